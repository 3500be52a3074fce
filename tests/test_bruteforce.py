"""The fast tree search against an independent brute force over every machine
of the full space, string by string (tests/bruteforce.py shares no code with ctmtab)."""
import pytest

from bruteforce import brute_force_1d, code_of
from conftest import exact_table


@pytest.mark.parametrize("n,m,cap", [
    (1, 2, 3), (2, 2, 6), (1, 3, 5), (2, 2, 3),
    (3, 2, 21),   # cap S(3) = 21 (Lin & Rado 1965, verified)
    (3, 2, 9),    # a cap that leaves many runs undecided
    (2, 3, 38),   # cap S(2,3) = 38 (Lafitte & Papazian 2007, verified)
])
def test_fast_table_equals_brute_force(n, m, cap):
    counts, halting, steps_hist = brute_force_1d(n, m, cap)
    t = exact_table(n, m, cap)
    fast = {(len(k), code_of(k, m)): c for g in t.groups.values() for k, c in g.items()}
    assert fast == dict(counts)
    # the totals count machines on any one blank: the brute force ran every blank
    assert halting == [t.halting] * m
    assert steps_hist[0][: len(t.steps_hist)] == t.steps_hist
    assert sum(steps_hist[0][len(t.steps_hist):]) == 0
