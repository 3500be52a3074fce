"""BDM with its certainty, the bdm command and perturbation (issue 27), each against a plain
implementation written here from the definition: BDM(X) = sum over distinct blocks r of
CTM(r) + log2(n_r) (Zenil et al., Entropy 20(8):605, 2018), blocks by loops, counts in a dict,
values from Table.ctm / interval / standard_error one key at a time."""
import json
import math
import subprocess
import sys
import warnings
from collections import Counter

import numpy as np
import pytest

from ctmtab.errors import CtmtabError, FallbackWarning, MissingKeyError, RareKeyWarning
from ctmtab.tables import load
from ctmtab.tools.bdm import BDM


@pytest.fixture(scope="module")
def tables():
    return {name: load(name) for name in ("1d-n5-m2-t500", "1d-n4-m2-t107", "2d-n3-m2-t2000", "2d-n4-m2-t2000",
                                          "1d-n2-m4-t3932964-exact", "2d-n2-m3-t2000",
                                          "1d-n4-m4-t2000-sampled")}


# ---- the plain implementation

def plain_blocks(x, block, mode, stride):
    """Every block the decomposition takes, as (rows, cols, cells), by loops. x is 2D (1D: one row)."""
    R, C = x.shape
    (br, bc), (sr, sc) = block, stride
    if mode == "wrap":
        return [(br, bc, tuple(x[(r + i) % R, (c + j) % C] for i in range(br) for j in range(bc)))
                for r in range(0, R, sr) for c in range(0, C, sc)]
    out = [(br, bc, tuple(x[r + i, c + j] for i in range(br) for j in range(bc)))
           for r in range(0, R - br + 1, sr) for c in range(0, C - bc + 1, sc)]
    if mode == "drop":
        return out
    # shrink: what full blocks leave is scored with smaller blocks (BDM's docstring)
    end_r = (R - br) // sr * sr + br if R >= br else 0
    end_c = (C - bc) // sc * sc + bc if C >= bc else 0
    if R == 1 and br == 1:  # 1D: the rest of the row
        rest = x[:, end_c:]
        if rest.shape[1]:
            if rest.shape[1] < bc:
                out += plain_blocks(rest, (1, rest.shape[1]), "shrink", (1, rest.shape[1]))
            else:
                out += plain_blocks(rest, block, "shrink", stride)
        return out
    for part in (x[:end_r, end_c:], x[end_r:, :end_c], x[end_r:, end_c:]):
        if part.size:
            sub = (min(br, part.shape[0]), min(bc, part.shape[1]))
            out += plain_blocks(part, sub, "shrink", sub)
    return out


def key_text(t, rows, cols, cells):
    text = "".join(str(int(c)) for c in cells)
    if t.space.dims == 1:
        return text
    return "/".join(text[i * cols:(i + 1) * cols] for i in range(rows))


def as_rows(t, x):
    x = np.asarray(x)
    return x[None, :] if t.space.dims == 1 else x


def plain(t, x, block, mode="drop", stride=None):
    """value, low, high, se, fallbacks, rare, blocks by the definition, one key at a time."""
    block2 = (1, block) if t.space.dims == 1 else block
    stride = block if stride is None else stride
    stride2 = (1, stride) if t.space.dims == 1 else stride
    counts = Counter(key_text(t, *b) for b in plain_blocks(as_rows(t, x), block2, mode, stride2))
    value = low = high = var = 0.0
    fell = rare = 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RareKeyWarning)
        for key, n in counts.items():
            c = t.count(key)
            value += (t.ctm(key) if c else t.fallback()) + math.log2(n)
            fell += 0 if c else n
            if t.mode == "exhaustive":
                lo, hi = t.interval(key)
                low, high = low + lo + math.log2(n), high + hi + math.log2(n)
            elif c:
                var += (t.standard_error(key) / (t.probability(key) * math.log(2))) ** 2
                rare += n if t.seen(key) < t.min_seen else 0
    return {"value": value, "low": low, "high": high, "se": math.sqrt(var), "fallbacks": fell, "rare": rare,
            "blocks": sum(counts.values()), "distinct": len(counts)}


# ---- BDM.estimate

CASES_1D = [(12, "drop", None), (11, "shrink", None), (10, "wrap", None), (7, "drop", 3), (6, "shrink", 4),
            (5, "wrap", 2), (4, "shrink", 6)]


@pytest.mark.parametrize("block,mode,stride", CASES_1D)
def test_estimate_1d_equals_the_plain_sum(tables, block, mode, stride):
    t = tables["1d-n5-m2-t500"]
    rng = np.random.default_rng(block * 7 + len(mode))
    for length in (1, 9, 37, 101):
        x = rng.integers(0, 2, length)
        e = BDM(t, block, mode=mode, stride=stride, on_missing="ignore").estimate(x)
        want = plain(t, x, block, mode, stride)
        assert e.value == pytest.approx(want["value"], abs=1e-9)
        assert e.low == pytest.approx(want["low"], abs=1e-9) and e.high == pytest.approx(want["high"], abs=1e-9)
        assert (e.fallbacks, e.blocks, e.distinct) == (want["fallbacks"], want["blocks"], want["distinct"])
        if not e.fallbacks:
            assert e.low - 1e-9 <= e.value <= e.high + 1e-9
        assert BDM(t, block, mode=mode, stride=stride, on_missing="ignore")(x) == pytest.approx(e.value, abs=1e-9)


@pytest.mark.parametrize("name", ["2d-n3-m2-t2000", "2d-n2-m3-t2000"])
@pytest.mark.parametrize("block,mode,stride", [((2, 2), "drop", None), ((3, 2), "shrink", None),
                                               ((2, 3), "wrap", (1, 2)), ((2, 2), "shrink", (1, 1))])
def test_estimate_2d_equals_the_plain_sum(tables, name, block, mode, stride):
    t = tables[name]
    x = np.random.default_rng(11).integers(0, t.space.symbols, (7, 9))
    e = BDM(t, block, mode=mode, stride=stride, on_missing="ignore").estimate(x)
    want = plain(t, x, block, mode, stride)
    assert e.value == pytest.approx(want["value"], abs=1e-9)
    assert e.low == pytest.approx(want["low"], abs=1e-9) and e.high == pytest.approx(want["high"], abs=1e-9)
    assert e.low - 1e-9 <= e.value <= e.high + 1e-9
    assert e.fallbacks == want["fallbacks"] and e.standard_error is None


def test_an_exact_table_gives_a_point_interval(tables):
    t = tables["1d-n4-m2-t107"]  # exact: nothing undecided, so each CTM interval is a point
    x = np.random.default_rng(3).integers(0, 2, 64)
    e = BDM(t, 8).estimate(x)
    assert e.low == pytest.approx(e.value, abs=1e-9) == pytest.approx(e.high, abs=1e-9)


def test_dropped_cells_are_counted(tables):
    x = np.random.default_rng(2026).integers(0, 2, (200, 200))
    t = tables["2d-n4-m2-t2000"]
    # 66 blocks of 3 cover 198 of 200 rows and columns
    assert BDM(t, (3, 3)).estimate(x).dropped_cells == 200 * 200 - 198 * 198
    assert BDM(t, (3, 3), mode="wrap").estimate(x).dropped_cells == 0
    assert BDM(t, (3, 3), mode="shrink").estimate(x).dropped_cells == 0
    # a stride longer than the block leaves gaps: 10 cells, blocks of 2 at 0, 4, 8
    assert BDM(tables["1d-n5-m2-t500"], 2, stride=4).estimate([0, 1] * 5).dropped_cells == 10 - 6


def test_sampled_standard_error_and_rare_blocks(tables):
    t = tables["1d-n4-m4-t2000-sampled"]
    rng = np.random.default_rng(9)
    for block in (5, 9):
        x = rng.integers(0, 4, 450)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RareKeyWarning)
            e = BDM(t, block, on_missing="ignore").estimate(x)
        want = plain(t, x, block)
        assert e.low is None and e.high is None
        assert e.value == pytest.approx(want["value"], abs=1e-9)
        assert e.standard_error == pytest.approx(want["se"], rel=1e-9)
        assert (e.rare, e.fallbacks) == (want["rare"], want["fallbacks"])
    assert want["rare"] > 0  # length 9 over 4 symbols: some blocks were seen a few times only


def test_fallbacks_warn_raise_or_stay_quiet(tables):
    t = tables["1d-n4-m4-t2000-sampled"]
    dna = "ACGT" * 1248
    blocks = [dna[i:i + 12] for i in range(0, len(dna) - 11, 12)]
    never = sum(t.count("".join(str("ACGT".index(c)) for c in b)) == 0 for b in blocks)
    with pytest.warns(FallbackWarning, match=f"{never} of the {len(blocks)} blocks"):
        e = BDM(t, 12, alphabet="ACGT").estimate(dna)
    assert e.fallbacks == never == 416
    with pytest.raises(MissingKeyError, match="never seen"):
        BDM(t, 12, alphabet="ACGT", on_missing="error")(dna)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        BDM(t, 12, alphabet="ACGT", on_missing="ignore")(dna)
        BDM(t, 4, alphabet="ACGT")(dna)  # every block of 4 was seen: no warning


def test_letters_without_an_alphabet_point_to_it(tables):
    t = tables["1d-n4-m4-t2000-sampled"]
    with pytest.raises(CtmtabError, match="alphabet"):
        BDM(t, 8)("ACGTACGTACGT")
    with pytest.raises(CtmtabError, match="'N' at column 3"):
        BDM(t, 2, alphabet="ACGT")("ACNT")
    with pytest.raises(CtmtabError, match="repeats"):
        BDM(t, 2, alphabet="ACGA")
    # the alphabet's order is the symbols' order
    assert BDM(t, 2, alphabet="ACGT")("GTCA") == pytest.approx(BDM(t, 2)("2310"), abs=1e-12)


def test_estimate_many_equals_one_at_a_time(tables):
    t = tables["1d-n5-m2-t500"]
    rng = np.random.default_rng(5)
    xs = [rng.integers(0, 2, n) for n in rng.integers(1, 40, 60)]
    bdm = BDM(t, 6, stride=2, mode="shrink", on_missing="ignore")
    cols = bdm.estimate_many(xs)
    for i, x in enumerate(xs):
        want = plain(t, x, 6, "shrink", 2)
        assert cols["bdm"][i] == pytest.approx(want["value"], abs=1e-9)
        assert cols["bdm_low"][i] == pytest.approx(want["low"], abs=1e-9)
        assert cols["fallbacks"][i] == want["fallbacks"]
    same = np.stack([x[:20] for x in xs if len(x) >= 20])  # one array: a batch of one shape
    assert np.allclose(bdm.estimate_many(same)["bdm"], [plain(t, x, 6, "shrink", 2)["value"] for x in same])


# ---- perturbation

def brute_perturbation(t, x, block, mode, stride):
    """Change each element to every other symbol and recompute BDM from scratch."""
    base = plain(t, x, block, mode, stride)["value"]
    out = np.zeros(x.shape)
    for pos in np.ndindex(x.shape):
        changes = []
        for s in range(t.space.symbols):
            if s != x[pos]:
                y = x.copy()
                y[pos] = s
                changes.append(plain(t, y, block, mode, stride)["value"] - base)
        out[pos] = max(changes, key=abs)
    return out


@pytest.mark.parametrize("name,block,mode,stride", [
    ("1d-n5-m2-t500", 4, "drop", None), ("1d-n5-m2-t500", 4, "shrink", 3), ("1d-n5-m2-t500", 5, "wrap", 2),
    ("1d-n5-m2-t500", 3, "drop", 1), ("1d-n5-m2-t500", 20, "wrap", 7),
    ("1d-n2-m4-t3932964-exact", 3, "drop", 1), ("1d-n2-m4-t3932964-exact", 4, "shrink", None),
    ("1d-n2-m4-t3932964-exact", 3, "wrap", 2)])
def test_perturbation_1d_equals_recomputation(tables, name, block, mode, stride):
    t = tables[name]
    x = np.random.default_rng(block).integers(0, t.space.symbols, 14)
    got = BDM(t, block, mode=mode, stride=stride, on_missing="ignore").perturbation(x)
    want = brute_perturbation(t, x, block, mode, stride)
    assert np.allclose(np.abs(got), np.abs(want), atol=1e-9, rtol=0)
    if t.space.symbols == 2:
        assert np.allclose(got, want, atol=1e-9, rtol=0)


@pytest.mark.parametrize("name,block,mode,stride", [
    ("2d-n3-m2-t2000", (2, 2), "drop", None), ("2d-n3-m2-t2000", (2, 3), "shrink", None),
    ("2d-n3-m2-t2000", (2, 2), "wrap", (1, 1)), ("2d-n3-m2-t2000", (3, 3), "drop", (2, 1)),
    ("2d-n2-m3-t2000", (2, 2), "shrink", (1, 2)), ("2d-n2-m3-t2000", (2, 2), "wrap", None)])
def test_perturbation_2d_equals_recomputation(tables, name, block, mode, stride):
    t = tables[name]
    x = np.random.default_rng(1).integers(0, t.space.symbols, (5, 6))
    got = BDM(t, block, mode=mode, stride=stride, on_missing="ignore").perturbation(x)
    want = brute_perturbation(t, x, block, mode, stride)
    assert got.shape == x.shape
    assert np.allclose(np.abs(got), np.abs(want), atol=1e-9, rtol=0)
    if t.space.symbols == 2:
        assert np.allclose(got, want, atol=1e-9, rtol=0)


# ---- the bdm command

def ctm(*args, stdin=""):
    return subprocess.run([sys.executable, "-m", "ctmtab", *map(str, args)], input=stdin, capture_output=True,
                          text=True, timeout=120)


def test_bdm_command_text_and_json(tables, tmp_path):
    t = tables["1d-n5-m2-t500"]
    lines = ["0110100101101", "111111111111111111111111", "01"]
    r = ctm("bdm", "1d-n5-m2-t500", "--block", 12, "--json", "-", stdin="\n".join(lines) + "\n")
    assert r.returncode == 0, r.stderr
    rows = json.loads(r.stdout)
    for row, line in zip(rows, lines):
        want = plain(t, np.array([int(c) for c in line]), 12)
        assert row["bdm"] == pytest.approx(want["value"], abs=1e-9)
        assert row["bdm_low"] == pytest.approx(want["low"], abs=1e-9)
        assert row["dropped_cells"] == len(line) % 12 and row["fallbacks"] == 0
    path = tmp_path / "seqs.txt"
    path.write_text("\n".join(lines) + "\n")
    r = ctm("bdm", "1d-n5-m2-t500", "--block", 12, path)
    assert r.returncode == 0 and r.stdout.split("\n")[0].split() == [
        "line", "bdm", "bdm_low", "bdm_high", "fallbacks", "rare", "dropped_cells"]
    assert len(r.stdout.strip().split("\n")) == 4


def test_bdm_command_2d_csv_npy_and_the_alphabet(tables, tmp_path):
    t = tables["2d-n3-m2-t2000"]
    x = np.random.default_rng(8).integers(0, 2, (6, 7))
    np.save(tmp_path / "x.npy", x)
    (tmp_path / "x.csv").write_text("\n".join(",".join(map(str, r)) for r in x) + "\n")
    want = plain(t, x, (2, 2), "shrink", None)["value"]
    for f in ("x.npy", "x.csv"):
        r = ctm("bdm", "2d-n3-m2-t2000", "--block", "2x2", "--boundary", "shrink", "--json", tmp_path / f)
        assert r.returncode == 0, r.stderr
        assert json.loads(r.stdout)[0]["bdm"] == pytest.approx(want, abs=1e-9)
    s = tables["1d-n4-m4-t2000-sampled"]
    r = ctm("bdm", "1d-n4-m4-t2000-sampled", "--block", 12, "--alphabet", "ACGT", "--json", stdin="ACGT" * 30)
    row = json.loads(r.stdout)[0]
    assert r.returncode == 0 and "standard_error" in row and "bdm_low" not in row
    assert row["fallbacks"] == 10 and r.stderr.count("\n") == 1 and "10 of the 10 blocks" in r.stderr
    assert s.count("012301230123") == 0  # why they fell back


@pytest.mark.parametrize("args,stdin,says", [
    (("1d-n4-m4-t2000-sampled", "--block", 4, "--alphabet", "ACGT"), "ACGT\nACNT\n", "line 2 holds 'N' at column 3"),
    (("1d-n4-m4-t2000-sampled", "--block", 4), "ACGT\n", "--alphabet"),
    (("1d-n5-m2-t500", "--block", "4x4"), "0101\n", "--block '4x4'"),
    (("1d-n5-m2-t500", "--block", 4), "0101\n\n0101\n", "line 2 is empty"),
    (("2d-n3-m2-t2000", "--block", 2), "0,1\n1,0,1\n", "rectangular"),
    (("1d-n5-m2-t500", "--block", 4, "--boundary", "spiral"), "0101\n", "invalid choice")])
def test_bdm_command_errors_are_one_line(args, stdin, says):
    r = ctm("bdm", *args, stdin=stdin)
    assert r.returncode == 2 and r.stdout == ""
    assert r.stderr.count("\n") == 1 and says in r.stderr and "Traceback" not in r.stderr
