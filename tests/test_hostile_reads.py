"""The reader against hostile and careless input: special files, re-sealed headers with absurd
content, decompression bombs, wrong-typed fields, out-of-range lookups, tables where nothing
halted, terminal escapes and non-strict JSON. Each defect of issue 12 has its test here."""
import json
import math
import os
import stat
import subprocess
import sys
import time
import warnings
from pathlib import Path

import msgpack
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from ctmtab.enumerator import Space
from ctmtab.errors import InconsistentTableError, SizeLimitError, TableError
from ctmtab.tables import Table, load, loads, problems
from ctmtab.tables import format as fmt
from ctmtab.tables import sampled
from ctmtab.tables.dense import DENSE_LOOKUP, MAX_DENSE

from hostile import load_or_refuse, no_halting, small_2d, small_valid, split, with_header, with_raw_body, with_zero_body


def cli(*args, timeout=60):
    return subprocess.run([sys.executable, "-m", "ctmtab", *map(str, args)], capture_output=True, text=True,
                          timeout=timeout)


def one_line(r) -> str:
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in r.stderr, r.stderr
    return lines[0]


def strict(text: str):
    """json.loads that refuses NaN and Infinity, as strict parsers do."""
    def refuse(name):
        raise ValueError(f"non-strict JSON constant {name}")
    return json.loads(text, parse_constant=refuse)


@pytest.fixture(scope="module")
def t4():
    return load("1d-n4-m2-t107")


# ---- lookups: no symbol outside 0..m-1 may alias another key

@pytest.mark.parametrize("key", [[0, 0, 0, 2], [0, 1, 1, -1], [0, 1, 1, 256], [0, 1, 1, 258]])
def test_vectorised_lookup_refuses_symbols_outside_the_alphabet(t4, key):
    # before the fix [0,0,0,2] returned the count of 0010 and [0,1,1,-1] that of 0101
    with pytest.raises(TableError, match=r"outside 0\.\.1"):
        t4.lookup(np.array([key]))
    with pytest.raises(TableError, match=r"outside 0\.\.1"):
        t4.lookup([key])
    with pytest.raises(TableError, match=r"outside 0\.\.1"):
        t4.count(key)


def test_lookup_refuses_non_integer_symbols_and_unknown_policies(t4):
    for bad in (np.array([[0.0, 1.5, 1.0, 0.0]]), np.array([[0.0, 1.0, 1.0, 0.0]])):
        with pytest.raises(TableError, match="integer symbols"):
            t4.lookup(bad)
    with pytest.raises(TableError, match="integer symbols"):
        t4.count([0.5, 1])
    with pytest.raises(TableError, match="unknown missing-key policy"):
        t4.lookup(["0110"], missing="zero")
    with pytest.raises(TableError):
        t4.count([[0, 1], [1]])  # ragged


def test_2d_vectorised_lookup_refuses_bad_symbols():
    t = load("2d-n3-m2-t2000")
    with pytest.raises(TableError, match=r"outside 0\.\.1"):
        t.lookup(np.array([[[0, 2]]]))
    with pytest.raises(TableError, match=r"outside 0\.\.1"):
        t.lookup(np.array([[[0, 1], [1, -1]]]))
    assert t.lookup(np.array([[[0, 1]]]))["count"][0] == t.count("01")


def test_lookup_keeps_the_key_order_across_shapes(t4):
    keys = ["0110", "0", "11111111111111111", "01", "1001"]
    out = t4.lookup(keys)
    assert list(out["count"]) == [t4.count(k) for k in keys]


def test_dense_refuses_huge_shapes_at_once(t4):
    start = time.perf_counter()
    for shape in (10**9, 27, 10**18):
        with pytest.raises(TableError, match="lookup"):
            t4.dense(shape)
    assert time.perf_counter() - start < 1.0  # 2^(10^9) was computed first: about 8 s
    for shape in (0, -3, (2, 2), "8"):
        with pytest.raises(TableError):
            t4.dense(shape)


def test_lookup_caches_stay_bounded():
    t = load("1d-n4-m4-t2000-sampled")
    keys = [np.random.default_rng(i).integers(0, 4, 13).tolist() for i in range(10)]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out = t.lookup(keys)
    assert list(out["count"]) == [t.count(k) for k in keys]
    # 4^13 keys would be a 512 MiB dense array: the length-13 lookup searches the group instead
    assert 4**13 > DENSE_LOOKUP
    assert sum(a.nbytes for a in t._dense.values()) <= DENSE_LOOKUP * 8


def test_dense_views_beyond_the_cache_budget_are_not_kept(t4):
    d = t4.dense(20)  # 2^20 keys: built, 8 MiB
    assert d.shape == (2**20,) and not d.flags.writeable
    assert 2**20 <= MAX_DENSE


# ---- a table where nothing halted

@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
@pytest.mark.parametrize("mode", ["exhaustive", "sampled"])
def test_a_table_with_no_halting_run(tmp_path, mode):
    t = loads(no_halting(mode))
    assert t.count("0") == 0 and t.total == 0
    calls = [lambda: t.lookup(["0"]), lambda: t.ctm("0"), lambda: t.probability("0"),
             lambda: t.interval("0"), lambda: t.dense(3), lambda: t.fallback()]
    if mode == "sampled":  # exhaustive tables are exact: their error of 0 needs no halting run
        calls.append(lambda: t.standard_error("0"))
    for call in calls:
        with pytest.raises(TableError, match="halted"):
            call()
    path = tmp_path / "none.ctmt"
    path.write_bytes(no_halting(mode))
    assert "halted" in one_line(cli("lookup", path, "0"))
    assert "halted" in one_line(cli("plot", path, "-o", tmp_path / "figs"))
    r = cli("export", path)
    assert r.returncode == 0 and len(r.stdout.splitlines()) == 1  # the header row, no keys
    r = cli("export", path, "--format", "json")
    assert r.returncode == 0 and strict(r.stdout)["counts"] == {}
    r = cli("info", path, "--json")
    assert r.returncode == 0 and strict(r.stdout)["ctm_min"] is None
    assert "no run halted" in cli("info", path).stdout


# ---- verify: impossible moments, and every file reported

def _sampled_bytes():
    from ctmtab.enumerator import sample

    return Table.from_tally(sample(Space(1, 2, 2), 6, 25_000, seed=4, workers=1)).to_bytes()


@pytest.mark.core  # samples or builds a table
@pytest.mark.parametrize("change,fragment", [
    (lambda s1, s2: s1 - 1 if s1 > 1 else s2, "S1 > S2"),     # S2 < S1: no X >= 1 gives it
    (lambda s1, s2: s1 * 100, "images in one sample"),        # X <= k: S2 <= k S1
])
def test_verify_refuses_impossible_moments(change, fragment):
    t = loads(_sampled_bytes())
    assert problems(t) == []
    shape = t.shapes[-1]
    g = t.groups[shape]
    mom = np.asarray(g.moments, dtype=object).copy()
    i = int(np.argmax(np.asarray(g.counts, dtype=np.float64)))
    mom[i] = change(int(g.counts[i]), int(mom[i]))
    g.moments = mom
    assert any(fragment in p for p in problems(t))


@pytest.mark.core  # samples or builds a table
def test_verify_refuses_moments_that_give_a_zero_standard_error():
    t = loads(_sampled_bytes())
    g = t.groups[(1,)]  # "0": seen in most halting samples, so S1^2 / H is above S1
    s1 = int(g.counts[0])
    s2 = (s1 * s1 - 1) // t.halting  # S2 H < S1^2: under the Cauchy-Schwarz bound, yet S1 <= S2 <= k S1
    assert s1 <= s2 <= t.header["sample"]["images_per_sample"] * s1
    assert sampled.errors(t, s1, int(g.moments[0])) > 0
    mom = np.asarray(g.moments, dtype=object).copy()
    mom[0] = s2
    g.moments = mom
    assert sampled.errors(t, s1, s2) == 0.0  # what a reader would have reported: a false certainty
    assert [p for p in problems(t) if "impossible moments" in p] == [
        f"shape (1,): 1 keys have impossible moments, S1^2 > H x S2 (a standard error below what "
        f"{t.halting} halting samples allow), e.g. 0"]


def test_verify_reports_every_file_and_exits_with_the_worst(tmp_path):
    good = tmp_path / "good.ctmt"
    good.write_bytes(small_valid())
    bad = tmp_path / "bad.ctmt"
    data = bytearray(small_valid())
    data[-3] ^= 1
    bad.write_bytes(bytes(data))
    r = cli("verify", good, tmp_path / "missing.ctmt", bad, "--json")
    report = strict(r.stdout)
    assert [x["ok"] for x in report] == [True, False, False]
    assert "no table file" in report[1]["problems"][0] and "checksum" in report[2]["problems"][0]
    assert r.returncode == 2  # a file that cannot be read (2) is worse than a failed check (1)
    r = cli("verify", good, bad)
    assert r.returncode == 1 and "good.ctmt: ok" in r.stdout and "bad.ctmt: FAILED" in r.stdout


# ---- special files and unbounded reads

def _mknod_zero(path: Path):
    try:
        os.mknod(path, stat.S_IFCHR | 0o600, os.makedev(1, 5))  # what /dev/zero is
    except (PermissionError, OSError) as exc:
        pytest.skip(f"mknod is not permitted here ({exc})")


def test_a_fifo_is_refused_without_blocking(tmp_path):
    fifo = tmp_path / "pipe.ctmt"
    os.mkfifo(fifo)
    with pytest.raises(TableError, match="FIFO"):
        load(fifo)
    r = cli("info", fifo, timeout=30)  # hung forever before the fix
    assert r.returncode == 2 and "FIFO" in one_line(r)


def test_a_zero_device_is_refused_before_any_read(tmp_path):
    dev = tmp_path / "zero.ctmt"
    _mknod_zero(dev)
    with pytest.raises(TableError, match="character device"):
        load(dev)
    r = cli("info", dev, timeout=30)  # read until MemoryError before the fix
    assert r.returncode == 2 and "character device" in one_line(r)
    link = tmp_path / "link.ctmt"
    link.symlink_to(dev)
    with pytest.raises(TableError, match="character device"):
        load(link)


def test_a_file_that_reports_no_size_is_not_read(tmp_path):
    empty = tmp_path / "empty.ctmt"
    empty.write_bytes(b"")
    with pytest.raises(TableError, match="empty"):
        load(empty)
    with pytest.raises(TableError):
        load(tmp_path)  # a folder
    if Path("/proc/self/mem").exists():  # size 0, and reading it fails with EIO
        r = cli("verify", "/proc/self/mem", "--json")
        assert r.returncode == 2 and strict(r.stdout)[0]["ok"] is False and "Traceback" not in r.stderr  # not a table


def test_a_file_larger_than_any_table_is_not_read(tmp_path):
    big = tmp_path / "big.ctmt"
    with open(big, "wb") as f:
        f.truncate(fmt.PREAMBLE.size + fmt.MAX_HEADER + fmt.compressed_bound(1 << 20) + 1)  # sparse
    with pytest.raises(SizeLimitError, match="larger than any table"):
        load(big, max_body=1 << 20)


# ---- re-sealed headers with absurd content: refused before any work

@pytest.mark.parametrize("edit,fragment", [
    (lambda h: h["space"].update(states=10**9), "space is malformed"),      # computed a space size
    (lambda h: h["space"].update(states=True), "space is malformed"),
    (lambda h: h["space"].update(states=40, symbols=2), "space is malformed"),  # 80 entries > 64
    (lambda h: h.update(cap=10**12), "cap"),
    (lambda h: h.update(mode="guessed"), "mode"),
    (lambda h: h["totals"].update(halting="1" * 5000), "not a whole number"),  # over int() digit limit
    (lambda h: h["totals"].update(halting="١٢"), "not a whole number"),        # non-ASCII digits
    (lambda h: h.update(kind="other"), "kind"),
])
def test_resealed_headers_with_absurd_space_cap_or_totals(edit, fragment):
    start = time.perf_counter()
    with pytest.raises(InconsistentTableError, match=fragment):
        loads(with_header(small_valid(), edit))
    assert time.perf_counter() - start < 5.0


def test_a_2d_shape_of_a_million_by_a_million_is_refused_at_once():
    data = small_2d()

    def huge(h, cap=None):
        h["keys"]["groups"].append([[10**6, 10**6], 1])
        h["keys"]["distinct"] += 1
        if cap:
            h["cap"] = cap

    start = time.perf_counter()
    with pytest.raises(InconsistentTableError, match="no run within cap"):
        loads(with_header(data, huge))
    with pytest.raises(InconsistentTableError, match="keys the header lists take"):  # 10^12 cells > the body
        loads(with_header(data, lambda h: huge(h, cap=10**7)))
    assert time.perf_counter() - start < 5.0

    def body_too(raw):  # the body claims the shape as well
        body = msgpack.unpackb(raw, raw=False)
        body["groups"].append({"shape": [10**6, 10**6], "n": 1, "keys": {"kind": "symbols", "data": b""},
                               "counts": {"limbs": 1, "data": bytes(8)}})
        return msgpack.packb(body, use_bin_type=True)
    with pytest.raises(TableError):
        loads(with_raw_body(data, body_too))


@pytest.fixture(scope="module")
def bomb():
    return with_zero_body(small_valid(), 2 << 30)  # 2 GiB of zeros, a few dozen KiB compressed


def test_a_zstd_bomb_is_refused_before_decompressing(bomb):
    # the header declares 2 GiB, under the default limit; 22 keys take a few KiB at most
    assert len(bomb) < 1 << 20 and 2 << 30 <= fmt.MAX_BODY
    start = time.perf_counter()
    with pytest.raises(InconsistentTableError, match="keys the header lists take"):
        loads(bomb)
    assert time.perf_counter() - start < 2.0  # decompressing alone takes longer; peaked at 4.2 GB


def test_a_bomb_declared_within_the_bounds_stops_at_the_first_object():
    from ctmtab.tables.load import body_bounds, check_header
    header = msgpack.unpackb(split(small_valid())[1], raw=False)
    check_header(header)
    low, high = body_bounds(header)
    data = with_zero_body(small_valid(), 64 << 20, declared=high)
    with pytest.raises(TableError, match="not a map"):
        loads(data)  # one zero byte is the whole first msgpack object: nothing more is inflated


def test_the_body_size_is_checked_against_free_memory(monkeypatch):
    monkeypatch.setattr(fmt, "available_memory", lambda: 1000)
    with pytest.raises(SizeLimitError, match="memory"):
        loads(small_valid())


@pytest.mark.parametrize("field,value", [
    ("build", 5), ("build", "x"), ("stats", "fast"), ("stats", [1]), ("units", 3), ("units", "all"),
    ("notes", 7), ("generator", 1), ("deciders", "all"), ("symmetries", 3), ("blanks", [0, 9]),
])
def test_header_fields_of_the_wrong_type_are_refused_at_load(field, value):
    with pytest.raises(InconsistentTableError, match=field):  # an AttributeError in info before
        loads(with_header(small_valid(), lambda h: h.update({field: value})))


def test_wrong_typed_fields_give_one_line_in_the_cli(tmp_path):
    paths = []
    for field, value in (("build", 5), ("stats", "fast"), ("units", 3)):
        paths.append(tmp_path / f"{field}.ctmt")
        paths[-1].write_bytes(with_header(small_valid(), lambda h: h.update({field: value})))
    r = cli("info", paths[0])
    assert r.returncode == 2 and "'build'" in one_line(r)
    r = cli("verify", *paths)
    assert r.returncode == 1 and r.stdout.count("FAILED") == 3 and "Traceback" not in r.stderr


@pytest.mark.parametrize("edit", [
    lambda h: h["build"].update(seconds=float("nan")),
    lambda h: h["build"].update(seconds="soon"),
    lambda h: h["stats"].update(longest_run=-1),
    lambda h: h["units"].update(covered=[0, "x"]),
    lambda h: h["units"].update(shard=[3, 2]),
    lambda h: h["build"].update(extended={"commands": 5}),
])
def test_header_subfields_of_the_wrong_type_or_range(edit):
    with pytest.raises(InconsistentTableError):
        loads(with_header(small_valid(), edit))


@pytest.mark.core  # samples or builds a table
def test_sampled_header_fields_are_checked():
    data = _sampled_bytes()
    for edit in (lambda h: h["sample"].update(images_per_sample=10**18),
                 lambda h: h["sample"].update(relabelling="some"),
                 lambda h: h["sample"].update(halting_samples=1)):
        with pytest.raises(InconsistentTableError):
            loads(with_header(data, edit))


# ---- output: terminal escapes and strict JSON

def test_info_escapes_control_characters_from_the_file(tmp_path):
    path = tmp_path / "t.ctmt"
    evil = "\x1b]0;owned\x07\x1b[2J\u202eevil"
    path.write_bytes(with_header(small_valid(), lambda h: (h.update(notes=evil),
                                                           h["build"].update(by="x\x1b[31m"))))
    out = cli("info", path).stdout
    assert "\x1b" not in out and "\x07" not in out and "\u202e" not in out
    assert "\\x1b]0;owned\\x07" in out and "\\u202e" in out
    info = strict(cli("info", path, "--json").stdout)
    assert info["notes"] == evil  # JSON keeps the text exactly, escaped by JSON itself


@pytest.mark.core  # samples or builds a table
def test_json_output_is_strict(tmp_path):
    path = tmp_path / "s.ctmt"
    path.write_bytes(_sampled_bytes())
    never = "1" * 6
    r = cli("lookup", path, "0", never, "--missing", "nan", "--json")
    rows = strict(r.stdout)
    assert rows[1]["ctm"] is None and rows[1]["ctm_high"] is None  # NaN and an unbounded interval
    assert rows[0]["ctm"] is not None and math.isfinite(rows[0]["ctm"])
    strict(cli("info", path, "--json").stdout)
    r = cli("export", path, "--format", "json")
    assert r.returncode == 0 and strict(r.stdout)["counts"]
    strict(cli("info", "2d-n2-m2-t2000", "--json").stdout)  # exact names only, never a prefix


def test_shipped_tables_still_load_within_their_bounds():
    from ctmtab.tables import shipped
    from ctmtab.tables.load import body_bounds, check_header, read_file
    for name in shipped():
        header, _ = fmt.read_header(read_file(Path(load(name).source)))
        check_header(header)
        low, high = body_bounds(header)
        assert low <= header["body"]["raw_size"] <= high, name


# ---- nested header fields, re-sealed: refused as a TableError, or loaded and usable everywhere

VALID = small_valid()
NESTED = [("space", "dims"), ("space", "states"), ("space", "symbols"), ("totals", "halting"),
          ("totals", "space_size"), ("stats", "longest_run"), ("stats", "most_nonblank"), ("units", "count"),
          ("units", "covered"), ("units", "weight"), ("units", "shard"), ("build", "seconds"),
          ("build", "command"), ("build", "by"), ("build", "extended"), ("generator", "version"),
          ("keys", "distinct"), ("keys", "groups"), ("body", "raw_size"),
          ("certificate", "proofs"), ("certificate", "undecided_by_size"), ("certificate", "undecided_nodes"),
          ("certificate", "step_bound")]
odd = st.one_of(st.none(), st.booleans(), st.integers(-2**63, 2**64 - 1), st.sampled_from([10**9, 10**18, 2**31]),
                st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=6), st.binary(max_size=6),
                st.lists(st.one_of(st.integers(-3, 10**6), st.lists(st.integers(0, 10**6), max_size=3)), max_size=3),
                st.dictionaries(st.text(max_size=3), st.integers(-2**63, 2**64 - 1), max_size=2))


@settings(max_examples=400, deadline=None, suppress_health_check=list(HealthCheck), derandomize=True)
@given(st.sampled_from(NESTED), odd)
def test_resealed_nested_field_replacements(where, value):
    from ctmtab.tools.cli import _json
    outer, inner = where
    t = load_or_refuse(with_header(VALID, lambda h: h[outer].update({inner: value})))
    if t is None:
        return
    # what loads is usable: info, verify, export and merge's conversion never raise anything else
    _json(t.summary())
    problems(t)
    _json(t.to_json())
    t.to_tally()


# ---- sparse histograms (format 1.4): a long, mostly empty step histogram keeps its non-zero entries

@__import__("functools").lru_cache(maxsize=1)
def _sparse_steps_bytes():
    """The shipped exact (2,4) table: 3,932,965 step-histogram entries, a few thousand non-zero."""
    return load("1d-n2-m4-t3932964-exact").to_bytes()


def test_a_long_step_histogram_is_stored_sparse_and_reads_back_exactly():
    t = load("1d-n2-m4-t3932964-exact")
    data = _sparse_steps_bytes()
    body = msgpack.unpackb(zstandard_decompress(data), raw=False)
    assert "at" in body["hist_steps"] and len(body["hist_steps"]["at"]) < len(t.steps_hist)
    back = loads(data)
    assert back.steps_hist == t.steps_hist and sum(back.steps_hist) == back.halting
    assert problems(back) == []


def zstandard_decompress(data: bytes) -> bytes:
    import zstandard
    _, _, body = split(data)
    return zstandard.ZstdDecompressor().decompress(body)


@pytest.mark.parametrize("edit,fragment", [
    (lambda h: h.update(at=h["at"][8:16] + h["at"][:8] + h["at"][16:]), "out of order"),   # indices swapped
    (lambda h: h.update(at=h["at"][:-8] + (10**9).to_bytes(8, "little")), "out of order or past"),  # past n
    (lambda h: h.update(at=h["at"][:-3]), "malformed indices"),                                # a torn index
    (lambda h: h.update(at=h["at"][:-8]), "bytes, not"),                                      # one count too many
])
def test_a_damaged_sparse_histogram_is_refused(edit, fragment):
    def damage(raw):
        body = msgpack.unpackb(raw, raw=False)
        edit(body["hist_steps"])
        return msgpack.packb(body, use_bin_type=True)
    with pytest.raises(InconsistentTableError, match=fragment):
        loads(with_raw_body(_sparse_steps_bytes(), damage))
