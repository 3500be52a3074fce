"""Two-dimensional machines: the tree search against brute force, symmetry closure, keys."""
import numpy as np
import pytest

from ctmtab.enumerator import Space, build
from ctmtab.tables import Table, loads, problems

from bruteforce import brute_force_2d, code_of


def table2d(n, m, cap, **kw):
    return build(Space(2, n, m), cap, budget_hours=None, **kw)


@pytest.mark.parametrize("n,m,cap", [(1, 2, 4), (2, 2, 10), (2, 2, 4), (1, 3, 5)])
def test_2d_tree_search_equals_brute_force(n, m, cap):
    counts, halting = brute_force_2d(n, m, cap)
    t = table2d(n, m, cap)
    fast = {(s[0], s[1], code_of(k, m)): c for s, g in t.groups.items() for k, c in g.items()}
    assert fast == dict(counts)
    assert halting == [t.halting] * m


@pytest.mark.parametrize("n", [1, 2, 3, 4])
def test_2d_space_sizes(n):
    # (4nm+m)^(nm): follows from the definition (REFERENCES.md); (4,2) is 34^8
    assert Space(2, n, 2).size == (8 * n + 2) ** (2 * n)
    assert Space(2, 4, 2).size == 1_785_793_904_896


def test_2d_tables_are_closed_under_rotation_reflection_and_blank_swap():
    t = Table.from_tally(table2d(3, 2, 40))
    assert problems(loads(t.to_bytes())) == []
    g = table2d(3, 2, 40).groups
    for shape, group in g.items():
        for key, c in group.items():
            a = np.frombuffer(key, dtype=np.uint8).reshape(shape)
            for img in (np.rot90(a), np.rot90(a, 2), a[::-1], a[:, ::-1], a.T, 1 - a):
                img = np.ascontiguousarray(img)
                assert g[img.shape][img.tobytes()] == c


def test_2d_invariant_and_splits():
    whole = table2d(3, 2, 30, split_depth=0)
    for depth in (2, 4):
        t = table2d(3, 2, 30, split_depth=depth)
        assert t.groups == whole.groups and t.halting == whole.halting
    assert whole.halting + whole.non_halting + whole.undecided == Space(2, 3, 2).size


def test_2d_deciders_never_change_a_count():
    ref = table2d(3, 2, 30)
    none = table2d(3, 2, 30, deciders=())
    assert none.groups == ref.groups and none.non_halting == 0
    assert ref.undecided < none.undecided


def test_2d_keys_lookups_and_export():
    t = loads(Table.from_tally(table2d(3, 2, 40)).to_bytes())
    key = "01/10"
    assert t.count(key) == t.count(np.array([[0, 1], [1, 0]])) > 0
    assert t.count("10/01") == t.count(key)  # a rotation
    dense = t.dense((2, 2))
    assert dense.shape == (16,) and dense[0b0110] == pytest.approx(t.ctm(key))
    arr = np.array([[[0, 1], [1, 0]], [[1, 1], [1, 1]]], dtype=np.uint8)
    out = t.lookup(arr)
    assert out["count"][0] == t.count(key) and out["count"][1] == t.count("11/11")
    rows = dict(t.items((2, 2)))
    assert rows[key] == t.count(key)
