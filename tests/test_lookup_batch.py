"""lookup for batches (issue 27, item 3) and the interval's width (item 7): keys from a file or
stdin, one row per key, each row equal to the single-key API's answer."""
import json
import math
import subprocess
import sys

import numpy as np
import pytest

from ctmtab.tables import load


def ctm(*args, stdin=None, cwd=None):
    return subprocess.run([sys.executable, "-m", "ctmtab", *map(str, args)], capture_output=True, text=True,
                          input=stdin, cwd=cwd)


def one_line(r, code=2) -> str:
    assert r.returncode == code, r.stderr
    assert len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.stderr, r.stderr
    return r.stderr


def _close(a, b):
    return (a is None and (b is None or not math.isfinite(b))) or math.isclose(a, b, rel_tol=1e-12, abs_tol=1e-12)


def _agrees(t, row, key):
    """A CLI row against the single-key API (count, ctm, interval)."""
    assert row["key"] == key
    c = t.count(key)
    assert row["count"] == c
    if c:
        assert _close(row["ctm"], t.ctm(key))
    low, high = t.interval(key)
    assert _close(row["ctm_low"], low) and _close(row["ctm_high"], high)


@pytest.mark.parametrize("name", ["1d-n5-m2-t500", "1d-n4-m2-t107", "2d-n3-m2-t2000", "1d-n4-m4-t2000-sampled"])
def test_batch_rows_equal_single_lookups(name, tmp_path):
    t = load(name)
    t.min_seen = 0  # rare keys: compared, not warned about
    rng = np.random.default_rng(27)
    if t.space.dims == 1:
        keys = ["".join(map(str, rng.integers(0, t.space.symbols, n))) for n in rng.integers(1, 12, 60)]
    else:
        keys = ["/".join("".join(map(str, rng.integers(0, 2, c))) for _ in range(r))
                for r, c in rng.integers(1, 4, (60, 2))]
    (tmp_path / "k.txt").write_text("\n".join(keys[:40]) + "\n\n")
    r = ctm("lookup", name, *keys[40:50], "--keys-from", tmp_path / "k.txt", "--keys-from", "-",
            "--missing", "nan", "--json", "--min-seen", 0, stdin="\r\n".join(keys[50:]))
    assert r.returncode == 0, r.stderr
    rows = json.loads(r.stdout)
    assert len(rows) == 60  # the command line's keys, then each file's, in order
    for row, key in zip(rows, keys[40:50] + keys[:40] + keys[50:]):
        _agrees(t, row, key)


def test_a_cut_table_gives_its_bound_per_row():
    t = load("2d-n5-m2-t100-upto4")
    rows = json.loads(ctm("lookup", "2d-n5-m2-t100-upto4", "01/10", "00000", "0000", "--json").stdout)
    assert rows[1]["dropped"] and math.isclose(rows[1]["ctm_low"], t.interval("00000")[0])
    _agrees(t, rows[0], "01/10")
    _agrees(t, rows[2], "0000")


def test_missing_nan_goes_on_and_raise_names_the_line(tmp_path):
    (tmp_path / "k.txt").write_text("0110\n" + "1" * 30 + "\n0101\n")
    r = ctm("lookup", "1d-n4-m2-t107", "--keys-from", tmp_path / "k.txt", "--missing", "nan", "--json")
    rows = json.loads(r.stdout)
    assert [x["count"] for x in rows] == [load("1d-n4-m2-t107").count(k) for k in ("0110", "1" * 30, "0101")]
    assert rows[1]["count"] == 0 and rows[1]["ctm"] is None
    err = one_line(ctm("lookup", "1d-n4-m2-t107", "--keys-from", tmp_path / "k.txt"))
    assert "line 2" in err and "--missing nan" in err
    fallback = json.loads(ctm("lookup", "1d-n4-m2-t107", "--keys-from", tmp_path / "k.txt", "--missing",
                              "fallback", "--json").stdout)
    assert math.isclose(fallback[1]["ctm"], load("1d-n4-m2-t107").fallback())


@pytest.mark.parametrize("args, stdin, fragment", [
    ((), None, "no keys"),
    (("--keys-from", "nosuch.txt"), None, "no keys file"),
    (("--keys-from", "-"), "0110\n01x0\n", "stdin line 2"),
    (("--keys-from", "-"), "0110\n0120\n", "stdin line 2"),
    (("--keys-from", "-", "--keys-from", "-"), "0\n", "twice"),
    (("--keys-from", "."), None, "folder"),
])
def test_bad_batches_fail_in_one_line(args, stdin, fragment):
    assert fragment in one_line(ctm("lookup", "1d-n4-m2-t107", *args, stdin=stdin))


def test_keys_may_follow_the_options():
    r = ctm("lookup", "1d-n4-m2-t107", "--missing", "nan", "0110", "--json", "01")
    assert [x["key"] for x in json.loads(r.stdout)] == ["0110", "01"]


def test_the_width_is_printed_where_four_decimals_show_a_point():
    t = load("1d-n5-m2-t500")
    out = ctm("lookup", "1d-n5-m2-t500", "0110").stdout.splitlines()[1]
    low, high = t.interval("0110")
    assert f"[{low:.4f}, {high:.4f}]" in out and low != high  # a point at 4 decimals ...
    assert f"width {high - low:.2g}" in out and "e-05" in out  # ... that is not one
    assert "width 0" in ctm("lookup", "1d-n4-m2-t107", "0110").stdout  # exact: a point
