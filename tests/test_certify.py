"""Certification: the non-halting proofs never claim a run that halts, the per-size bounds on
the undecided weight hold, the busy-beaver step bound makes tables exact, and holdouts list
exactly what remains undecided."""
import itertools

import numpy as np
import pytest

from ctmtab.enumerator import Space, build
from ctmtab.enumerator import holdouts as ho
from ctmtab.model.bounds import STEP_BOUNDS, bound_reached
from ctmtab.enumerator.native import core as _core
from ctmtab.errors import InconsistentTableError
from ctmtab.tables import Table

pytestmark = pytest.mark.core

ALL_BUT_CPS = ("full-table", "escapee", "cycler", "translated-cycler")


# ---- an independent simulator for partial 1D machines (shares no code with the package)

def parse(text):
    """Compact notation -> {(state, symbol): (write, +1/-1, next)}; '---' stays out (undefined)."""
    table = {}
    for q, group in enumerate(text.split("_")):
        for s in range(len(group) // 3):
            w, d, t = group[3 * s: 3 * s + 3]
            if w != "-":
                table[(q, s)] = (int(w), 1 if d == "R" else -1, None if t == "Z" else ord(t) - 65)
    return table


def reaches_undefined(text, steps):
    """True if the run from the blank tape meets an undefined or HALT entry within `steps` steps."""
    table, tape, head, state = parse(text), {}, 0, 0
    for _ in range(steps):
        entry = table.get((state, tape.get(head, 0)))
        if entry is None or entry[2] is None:
            return True
        tape[head] = entry[0]
        head += entry[1]
        state = entry[2]
    return False


# The binary attempts at the cap, as enumerator/csrc/ctm_prove.c lists them (cps_binary_late)
LATE_BINARY = [(3, 4, 13), (2, 1, 11), (2, 3, 12), (4, 4, 14), (2, 2, 11), (3, 2, 12), (4, 2, 14), (2, 4, 12)]


def cps(text, **how):
    """The core's CPS on one partial machine in compact notation: the attempt that proved it, or 0.
    how: at_cap=True for the costlier attempts a build adds at the cap, or plan=[(n, k, log2)]."""
    table = parse(text)
    groups = text.split("_")
    n, m = len(groups), len(groups[0]) // 3
    de = np.zeros(n * m, np.int8)
    wr, mv, nx = np.zeros(n * m, np.uint8), np.zeros(n * m, np.int8), np.zeros(n * m, np.uint8)
    for (q, s), (w, d, t) in table.items():
        if t is None:
            de[q * m + s] = 2  # HALT: may halt, like an undefined entry
            continue
        de[q * m + s], wr[q * m + s], mv[q * m + s], nx[q * m + s] = 1, w, 0 if d > 0 else 1, t
    return _core.cps_prove(n, m, de, wr, mv, nx, **how)


# ---- n-gram CPS on hand-built machines, both ways

@pytest.mark.parametrize("machine", [
    "0RB1LA_1LA1RB_------_------_------",   # bouncer (docs/HOLDOUTS.md)
    "0RB0LA_1LA1RB_------_------_------",   # binary counter (docs/HOLDOUTS.md)
    "0RB---_0LA---",                        # a two-cell shuttle on blanks
    "1RA---",                               # runs right forever on blanks
])
def test_cps_proves_machines_that_never_halt(machine):
    assert not reaches_undefined(machine, 20_000)  # the independent check that the claim is true
    assert cps(machine) > 0


@pytest.mark.parametrize("machine", [
    "1RB1LB_1LA0LC_1RZ1LD_1RD0RA",          # the 4-state busy beaver: halts at step 107 (Brady 1983)
    "1RB1LC_1RC1RB_1RD0LE_1LA1LD_---0LA",   # the 5-state champion with its halt undefined:
                                            # reaches it at step 47,176,870 (arXiv:2509.12337)
    "1RB---_0LA---",                        # needs its undefined entry at step 3
    "1RB2LA1RA1RA_1LB1LA3RB---",            # the (2,4) champion, halt undefined (arXiv:2509.12337)
    "0RB2LA1RA_1LA2RB1RC_---1LB1LC",        # the (3,3) champion, halt undefined: it halts after
                                            # about 1.19 x 10^17 steps (memory, the S(3,3) lower bound)
])
def test_cps_never_proves_a_machine_that_halts(machine):
    assert cps(machine) == 0
    assert cps(machine, at_cap=True) == 0
    assert cps(machine, plan=[(n, k, 16) for n in (2, 4, 6) for k in (0, 2, 4)]) == 0


@pytest.mark.parametrize("plan", [[(0, 0, 10)], [(17, 0, 10)], [(2, -1, 10)], [(2, 0, 0)], [(2, 0, 25)]])
def test_cps_refuses_an_impossible_schedule(plan):
    with pytest.raises(ValueError):
        cps("0RB1LA_1LA1RB_------_------_------", plan=plan)


def test_cps_refuses_a_malformed_machine():
    with pytest.raises(ValueError):
        _core.cps_prove(2, 2, np.ones(3, np.int8), np.zeros(3, np.uint8), np.zeros(3, np.int8),
                        np.zeros(3, np.uint8))


# ---- soundness on whole spaces where the truth is known

@pytest.mark.parametrize("space,cap,truth", [
    (Space(1, 3, 2), 8, 21),     # S(3) = 21 (Lin & Rado 1965)
    (Space(1, 4, 2), 20, 107),   # S(4) = 107 (Brady 1983)
    (Space(1, 4, 2), 60, 107),
    (Space(1, 2, 3), 12, 38),    # S(2,3) = 38 (Lafitte & Papazian 2007)
    (Space(2, 2, 2), 20, 4096),  # 2D: no bound is proven; 4,096 is the core's largest cap
    (Space(2, 3, 2), 60, 1000),
    (Space(2, 2, 2), 128, 4096),  # from cap 128 the CPS also runs, in 2D on runs still in one row
    pytest.param(Space(2, 3, 2), 128, 2000, marks=pytest.mark.ci_slow),
    pytest.param(Space(2, 4, 2), 128, 1024, marks=pytest.mark.ci_slow),
])
def test_per_size_bounds_hold_against_a_longer_run(space, cap, truth):
    """Every run that halts between the two caps was undecided at the smaller one, with a span
    (box) no larger than its output. So for each size, the extra halts with output at most that
    size are bounded by the undecided weight recorded at sizes that fit. A decider that proved a
    run that halts later would break this (its halts would come from nowhere)."""
    short, long = build(space, cap, budget_hours=None), build(space, truth, budget_hours=None)
    assert long.halting - short.halting <= short.undecided
    blanks = space.symbols

    def halts_within(t, fits):
        return sum(sum(g.values()) for shape, g in t.groups.items() if fits(shape))

    shapes = sorted(long.groups)
    for shape in shapes:
        if space.dims == 1:
            fits = lambda s, k=shape[0]: s[0] <= k  # noqa: E731
            room = sum(w for (r, c), w in short.undecided_by_size.items() if c <= shape[0])
        else:
            fits = lambda s, k=shape: s[0] <= k[0] and s[1] <= k[1]  # noqa: E731
            room = sum(w for (r, c), w in short.undecided_by_size.items()
                       if (r <= shape[0] and c <= shape[1]) or (c <= shape[0] and r <= shape[1]))
        extra = halts_within(long, fits) - halts_within(short, fits)
        assert 0 <= extra <= blanks * room, shape


@pytest.mark.parametrize("n,m,cap,truth", [(4, 2, 20, 107), (4, 2, 50, 107), (2, 3, 12, 38)])
def test_cps_in_the_search_never_claims_a_late_halt(n, m, cap, truth):
    """The whole tree in one call, the CPS tried at the cap on every undecided node: the extra
    halting weight up to S(n, m) (S(4) = 107, Brady 1983; S(2,3) = 38, Lafitte & Papazian 2007)
    must fit in what stayed undecided. A CPS proof of a node that halts later breaks this."""
    short = _core.run_unit(1, n, m, cap, 31, (), -1, False, 0)
    plain = _core.run_unit(1, n, m, cap, 15, (), -1, False, 0)
    long = _core.run_unit(1, n, m, truth, 15, (), -1, False, 0)
    assert short["proven"][4] > 0 and short["halting"] == plain["halting"]
    assert long["halting"] - short["halting"] <= short["undecided"]
    assert short["undecided"] + short["proven"][4] == plain["undecided"]


def test_decided_weight_never_halts_later_1d_42():
    with_cps = build(Space(1, 4, 2), 107, budget_hours=None)
    without = build(Space(1, 4, 2), 107, deciders=ALL_BUT_CPS, budget_hours=None)
    assert with_cps.groups == without.groups and with_cps.halting_nodes == 249_693  # arXiv:2509.12337


@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
def test_cps_proofs_checked_by_simulation_on_holdouts():
    """The nodes left undecided at cap 40 without CPS: each one the CPS proves must run 107 steps
    (S(4), Brady 1983) without meeting an undefined entry, by the independent simulator."""
    space = Space(1, 4, 2)
    t = build(space, 40, deciders=ALL_BUT_CPS, budget_hours=None, holdouts=True)
    lines = list(ho.lines(space, t.holdouts))
    assert len(lines) == t.undecided_nodes and sum(int(x.split()[1]) for x in lines) == t.undecided
    proved = [x.split()[0] for x in lines if cps(x.split()[0])]
    assert len(proved) > 100
    assert not any(reaches_undefined(mach, 107) for mach in proved)
    unproved = [x.split()[0] for x in lines if not cps(x.split()[0])]
    assert any(reaches_undefined(mach, 107) for mach in unproved)  # the late halts stay undecided


@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
def test_translated_cycler_2d_is_sound_and_strong():
    """2D (3,2) at cap 2000: the 2D translated cycler leaves at most 0.05% of the machines
    undecided, and the counts equal those without it."""
    space = Space(2, 3, 2)
    full = build(space, 2000, budget_hours=None)
    plain = build(space, 2000, deciders=("full-table", "escapee", "cycler"), budget_hours=None)
    assert full.groups == plain.groups and full.halting == plain.halting
    assert full.undecided <= 0.0005 * space.size < plain.undecided
    assert full.proofs["translated-cycler"] > 0


# ---- the busy-beaver step bound

def test_step_bound_makes_tables_exact():
    t = build(Space(1, 4, 2), 107)
    assert t.undecided == 0 and t.step_bound == STEP_BOUNDS[(4, 2)] and t.proofs["step-bound"] > 0
    table = Table.from_tally(t)
    assert table.exact and table.header["certificate"]["step_bound"]["steps"] == 107
    low, high = table.interval("0110")
    assert low == high == table.ctm("0110")
    near = Table.from_tally(build(Space(1, 4, 2), 106))
    assert not near.exact and near.undecided > 0 and near.certificate.step_bound is None


def test_bounds_table_holds_the_published_values():
    # arXiv:2509.12337 (and its Coq proof) for (5,2) and (2,4); OEIS A060843 for n <= 4
    assert {k: v[0] for k, v in STEP_BOUNDS.items()} == {
        (1, 2): 1, (2, 2): 6, (3, 2): 21, (4, 2): 107, (5, 2): 47_176_870, (2, 3): 38, (2, 4): 3_932_964}
    assert bound_reached(Space(2, 2, 2), 10**6) is None  # no 2D bound is proven


# ---- per-size intervals in the reader

def test_small_keys_get_tight_intervals_and_big_ones_stay_honest():
    t = Table.from_tally(build(Space(1, 4, 2), 40))
    assert t.certificate is not None and t.undecided > 0
    low, high = t.interval("0110")
    flat_low = np.log2(t.total + t.undecided_runs) - np.log2(t.count("0110") + t.undecided_runs)
    assert high - low < 0.05 < high - flat_low  # the per-size bound is far tighter than the total
    widths = {w["shape"]: w["widest"] for w in t.interval_widths()}
    assert widths["4"] < 0.05 and widths["12"] > 1
    sizes = sorted(widths, key=int)
    assert all(widths[a] <= widths[b] + 1e-12 for a, b in zip(sizes, sizes[1:]))  # U_k grows with k
    out = t.lookup(np.array([[0, 1, 1, 0]]))
    assert out["ctm_low"][0] == pytest.approx(low) and out["ctm_high"][0] == pytest.approx(high)


def test_a_certificate_that_contradicts_the_totals_is_refused():
    t = Table.from_tally(build(Space(1, 3, 2), 10))
    header = dict(t.header)
    cert = dict(header["certificate"])
    cert["undecided_by_size"] = [[1, 3, str(t.undecided + 1)]]
    header["certificate"] = cert
    with pytest.raises(InconsistentTableError):
        Table(header, t.groups, t.steps_hist, t.length_hist)
    cert["undecided_by_size"], cert["step_bound"] = [], {"steps": 5, "source": "x"}
    with pytest.raises(InconsistentTableError):
        Table(header, t.groups, t.steps_hist, t.length_hist)
    cert["step_bound"] = None
    for size in ([2, 3], [1, 12]):  # 1D has one row; 10 steps reach at most 11 cells
        cert["undecided_by_size"] = [size + [str(t.undecided)]]
        with pytest.raises(InconsistentTableError, match="cannot arise"):
            Table(header, t.groups, t.steps_hist, t.length_hist)


def test_a_table_without_certificate_falls_back_to_the_total():
    t = Table.from_tally(build(Space(1, 3, 2), 10))
    header = {k: v for k, v in t.header.items() if k != "certificate"}
    old = Table(header, t.groups, t.steps_hist, t.length_hist)
    c, u, h = old.count("010"), old.undecided_runs, old.total
    assert old.interval("010")[0] == pytest.approx(np.log2(h + u) - np.log2(c + u))


def test_shards_merge_their_certificates():
    from ctmtab.tables import merge
    space = Space(1, 4, 2)
    single = Table.from_tally(build(space, 40))
    merged = merge([Table.from_tally(build(space, 40, shard=(i, 3))) for i in range(3)])
    assert merged.header["certificate"] == single.header["certificate"]


# ---- holdouts

@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
def test_holdouts_are_the_undecided_nodes_1d():
    space = Space(1, 4, 2)
    t = build(space, 30, holdouts=True)
    lines = list(ho.lines(space, t.holdouts))
    assert len(lines) == t.undecided_nodes > 0
    total = 0
    for line in lines:
        mach, weight, step, size = line.split()
        total += int(weight)
        assert int(step) == 30 and not reaches_undefined(mach, 30)
        run = __import__("ctmtab.enumerator.machine", fromlist=["run"]).run(mach, 30)
        assert len(run.output) == int(size)
    assert total == t.undecided


def test_holdouts_in_2d_name_the_box():
    space = Space(2, 2, 2)
    t = build(space, 20, holdouts=True)
    lines = list(ho.lines(space, t.holdouts))
    assert len(lines) == t.undecided_nodes and sum(int(x.split()[1]) for x in lines) == t.undecided
    for line in lines:
        mach, _, _, size = line.split()
        assert set(mach) <= set("0123456789NESWAB-_") and "x" in size


def test_binary_search_tries_plain_windows_early_and_history_at_the_cap():
    """The 1D search's two CPS stages (DEVELOPERS.md): binary machines get windows 1-4 without
    history at the early step (bit masks) and the attempts with history at the cap; 3 or more
    symbols keep the schedule and its cap attempts. Every proof of either stage must hold: on
    1D (4,2) holdouts at cap 130 (found without the CPS), each machine a stage proves runs
    5,000 steps in the one-machine simulator, which shares no code with the CPS, without
    meeting an undefined entry."""
    from ctmtab.enumerator import plan
    from ctmtab.enumerator.machine import run
    space = Space(1, 4, 2)
    p = plan(space, 130, None, ALL_BUT_CPS)
    early = late = 0
    for unit in p.units[::40]:
        r = _core.run_unit(1, 4, 2, 130, 15, unit.prefix, -1, True)
        for line in ho.lines(space, [r["holdouts"]]):
            mach = line.split()[0]
            e, c = cps(mach, stage="early"), cps(mach, stage="cap")
            if e:
                early += 1
                plain = cps(mach, plan=[(w, 0, 12) for w in (1, 2, 3, 4)])
                assert plain and cps(mach, plan=[(w, 0, 12) for w in range(1, plain)]) == 0
            elif c:
                late += 1
                assert cps(mach, plan=[(w, 0, 16) for w in (1, 2, 3, 4)]) == 0  # it needs history
            if not e and late <= 40:  # the cap stage's order is for speed: it proves what any one attempt proves
                assert (c > 0) == any(cps(mach, plan=[a]) > 0 for a in LATE_BINARY)
            if e or c:
                assert run(mach, 5_000).status != "undefined", mach
    assert early > 100 and late > 10
    # the example of a proof that needs history: left early, proven at the cap
    mach = "0RB1LC_0RC1RB_0LD0RC_1LA---"
    assert cps(mach, stage="early") == 0 and cps(mach, stage="cap") > 0
    assert cps(mach, plan=[(2, 2, 11)]) == 1
    with pytest.raises(ValueError, match="stage"):
        cps(mach, stage="late")
    # 3 symbols: the stages are the schedule and its cap attempts, attempt for attempt
    space3 = Space(1, 2, 3)
    p3 = plan(space3, 30, None, ALL_BUT_CPS)
    seen = 0
    for unit in p3.units[::10]:
        r = _core.run_unit(1, 2, 3, 30, 15, unit.prefix, -1, True)
        for line in ho.lines(space3, [r["holdouts"]]):
            mach = line.split()[0]
            assert cps(mach, stage="early") == cps(mach)
            assert cps(mach, stage="cap") == cps(mach, at_cap=True)
            seen += 1
    assert seen > 10


@pytest.mark.ci_slow
def test_cps_proofs_on_52_holdouts_survive_a_long_run():
    """1D (5,2) at cap 500, a few work units run without the CPS: every node the CPS then
    proves must run 20,000 steps without meeting an undefined entry (the one-machine
    simulator, which shares no code with the CPS or the search). The measured late halts of
    (5,2) all come by step 19,463 (docs/HOLDOUTS.md)."""
    from ctmtab.enumerator import plan
    from ctmtab.enumerator.machine import run
    space = Space(1, 5, 2)
    p = plan(space, 500, None, ALL_BUT_CPS)
    proved = at_cap = 0
    for unit in p.units[::max(1, len(p.units) // 4)][:4]:
        r = _core.run_unit(1, 5, 2, 500, 15, unit.prefix, -1, True)
        for line in ho.lines(space, [r["holdouts"]]):
            mach = line.split()[0]
            if cps(mach) or cps(mach, at_cap=True) or cps(mach, stage="early") or cps(mach, stage="cap"):
                proved += 1
                at_cap += cps(mach, stage="early") == 0
                assert run(mach, 20_000).status != "undefined", mach
    assert proved > 1000 and at_cap > 0


def test_the_command_line_shows_the_certificate(tmp_path):
    import subprocess
    import sys

    def ctm(*args):
        return subprocess.run([sys.executable, "-m", "ctmtab", *map(str, args)], capture_output=True, text=True)

    out, holds = tmp_path / "t.ctmt", tmp_path / "h.txt"
    r = ctm("build", "--states", 3, "--max-steps", 12, "-o", out, "--holdouts", holds, "-q")
    assert r.returncode == 0, r.stderr
    lines = holds.read_text().splitlines()
    info = ctm("info", out).stdout
    assert f"{len(lines) - 1:,} tree nodes remain" in info and "widest certified interval" in info
    assert ctm("build", "--states", 3, "-o", tmp_path / "x.ctmt", "--holdouts", tmp_path).returncode == 2
    r = ctm("build", "--states", 3, "--sample", 100, "-o", tmp_path / "s.ctmt", "--holdouts", holds)
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1
    exact = ctm("lookup", "1d-n4-m2-t107", "0110").stdout
    assert "exact (step bound)" in exact
    assert "proven non-halting by the step bound S = 107" in ctm("info", "1d-n4-m2-t107").stdout


@pytest.mark.parametrize("prefix,what", [
    ((1, 0), "0EB---_0NA---_------: a diagonal staircase on blank cells (docs/HOLDOUTS.md)"),
    ((3, 0), "1EB---_0NA---_------: the same staircase, leaving 1s behind it"),
])
def test_2d_translated_cycler_proves_a_hand_built_glider(prefix, what):
    """The search follows the machine's two entries (A0: write, move E, the new state B; B0: write
    0, move N, back to A) and stops at the node: the run climbs NE forever and never reads a
    written cell, so it never halts. Only the 2D translated cycler sees it."""
    with_it = _core.run_unit(2, 3, 2, 2000, 15, prefix)
    without = _core.run_unit(2, 3, 2, 2000, 7, prefix)
    assert with_it["halting"] == without["halting"] == 0
    assert without["undecided"] > 0 and with_it["undecided"] == 0
    assert with_it["proven"][3] == without["undecided"]  # proven by the translated cycler, bit 8
    assert with_it["steps"] < without["steps"] // 10     # and early, long before the cap


def test_2d_translated_cycler_needs_the_edges_a_diagonal_shift_points_past():
    """A 2D (4,2) node (found in review) whose records on the north side repeat shifted by (1, -1)
    at steps 21 and 29 while the head is not on the east edge: the staircase then meets cells
    written before step 21 and reaches its undefined entry at step 48. It must not be proven."""
    prefix = (3, 11, 24, 7, 30, 30, 1)  # 1EB0EC_1NC0ND_1SA1WC_1WC---, first move E, in search order
    with_it, without = (_core.run_unit(2, 4, 2, 64, bits, prefix) for bits in (15, 7))
    assert without["halting"] > 0 and with_it["halting"] == without["halting"]


@pytest.mark.ci_slow
@pytest.mark.parametrize("cap", [64, 512])
def test_2d_translated_cycler_keeps_every_halt_of_42(cap):
    """2D (4,2), the whole space: the halting weight is the same with and without the 2D
    translated cycler (a wrong proof of a node that halts by the cap would lower it)."""
    with_it, without = (_core.run_unit(2, 4, 2, cap, bits) for bits in (15, 7))
    assert with_it["halting"] == without["halting"] and with_it["undecided"] < without["undecided"]


# ---- the CPS on 2D runs confined to one row

def reaches_undefined_2d(text, steps):
    """An independent 2D simulator (compact notation, moves N E S W): True if the run from the
    blank grid meets an undefined or HALT entry within `steps` steps."""
    moves = {"N": (0, -1), "E": (1, 0), "S": (0, 1), "W": (-1, 0)}
    table = {}
    for q, group in enumerate(text.split("_")):
        for sym in range(len(group) // 3):
            w, d, t = group[3 * sym: 3 * sym + 3]
            if w != "-" and t != "Z":
                table[(q, sym)] = (int(w), moves[d], ord(t) - 65)
    grid, x, y, state = {}, 0, 0, 0
    for _ in range(steps):
        entry = table.get((state, grid.get((x, y), 0)))
        if entry is None:
            return True
        grid[(x, y)] = entry[0]
        x, y, state = x + entry[1][0], y + entry[1][1], entry[2]
    return False


def test_row_cps_proofs_in_2d_survive_a_long_run():
    """2D (3,2) at cap 128: the nodes that the CPS proves (those undecided without it) all ran
    in one row, and each runs 20,000 steps in an independent simulator without meeting an
    undefined entry."""
    space = Space(2, 3, 2)
    with_cps = build(space, 128, holdouts=True, budget_hours=None)
    without = build(space, 128, deciders=ALL_BUT_CPS, holdouts=True, budget_hours=None)
    left = set(ho.lines(space, with_cps.holdouts))
    proved = [line for line in ho.lines(space, without.holdouts) if line not in left]
    assert with_cps.proofs["ngram-cps"] == sum(int(line.split()[1]) for line in proved) > 0
    for line in proved:
        mach, _, _, size = line.split()
        assert size.startswith("1x") and not reaches_undefined_2d(mach, 20_000), line
    assert with_cps.halting == without.halting


# ---- tree nodes per proof (format 1.5)

def test_proof_node_counts_do_not_depend_on_the_split_or_the_executor():
    space = Space(1, 4, 2)
    runs = [build(space, 40, split_depth=d, workers=w) for d, w in ((1, 1), (4, 1), (3, 2))]
    nodes = [t.proof_nodes for t in runs]
    assert nodes[0] == nodes[1] == nodes[2]
    t = runs[0]
    for name, n in t.proof_nodes.items():  # a node stands for at least one machine
        assert (n == 0) == (t.proofs[name] == 0) and n <= t.proofs[name]
    # every node that did not halt was closed by one proof or left undecided: the cap-107 build
    # (exact by S(4) = 107) proves more with the step bound but the same nodes did not halt
    # up to the step each stopped at, so the count only grows with the cap
    exact = build(space, 107)
    assert sum(exact.proof_nodes.values()) >= sum(t.proof_nodes.values())
    assert exact.proof_nodes["step-bound"] > 0 and exact.undecided_nodes == 0


def test_a_spool_record_without_node_counts_leaves_them_unknown_not_zero():
    from ctmtab.enumerator.accumulate import Partial
    unit = _core.run_unit(1, 2, 2, 6, 0, (), -1, False)
    unit.pop("cuts", None)
    old = {k: v for k, v in unit.items() if k != "proven_nodes"}
    part = Partial()
    part.add(unit)
    assert part.proven_nodes is not None
    part.add(old)
    assert part.proven_nodes is None


@pytest.mark.parametrize("edit, fragment", [
    (lambda c: c["proof_nodes"].pop("cycler"), "same proofs"),
    (lambda c: c["proof_nodes"].update(cycler=str(10**30)), "contradict"),
    (lambda c: c["proof_nodes"].update(escapee=0), "contradict"),
    (lambda c: c["proof_nodes"].update(escapee="x"), "whole number"),
    (lambda c: c.update(proof_nodes=[1, 2]), "same proofs"),
])
def test_resealed_proof_node_counts_that_contradict_the_weights_are_refused(edit, fragment):
    from ctmtab.tables import loads

    from hostile import with_header
    data = Table.from_tally(build(Space(1, 3, 2), 21)).to_bytes()
    with pytest.raises(InconsistentTableError, match=fragment):
        loads(with_header(data, lambda h: edit(h["certificate"])))


def test_sparse_histograms_read_like_the_lists_they_stand_for():
    from ctmtab.tables.arrays import Hist
    rng = np.random.default_rng(5)
    for n in (0, 1, 7, 5000):
        dense = [int(x) if rng.random() < 0.1 else 0 for x in rng.integers(1, 2**62, n)]
        h = Hist.of(dense)
        assert len(h) == n and h.tolist() == dense and list(h) == dense and h == dense
        assert h.total() == sum(dense) and [h[i] for i in range(n)] == dense
        assert np.array_equal(np.asarray(h), np.asarray(dense, dtype=float))
        if n:
            assert h[-1] == dense[-1] and h[1:4] == dense[1:4]
        with pytest.raises(IndexError):
            h[n]
    big = [0] * 10 + [2**70]
    assert Hist.of(big).total() == 2**70 and Hist.of(big)[10] == 2**70


@pytest.mark.parametrize("space, cap", [(Space(1, 4, 2), 60), pytest.param(Space(1, 5, 2), 130, marks=pytest.mark.ci_slow),
                                        (Space(1, 3, 3), 8),
                                        (Space(1, 2, 4), 14)])
def test_packed_cps_reaches_the_same_fixed_point_as_the_word_arrays(space, cap):
    """Three representations of one CPS fixed point, on the nodes a build leaves undecided
    without CPS: the bit masks of binary plain windows, the packed words (one 128-bit integer)
    and the word arrays. The same attempt proves each node, for the build's schedule, the
    attempts at the cap (configurations past 64 bits, (4,2)'s window 4 with 4 tags at exactly
    128, and (3,3)'s, which do not fit and take the word arrays), longer windows, and plain
    windows one at a time, with limits loose enough for the bit masks and tight enough that
    the limit decides (there the bit masks stand aside)."""
    t = build(space, cap, deciders=ALL_BUT_CPS, budget_hours=None, holdouts=True)
    machines = [line.split()[0] for line in itertools.islice(ho.lines(space, t.holdouts), 0, 3500, 7)]
    assert len(machines) > 150
    wide = [(1, 3, 9), (3, 1, 12), (2, 3, 12), (3, 2, 12), (4, 1, 13), (5, 0, 13)]
    plain = [[(w, 0, 13)] for w in (1, 2, 3, 4, 5)] + [[(2, 0, 5)], [(3, 0, 6)]]
    proved = {"schedule": 0, "plain": 0}
    for mach in machines:
        for how in [{}, {"at_cap": True}, {"plan": wide}] + [{"plan": p} for p in plain]:
            got = cps(mach, **how)
            assert got == cps(mach, bitsets=False, **how) == cps(mach, packed=False, **how), (mach, how)
            proved["plain" if how.get("plan") in plain else "schedule"] += got > 0
    assert proved["schedule"] > 100 and proved["plain"] > 100, proved
