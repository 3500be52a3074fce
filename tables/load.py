"""Loading a table file: untrusted input, validated before use.

Order of work, so that no hostile file costs more than its honest size: stat (regular files
only), read at most the file's size, the preamble and header checks (format.py), every header
field's type and range (check_header), the declared body size against what the header's keys
can take (body_bounds), then the body, streamed within that size, and the body's consistency."""
from __future__ import annotations

import math
import os
import stat
from pathlib import Path

import msgpack
import numpy as np

from ..model.space import MAX_CAP, MAX_ENTRIES
from ..model.symmetry import FULL_RELABELLING_MAX, images_for
from ..errors import InconsistentTableError, NotATableError, SizeLimitError, TableError
from . import format as fmt
from .arrays import U64, Hist, decode_counts, fits_code64, limbs_needed
from . import certify
from .group import Group
from .table import SHIPPED, Table

SUFFIX = ".ctmt"
MAX_DIGITS = 400  # a total as a decimal string: the largest space (64 entries) has under 200 digits


def shipped() -> list[str]:
    """Names of the tables that ship inside the package."""
    return sorted(p.stem for p in SHIPPED.glob("*" + SUFFIX))


def resolve(name_or_path) -> Path:
    """The one file a name stands for: an existing path, else a shipped table by its exact name
    (with or without the suffix). Never a prefix or a near miss: a name that is neither is refused,
    with the close names of both kinds as suggestions, so a typo never loads another table."""
    path = Path(name_or_path)
    if path.exists() or path.is_symlink():  # a dangling link: stat names it
        return path
    text = str(name_or_path)
    names = shipped()
    stem = text.removesuffix(SUFFIX)
    if stem in names and os.sep not in text and (os.altsep is None or os.altsep not in text):
        return SHIPPED / (stem + SUFFIX)
    raise NotATableError(f"no table file {text!r}{_did_you_mean(path, names)}")


def _did_you_mean(path: Path, names: list[str]) -> str:
    """'; did you mean ...' with the local files and shipped names closest to path, else the list."""
    import difflib

    near = []
    if (path.parent / (path.name + SUFFIX)).exists():  # the suffix left out of a local file's name
        near.append(str(path.parent / (path.name + SUFFIX)) if str(path.parent) != "." else path.name + SUFFIX)
    try:
        local = [p.name for p in path.parent.glob("*" + SUFFIX)][:1000] if path.parent.is_dir() else []
    except OSError:
        local = []
    if not near:  # else the missing suffix is the likely slip: name just that
        near += difflib.get_close_matches(path.name, local, n=2, cutoff=0.85)
        stem = path.name.removesuffix(SUFFIX)
        close = [n for n in names if n.startswith(stem)][:3] or difflib.get_close_matches(stem, names, n=2, cutoff=0.85)
        near += [f"{n} (shipped)" for n in close]
    if near:
        return "; did you mean " + " or ".join(near) + "? Give the exact path or shipped name"
    listed = f"shipped tables: {', '.join(names)}" if names else "no tables ship with this install"
    return f"; give a path, or the exact name of a shipped table ({listed})"


def load(name_or_path, *, max_body: int = fmt.MAX_BODY) -> Table:
    """Load and validate a table file.

    Parameters
    ----------
    name_or_path : str or os.PathLike
        An existing path, else the exact name of a shipped table (``shipped()`` lists them;
        ``"1d-n5-m2-t500"``). A near miss is refused with suggestions, never loaded instead.
    max_body : int
        The largest decompressed body accepted, in bytes (a guard against hostile files).

    Returns
    -------
    Table
        Checked against its checksums, its declared sizes and every invariant the reader can
        test cheaply; ``problems(table)`` runs the deeper checks of ``ctmtab verify``.

    Raises
    ------
    NotATableError
        The name is neither a path nor a shipped table, or the path is not a table file.
    TableError
        The file is truncated, corrupt, edited, or of a newer major format.
    """
    path = resolve(name_or_path)
    return loads(read_file(path, max_body), max_body=max_body, where=str(path))


def load_header(name_or_path) -> tuple[dict, int]:
    """The checked header of a table (by path or shipped name) and the file's size, reading only
    the preamble and the header: the body is neither read nor checked."""
    path = resolve(name_or_path)
    st = os.stat(path)
    if not stat.S_ISREG(st.st_mode):
        raise _not_regular(path, st.st_mode)
    with open(path, "rb") as f:
        start = f.read(fmt.PREAMBLE.size)
        head_len = fmt.PREAMBLE.unpack_from(start)[3] if len(start) == fmt.PREAMBLE.size else 0
        start += f.read(min(head_len, fmt.MAX_HEADER))
    header, _ = fmt.read_header(start, str(path), size=st.st_size)
    check_header(header, str(path))
    return header, st.st_size


_KINDS = [(stat.S_ISDIR, "a folder"), (stat.S_ISFIFO, "a FIFO (named pipe)"), (stat.S_ISCHR, "a character device"),
          (stat.S_ISBLK, "a block device"), (stat.S_ISSOCK, "a socket")]


def _not_regular(path, mode: int) -> NotATableError:
    kind = next((name for test, name in _KINDS if test(mode)), "not a regular file")
    return NotATableError(f"{path} is {kind}, not a table file; give the path of a .ctmt file")


def read_file(path, max_body: int = fmt.MAX_BODY) -> bytes:
    """The bytes of a regular file, never more than its size nor than any table this reader
    accepts. Devices, FIFOs, sockets and folders are refused before they are read: stat before
    open, and the open never blocks (O_NONBLOCK), so a FIFO swapped in between is caught by fstat."""
    st = os.stat(path)  # a missing file or a forbidden folder: the OSError the CLI reports
    if not stat.S_ISREG(st.st_mode):
        raise _not_regular(path, st.st_mode)
    fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_CLOEXEC", 0))
    try:
        st = os.fstat(fd)
        if not stat.S_ISREG(st.st_mode):
            raise _not_regular(path, st.st_mode)
        size = st.st_size
        if size > fmt.PREAMBLE.size + fmt.MAX_HEADER + fmt.compressed_bound(max_body):
            raise SizeLimitError(f"{path}: {size} bytes is larger than any table this reader accepts "
                                 f"(max_body {max_body}); pass a larger max_body if you trust this file")
        if size == 0:  # also what /proc and /sys files report: never read them
            raise NotATableError(f"{path} is empty (0 bytes), not a table file; fetch it again")
        chunks, left = [], size + 1  # one byte past the size tells a file that grew while read
        while left > 0:
            chunk = os.read(fd, min(left, 1 << 24))
            if not chunk:
                break
            chunks.append(chunk)
            left -= len(chunk)
    except OSError as exc:
        raise NotATableError(f"{path}: cannot be read ({exc.strerror or exc}); give a table file") from None
    finally:
        os.close(fd)
    data = b"".join(chunks)
    if len(data) != size:
        raise TableError(f"{path} changed size while it was read ({size} bytes, then {len(data)}); "
                         "read it again once it is complete")
    return data


def loads(data: bytes, *, max_body: int = fmt.MAX_BODY, where: str = "table") -> Table:
    header, offset = fmt.read_header(data, where)
    try:
        check_header(header, where)
        low, high = body_bounds(header)
        body = fmt.read_body(data, header, offset, max_body, where, expect=(low, high))
        return _build(header, body, where)
    except TableError:
        raise
    except (KeyError, TypeError, ValueError, IndexError, OverflowError, AttributeError,
            msgpack.UnpackException) as exc:  # a field of the wrong type or shape
        raise TableError(f"{where}: malformed table ({type(exc).__name__}: {exc}); the file is corrupt") from None


def _need(cond: bool, where: str, what: str) -> None:
    if not cond:
        raise InconsistentTableError(f"{where}: {what}; the file is corrupt or was edited")


def _int(v, low: int = 0, high: int | None = None) -> bool:
    return isinstance(v, int) and not isinstance(v, bool) and v >= low and (high is None or v <= high)


def _digits(v) -> bool:
    return isinstance(v, str) and 0 < len(v) <= MAX_DIGITS and v.isascii() and v.isdigit()


def _strs(v) -> bool:
    return isinstance(v, list) and all(isinstance(x, str) for x in v)


def _optional(header: dict, name: str, kind, where: str) -> dict:
    """header[name] when present must be of this type ({} / "" stand in when absent)."""
    value = header.get(name, kind())
    _need(isinstance(value, kind), where, f"the header's {name!r} is a {type(value).__name__}, not a "
          + {dict: "map", str: "string", list: "list"}[kind])
    return value


def _key_width(m: int, cells: int) -> int:
    return 8 if fits_code64(m, cells) else cells


def check_header(header: dict, where: str = "table") -> None:
    """Every header field the reader, info, merge and verify use, by type and range, before any
    work that depends on one: a hostile header re-sealed with a valid checksum stops here."""
    _need(header.get("kind") == "ctmtab-table", where, "the header is not a ctmtab table's ('kind')")
    space = header.get("space")
    _need(isinstance(space, dict), where, "the header has no space")
    dims, n, m = space.get("dims"), space.get("states"), space.get("symbols")
    _need(dims in (1, 2) and _int(n, 1, MAX_ENTRIES) and _int(m, 2, 255) and n * m <= MAX_ENTRIES,
          where, f"the header's space is malformed (dims 1 or 2, states x symbols at most {MAX_ENTRIES})")
    cap = header.get("cap")
    _need(_int(cap, 1, MAX_CAP), where, f"the header's cap or mode is malformed (cap 1..{MAX_CAP})")
    mode = header.get("mode")
    _need(mode in ("exhaustive", "sampled"), where, "the header's cap or mode is malformed")
    totals = header.get("totals")
    _need(isinstance(totals, dict), where, "the header has no totals")
    for name in ("space_size", "halting", "non_halting", "undecided"):
        _need(_digits(totals.get(name)), where, f"the header total {name!r} is missing or not a whole number")
    for name in ("formalism", "invariant", "notes"):
        _optional(header, name, str, where)
    blanks = _optional(header, "blanks", list, where)
    _need(all(_int(b, 0, m - 1) for b in blanks), where, "the header's blanks are not symbols of the space")
    for name in ("symmetries", "deciders"):
        _need(_strs(_optional(header, name, list, where)), where, f"the header's {name} are not strings")
    stats = _optional(header, "stats", dict, where)
    for name in ("halting_nodes", "longest_run", "most_nonblank", "steps_simulated"):
        _need(name not in stats or _int(stats[name]), where, f"the header's stats {name!r} is not a count")
    units = _optional(header, "units", dict, where)
    count = units.get("count", 1)
    _need(_int(count, 1) and _int(units.get("depth", 0)) and isinstance(units.get("plan", ""), str)
          and _digits(units.get("weight", "0")), where, "the header's units are malformed")
    covered, shard = units.get("covered", "all"), units.get("shard")
    _need(covered == "all" or (isinstance(covered, list) and all(_int(k, 0, count - 1) for k in covered)),
          where, "the header's covered units are malformed")
    _need(shard is None or (isinstance(shard, list) and len(shard) == 2 and _int(shard[1], 1)
                            and _int(shard[0], 0, shard[1] - 1)), where, "the header's shard is malformed")
    _check_units(header, units, where)
    generator = _optional(header, "generator", dict, where)
    _need(all(isinstance(v, str) for v in generator.values()), where, "the header's generator is malformed")
    build = _optional(header, "build", dict, where)
    for name in ("command", "created", "by"):
        _need(isinstance(build.get(name, ""), str), where, f"the header's build {name!r} is not a string")
    seconds = build.get("seconds", 0)
    _need(isinstance(seconds, (int, float)) and not isinstance(seconds, bool) and math.isfinite(seconds)
          and seconds >= 0, where, "the header's build seconds is not a time")
    _need(_int(build.get("resumed_units", 0)) and isinstance(build.get("workers", 0), (int, str))
          and isinstance(build.get("until", {}), dict), where, "the header's build record is malformed")
    extended = build.get("extended", {})
    _need(isinstance(extended, dict) and isinstance(extended.get("from", ""), str)
          and _strs(extended.get("commands", [])), where, "the header's build 'extended' is malformed")
    if mode == "sampled":
        sample = header.get("sample")
        _need(isinstance(sample, dict) and _int(sample.get("size"), 1) and _int(sample.get("images_per_sample"), 1),
              where, "a sampled table without its sample size")
        relab = sample.get("relabelling", "blank-swaps")
        _need(relab == "blank-swaps" or (relab == "all" and m <= FULL_RELABELLING_MAX), where,
              f"the sample's relabelling {relab!r} is not 'all' (m <= {FULL_RELABELLING_MAX}) or 'blank-swaps'")
        # either expansion: 1.1 files took the blank swaps whatever m (merge.check_expansion tells them)
        _need(sample["images_per_sample"] in {images_for(dims, m, r) for r in ("blank-swaps", relab)}, where,
              f"the sample's images_per_sample {sample['images_per_sample']} is not what a symmetry expansion gives")
        _need(sample.get("halting_samples", int(totals["halting"])) == int(totals["halting"]), where,
              "the sample's halting_samples contradicts the halting total")
        ran = sum(int(totals[name]) for name in ("halting", "non_halting", "undecided"))
        _need(ran == sample["size"], where, f"halting + non_halting + undecided = {ran} samples, not the "
              f"sample size {sample['size']}")
    keys = header.get("keys")
    _need(isinstance(keys, dict) and isinstance(keys.get("groups"), list), where, "the header has no key summary")
    last = None
    for entry in keys["groups"]:
        _need(isinstance(entry, list) and len(entry) == 2 and isinstance(entry[0], list), where,
              "the header's key summary is malformed")
        shape, k = entry
        # a run that halts within the cap visits at most cap cells along any side
        _need(len(shape) == dims and all(_int(s, 1, cap + 1) for s in shape), where,
              f"the header's key summary lists a shape {shape!r} that no run within cap {cap} can write")
        cells = math.prod(shape)
        _need(_int(k, 1) and (not fits_code64(m, cells) or k <= m**cells), where,
              f"the header's key summary lists a bad key count for shape {shape}")
        _need(last is None or shape > last, where, "the header's key summary is not sorted by shape")
        last = shape
    _need(keys.get("distinct") == sum(k for _, k in keys["groups"]), where,
          "the header's key summary does not add up to its distinct count")


def _check_units(header: dict, units: dict, where: str) -> None:
    """The units against the totals: what the covered units weigh is what the totals add up to,
    a shard covers exactly the units of its index, and every unit covered weighs the whole space."""
    totals = header["totals"]
    ran = sum(int(totals[name]) for name in ("halting", "non_halting", "undecided"))
    count, covered, shard = units.get("count", 1), units.get("covered", "all"), units.get("shard")
    if "weight" in units:
        _need(int(units["weight"]) == ran, where, f"halting + non_halting + undecided = {ran}, not the weight "
              f"{units['weight']} of the units it covers")
    space = header["space"]
    n_m = space["states"] * space["symbols"]
    size = ((2 if space["dims"] == 1 else 4) * n_m + space["symbols"]) ** n_m
    _need(int(totals["space_size"]) == size, where, f"the header's space size {totals['space_size']} is not "
          f"the {size} machines of its space")
    if shard is None:
        _need(covered == "all", where, "the header lists covered units but no shard")
        _need(header.get("mode") != "exhaustive" or ran == size, where, f"halting + non_halting + undecided = "
              f"{ran}, not the space size {size}")
        return
    i, n = shard
    # a shard's units are those congruent to its index: compare the length first (count is untrusted)
    _need(covered != "all" and len(covered) == len(range(i, count, n)) and covered == list(range(i, count, n)),
          where, f"the covered units are not those of shard {i}/{n} (units {i} mod {n} of {count})")
    if header.get("mode") == "exhaustive" and len(covered) == count:
        _need(ran == size, where, f"shard {i}/{n} covers every unit, but its totals add up to {ran}, not the "
              f"space size {size}")


def body_bounds(header: dict) -> tuple[int, int]:
    """The fewest and the most decompressed body bytes the header's key summary and totals
    allow. Keys take 8 (codes) or one per cell (symbols); no count exceeds the counts' sum
    (blanks or images times halting), no moment that times the images, no histogram entry the
    halting total; msgpack adds at most a few dozen bytes per group."""
    m = header["space"]["symbols"]
    halting = int(header["totals"]["halting"])
    per_run = header["sample"]["images_per_sample"] if header["mode"] == "sampled" else m
    count_limbs = limbs_needed([per_run * halting])
    moment_limbs = limbs_needed([per_run * per_run * halting]) if header["mode"] == "sampled" else 0
    low, high = 0, 256
    for shape, k in header["keys"]["groups"]:
        width = _key_width(m, math.prod(shape))
        low += k * (width + 8 + (8 if moment_limbs else 0))
        high += k * (width + 8 * (count_limbs + moment_limbs)) + 256
    for shape, k in _late_summary(header):  # halts past the cap: no moments, counts below the total's
        width = _key_width(m, math.prod(shape))
        low += k * (width + 8)
        high += k * (width + 8 * count_limbs) + 256
    longest = _longest_size(header, [shape for shape, _ in header["keys"]["groups"]])
    hist_limbs = limbs_needed([halting])
    high += (header["cap"] + 1 + longest + 1) * 8 * hist_limbs + 256
    return low, high


def _array_bytes(spec, n: int, width: int, where: str, what: str) -> bytes:
    _need(isinstance(spec, dict) and isinstance(spec.get("data"), bytes), where, f"{what} has no data")
    _need(len(spec["data"]) == n * width, where, f"{what} holds {len(spec['data'])} bytes, not {n * width}")
    return spec["data"]


def _longest_size(header: dict, shapes) -> int:
    """The longest size the size histogram may reach: the longest key kept or, in a table cut by
    size, cap + 1 (the dropped sizes stay in it; a run visits at most cap + 1 cells)."""
    if header.get("cut") is not None:
        return header["cap"] + 1
    return max((max(s) for s in shapes), default=0)


def _counts(spec, n: int, where: str, what: str) -> np.ndarray:
    _need(isinstance(spec, dict) and _int(spec.get("limbs"), 1, 64), where, f"{what} has a bad limb count")
    _array_bytes(spec, n, 8 * spec["limbs"], where, what)
    return decode_counts(spec, n)


def _hist(spec, limit: int, where: str, what: str) -> Hist:
    _need(isinstance(spec, dict) and _int(spec.get("n"), 0, limit), where, f"{what} is malformed")
    n = spec["n"]
    if "at" not in spec:
        values = _counts(spec, n, where, what)
        idx = np.flatnonzero(values != 0) if values.dtype != object else [i for i, v in enumerate(values) if v]
        return Hist(n, idx, [values[i] for i in idx])
    # since 1.4: the non-zero entries only, at strictly increasing indices below n
    at = spec["at"]
    _need(isinstance(at, bytes) and len(at) % 8 == 0 and len(at) // 8 <= n, where, f"{what} has malformed indices")
    idx = np.frombuffer(at, dtype="<u8")
    _need(bool(np.all(idx < n)) and bool(np.all(idx[1:] > idx[:-1])), where,
          f"{what} has indices out of order or past its {n} entries")
    values = _counts(spec, len(idx), where, what)
    values = values.tolist() if values.dtype != object else list(values)
    _need(all(values), where, f"{what} lists a zero entry among its non-zero ones")
    return Hist(n, idx.astype(np.int64), values)


def _rows_increasing(rows: np.ndarray) -> bool:
    """Rows strictly increasing in lexicographic order, vectorised (no Python object per key)."""
    if len(rows) < 2:
        return True
    a, b = rows[:-1], rows[1:]
    differ = a != b
    first = differ.argmax(axis=1)
    at = np.arange(len(a))
    return bool(differ[at, first].all() and (b[at, first] > a[at, first]).all())


def _late_summary(header: dict) -> list:
    """[(shape, keys)] of the halts past the cap the certificate declares (none without a run-on)."""
    cert = header.get("certificate")
    if not isinstance(cert, dict) or cert.get("settle") is None:
        return []
    settle = certify.parse_settle(cert["settle"], header["cap"], header["space"]["dims"])
    return settle["late_keys"]


def _build(header: dict, body: dict, where: str) -> Table:
    m = header["space"]["symbols"]
    summary = {tuple(s): k for s, k in header["keys"]["groups"]}
    raw_groups = body.get("groups")
    _need(isinstance(raw_groups, list), where, "the body has no key groups")
    groups = _groups(raw_groups, summary, m, header.get("mode") == "sampled", where, "key group")
    late_summary = dict(_late_summary(header))
    raw_late = body.get("late", [])
    _need(isinstance(raw_late, list) and len(raw_late) == len(late_summary), where,
          "the body's halts past the cap contradict the certificate's late key summary")
    late = _groups(raw_late, late_summary, m, False, where, "late key group")
    longest = _longest_size(header, summary)
    table = Table(header, groups, _hist(body.get("hist_steps"), header["cap"] + 1, where, "the step histogram"),
                  _hist(body.get("hist_len"), longest + 1, where, "the length histogram"), source=where, late=late)
    return _check_body(table, header, where)


def _groups(raw_groups: list, summary: dict, m: int, sampled: bool, where: str, what: str) -> dict:
    """Key groups of the body, each checked against the header's summary (shape -> keys)."""
    groups = {}
    for spec in raw_groups:
        _need(isinstance(spec, dict), where, f"a {what} is malformed")
        shape, n = spec.get("shape"), spec.get("n")
        _need(isinstance(shape, list) and tuple(shape) in summary, where,
              f"a {what} has a shape {shape!r} the header's key summary does not list")
        shape = tuple(shape)
        _need(n == summary[shape], where, "the header's key summary contradicts the body")
        _need(shape not in groups, where, f"shape {shape} appears twice")
        size = math.prod(shape)
        keys = spec.get("keys")
        _need(isinstance(keys, dict), where, "a key group has no keys")
        code64 = fits_code64(m, size)
        _need(keys.get("kind") == ("code64" if code64 else "symbols"), where,
              f"shape {shape} has an unknown key kind, or not the one its size takes")
        counts = _counts(spec.get("counts"), n, where, f"the counts of shape {shape}")
        if code64:
            codes = np.frombuffer(_array_bytes(keys, n, 8, where, f"the keys of shape {shape}"), dtype=U64)
            _need(n == 1 or bool(np.all(codes[1:] > codes[:-1])), where, f"the keys of shape {shape} are not sorted")
            _need(int(codes[-1]) < m**size, where, f"a key of shape {shape} is out of range")
            g = Group(shape, codes, None, counts)
        else:
            raw = _array_bytes(keys, n, size, where, f"the keys of shape {shape}")
            rows = np.frombuffer(raw, dtype=np.uint8).reshape(n, size)
            _need(int(rows.max()) < m, where, f"a key of shape {shape} holds a symbol >= {m}")
            _need(_rows_increasing(rows), where, f"the keys of shape {shape} are not sorted")
            g = Group(shape, None, rows, counts)
        _need(bool(np.all(counts > 0)) if counts.dtype != object else all(c > 0 for c in counts),
              where, f"shape {shape} holds a zero count")
        if sampled:
            g.moments = _counts(spec.get("moments"), n, where, f"the moments of shape {shape}")
        groups[shape] = g
    return groups


def _check_body(table: Table, header: dict, where: str) -> Table:
    _need(header.get("keys") == table._key_summary(), where, "the header's key summary contradicts the body")
    if table.mode == "sampled":
        sample = header["sample"]
        streams = sample.get("streams", [[sample.get("seed"), sample["size"]]])  # 1.1 files: one stream
        _need(isinstance(streams, list) and len(streams) >= 1
              and all(isinstance(x, list) and len(x) == 2 and all(_int(v) for v in x)
                      and 0 <= x[0] < 1 << 63 and x[1] > 0 for x in streams),
              where, "the sample's streams are malformed")
        _need(sum(x[1] for x in streams) == sample["size"], where, "the sample's streams do not add up to its size")
        _need(len({x[0] for x in streams}) == len(streams), where, "the sample lists one seed twice")
        _need(streams == sorted(streams) and sample.get("seed") == streams[0][0], where,
              "the sample's streams are not sorted by seed, or its seed is not the first stream's")
        _need(table.total == sample["images_per_sample"] * table.halting, where,
              "the counts do not sum to images_per_sample x the halting samples")
    if table.mode == "exhaustive":
        _need(table.total == table.blanks * table.halting, where,
              "the counts do not sum to blanks x the halting total in the header")
        _need(table.steps_hist.total() == table.halting, where, "the step histogram contradicts the halting total")
    if table.cut is not None:  # what was dropped must still add up size by size, before any lookup
        per_run = table.blanks if table.mode == "exhaustive" else table.header["sample"]["images_per_sample"]
        _need(all(total == per_run * (table.length_hist[size] if size < len(table.length_hist) else 0)
                  for size, total in table.weight_by_size().items()), where,
              "the kept and dropped counts disagree with the size histogram")
    return table
