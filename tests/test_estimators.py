"""BDM, the baselines and validation, against their definitions and outside libraries."""
import json
import math
import subprocess
import sys

import numpy as np
import pytest
from scipy import stats

from ctmtab.errors import CtmtabError
from ctmtab.tables import load
from ctmtab.tools.baselines import block_entropy, compressed_bits
from ctmtab.tools.bdm import BDM
from ctmtab.tools.validate import builtin, validate, values_from_csv


@pytest.fixture(scope="module")
def t5():
    return load("1d-n5-m2-t500")


@pytest.fixture(scope="module")
def t2d():
    return load("2d-n3-m2-t2000")


def test_bdm_of_one_block_is_its_ctm(t5):
    # BDM definition, Zenil et al., Entropy 20(8):605 (2018), via REFERENCES.md
    for key in ("010011010110", "000000000000", "111010001011"):
        assert BDM(t5, 12)(key) == pytest.approx(t5.ctm(key), abs=1e-12)


@pytest.mark.parametrize("k", [2, 3, 7])
def test_bdm_of_a_repeated_block_adds_log2_k(t5, k):
    # same source: a block occurring n_r times contributes CTM(r) + log2(n_r)
    block = "01101001011"
    assert BDM(t5, 11)(block * k) == pytest.approx(t5.ctm(block) + math.log2(k), abs=1e-9)


def test_bdm_modes_by_hand(t5):
    x = "0110100101" + "1100"  # one block of 10, a remainder of 4
    drop = BDM(t5, 10)(x)
    assert drop == pytest.approx(t5.ctm("0110100101"))
    assert BDM(t5, 10, mode="shrink")(x) == pytest.approx(t5.ctm("0110100101") + t5.ctm("1100"))
    # wrap: blocks start at 0 and 10, the second wraps around to the start
    assert BDM(t5, 10, mode="wrap")(x) == pytest.approx(t5.ctm("0110100101") + t5.ctm("1100011010"))
    # stride 1: every overlapping block of 12 in a 14-cell string, three distinct ones
    y = "01101001011101"
    expected = sum(t5.ctm(y[i:i + 12]) for i in range(3))
    assert BDM(t5, 12, stride=1)(y) == pytest.approx(expected)


def test_bdm_2d_single_and_tiled_blocks(t2d):
    block = np.array([[0, 1], [1, 1]])
    assert BDM(t2d, (2, 2))(block) == pytest.approx(t2d.ctm(block))
    tiled = np.tile(block, (3, 3))  # 9 copies: CTM + log2(9)
    assert BDM(t2d, (2, 2))(tiled) == pytest.approx(t2d.ctm(block) + math.log2(9))
    torus = BDM(t2d, (2, 2), mode="wrap")(np.tile(block, (2, 3))[:, :5])
    assert math.isfinite(torus)
    rec = BDM(t2d, (2, 2), mode="shrink")(np.tile(block, (2, 2))[:3, :3])
    assert math.isfinite(rec) and rec > BDM(t2d, (2, 2))(np.tile(block, (2, 2))[:3, :3])


def test_bdm_bad_input(t5):
    with pytest.raises(CtmtabError, match="mode"):
        BDM(t5, 8, mode="spiral")
    with pytest.raises(CtmtabError, match="symbols outside"):
        BDM(t5, 8)([0, 1, 2])


def test_baselines_against_the_formats_and_scipy():
    # zlib: a 2-byte header and a 4-byte Adler-32 (RFC 1950, section 2.2) around one fixed-Huffman
    # block: 3 header bits, 8 bits per literal byte 0-143 and a 7-bit end code (RFC 1951, 3.2.6).
    # Up to 3 symbols there is no 3-byte repeat to match, so k symbols take k + 8 bytes.
    for key in ("0", "1", "01", "10", "000", "011"):
        assert compressed_bits(key, "zlib") == 8 * (len(key) + 8), key
    # bz2 and xz streams carry at least their fixed framing: "BZh9" plus a 10-byte end-of-stream
    # record (bzip2 format), a 12-byte header and a 12-byte footer (xz format 1.0.4) (memory)
    assert compressed_bits("0", "bz2") >= 8 * 14 and compressed_bits("0", "lzma") >= 8 * 24
    x = np.random.default_rng(5).integers(0, 2, 200)
    # Shannon entropy of the symbol frequencies times the length (scipy.stats.entropy, base 2)
    p = np.bincount(x) / len(x)
    assert block_entropy(x, 1) == pytest.approx(len(x) * stats.entropy(p, base=2))


def test_rank_correlations_by_hand_with_ties(t5):
    # four keys that tie in pairs (000 = 111 and 010 = 101, by complement), scored 1, 2 for the
    # likelier pair and 3, 4 for the other; the rest of length 3 unscored. By hand: Spearman's
    # rho is Pearson on average ranks (1.5, 1.5, 3.5, 3.5 against 1..4) = 4 / sqrt(4 * 5);
    # Kendall's tau-b (Kendall 1945, ties): 4 concordant, 0 discordant of 6 pairs, 2 tied in
    # the exact values only, (4 - 0) / sqrt((6 - 2) * 6) (common practice)
    assert t5.ctm("000") == t5.ctm("111") != t5.ctm("010") == t5.ctm("101")
    low, high = sorted([("000", "111"), ("010", "101")], key=lambda pair: t5.ctm(pair[0]))
    rep = validate(t5, values=dict(zip(low + high, [1.0, 2.0, 3.0, 4.0])), sizes=[3])
    assert rep.coverage == 0.5
    assert rep.spearman == pytest.approx(2 / math.sqrt(5), abs=1e-12)
    assert rep.kendall == pytest.approx(2 / math.sqrt(6), abs=1e-12)


def test_zlib_ranks_short_strings_poorly(t5):
    rep = validate(t5, builtin("zlib"), sizes=range(5, 12))
    # short strings: compressed length agrees with CTM far from perfectly (common practice);
    # measured here, Spearman about 0.50 within sizes (0.57 pooled) for lengths 5..11 of the (5,2)
    # table (README.md)
    assert rep.spearman < 0.99 and rep.spearman_pooled < 0.99


def test_exact_table_against_itself_and_shuffled(t5):
    same = validate(t5, lambda k: t5.ctm(k), sizes=range(1, 12))
    assert same.spearman == pytest.approx(1.0) and same.kendall == pytest.approx(1.0)
    assert same.mae_linear == pytest.approx(0.0, abs=1e-9) and same.coverage == 1.0
    keys = [k for n in range(1, 12) for k, _ in t5.items(n)]
    vals = np.array([t5.ctm(k) for k in keys])
    np.random.default_rng(11).shuffle(vals)
    shuffled = validate(t5, values=dict(zip(keys, vals)), sizes=range(1, 12))
    assert abs(shuffled.spearman) < 0.05  # 4,094 keys: a random ranking correlates near 0


def test_uncovered_keys_count_against_coverage(t5):
    rep = validate(t5, lambda k: 1.0 / (len(k) - 3) if len(k) != 4 else math.nan, sizes=range(5, 8))
    assert rep.coverage == 1.0
    rep = validate(t5, values={"00000": 1.0, "00001": 2.0, "00011": 2.5}, sizes=[5])
    assert rep.scored == 3 and rep.keys == 32


def test_values_csv(tmp_path):
    p = tmp_path / "v.csv"
    p.write_text("key,value\n0101,3.5\n0000,1\n")
    assert values_from_csv(p) == {"0101": 3.5, "0000": 1.0}
    p.write_text("key,value\n0101\n")
    with pytest.raises(CtmtabError, match="line 2"):
        values_from_csv(p)


def ctm(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "ctmtab", *map(str, args)], capture_output=True, text=True,
                          cwd=cwd)


@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
def test_validate_command_json_plot_and_module_function(tmp_path):
    r = ctm("validate", "1d-n5-m2-t500", "--estimator", "ctmtab.tools.demo:switch_score", "--sizes", "5-9",
            "--json", "--plot", tmp_path / "v.png")
    assert r.returncode == 0, r.stderr
    rep = json.loads(r.stdout)
    assert rep["keys"] == 32 + 64 + 128 + 256 + 512 and set(rep["by_size"]) == {"5", "6", "7", "8", "9"}
    assert (tmp_path / "v.png").read_bytes()[:4] == b"\x89PNG"
    (tmp_path / "v.csv").write_text("0101,2\n0110,3\n")
    r = ctm("validate", "1d-n4-m2-t107", "--values", tmp_path / "v.csv", "--sizes", "4")
    assert r.returncode == 0 and "2 of 16 keys scored" in r.stdout
    r = ctm("validate", "1d-n4-m2-t107", "--estimator", "nosuch:thing")
    assert r.returncode == 2 and "cannot import" in r.stderr and len(r.stderr.splitlines()) == 1


@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
def test_plot_and_demo_commands(tmp_path):
    r = ctm("plot", "2d-n3-m2-t2000", "-o", tmp_path)
    assert r.returncode == 0
    assert {p.name for p in tmp_path.glob("*.png")} == {"ctm-rank.png", "halting-steps.png", "mass-by-size.png"}
    r = ctm("demo", "-o", tmp_path / "demo")
    assert r.returncode == 0 and "Spearman" in r.stdout and "fictional" in r.stdout
    assert len(list((tmp_path / "demo").glob("*.png"))) == 5


def test_bdm_counts_the_blocks_it_scored_by_the_fallback():
    from ctmtab.tables import load
    from ctmtab.tools.bdm import BDM
    t = load("1d-n4-m2-t107")  # every string of length <= 8 is produced, some of length 9 are not
    x = np.random.default_rng(4).integers(0, 2, 9 * 3000)
    seen = {k for k, _ in t.items(9)}
    blocks = ["".join(map(str, x[i:i + 9])) for i in range(0, len(x) - 8, 9)]
    assert BDM(t, 9).fallbacks(x) == sum(b not in seen for b in blocks) > 0
    assert BDM(t, 8).fallbacks(x) == 0
