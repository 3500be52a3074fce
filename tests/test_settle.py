"""The run-on past the cap (build settle_size): every node undecided at the cap whose output still
fits K cells is run on until it halts, repeats or outgrows K, so every key up to size K gets its
exact unbounded-time count (cap count + halts past the cap) and tight certified bounds.

The truth it is checked against comes from outside the run-on: tables at a proven busy-beaver
step bound (every run left at the bound never halts), the independent brute force
(tests/bruteforce.py), and 2D tables whose certificate leaves no undecided run that fits K."""
import itertools
import math


import numpy as np
import pytest

from bruteforce import code_of, up_to
from conftest import brute_force
from hostile import load_or_refuse, with_header

from ctmtab.enumerator import Space, build
from ctmtab.model.symmetry import size_of
from ctmtab.errors import InconsistentTableError, MergeError, SpaceError, TooLargeError
from ctmtab.tables import Table, certify, load, loads, merge, problems

pytestmark = pytest.mark.core


def settled(dims, n, m, cap, k, **kw):
    return build(Space(dims, n, m), cap, settle_size=k, budget_hours=None, **kw)


def unbounded(t, k) -> dict:
    """(shape, key) -> cap count + halts past the cap, for every key up to size k."""
    out = {}
    for source in (t.groups, t.late_groups):
        for shape, g in source.items():
            if size_of(shape) <= k:
                for key, c in g.items():
                    out[shape, key] = out.get((shape, key), 0) + c
    return out


# S(2) = 6 (Rado 1962), S(3) = 21 (Lin & Rado 1965), S(2,3) = 38 (Lafitte & Papazian 2007),
# S(4) = 107 (Brady 1983): docs/REFERENCES.md. At those caps the build is exact by the bound.
@pytest.mark.parametrize("n,m,cap,k,bound", [(2, 2, 3, 3, 6), (3, 2, 9, 6, 21), (3, 2, 5, 4, 21),
                                             (2, 3, 15, 8, 38), (4, 2, 40, 12, 107)])
def test_settled_keys_have_their_busy_beaver_counts(n, m, cap, k, bound):
    t = settled(1, n, m, cap, k)
    truth = build(Space(1, n, m), bound, budget_hours=None)
    assert truth.undecided == 0 and truth.step_bound is not None
    assert unbounded(t, k) == unbounded(truth, k)
    assert t.settle["halting"] > 0 or (n, cap) == (2, 3)  # the run-on found halts the cap missed
    # the run-on decided every node of size <= k: none is left there
    assert all(max(s) > k for s in t.undecided_by_size)


@pytest.mark.xdist_group("brute-force")  # on the worker that already ran it (conftest)
def test_settled_counts_equal_the_brute_force():
    # the brute force runs every machine on every blank to S(3) = 21 steps (tests/bruteforce.py;
    # the same pass as test_bruteforce's, once per session)
    counts, _ = brute_force(1, 3, 2, 21)
    truth = {key: c for key, c in up_to(counts, 21).items() if key[0] <= 5}
    t = settled(1, 3, 2, 7, 5)
    mine = {(shape[0], code_of(key, 2)): c for (shape, key), c in unbounded(t, 5).items()}
    assert mine == truth


@pytest.mark.parametrize("n,cap,k", [(2, 4, 2), (3, 30, 4)])
def test_2d_settled_keys_equal_a_table_with_nothing_left_there(n, cap, k):
    # the shipped cap-2000 tables' certificates leave no undecided run that fits k x k, so their
    # counts of those keys are the unbounded-time counts
    far = load(f"2d-n{n}-m2-t2000")
    assert far.undecided_reach((k, k)) == 0
    t = settled(2, n, 2, cap, k)
    m = 2
    far_counts = {(s, row.tobytes()): int(c) for s in far.shapes if size_of(s) <= k
                  for row, c in zip(far.groups[s].rows(m), far.groups[s].counts)}
    assert unbounded(t, k) == far_counts


@pytest.mark.parametrize("dims,n,m,cap,k", [(1, 4, 2, 40, 12), (2, 3, 2, 30, 4), (1, 2, 3, 15, 8)])
def test_the_run_on_changes_no_count(dims, n, m, cap, k):
    plain = build(Space(dims, n, m), cap, budget_hours=None)
    t = settled(dims, n, m, cap, k)
    assert (t.groups, t.halting, t.non_halting, t.undecided, t.steps_hist, t.proofs) == (
        plain.groups, plain.halting, plain.non_halting, plain.undecided, plain.steps_hist, plain.proofs)
    assert Table.from_tally(t).body()["groups"] == Table.from_tally(plain).body()["groups"]
    # the undecided weight splits exactly: halted later + proven + still open (past size k)
    assert t.settle["halting"] + t.settle["proven"] + sum(t.undecided_by_size.values()) == t.undecided


def test_intervals_hold_the_truth_and_close_up():
    t = Table.from_tally(settled(1, 4, 2, 40, 12))
    plain = Table.from_tally(build(Space(1, 4, 2), 40, budget_hours=None))
    truth = load("1d-n4-m2-t107")  # exact by S(4) = 107 (Brady 1983)
    late, left = certify.open_runs(t.certificate, t.blanks, t.undecided)
    floor = math.log2(1 + left / (t.total + late))  # only the normalisation stays open
    for length in range(1, 13):
        keys = np.array(list(itertools.product((0, 1), repeat=length)), dtype=np.uint8)
        r, p, exact = t.lookup(keys), plain.lookup(keys), truth.lookup(keys)
        seen = exact["count"] > 0
        ctm = np.log2(truth.total) - np.log2(exact["count"][seen])
        assert np.all(r["ctm_low"][seen] <= ctm + 1e-9) and np.all(ctm <= r["ctm_high"][seen] + 1e-9)
        width = r["ctm_high"][seen] - r["ctm_low"][seen]
        assert np.all(width <= floor + 1e-9)
        if length >= 8:  # without the run-on these keys are open by many bits
            assert np.max((p["ctm_high"] - p["ctm_low"])[seen]) > 10
    # a key past the settle size keeps the interval of its reach
    assert t.interval("0" * 13)[1] - t.interval("0" * 13)[0] > 1


def test_a_settled_table_round_trips_and_verifies(tmp_path):
    t = Table.from_tally(settled(1, 4, 2, 40, 12))
    path = tmp_path / "s.ctmt"
    t.save(path)
    u = load(path)
    assert problems(u) == []
    assert u.settle_size == 12 and u.body() == t.body()
    assert u.interval("01010101") == t.interval("01010101")
    cut = u.cut_at(8)  # the cut keeps the run-on's record whole
    assert problems(cut) == [] and cut.interval("0110") == u.interval("0110")


def test_shards_of_a_settled_build_merge_to_the_whole():
    whole = Table.from_tally(settled(1, 4, 2, 40, 12))
    parts = [Table.from_tally(settled(1, 4, 2, 40, 12, shard=(i, 3))) for i in range(3)]
    assert merge(parts).body() == whole.body()
    plain = Table.from_tally(build(Space(1, 4, 2), 40, budget_hours=None, shard=(0, 3)))
    with pytest.raises(MergeError, match="settled to different sizes"):
        merge([plain] + parts[1:])


@pytest.mark.parametrize("edit", [
    lambda s: s.update(halting=str(int(s["halting"]) + 1)),   # halts that the late keys do not hold
    lambda s: s.update(proven=str(int(s["proven"]) + 1)),     # totals that no longer add up
    lambda s: s.update(size=s["size"] - 4),                   # undecided weight left inside the size
    lambda s: s.update(size=10**6),                           # past the cap
    lambda s: s["late_keys"].pop(),                           # a late group the summary lacks
])
def test_a_forged_run_on_record_is_refused(edit):
    data = Table.from_tally(settled(1, 4, 2, 40, 12)).to_bytes()
    forged = with_header(data, lambda h: edit(h["certificate"]["settle"]))
    with pytest.raises(InconsistentTableError):
        loads(forged)
    assert load_or_refuse(forged) is None


def test_settle_sizes_that_cannot_work_are_refused():
    with pytest.raises(SpaceError, match="larger than the cap"):
        settled(1, 2, 2, 5, 6)
    with pytest.raises(SpaceError, match="larger than the kept size"):
        settled(1, 3, 2, 9, 6, keep_size=5)
    with pytest.raises(TooLargeError, match="configurations"):
        settled(2, 3, 2, 40, 7)
    with pytest.raises(SpaceError, match="whole number"):
        settled(1, 2, 2, 5, 0)
    # at a proven step bound nothing halts past the cap: no run-on, the table is exact
    t = settled(1, 3, 2, 21, 6)
    assert t.settle is None and t.undecided == 0


# ---- hand-built machines, one node each: the prefix follows the tree to the machine (1D, binary,
# states in first-use order, first move R), the cap stops it inside the settle size, and the
# run-on must do with it what a plain simulation (below, independent of the core) says.

def _prefix(machine: dict, n: int, steps: int) -> list:
    """The move-option index chosen at each branch point the run meets within `steps` steps:
    k = write x (directions x next states) + direction x next states + next state, where the first
    branch point offers R only and the next states are those in use plus the first unused one."""
    from collections import defaultdict

    tape, head, q, used, prefix, defined = defaultdict(int), 0, 0, 1, [], set()
    for _ in range(steps):
        e = (q, tape[head])
        if e not in machine:
            break
        w, d, nxt = machine[e]
        if e not in defined:
            dirs = (1,) if not defined else (1, -1)
            nnext = used + (used < n)
            prefix.append(w * len(dirs) * nnext + dirs.index(d) * nnext + nxt)
            defined.add(e)
            used += nxt == used
        tape[head], head, q = w, head + d, nxt
    return prefix


def _run_on_node(machine, n, cap, k, deciders=("all",)):
    from ctmtab.enumerator.driver import search_bits
    from ctmtab.enumerator.native import core

    space = Space(1, n, 2)
    bits = search_bits(space, cap, () if deciders == () else ("full-table", "escapee", "cycler",
                                                             "translated-cycler"))
    return core.run_unit(1, n, 2, cap, bits, _prefix(machine, n, cap), -1, False, -1, 0, k)


# A0 1RB, B0 1LB, B1 0RC, C0 1LC, C1 1LA, A1 undefined: the span is 4 cells at step 10, 5 from
# step 17, and at step 20 (span 5) it reads the undefined A1 (a plain simulation, by hand)
LATE = {(0, 0): (1, 1, 1), (1, 0): (1, -1, 1), (1, 1): (0, 1, 2), (2, 0): (1, -1, 2), (2, 1): (1, -1, 0)}


def test_a_run_that_reaches_an_undefined_entry_after_the_cap_halts_there():
    r = _run_on_node(LATE, 3, 10, 5)
    # the node: 2 (new states B, C: 2 x 1) x 14 options of A1 x 2 (the mirror) machines
    assert r["undecided"] == 56 and r["halting"] == 0
    # HALT(0) and HALT(1) at A1: 2 x 2 x 2 machines halt past the cap, with span 5; the MOVE
    # options complete the table with no HALT (proven)
    assert r["late_halting"] == 8 and r["late_proven"] == 48 and r["undecided_by_size"] == {}
    assert {len(key) - 1 for key in r["late"]} == {5} and sum(r["late"].values()) == 4


def test_a_run_that_outgrows_the_settle_size_stays_undecided_at_its_new_size():
    r = _run_on_node(LATE, 3, 10, 4)  # the span reaches 5 at step 17, before the undefined entry
    assert r["late_halting"] == 0 and r["late_proven"] == 0
    assert r["undecided_by_size"] == {(1, 5): 56}


def test_a_run_that_repeats_inside_the_settle_size_is_proven():
    # A0 1RB, B0 1LA, A1 1RB, B1 1LA: a ping-pong over 2 cells forever; with no decider running
    # before the cap it is undecided there, and the run-on sees its configuration repeat
    pingpong = {(0, 0): (1, 1, 1), (1, 0): (1, -1, 0), (0, 1): (1, 1, 1), (1, 1): (1, -1, 0)}
    r = _run_on_node(pingpong, 2, 10, 2, deciders=())
    assert r["undecided"] == 2 and r["late_proven"] == 2 and r["undecided_by_size"] == {}
    r = _run_on_node(pingpong, 2, 10, 0, deciders=())  # no run-on: it stays undecided
    assert r["undecided_by_size"] == {(1, 2): 2} and r["late_proven"] == 0


def test_verify_checks_the_halts_past_the_cap_for_symmetry():
    t = Table.from_tally(settled(1, 4, 2, 40, 12))
    assert problems(t) == []
    shape = min(t.late)
    g = t.late[shape]
    g.counts = g.counts.copy()
    g.counts[0] += 2  # a forged count that keeps the sum consistent needs a matching loss elsewhere
    g.counts[-1] -= 2
    found = problems(t)
    assert found and all("halts past the cap" in p for p in found)


def test_the_command_line_builds_shows_and_refuses_run_ons(tmp_path):
    import json
    import subprocess
    import sys

    def ctm(*args):
        return subprocess.run([sys.executable, "-m", "ctmtab", *map(str, args)], capture_output=True, text=True)

    out = tmp_path / "s.ctmt"
    r = ctm("build", "--states", 4, "--max-steps", 40, "--settle-size", 12, "-o", out, "-q")
    assert r.returncode == 0, r.stderr
    info = ctm("info", out).stdout
    assert "settled    keys up to size 12" in info
    # the undecided count in the certificate is the cap's: info must not call it what remains
    nodes = load(out).certificate.nodes
    assert f"{nodes:,} tree nodes were undecided at the cap" in info and "tree nodes remain" not in info
    rows = json.loads(ctm("lookup", out, "0110", "0" * 13, "--missing", "nan", "--json").stdout)
    assert rows[0]["settled"] is True and rows[1]["settled"] is False
    assert "settled" in ctm("lookup", out, "01010101").stdout
    for bad in (["--settle-size", 41], ["--settle-size", -1], ["--sample", 1000, "--settle-size", 4]):
        r = ctm("build", "--states", 4, "--max-steps", 40, *bad, "-o", tmp_path / "x.ctmt")
        assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.stderr
    # the kept size is the default settle size
    r = ctm("build", "--states", 3, "--max-steps", 9, "--keep-size", 5, "-o", tmp_path / "k.ctmt", "-q")
    assert r.returncode == 0 and load(tmp_path / "k.ctmt").settle_size == 5
