import pytest

from ctmtab.enumerator import Space, build
from ctmtab.errors import SpaceError, TooLargeError

from conftest import exact_table


# OEIS A141475, (4n+2)^(2n) machines with n states and 2 symbols (verified, REFERENCES.md)
A141475 = [36, 10_000, 7_529_536, 11_019_960_576, 26_559_922_791_424]


@pytest.mark.parametrize("n", [1, 2, 3, 4, 5])
def test_binary_space_sizes_match_oeis(n):
    assert Space(1, n, 2).size == A141475[n - 1]


def test_2d_size_matches_published_count():
    # (4nm+m)^(nm): 34^8 for 2D (4,2), the count in Zenil et al., PeerJ CS 2015 (memory, REFERENCES.md)
    assert Space(2, 4, 2).size == 1_785_793_904_896


@pytest.mark.parametrize("args,fragment", [
    ((1, 0, 2), "at least 1 state"),
    ((1, 2, 1), "at least 2 symbols"),
    ((3, 2, 2), "dimension 3"),
    ((1, 2.5, 2), "whole number"),
])
def test_impossible_spaces_are_refused(args, fragment):
    with pytest.raises(SpaceError, match=fragment):
        Space(*args)


@pytest.mark.parametrize("cap", [0, -3])
def test_cap_below_one_is_refused(cap):
    with pytest.raises(SpaceError, match="at least 1"):
        build(Space(1, 2, 2), cap)


def test_space_too_large_for_exact_counts_is_refused():
    with pytest.raises(TooLargeError, match="128-bit"):
        build(Space(1, 6, 6), 10)


def test_hopeless_exhaustive_request_is_refused_before_work():
    # (7,2) at cap 1000: the estimate is about 1,000 CPU-hours, far over the 24-hour default
    with pytest.raises(TooLargeError, match="CPU-hours"):
        build(Space(1, 7, 2), 1000)


def test_a_small_estimate_over_a_tight_budget_is_shown_in_a_readable_unit():
    # (4,2) costs well under a CPU-minute: "0 CPU-hours" would say nothing
    with pytest.raises(TooLargeError, match=r"estimated at [0-9.]+ CPU-seconds, over the budget of 1e-07 CPU-hours"):
        build(Space(1, 4, 2), 107, budget_hours=1e-7)


def test_estimate_tracks_the_real_search():
    # the (4,2) search has 249,693 halting nodes (arXiv:2509.12337, verified); the stratified
    # random-walk estimate must land within a factor 2, or the refusals above mean little
    from ctmtab.enumerator import estimate
    e = estimate(Space(1, 4, 2), 107)
    assert 249_693 / 2 < e.nodes < 249_693 * 2


@pytest.mark.parametrize("n,m,cap", [(1, 2, 1), (2, 2, 6), (3, 2, 21), (4, 2, 107), (2, 3, 38), (3, 2, 5)])
def test_invariant_holds(n, m, cap):
    t = exact_table(n, m, cap)
    assert t.halting + t.non_halting + t.undecided == Space(1, n, m).size
    t.check()


def test_the_cap_limit_reaches_the_five_state_bound():
    from ctmtab.model.bounds import STEP_BOUNDS
    from ctmtab.model.space import MAX_CAP, check_cap
    assert max(STEP_BOUNDS.values(), key=lambda b: b[0])[0] <= MAX_CAP  # S(5) = 47,176,870 fits
    assert check_cap(MAX_CAP) == MAX_CAP
    with pytest.raises(SpaceError, match="over the limit"):
        check_cap(MAX_CAP + 1)
