"""Lookups for estimators: scalar, vectorised and dense, with the missing-key policy."""
import math

import numpy as np
import pytest

from ctmtab.errors import MissingKeyError, TableError
from ctmtab.tables import load


@pytest.fixture(scope="module")
def t4():
    return load("1d-n4-m2-t107")


def test_scalar_key_forms_agree(t4):
    assert t4.count("0110") == t4.count([0, 1, 1, 0]) == t4.count(np.array([0, 1, 1, 0])) > 0


def test_probability_and_ctm_follow_the_coding_theorem(t4):
    c = t4.count("0")
    assert t4.probability("0") == c / t4.total
    assert t4.ctm("0") == pytest.approx(-math.log2(c / t4.total), rel=1e-15)
    assert sum(t4.probability(k) for k, _ in t4.items()) == pytest.approx(1.0)


def test_certified_interval_contains_the_estimate(t4):
    for key in ("0", "0101", "000000000"):
        low, high = t4.interval(key)
        assert low <= t4.ctm(key) <= high


def test_missing_key_policy(t4):
    absent = "1" * 15
    with pytest.raises(MissingKeyError, match="never produced"):
        t4.ctm(absent)
    assert math.isnan(t4.ctm(absent, missing="nan"))
    fb = t4.ctm(absent, missing="fallback")
    assert fb > max(t4.ctm(k) for k, _ in t4.items())
    with pytest.raises(TableError, match="unknown missing-key policy"):
        t4.ctm(absent, missing="zero")


def test_bad_keys_are_refused(t4):
    for key in ("012", "", "ab", [0, 5]):
        with pytest.raises(TableError):
            t4.count(key)


def test_vectorised_lookup_matches_scalar(t4):
    rng = np.random.default_rng(7)
    keys = rng.integers(0, 2, size=(500, 9)).astype(np.uint8)
    out = t4.lookup(keys)
    for row, c, v in zip(keys, out["count"], out["ctm"]):
        assert c == t4.count(row)
        assert (math.isnan(v) and c == 0) or v == pytest.approx(t4.ctm(row))
    mixed = t4.lookup(["0", "0110", "1" * 15])
    assert mixed["count"][0] == t4.count("0") and mixed["count"][2] == 0


def test_dense_view_is_indexed_by_base_m_code(t4):
    dense = t4.dense(8)
    assert dense.shape == (256,)
    assert not np.isnan(dense).any()  # every string of length 8 is present
    assert dense[int("00110101", 2)] == pytest.approx(t4.ctm("00110101"))
    with pytest.raises(ValueError):
        dense[0] = 1.0  # read-only: shared across callers
    d10 = t4.dense(10, missing="fallback")
    assert (d10 == t4.fallback()).sum() == 1024 - len(t4.groups[(10,)])


def test_iteration_filtering_and_summary(t4):
    eights = list(t4.items(8))
    assert len(eights) == 256 and all(len(k) == 8 for k, _ in eights)
    s = t4.summary()
    assert s["distinct_keys"] == len(t4) == 1832  # the (4,2) table's distinct strings (memory, REFERENCES.md)
    assert s["complete_shapes"][-1] == "8"


@pytest.mark.parametrize("m,length,dtype", [(2, n, d) for n in (1, 8, 12, 18, 33, 64) for d in (np.uint8, np.int64, bool)]
                         + [(m, n, d) for m, n in ((3, 1), (3, 25), (4, 16), (4, 32), (7, 22))
                            for d in (np.uint8, np.int64)])  # bool holds two symbols only
def test_key_codes_agree_with_pythons_base_m_integers(m, length, dtype):
    # Python's int(text, m) is the independent reference; the first rows are all m-1 (2^64 - 1 at
    # m = 2, length 64) and all 0, the extremes of the packed binary path and the in-place loop
    from ctmtab.tables.arrays import codes_of
    rows = np.random.default_rng(length).integers(0, m, size=(200, length))
    rows[0], rows[1] = m - 1, 0
    expect = [int("".join(map(str, r)), m) for r in rows.tolist()]
    assert codes_of(rows.astype(dtype), m).tolist() == expect
