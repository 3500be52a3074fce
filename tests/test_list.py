"""ctmtab list (issue 27, item 4): every shipped table, its rows checked against the table's own
header, its counts and os.stat."""
import json
import math
import os
import subprocess
import sys
import time

from ctmtab.tables import load
from ctmtab.tables.load import shipped


def ctm(*args):
    return subprocess.run([sys.executable, "-m", "ctmtab", *map(str, args)], capture_output=True, text=True)


def _listing(*args):
    r = ctm("list", "--json", *args)
    assert r.returncode == 0, r.stderr
    return json.loads(r.stdout)


def _upto(t, good) -> int:
    """The largest k with good(shape) for every shape up to k (2D: k x k), from the loaded table."""
    k = 0
    while True:
        k1 = k + 1
        shapes = [(k1,)] if t.space.dims == 1 else [(r, c) for r in range(1, k1 + 1) for c in range(1, k1 + 1)
                                                     if max(r, c) == k1]
        if not all(good(s) for s in shapes):
            return k
        k = k1


def test_one_row_per_shipped_table_matching_its_header_and_file():
    listing = _listing()
    rows = {r["name"]: r for r in listing["tables"]}
    assert sorted(rows) == shipped()
    for name, row in rows.items():
        t = load(name)
        assert row["file_bytes"] == os.stat(t.source).st_size
        assert (row["dims"], row["states"], row["symbols"], row["cap"]) == (
            t.space.dims, t.space.states, t.space.symbols, t.cap)
        assert row["distinct_keys"] == t.distinct
        assert row["kind"] == ("sampled" if t.mode == "sampled" else "exact" if t.undecided == 0 else "capped")
        m = t.space.symbols
        full = {s for s in t.shapes if len(t.groups[s]) == m ** math.prod(s)}  # every key of the shape held
        assert row["complete_shapes"] == ["x".join(map(str, s)) for s in sorted(full)]
        upto = _upto(t, lambda s: s in full)
        as_size = (lambda k: k or None) if t.space.dims == 1 else (lambda k: f"{k}x{k}" if k else None)
        assert row["complete_up_to"] == as_size(upto)
        if t.mode == "sampled" or t.exact:
            assert row["block"] == as_size(upto)
        else:  # tight: the widest certified interval, from the loaded table's own keys
            widths = {s: w for s, w in zip(t.shapes, (x["widest"] for x in t.interval_widths()))}
            assert row["block"] == as_size(_upto(t, lambda s: s in full and widths[s] <= 0.1))
    assert "0.1 bits" in listing["block_rule"]


def test_blocks_follow_the_tightness_asked_for():
    rows = {r["name"]: r for r in _listing("--tight", 1e-6)["tables"]}
    assert rows["1d-n6-m2-t1000-upto18"]["block"] is None  # 4e-05 bits at length 1
    assert rows["1d-n4-m2-t107"]["block"] == 8  # exact: points
    assert {r["name"]: r for r in _listing("--tight", 2)["tables"]}["1d-n6-m2-t1000-upto18"]["block"] == 11


def test_reads_headers_only_where_it_can_and_is_fast():
    rows = _listing()["tables"]
    assert [r["name"] for r in rows if r["body_read"]] == ["1d-n6-m2-t1000-upto18"]  # widths hang on counts
    from ctmtab.tools.catalog import catalog
    t0 = time.perf_counter()
    catalog()
    assert time.perf_counter() - t0 < 1.0


def test_text_and_bad_input():
    r = ctm("list")
    assert r.returncode == 0 and len(r.stdout.splitlines()) == len(shipped()) + 2
    assert "1d-n5-m2-t500" in r.stdout and "settled 16" in r.stdout
    r = ctm("list", "--tight", "-1")
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.stderr
