"""Two-dimensional machines: symmetry closure, splits, deciders, keys (the brute force: test_bruteforce.py)."""
import numpy as np
import pytest

from ctmtab.enumerator import Space, build
from ctmtab.tables import Table, loads, problems


def table2d(n, m, cap, **kw):
    return build(Space(2, n, m), cap, budget_hours=None, **kw)


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


def life_step(grid: np.ndarray) -> np.ndarray:
    """One Game of Life generation on a grid padded with dead cells (common practice: B3/S23)."""
    g = np.pad(grid, 1)
    nb = sum(np.roll(np.roll(g, dr, 0), dc, 1) for dr in (-1, 0, 1) for dc in (-1, 0, 1) if (dr, dc) != (0, 0))
    out = ((nb == 3) | ((g == 1) & (nb == 2))).astype(np.uint8)
    rows, cols = np.nonzero(out)
    return out[rows.min(): rows.max() + 1, cols.min(): cols.max() + 1]


def test_glider_phases_two_generations_apart_get_equal_ctm():
    # Fact of the trade (common practice, REFERENCES.md): two generations on, a glider is the
    # mirror image of its shape, shifted one cell diagonally (a glide reflection).
    from ctmtab.tables import load
    glider = np.array([[0, 1, 0], [0, 0, 1], [1, 1, 1]], dtype=np.uint8)
    later = life_step(life_step(glider))
    assert later.shape == (3, 3) and not np.array_equal(later, glider)
    assert any(np.array_equal(later, img) for img in (glider[::-1], glider[:, ::-1], glider.T,
                                                       np.rot90(glider, 2).T))
    for name in ("2d-n3-m2-t2000", "2d-n4-m2-t2000"):  # shipped: a missing one is a failure
        t = load(name)
        assert t.count(glider) > 0
        assert t.ctm(glider) == t.ctm(later)


def test_2d_cap_over_the_grid_limit_is_refused():
    from ctmtab.errors import SpaceError
    with pytest.raises(SpaceError, match="2D cap"):
        build(Space(2, 2, 2), 5000)


def test_2d_build_and_export_from_the_command_line(tmp_path):
    import subprocess
    import sys
    out = tmp_path / "t.ctmt"
    r = subprocess.run([sys.executable, "-m", "ctmtab", "build", "--dims", "2", "--states", "2",
                        "--max-steps", "20", "-o", str(out), "-q"], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    r = subprocess.run([sys.executable, "-m", "ctmtab", "export", str(out)], capture_output=True, text=True)
    rows = dict(line.split(",")[:2] for line in r.stdout.splitlines()[1:])
    assert "0/1" in rows and "01" in rows  # a column and a row: rows north to south, joined by /
    assert all(len({len(part) for part in k.split("/")}) == 1 for k in rows)
    r = subprocess.run([sys.executable, "-m", "ctmtab", "build", "--dims", "2", "--states", "2", "-o",
                        str(tmp_path / "x.ctmt")], capture_output=True, text=True)
    assert r.returncode == 2 and "give --max-steps" in r.stderr


def test_the_shipped_5_state_2d_table_holds_every_4x4_array():
    from ctmtab.tables import load, problems
    from ctmtab.tools.bdm import BDM
    t = load("2d-n5-m2-t100-upto4")
    # (4nm + m)^(nm) machines in the 2D busy-beaver formalism (DESIGN.md): 42^10 for (5,2)
    assert t.space_size == (4 * 5 * 2 + 2) ** 10 == 17_080_198_121_677_824
    assert t.cut.keep_size == 4 and problems(t) == []
    assert all(len(t.groups[(r, c)]) == 2 ** (r * c) for r in range(1, 5) for c in range(1, 5))
    x = np.random.default_rng(2026).integers(0, 2, (200, 200))
    assert BDM(t, (4, 4)).fallbacks(x) == 0
    assert t.dropped((5, 1)) and t.interval("00000/00000")[1] == float("inf")
