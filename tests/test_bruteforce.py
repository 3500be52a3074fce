"""The fast tree search against an independent brute force over every machine
of the full space, string by string (tests/bruteforce.py shares no code with ctmtab).

The brute force runs once per space, at the largest cap listed for it, and tallies
each output by its halting step; every smaller cap is read off that one pass."""
import pytest

from bruteforce import code_of, up_to
from conftest import brute_force, exact_table

from ctmtab.enumerator import Space, build

# (dims, states, symbols): caps checked, the largest one brute-forced
CAPS = {
    (1, 1, 2): (1, 2, 3),
    (1, 2, 2): (1, 3, 6),       # 6 = S(2) (Rado 1962, verified, REFERENCES.md)
    (1, 1, 3): (2, 5),
    (1, 3, 2): (7, 9, 20, 21),  # 21 = S(3) (Lin & Rado 1965, verified); 9 leaves many runs undecided
    (1, 2, 3): (12, 37, 38),    # 38 = S(2,3) (Lafitte & Papazian 2007, verified)
    (2, 1, 2): (1, 4, 10),
    (2, 2, 2): (4, 7, 10),
    (2, 1, 3): (5, 10),
    # 4 and 5 symbols: one state only halts at its first entry, but the symbol maps that expand the
    # first-use order (m >= 3) are checked against every write and blank; (1, 2, 3) is the deep case
    (1, 1, 4): (2, 8),
    (1, 1, 5): (3, 8),
    (2, 1, 4): (3, 10),
}
HEAVY = {(1, 2, 3)}  # 11,390,625 machines x 3 blanks x 38 steps: the CI lane (.ci/run)

# one worker runs every brute force (cached in conftest); test_settle.py shares it
pytestmark = pytest.mark.xdist_group("brute-force")


def cases():
    for space, caps in CAPS.items():
        marks = [pytest.mark.ci_slow] if space in HEAVY else []
        for cap in caps:
            yield pytest.param(*space, cap, marks=marks, id=f"{space[0]}d-n{space[1]}-m{space[2]}-t{cap}")


@pytest.fixture(scope="session")
def brute():
    """(dims, n, m) -> (counts by halting step, halts per blank and step), one pass per space."""
    done = {}

    def get(dims, n, m):
        if (dims, n, m) not in done:
            done[dims, n, m] = brute_force(dims, n, m, max(CAPS[dims, n, m]))
        return done[dims, n, m]
    return get


def fast_table(dims, n, m, cap):
    return exact_table(n, m, cap) if dims == 1 else build(Space(2, n, m), cap, budget_hours=None)


@pytest.mark.parametrize("dims,n,m,cap", list(cases()))  # a list: pytest deprecates generators here
def test_fast_table_equals_brute_force(brute, dims, n, m, cap):
    counts, halts = brute(dims, n, m)
    t = fast_table(dims, n, m, cap)
    fast = {(*shape, code_of(k, m)) if dims == 2 else (len(k), code_of(k, m)): c
            for shape, g in t.groups.items() for k, c in g.items()}
    assert fast == up_to(counts, cap)
    # the totals count machines on any one blank: the brute force ran every blank
    assert [sum(h[: cap + 1]) for h in halts] == [t.halting] * m
    if dims == 1:
        assert t.steps_hist + [0] * (cap + 1 - len(t.steps_hist)) == halts[0][: cap + 1]


@pytest.mark.parametrize("dims,n,m,cap", [c for c in cases() if c.values[3] < max(CAPS[c.values[:3]])])
def test_undecided_weight_bounds_the_later_halts(brute, dims, n, m, cap):
    # the certified interval is sound only if every machine that halts after the cap
    # was counted undecided at the cap: the brute force sees those halts directly
    _, halts = brute(dims, n, m)
    later = sum(halts[0][cap + 1:])
    assert later <= fast_table(dims, n, m, cap).undecided
