"""Key text reads back as itself for every alphabet size, ambiguous spellings are refused, and
data that are not symbols never reach a count or a BDM value."""
import csv
import io
import json
import math
import subprocess
import sys

import numpy as np
import pytest

from ctmtab.enumerator import Space, sample
from ctmtab.errors import CtmtabError, TableError
from ctmtab.tables import Table, load
from ctmtab.tools.baselines import block_entropy, compressed_bits
from ctmtab.tools.bdm import BDM
from ctmtab.tools.validate import validate, values_from_csv

SPACES = [Space(1, 2, 2), Space(1, 2, 10), Space(1, 2, 11), Space(1, 2, 13), Space(2, 2, 11), Space(2, 2, 13)]


def ctm(*args):
    return subprocess.run([sys.executable, "-m", "ctmtab", *map(str, args)], capture_output=True, text=True,
                          timeout=120)


def one_line(r, code=2):
    assert r.returncode == code, r.stderr
    assert len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.stderr, r.stderr
    return r.stderr


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    """Space -> (tally, table, file): small sampled tables (10,000 samples, cap 30)."""
    out = {}
    for space in SPACES:
        tally = sample(space, 30, 10_000, seed=3)
        path = tmp_path_factory.mktemp("keys") / f"{space.dims}d-m{space.symbols}.ctmt"
        Table.from_tally(tally, command="test").save(path)
        out[space] = (tally, load(path), path)
    return out


def _raw(tally) -> dict:
    """(shape, cells) -> count, straight from the builder's tally: no key text involved."""
    return {(shape, tuple(k)): c for shape, g in tally.groups.items() for k, c in g.items()}


def _exported(t) -> tuple[dict, dict]:
    buf = io.StringIO()
    t.write_csv(buf)
    rows = list(csv.reader(io.StringIO(buf.getvalue())))[1:]
    from_csv = {r[0]: int(r[1]) for r in rows}
    assert len(from_csv) == len(rows)  # no two keys share a spelling
    return from_csv, t.to_json()["counts"]


@pytest.mark.parametrize("space", SPACES, ids=lambda s: f"{s.dims}d-m{s.symbols}")
def test_every_exported_key_reads_back_as_its_own_count(built, space):
    tally, t, _ = built[space]
    raw = _raw(tally)
    from_csv, from_json = _exported(t)
    assert from_csv == from_json and len(from_csv) == len(raw) == t.distinct
    for text, count in from_csv.items():
        shape, cells = t.parse_key(text)
        assert raw[(shape, tuple(int(c) for c in cells))] == count, text
        assert t.count(text) == count and t.key_text(shape, cells) == text
    if space.symbols > 10:  # the examples of issue 25: symbol ten alone, and the cells 1, 0
        ten = (1,) * (space.dims - 1) + (1,)
        assert t.count("10.") == raw.get((ten, (10,)), 0) > 0
        assert t.count("1.0") == raw.get((ten[:-1] + (2,), (1, 0)), 0)


@pytest.mark.parametrize("space", SPACES, ids=lambda s: f"{s.dims}d-m{s.symbols}")
def test_the_command_line_lookup_of_every_exported_key(built, space):
    _, t, path = built[space]
    from_csv, _ = _exported(t)
    keys = list(from_csv)
    r = ctm("lookup", path, *keys, "--json", "--min-seen", 0)
    assert r.returncode == 0, r.stderr
    rows = json.loads(r.stdout)
    assert [row["key"] for row in rows] == keys
    assert [row["count"] for row in rows] == [from_csv[k] for k in keys]


@pytest.mark.parametrize("space", [s for s in SPACES if s.symbols > 10], ids=lambda s: f"{s.dims}d-m{s.symbols}")
def test_an_ambiguous_spelling_is_refused(built, space):
    _, t, path = built[space]
    m = space.symbols
    err = one_line(ctm("lookup", path, "10"))
    assert f"key '10' is ambiguous over {m} symbols: write 1.0 for the cells 1, 0, or 10. for the one cell 10" in err
    for key in ("10", "01", "110", "10/1.0"):
        with pytest.raises(TableError, match="ambiguous"):
            t.count(key)
    if space.dims == 2:  # a 2D key whose one ambiguous row is named
        with pytest.raises(TableError, match="in its row '11'"):
            t.count("1.0/11")


@pytest.mark.parametrize("key", ["01", "+1", " 1", "1 ", "\u0661", "1..0", ".1", "10..", "1.-1", "", "1/", "0x1",
                                 "12345678901234567890."])
def test_keys_that_are_not_key_text_get_one_line(built, key):
    _, t, path = built[Space(1, 2, 13)]
    with pytest.raises(TableError):
        t.count(key)
    if key and not key.startswith(("-", " ")):
        one_line(ctm("lookup", path, key))


def test_up_to_ten_symbols_dotted_text_is_the_same_key():
    t = load("1d-n4-m2-t107")
    assert t.count("0.1.1.0") == t.count("0.1.1.0.") == t.count("0110") == t.count([0, 1, 1, 0]) > 0
    for bad in ("0.01", "0.10", "01.0.", "0110 ", "2"):
        with pytest.raises(TableError):
            t.count(bad)
    with pytest.raises(TableError, match="one row"):
        t.count("01/10")


def test_validate_reads_values_in_the_one_spelling(built, tmp_path):
    _, t, path = built[Space(1, 2, 13)]
    from_csv, _ = _exported(t)
    keys = [k for k in from_csv if len(t.parse_key(k)[1]) <= 2]
    values = tmp_path / "v.csv"
    values.write_text("key,value\n" + "".join(f"{k},{i}\n" for i, k in enumerate(keys)))
    assert validate(t, values=values_from_csv(values)).scored == len(keys)
    # a one-digit cell may be typed with its trailing dot: the same key
    assert validate(t, values={"3.": 1.0, "10.": 2.0}).scored == 2
    with pytest.raises(CtmtabError, match="twice"):
        validate(t, values={"3": 1.0, "3.": 2.0})
    values.write_text("key,value\n10,1.5\n")
    assert "ambiguous" in one_line(ctm("validate", path, "--values", values))
    r = ctm("validate", path, "--estimator", "zlib", "--sizes", "1-2", "--json")  # dotted keys reach a codec
    assert r.returncode == 0, r.stderr
    assert json.loads(r.stdout)["scored"] == len(keys)
