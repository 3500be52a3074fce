"""The exhaustive 1D enumerator against published values and its own symmetries."""
import numpy as np
import pytest

from ctmtab.enumerator import DECIDERS, Space, build

from conftest import exact_table

# Busy beaver S(n) (steps, the halting one included) and Sigma(n) (ones), 2 symbols:
# OEIS A060843 / A028444; Rado 1962; Lin & Rado 1965; Brady 1983 (verified, REFERENCES.md)
BUSY_BEAVER = {1: (1, 1), 2: (6, 4), 3: (21, 6), 4: (107, 13)}


@pytest.mark.parametrize("n", [1, 2, 3, 4])
def test_busy_beaver_values(n):
    steps, ones = BUSY_BEAVER[n]
    t = exact_table(n, 2, steps)
    assert t.longest_run == steps
    assert t.most_nonblank == ones


def test_busy_beaver_two_states_three_symbols():
    # S(2,3) = 38, Lafitte & Papazian 2007 (verified, REFERENCES.md)
    t = exact_table(2, 3, 38)
    assert t.longest_run == 38


def test_busy_beaver_not_exceeded_at_larger_cap():
    # no 3-state machine halts after step 21 (S(3) = 21, Lin & Rado 1965, verified)
    t = exact_table(3, 2, 60)
    assert t.longest_run == 21
    assert exact_table(3, 2, 21).groups == t.groups


@pytest.mark.parametrize("n,nodes", [(2, 19), (3, 1_772), (4, 249_693)])
def test_halting_tree_normal_form_nodes(n, nodes):
    # halting nodes of the tree-normal-form enumeration, arXiv:2509.12337 (verified, REFERENCES.md)
    steps, _ = BUSY_BEAVER[n]
    assert exact_table(n, 2, steps).halting_nodes == nodes


def test_four_state_table_covers_every_string_up_to_length_8():
    # Delahaye & Zenil 2012, arXiv:1101.4795 (verified, abstract): (4,2) with cap S(4) = 107
    # produces every binary string of length <= 8, and only some longer strings
    t = exact_table(4, 2, 107)
    for length in range(1, 9):
        assert len(t.groups[(length,)]) == 2**length, length
    assert 0 < len(t.groups[(9,)]) < 2**9


def test_four_state_distinct_strings():
    # 1,832 distinct strings in the (4,2) table (memory, REFERENCES.md); reproduced here by
    # the tree search, and its counts agree with the brute force on the smaller spaces
    assert exact_table(4, 2, 107).distinct() == 1832


@pytest.mark.parametrize("n,cap", [(2, 6), (3, 21), (4, 107), (3, 7)])
def test_binary_tables_are_closed_under_reversal_and_complement(n, cap):
    t = exact_table(n, 2, cap)
    swap = bytes([1, 0])
    for group in t.groups.values():
        for s, c in group.items():
            assert group[s[::-1]] == c
            assert group[s.translate(swap + bytes(254))] == c


def test_ternary_table_is_closed_under_reversal_and_blank_swaps():
    t = exact_table(2, 3, 38)
    for group in t.groups.values():
        for s, c in group.items():
            assert group[s[::-1]] == c
            for b in (1, 2):
                perm = list(range(256))
                perm[0], perm[b] = b, 0
                assert group[s.translate(bytes(perm))] == c


@pytest.mark.parametrize("subset", [(), ("full-table",), ("escapee",), ("cycler",), tuple(DECIDERS)])
def test_deciders_never_change_a_count(subset):
    base = exact_table(3, 2, 21)
    t = build(Space(1, 3, 2), 21, deciders=subset, budget_hours=None)
    assert t.groups == base.groups
    assert t.halting == base.halting and t.steps_hist == base.steps_hist
    assert t.non_halting + t.undecided == base.non_halting + base.undecided
    if not subset:  # at cap S(3) = 21 only the busy-beaver step bound proves anything
        assert t.non_halting == t.proofs["step-bound"]


def test_deciders_prove_what_they_claim():
    # every decider moves weight from undecided to proven, never the other way; cap 20 is below
    # S(3) = 21 (Lin & Rado 1965), so the step bound proves nothing here
    none = build(Space(1, 3, 2), 20, deciders=(), budget_hours=None)
    # (the CPS runs in builds from cap 128 only; tests/test_certify.py checks it through the core)
    each = [build(Space(1, 3, 2), 20, deciders=(d,), budget_hours=None) for d in DECIDERS if d != "ngram-cps"]
    assert none.step_bound is None and all(t.undecided < none.undecided for t in each)
    assert build(Space(1, 3, 2), 20).undecided <= min(t.undecided for t in each)


@pytest.mark.parametrize("split", [1, 2, 3])
def test_work_unit_split_gives_identical_tally(split):
    whole = exact_table(3, 2, 21)
    t = exact_table(3, 2, 21, split)
    assert t.units > 1
    for name in ("groups", "halting", "non_halting", "undecided", "halting_nodes",
                 "steps_hist", "length_hist", "longest_run", "most_nonblank"):
        assert getattr(t, name) == getattr(whole, name), name


@pytest.mark.parametrize("dims,n,m,small,large", [
    (1, 3, 2, 7, 21),    # 21 = S(3) (Lin & Rado 1965, verified): nothing halts later
    (1, 2, 3, 12, 38),   # 38 = S(2,3) (Lafitte & Papazian 2007, verified)
    (2, 3, 2, 10, 40),
    (2, 2, 2, 3, 30),
])
def test_cap_truncation_and_sound_intervals(dims, n, m, small, large):
    from ctmtab.tables import Table
    full = build(Space(dims, n, m), large, budget_hours=None)
    short = build(Space(dims, n, m), small, budget_hours=None)
    # a run that halts within `small` steps halts at the same step under the larger cap
    assert short.steps_hist == full.steps_hist[: small + 1]
    assert short.halting == sum(full.steps_hist[: small + 1])
    # every machine halting after the small cap was undecided there
    assert short.undecided >= full.halting - short.halting
    # so every CTM value at the larger cap lies in the certified interval of the smaller one
    a, b = Table.from_tally(short), Table.from_tally(full)
    assert short.undecided > 0 and any(a.count(k) < c for k, c in b.items())  # the check has work
    for key, _ in b.items():
        low, high = a.interval(key)
        assert low - 1e-9 <= b.ctm(key) <= high + 1e-9, key


def test_one_state_at_cap_one_by_hand():
    # (1,2), cap 1: a run halts at step 1 iff entry (A,0) is HALT(0) or HALT(1), whatever
    # the other entry holds (6 options): 12 machines, on each of the 2 blanks
    t = exact_table(1, 2, 1)
    assert t.halting == 12
    assert t.groups == {(1,): {b"\x00": 12, b"\x01": 12}}


def test_two_state_distribution_matches_published_values():
    # D(2) from Delahaye & Zenil 2012 (memory, REFERENCES.md): P("0") = P("1") ~ 0.328,
    # P("00") ~ 0.0834, P("001") ~ 0.00098. Our (2,2) table equals the independent brute
    # force (test_bruteforce.py), so the values are reproduced twice here.
    # The published digits read as truncated, so each value must start with them.
    t = exact_table(2, 2, 6)
    total = t.total_count
    p = {k: c / total for g in t.groups.values() for k, c in g.items()}
    assert p[b"\x00"] == p[b"\x01"]
    assert 0.328 <= p[b"\x00"] < 0.329
    assert 0.0834 <= p[b"\x00\x00"] < 0.0835
    assert 0.00098 <= p[b"\x00\x00\x01"] < 0.00099


@pytest.mark.ci_slow  # about 10 s; the format tests keep long keys exact in the quick lane
def test_outputs_beyond_64_bit_codes_stay_exact_end_to_end():
    # (2,4) at cap 3000 produces outputs of dozens of cells; base-4 codes overflow 64 bits past
    # 32 cells, so those keys travel as symbol rows: counts must survive the file exactly
    from ctmtab.tables import Table, loads, problems
    t = build(Space(1, 2, 4), 3000, workers=2)
    long = {s: g for s, g in t.groups.items() if s[0] > 32}
    assert long, "expected outputs longer than 32 cells"
    table = loads(Table.from_tally(t).to_bytes())
    for shape, group in long.items():
        assert table.groups[shape].symbols is not None
        for key, c in group.items():
            assert table.count(key) == c and table.count(key[::-1]) == c
    assert problems(table) == []


def test_shipped_five_state_table_matches_the_published_one():
    # Soler-Toscano, Zenil, Delahaye & Gauvrit, PLoS ONE 9(5):e96223 (2014): every binary string
    # of length <= 11 is produced (verified, abstract); 99,608 distinct strings and
    # CTM("0") ~ 2.51 bits (memory). arXiv:2509.12337 (verified): 48,379,894 halting nodes without
    # a cap, and a cap of 500 finds slightly fewer (by less than 0.01%).
    from ctmtab.tables import load, problems
    t = load("1d-n5-m2-t500")
    assert t.space == Space(1, 5, 2) and t.cap == 500
    assert all(len(t.groups[(k,)]) == 2**k for k in range(1, 12))
    assert t.distinct == 99_608
    assert round(t.ctm("0"), 2) == 2.51
    nodes = t.header["stats"]["halting_nodes"]
    assert 0 < 48_379_894 - nodes < 48_379_894 // 10_000
    assert t.halting + t.non_halting + t.undecided == Space(1, 5, 2).size  # OEIS A141475, n = 5
    assert problems(t) == []


def test_every_core_error_code_has_its_own_class():
    from ctmtab.enumerator.native import core
    from ctmtab.errors import CoreArgumentError, CoreOverflowError, CtmtabError
    with pytest.raises(CoreOverflowError, match="128 bits"):  # 45^25 machines: 138 bits
        core.run_unit(1, 5, 5, 10, 15)
    with pytest.raises(CoreArgumentError, match="invalid argument"):
        core.run_unit(1, 2, 2, 10, 15, (99,))
    with pytest.raises(CoreArgumentError, match="invalid argument"):  # 512: neither a decider nor relabel
        core.run_unit(1, 2, 2, 10, 512)
    assert issubclass(CoreArgumentError, CtmtabError) and CoreArgumentError("x").exit_code == 2
    r = core.sample_unit(1, 5, 5, 100, 15, 7, 100)  # sampling counts samples: no 128-bit bound
    assert r["halting"] + r["non_halting"] + r["undecided"] == 100


@pytest.mark.core
def test_python_decider_table_is_the_cores():
    """model/deciders.py copies the core's bits by hand, so readers need no core: the copy
    must match the compiled module name by name, bit by bit and in the order of its proofs."""
    from ctmtab.enumerator import deciders, holdouts
    from ctmtab.enumerator.native import core
    assert list(deciders.DECIDERS.items()) == list(core.DECIDERS.items())
    assert [bit for bit in core.DECIDERS.values()] == [1 << i for i in range(len(core.DECIDERS))]
    assert deciders.SEARCH_RELABEL == core.SEARCH_RELABEL
    assert not deciders.SEARCH_RELABEL & sum(deciders.DECIDERS.values())
    # the holdout records, read without the core, use its entry kinds and direction indices
    assert holdouts.ENTRY_MOVE == core.ENTRY_MOVE
    assert {dims: "".join(letters[k] for k in sorted(letters)) for dims, letters in core.MOVES.items()} \
        == holdouts.MOVES


@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
def test_shipped_exact_five_state_table():
    # arXiv:2509.12337 (verified, REFERENCES.md): S(5) = 47,176,870 steps, the champion leaves
    # 4,098 ones, and the Coq proof's tree normal form has 48,379,894 halting nodes; a cap of at
    # least S(5) must reach exactly that many. OEIS A141475: 26,559,922,791,424 machines.
    from ctmtab.enumerator import run
    from ctmtab.tables import load, problems
    t = load("1d-n5-m2-t47176870-exact")
    assert t.space == Space(1, 5, 2) and t.cap == 47_176_870 and t.space_size == 26_559_922_791_424
    assert t.exact and t.undecided == 0 and t.certificate.step_bound["steps"] == 47_176_870
    stats = t.header["stats"]
    assert stats["halting_nodes"] == 48_379_894
    assert stats["longest_run"] == 47_176_870 and stats["most_nonblank"] == 4_098
    assert t.steps_hist[47_176_870] > 0 and len(t.steps_hist) == 47_176_871
    champion = run("1RB1LC_1RC1RB_1RD0LE_1LA1LD_1RZ0LA", 10**8)  # the one-machine simulator
    assert champion.steps == 47_176_870 and t.count("".join(map(str, champion.output))) >= 1
    # a longer cap only adds halts: every count of the cap-500 table is at most the exact one
    short = load("1d-n5-m2-t500")
    exact = dict(t.items())
    assert all(exact.get(k, 0) >= c for k, c in short.items())
    assert t.halting > short.halting and problems(t) == []
    # the cap-500 certificate must hold against the exact values: every exact CTM lies in the
    # certified interval of the short table, and a key the short table never produced has an
    # exact CTM at or above the lower bound the short table gave for it
    keys = list(exact)
    truth = np.log2(t.total) - np.log2(np.array([exact[k] for k in keys], dtype=float))
    got = short.lookup(keys, missing="nan")
    assert np.all(got["ctm_low"] <= truth + 1e-9) and np.all(truth <= got["ctm_high"] + 1e-9)
    assert np.count_nonzero(got["count"] == 0) > 0  # some keys appear only after step 500
