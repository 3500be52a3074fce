"""Loading a table file: untrusted input, validated before use."""
from __future__ import annotations

import math
import os
from pathlib import Path

import msgpack
import numpy as np

from ..errors import InconsistentTableError, TableError
from . import format as fmt
from .arrays import U64, decode_counts
from .table import SHIPPED, Group, Table

SUFFIX = ".ctmt"


def shipped() -> list[str]:
    """Names of the tables that ship inside the package."""
    return sorted(p.stem for p in SHIPPED.glob("*" + SUFFIX))


def resolve(name_or_path) -> Path:
    path = Path(name_or_path)
    if path.exists():
        return path
    names = shipped()
    matches = [n for n in names if n == str(name_or_path)] or [n for n in names if n.startswith(str(name_or_path))]
    if len(matches) == 1:
        return SHIPPED / (matches[0] + SUFFIX)
    hint = f"shipped tables: {', '.join(names)}" if names else "no tables ship with this install"
    if len(matches) > 1:
        raise TableError(f"{name_or_path!r} names several shipped tables ({', '.join(matches)}); be more precise")
    raise FileNotFoundError(f"no table file {str(name_or_path)!r}; give a path, or a name ({hint})")


def load(name_or_path, *, max_body: int = fmt.MAX_BODY) -> Table:
    """Load a table by path, or by the name of a shipped table (see shipped())."""
    path = resolve(name_or_path)
    with open(path, "rb") as f:
        size = os.fstat(f.fileno()).st_size
        if size > fmt.PREAMBLE.size + fmt.MAX_HEADER + max_body:
            raise fmt.SizeLimitError(f"{path}: {size} bytes is larger than any table this reader accepts")
        data = f.read()
    return loads(data, max_body=max_body, where=str(path))


def loads(data: bytes, *, max_body: int = fmt.MAX_BODY, where: str = "table") -> Table:
    header, offset = fmt.read_header(data, where)
    body = fmt.read_body(data, header, offset, max_body, where)
    try:
        return _build(header, body, where)
    except TableError:
        raise
    except (KeyError, TypeError, ValueError, IndexError, OverflowError, AttributeError,
            msgpack.UnpackException) as exc:  # a field of the wrong type or shape
        raise TableError(f"{where}: malformed table ({type(exc).__name__}: {exc}); the file is corrupt") from None


def _need(cond: bool, where: str, what: str) -> None:
    if not cond:
        raise InconsistentTableError(f"{where}: {what}; the file is corrupt or was edited")


def _array_bytes(spec, n: int, width: int, where: str, what: str) -> bytes:
    _need(isinstance(spec, dict) and isinstance(spec.get("data"), bytes), where, f"{what} has no data")
    _need(len(spec["data"]) == n * width, where, f"{what} holds {len(spec['data'])} bytes, not {n * width}")
    return spec["data"]


def _counts(spec, n: int, where: str, what: str) -> np.ndarray:
    _need(isinstance(spec, dict) and isinstance(spec.get("limbs"), int) and 1 <= spec["limbs"] <= 64,
          where, f"{what} has a bad limb count")
    _array_bytes(spec, n, 8 * spec["limbs"], where, what)
    return decode_counts(spec, n)


def _hist(spec, where: str, what: str) -> list:
    _need(isinstance(spec, dict) and isinstance(spec.get("n"), int) and 0 <= spec["n"] <= 10**8,
          where, f"{what} is malformed")
    return [int(v) for v in _counts(spec, spec["n"], where, what)]


def _build(header: dict, body: dict, where: str) -> Table:
    space = header.get("space")
    _need(isinstance(space, dict), where, "the header has no space")
    m, dims = space.get("symbols"), space.get("dims")
    _need(isinstance(m, int) and 2 <= m <= 255 and dims in (1, 2), where, "the header's space is malformed")
    groups = {}
    raw_groups = body.get("groups")
    _need(isinstance(raw_groups, list), where, "the body has no key groups")
    for spec in raw_groups:
        _need(isinstance(spec, dict), where, "a key group is malformed")
        shape, n = spec.get("shape"), spec.get("n")
        _need(isinstance(shape, list) and len(shape) == dims and all(isinstance(s, int) and 1 <= s <= 10**6
              for s in shape), where, f"a key group has a bad shape {shape!r}")
        _need(isinstance(n, int) and 0 < n, where, "a key group has a bad size")
        shape = tuple(shape)
        _need(shape not in groups, where, f"shape {shape} appears twice")
        size = math.prod(shape)
        keys = spec.get("keys")
        _need(isinstance(keys, dict), where, "a key group has no keys")
        counts = _counts(spec.get("counts"), n, where, f"the counts of shape {shape}")
        if keys.get("kind") == "code64":
            _need(m**size <= 1 << 64, where, f"shape {shape} stores 64-bit codes that cannot hold it")
            codes = np.frombuffer(_array_bytes(keys, n, 8, where, f"the keys of shape {shape}"), dtype=U64)
            _need(n == 1 or bool(np.all(codes[1:] > codes[:-1])), where, f"the keys of shape {shape} are not sorted")
            _need(int(codes[-1]) < m**size, where, f"a key of shape {shape} is out of range")
            g = Group(shape, codes, None, counts)
        elif keys.get("kind") == "symbols":
            raw = _array_bytes(keys, n, size, where, f"the keys of shape {shape}")
            rows = np.frombuffer(raw, dtype=np.uint8).reshape(n, size)
            _need(int(rows.max()) < m, where, f"a key of shape {shape} holds a symbol >= {m}")
            srt = [raw[i * size:(i + 1) * size] for i in range(n)]
            _need(all(a < b for a, b in zip(srt, srt[1:])), where, f"the keys of shape {shape} are not sorted")
            g = Group(shape, None, rows, counts)
        else:
            raise InconsistentTableError(f"{where}: shape {shape} has an unknown key kind")
        _need(bool(np.all(counts > 0)) if counts.dtype != object else all(c > 0 for c in counts),
              where, f"shape {shape} holds a zero count")
        if header.get("mode") == "sampled":
            g.moments = _counts(spec.get("moments"), n, where, f"the moments of shape {shape}")
        groups[shape] = g
    table = Table(header, groups, _hist(body.get("hist_steps"), where, "the step histogram"),
                  _hist(body.get("hist_len"), where, "the length histogram"), source=where)
    _need(header.get("keys") == table._key_summary(), where, "the header's key summary contradicts the body")
    if table.mode == "sampled":
        sample = header.get("sample")
        _need(isinstance(sample, dict) and all(isinstance(sample.get(k), int) and sample[k] > 0
                                               for k in ("size", "images_per_sample")),
              where, "a sampled table without its sample size")
        streams = sample.get("streams", [[sample.get("seed"), sample["size"]]])  # 1.1 files: one stream
        _need(isinstance(streams, list) and len(streams) >= 1
              and all(isinstance(x, list) and len(x) == 2 and all(isinstance(v, int) for v in x)
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
        _need(sum(table.hist_steps) == table.halting, where, "the step histogram contradicts the halting total")
    return table
