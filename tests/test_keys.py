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
@pytest.mark.ci_slow  # subprocesses, several seconds; the API checks of the same keys run in the quick lane
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


@pytest.mark.ci_slow  # subprocesses, several seconds; the API checks of the same keys run in the quick lane
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
    # keys of other alphabets or dimensions are not this table's: left unscored, as keys it lacks
    assert validate(t, values={"3.": 1.0, "13.": 2.0, "99999.": 3.0, "1.2/3.4": 4.0}).scored == 1
    values.write_text("key,value\n10,1.5\n")
    assert "ambiguous" in one_line(ctm("validate", path, "--values", values))
    r = ctm("validate", path, "--estimator", "zlib", "--sizes", "1-2", "--json")  # dotted keys reach a codec
    assert r.returncode == 0, r.stderr
    assert json.loads(r.stdout)["scored"] == len(keys)


# ---- data that are not symbols (issue 25, item 4)

@pytest.fixture(scope="module")
def t4():
    return load("1d-n4-m2-t107")


NOT_SYMBOLS = [[0, 1, 0.9, 1], [0, 1, math.nan, 1], [0, 1, math.inf, 1], [0.0, 1.0, 1.0, 0.0], [0, 1, 1j, 0],
               np.array([0, 1, None, 1], dtype=object), [0, 1, 2, 1], [0, -1, 1, 1], [0, 1, 1 << 70, 0],
               [[0, 1], [1]], "01a0", "0.1.2.0", "0110 ", ["0", "1"], np.array([0, 1], dtype="datetime64[D]")]


@pytest.mark.parametrize("x", NOT_SYMBOLS, ids=repr)
def test_bdm_and_lookups_refuse_data_that_are_not_symbols(t4, x):
    # before: BDM truncated 0.9 to 0, NaN to 0 and 1j to its real part, with a numpy warning only
    bdm = BDM(t4, 2)
    for use in (bdm, bdm.codes, bdm.fallbacks):
        with pytest.raises(CtmtabError):
            use(x)
    with pytest.raises(CtmtabError):
        t4.count(x)
    if not isinstance(x, str):
        with pytest.raises(CtmtabError):
            t4.lookup(np.asarray(x, dtype=object)[None] if isinstance(x, np.ndarray) else [x])
    binary_only = isinstance(x, str) and "2" in x or isinstance(x, list) and (2 in x or -1 in x)
    with pytest.raises(CtmtabError):
        compressed_bits([300] if binary_only else x)  # the codecs take any byte


def test_symbols_given_as_bools_small_ints_or_key_text_score_alike(t4):
    bits = [0, 1, 1, 0, 1, 0, 0, 1]
    bdm = BDM(t4, 4)
    # BDM of one block is its CTM (Zenil et al., Entropy 20(8):605, 2018)
    assert BDM(t4, 8)(bits) == pytest.approx(t4.ctm("01101001"))
    same = {bdm(bits), bdm(np.array(bits, dtype=np.int8)), bdm(np.array(bits, dtype=bool)), bdm("01101001"),
            bdm("0.1.1.0.1.0.0.1")}
    assert len(same) == 1
    assert compressed_bits("01101001") == compressed_bits(bits) == 8 * len(__import__("zlib").compress(
        bytes(bits), 9))
    assert block_entropy("0.1.1.0") == block_entropy([0, 1, 1, 0]) == 4.0  # 2 zeros, 2 ones: 4 x 1 bit


def test_bdm_over_more_than_ten_symbols_reads_dotted_text(built):
    _, t, _ = built[Space(1, 2, 13)]
    bdm = BDM(t, 2)
    assert bdm("10.1.0.3") == bdm([10, 1, 0, 3]) == pytest.approx(t.ctm("10.1") + t.ctm("0.3"))
    with pytest.raises(CtmtabError, match="ambiguous"):
        bdm("1013")


# ---- small items

def test_a_batch_of_zero_keys_gives_empty_answers(t4):
    one = t4.lookup(["0110"])
    for empty in (np.zeros((0, 8)), np.zeros((0, 8), dtype=np.uint8), [], ()):
        out = t4.lookup(empty)
        assert set(out) == set(one) and all(len(v) == 0 for v in out.values())
    t2 = load("2d-n3-m2-t2000")
    assert all(len(v) == 0 for v in t2.lookup(np.zeros((0, 3, 3))).values())


def test_a_lookup_batch_that_is_one_key_or_no_sequence_is_refused(t4):
    # before: lookup("0110") looked up the four one-cell keys 0, 1, 1, 0
    for bad, what in (("0110", "not the one key"), (b"0110", "not the one key"), (5, "not a int"),
                      (np.array([0, 1, 1, 0]), "no batch")):
        with pytest.raises(TableError, match=what):
            t4.lookup(bad)


@pytest.mark.parametrize("name", ["out.xyz", "out", "out.jpg", "out.png.bak"])
def test_validate_plot_refuses_a_format_it_cannot_write(tmp_path, name):
    err = one_line(ctm("validate", "1d-n4-m2-t107", "--estimator", "zlib", "--plot", tmp_path / name))
    assert ".png, .pdf or .svg" in err and not (tmp_path / name).exists()


@pytest.mark.parametrize("name, magic", [("v.pdf", b"%PDF"), ("v.svg", b"<svg"), ("V.PNG", b"\x89PNG")])
@pytest.mark.ci_slow  # subprocesses, several seconds; the API checks of the same keys run in the quick lane
def test_validate_plot_writes_the_format_it_names(tmp_path, name, magic):
    r = ctm("validate", "1d-n4-m2-t107", "--estimator", "zlib", "--sizes", "4-6", "--plot", tmp_path / name)
    assert r.returncode == 0, r.stderr
    assert magic in (tmp_path / name).read_bytes()[:400]  # the file signatures of PDF, SVG and PNG


@pytest.mark.ci_slow  # subprocesses, several seconds; the API checks of the same keys run in the quick lane
def test_undefined_correlations_are_said_in_words(t4, tmp_path):
    keys = [k for k, _ in t4.items()]
    by_len = {k: (1.0 if len(k) == 4 else float(int(k, 2))) for k in keys if len(k) in (1, 4, 5)}
    values = tmp_path / "v.csv"
    values.write_text("".join(f"{k},{v}\n" for k, v in by_len.items()))
    r = ctm("validate", "1d-n4-m2-t107", "--values", values)
    assert r.returncode == 0, r.stderr
    assert "nan" not in r.stdout.lower()
    table = r.stdout.split("Spearman   Kendall")[1].split("worst")[0]
    lines = {line.split()[0]: line for line in table.strip().splitlines()}
    # 0 and 1 have one count (the blank symmetry), and every length-4 key got the value 1.0
    assert "undefined (every key scored has the same exact CTM at this size)" in lines["1"]
    assert "undefined (the estimator is constant at this size)" in lines["4"]
    assert "undefined" not in lines["5"]
    rep = json.loads(ctm("validate", "1d-n4-m2-t107", "--values", values, "--json").stdout)
    assert rep["by_size"]["4"]["spearman"] is None and rep["by_size"]["5"]["spearman"] is not None
    values.write_text("".join(f"{k},2\n" for k in keys))
    out = ctm("validate", "1d-n4-m2-t107", "--values", values).stdout
    assert "Spearman and Kendall undefined (the estimator is constant)" in out and "nan" not in out.lower()


@pytest.mark.parametrize("value", ["nan", "inf", "-inf", "1e999", "1_0", "\u0661"])
def test_values_must_be_finite_plain_numbers(tmp_path, value):
    values = tmp_path / "v.csv"
    values.write_text(f"key,value\n0110,1\n0101,{value}\n")
    assert "line 3" in one_line(ctm("validate", "1d-n4-m2-t107", "--values", values))
