"""Exhaustive builds: the work-unit plan, the cost estimate that refuses
hopeless requests, the executors, shards, resume, and the exact merge."""
from __future__ import annotations

import math
import time
import warnings
from dataclasses import dataclass
from functools import partial

import numpy as np

from ..errors import InvariantError, SpaceError, TooLargeError
from . import executors
from .native import core as _core
from ..model.space import Space, check_cap
from .spool import Spool, kept
from ..model.stats import relative_sample_errors
from ..model.streams import SAMPLE_UNIT
from ..model.symmetry import images_per_sample, size_of
from ..model.tally import Tally
from .accumulate import Partial, sample_sums, tally_from_partial, tally_from_sample
from ..model.bounds import bound_reached
from .units import Plan, default_depth, make_plan, unit_settle_ok, unit_weight_ok
from .deciders import ALL_DECIDERS, CPS_MIN_CAP, DECIDERS, SEARCH_RELABEL

# Cost model of the estimate, single-core seconds, fitted to builds on this project's machine:
# 1D to the (4,2) and (5,2) figures of README.md (Performance); 2D to (3,2) and (2,3) at caps
# 100-2000 and (4,2) at cap 2000 (README.md). A 2D step costs more (grid rows lie 2 cap + 3 bytes
# apart), and every 2D unit pays for its (2 cap + 3)^2 grid, which dominates small 2D builds.
STEPS_PER_SECOND = 2.4e8     # 1D (run_1d: 2e8 before its cells in registers)
STEPS_PER_SECOND_2D = 2.5e7  # with the 2D translated cycler's records (2D (4,2) cap 2000)
NODES_PER_SECOND = 1.5e6     # branch points at m = 2; each tallies m HALT leaves, so cost grows with m
UNIT_SECONDS = 8e-5          # per unit: Python, the executor, the merge
CELL_SECONDS = 8e-12         # per 2D unit and grid cell (the grid is mapped lazily)
PROBE_CELL_SECONDS = 8e-11   # what a probe pays per grid cell to set up, before any walk
# The CPS per branch point of the tree. Binary machines try cheap windows early and the costly
# attempts only at the cap (ctm_cps1d_search): fitted to the quiet one-worker shards 4-7, 12 and
# 13 of 1D (6,2) cap 1000 (shards/1d-n6-m2-t1000/build.log; the model was within 15% of each),
# then scaled with the steps above by the 14-16% that the current core saves on shard 7 (its
# first 30 units: 481 -> 412 CPU-s, same counts). 3+ symbols try every attempt at step 128: 1D
# (3,3) cap 10000.
CPS_SECONDS_PER_NODE = 0.3e-6
CPS_SECONDS_PER_NODE_MULTI = 3.5e-6
PILOT_UNITS = 48             # units a pilot estimate probes when probing all of them would cost
DEFAULT_BUDGET_HOURS = 24.0


def decider_bits(names) -> int:
    bits = 0
    for name in names:
        if name not in DECIDERS:
            raise SpaceError(f"unknown decider {name!r}; choose from {', '.join(DECIDERS)}")
        bits |= DECIDERS[name]
    return bits


def search_bits(space: Space, cap: int, deciders, relabel: bool = True) -> int:
    """The decider bits an exhaustive search runs with. The CPS (in 2D on runs still in one row
    at the cap) starts at CPS_MIN_CAP: below it most undecided runs are only cut short (they
    branch soon after), so it would only cost time. At a cap at or past a proven busy-beaver
    bound the bound proves every undecided node, but the CPS still saves running most of them
    to the cap.
    relabel: with 3 or more symbols, write the non-blank ones in first-use order (the counts
    are the same either way; False is for tests and benchmarks)."""
    bits = decider_bits(deciders)
    if cap < CPS_MIN_CAP:
        bits &= ~DECIDERS["ngram-cps"]
    if relabel and space.symbols >= 3:
        bits |= SEARCH_RELABEL
    return bits


@dataclass(frozen=True)
class Estimate:
    nodes: float
    steps: float
    dims: int = 1
    symbols: int = 2
    units: int = 0                # work units the build runs
    cells: int = 0                # grid cells each unit sets up
    probed: int | None = None     # units the walks probed (None: all; fewer for a pilot)
    cps: bool = False             # the n-gram CPS runs (1D, caps from CPS_MIN_CAP)

    @property
    def seconds(self) -> float:
        """Single-core seconds."""
        rate = STEPS_PER_SECOND if self.dims == 1 else STEPS_PER_SECOND_2D
        per_unit = UNIT_SECONDS + (CELL_SECONDS * self.cells if self.dims == 2 else 0.0)
        cps = CPS_SECONDS_PER_NODE if self.symbols == 2 else CPS_SECONDS_PER_NODE_MULTI
        node_rate = NODES_PER_SECOND if not self.cps else 1 / (1 / NODES_PER_SECOND + cps)
        return self.steps / rate + self.nodes * self.symbols / 2 / node_rate + self.units * per_unit


def _cpu_time(seconds: float) -> str:
    """An estimate in the unit that keeps it readable (a tight --budget-hours meets small ones)."""
    if seconds >= 36_000:
        return f"{seconds / 3600:,.0f} CPU-hours"
    if seconds >= 3600:
        return f"{seconds / 3600:.1f} CPU-hours"
    return f"{seconds / 60:.1f} CPU-minutes" if seconds >= 60 else f"{seconds:.1f} CPU-seconds"


def _grid_cells(space: Space, cap: int) -> int:
    return 2 * cap + 3 if space.dims == 1 else (2 * cap + 3) ** 2


def _check_run(space: Space, cap: int) -> None:
    """Limits every run shares, exhaustive or sampled: the cap, the 2D grid, the table size."""
    check_cap(cap)
    if space.dims == 2 and cap > _core.MAX_CAP_2D:
        raise SpaceError(f"a 2D cap of {cap} is over the limit of {_core.MAX_CAP_2D} (the grid is "
                         "(2 cap + 3)^2 bytes per worker); use a smaller --max-steps")
    space.check_entries()


def _prepare(space: Space, cap: int) -> None:
    _check_run(space, cap)
    space.check_countable()


def plan(space: Space, cap: int, depth: int | None = None, deciders=ALL_DECIDERS, relabel: bool = True) -> Plan:
    """The deterministic unit list of a build (top of the tree run exactly)."""
    _prepare(space, cap)
    depth = default_depth(space) if depth is None else depth
    return make_plan(space, cap, depth, search_bits(space, cap, deciders, relabel), tuple(deciders))


def estimate(space: Space, cap: int, deciders=ALL_DECIDERS, walks: int = 20_000, seed: int = 1,
             at: Plan | None = None, enough: float | None = None, relabel: bool = True) -> Estimate:
    """Cost of an exhaustive build: the top of the tree exactly, then Knuth's
    random-walk estimate (Math. Comp. 29, 1975) inside every unit, which keeps
    the variance far below that of walks from the root. `at`: a plan at the
    default depth already made, so it is not made twice. `enough`: seconds below
    which a pilot over PILOT_UNITS evenly spaced units will do, when probing every
    unit would itself cost much (2D: each probe sets up the whole grid)."""
    p = at if at is not None else plan(space, cap, None, deciders, relabel)
    bits = p.bits
    per_unit = max(4, walks // max(1, len(p.units)))
    cells = _grid_cells(space, cap)

    def probe_all(units) -> Estimate:
        nodes = steps = 0.0
        for u in units:
            en, es = _core.probe(space.dims, space.states, space.symbols, cap, bits, seed + u.index, per_unit,
                                 u.prefix)
            nodes, steps = nodes + en, steps + es
        scale = len(p.units) / len(units) if units else 1.0
        return Estimate(float(p.top["halting_nodes"]) + scale * nodes, float(p.top["steps"]) + scale * steps,
                        space.dims, space.symbols, p.count, cells,
                        None if len(units) == len(p.units) else len(units),
                        bool(bits & DECIDERS["ngram-cps"]))

    costly = len(p.units) * cells * PROBE_CELL_SECONDS > 0.05
    if enough is not None and costly and len(p.units) > PILOT_UNITS:
        step = len(p.units) / PILOT_UNITS
        pilot = probe_all([p.units[int(i * step)] for i in range(PILOT_UNITS)])
        if pilot.seconds <= enough:
            return pilot
    return probe_all(p.units)


def build(
    space: Space,
    cap: int,
    *,
    deciders=ALL_DECIDERS,
    split_depth: int | None = None,
    workers: int = 1,
    scheduler: str | None = None,
    shard: tuple | None = None,
    spool: str | None = None,
    budget_hours: float | None = DEFAULT_BUDGET_HOURS,
    on_progress=None,
    holdouts: bool = False,
    relabel: bool = True,
    keep_size: int | None = None,
    settle_size: int | None = None,
    max_size: int | None = None,
) -> Tally:
    """Enumerate every machine of the space under cap; return the exact tally.

    split_depth splits the tree into work units (default: from the space alone).
    workers > 1 runs units in a local process pool; scheduler runs them on a Dask
    cluster. shard=(i, N) builds units i mod N only. spool names a folder where
    finished units are kept, so a killed build resumes. The tally is the same for
    every split, executor, shard merge and resume. on_progress(done, total,
    weight_done, weight_total, steps) is called as units finish. holdouts keeps
    every undecided node in tally.holdouts (enumerator/holdouts.py renders them). relabel=False
    turns off the first-use symbol order (same counts, for tests and benchmarks). keep_size keeps
    the keys up to that size only, with an exact record of the rest (tables/cut.py), and never
    holds the longer ones as keys, which bounds the memory of a big build's expansion. settle_size
    runs every node still undecided at the cap whose size (2D: both sides) is at most that on past
    the cap until it halts, repeats or outgrows it (see check_settle): the counts stay the cap's,
    and what it finds goes to the certificate, so every key up to that size gets its exact
    unbounded-time count. max_size: the old name of keep_size."""
    if max_size is not None:
        warnings.warn("build(max_size=) is now build(keep_size=)", DeprecationWarning, stacklevel=2)
        keep_size = max_size if keep_size is None else keep_size
    _prepare(space, cap)
    if budget_hours is not None and not (isinstance(budget_hours, (int, float)) and 0 < budget_hours < math.inf):
        raise SpaceError(f"the budget must be a positive number of CPU-hours, got {budget_hours!r}; "
                         "give e.g. --budget-hours 24")
    if shard is not None:
        i, n = shard
        if not (isinstance(i, int) and isinstance(n, int) and n >= 1 and 0 <= i < n):
            raise SpaceError(f"shard {i}/{n} does not exist; use I/N with 0 <= I < N")
    if workers < 1:
        raise SpaceError(f"--workers must be 1 or more, got {workers}")
    if keep_size is not None and (isinstance(keep_size, bool) or not isinstance(keep_size, int) or keep_size < 1):
        raise SpaceError(f"keep_size must be a whole number >= 1, got {keep_size!r}")
    if keep_size is not None:
        keep_size = min(keep_size, cap + 1)  # no output is longer: a larger size keeps everything
    settle_size = check_settle(space, cap, settle_size, keep_size)
    t0 = time.perf_counter()
    # The default-depth plan is cheap and serves the estimate too; another depth (0 runs the
    # whole tree as its top) is planned only after the estimate has let the build through.
    p = plan(space, cap, None, deciders, relabel) if split_depth in (None, default_depth(space)) else None
    if p is not None:
        _check_shard(shard, p)
    if budget_hours is not None:
        share = 1 if shard is None else shard[1]
        # a pilot estimate decides when it is far below the budget (a factor 4 of room)
        est = estimate(space, cap, deciders, at=p, enough=min(600.0, budget_hours * 3600 / 4) * share,
                       relabel=relabel)
        if est.seconds / share > budget_hours * 3600:
            raise TooLargeError(
                f"an exhaustive {space.label} build at cap {cap} is estimated at "
                f"{_cpu_time(est.seconds / share)}, over the budget of {budget_hours:g} CPU-hours; "
                "lower --max-steps, use fewer states or symbols, split it with --shard, or raise --budget-hours"
            )
    if p is None:
        p = plan(space, cap, split_depth, deciders, relabel)
    _check_shard(shard, p)
    chosen = p.select(shard)
    store = _exhaustive_spool(spool, p, chosen, keep_size, shard, settle_size) if spool else None
    results = store.finished() if store else {}
    if holdouts:  # parts spooled without their holdouts are run again
        results = {k: r for k, r in results.items() if "holdouts" in r or not r["undecided_nodes"]}
    resumed = len(results)
    part = Partial()
    weight_total = sum(p.unit(k).weight for k in chosen)
    weight_done, done, steps = 0, 0, 0

    def accept(index: int, result: dict) -> None:
        nonlocal weight_done, done, steps
        if not unit_weight_ok(result, p.unit(index).weight):
            raise InvariantError(f"unit {p.unit(index).uid} does not add up to its weight (a bug)")
        if settle_size and not unit_settle_ok(result):
            raise InvariantError(f"unit {p.unit(index).uid}: the run-on does not add up to the undecided weight (a bug)")
        part.add(result)
        weight_done += p.unit(index).weight
        done += 1
        steps += result["steps"]
        if on_progress:
            on_progress(done, len(chosen), weight_done, weight_total, steps)

    for index, result in sorted(results.items()):
        accept(index, result)
    bits = p.bits
    if 0 in chosen and 0 not in results:  # the plan computed the top already: never spooled
        top = p.top
        # the plan's top run kept no holdouts and every output: run it again for either
        if (holdouts and top["undecided_nodes"]) or keep_size is not None or settle_size:
            top = _core.run_unit(space.dims, space.states, space.symbols, cap, bits, (), p.depth or -1, holdouts,
                                 -1, keep_size or 0, settle_size or 0)
            top.pop("cuts")
        accept(0, top)
    tasks = [(space.dims, space.states, space.symbols, cap, bits, k, p.unit(k).prefix, holdouts, keep_size or 0,
              settle_size or 0) for k in chosen if k != 0 and k not in results]
    with kept(store):
        for index, result in executors.stream(tasks, workers, scheduler):
            if store:
                store.save(index, result)
            accept(index, result)
    tally = tally_from_partial(
        space, cap, part, deciders=tuple(deciders), units=p.count,
        covered=None if shard is None else chosen, weight=weight_total,
        plan_ident=p.ident, depth=p.depth, shard=shard, relabelled=bool(p.bits & SEARCH_RELABEL),
        keep_size=keep_size, settle=None if not settle_size else {"size": settle_size},
    )
    tally.seconds = time.perf_counter() - t0
    tally.resumed = resumed
    tally.spool_damaged = store.damaged if store else 0
    tally.holdouts = part.holdouts if holdouts and tally.step_bound is None else []
    tally.spool_clean = None if store is None else partial(store.clean, set(chosen).__contains__)
    return tally


def _check_shard(shard, p: Plan) -> None:
    """Shard I/N holds units I, I + N, ...: with N past the unit count some shards are empty and
    the count would not fit the table's header; refused before any work."""
    if shard is not None and shard[1] > p.count:
        raise SpaceError(f"--shard {shard[0]}/{shard[1]}: this build has only {p.count:,} work units, so "
                         f"at most {p.count:,} shards; give N from 1 to {p.count:,}")


def _exhaustive_spool(folder, p: Plan, chosen, keep_size: int | None = None, shard=None,
                      settle_size: int | None = None) -> Spool:
    """The spool of an exhaustive build: units of this plan and shard, sealed by their prefix.
    A build cut by size keeps only the weight of longer outputs, so its units are another build's;
    another shard's spool is another build's too (its table would go to the same -o)."""
    wanted = set(chosen)

    def expect(index):
        return (p.unit(index).uid, p.unit(index).weight) if index in wanted and index != 0 else None

    ident = {"kind": "exhaustive", "plan": p.ident, "space": p.space.to_dict(), "cap": p.cap, "units": p.count}
    if keep_size is not None:
        ident["keep_size"] = keep_size
    if shard is not None:
        ident["shard"] = list(shard)
    if settle_size:  # the run-on changes what a unit records
        ident["settle_size"] = settle_size
    return Spool(folder, ident, expect)


MAX_SETTLE_CONFIGS = 1 << 40  # a run-on's configurations, states x head cells x tapes; far past any use


def check_settle(space: Space, cap: int, settle_size, keep_size: int | None) -> int | None:
    """The run-on's size K, checked: a whole number, at most the cap (a run-on stays on the cap's
    grid) and the kept size (its halts are keys), with a configuration count (states x cells x
    m^cells; 2D cells = K^2) that bounds every run-on's steps. None at a proven busy-beaver bound,
    where no run halts past the cap."""
    if settle_size is None:
        return None
    if isinstance(settle_size, bool) or not isinstance(settle_size, int) or settle_size < 1:
        raise SpaceError(f"the settle size must be a whole number >= 1, got {settle_size!r}; e.g. --settle-size 12")
    if settle_size > cap:
        raise SpaceError(f"a settle size of {settle_size} is larger than the cap {cap}; give --settle-size {cap} "
                         "or less (a run-on stays on the cap's tape)")
    if keep_size is not None and settle_size > keep_size:
        raise SpaceError(f"a settle size of {settle_size} is larger than the kept size {keep_size}; the halts it "
                         f"finds must be keys of the table, so give --settle-size {keep_size} or less")
    cells = settle_size if space.dims == 1 else settle_size * settle_size
    configs = space.states * cells * space.symbols ** cells
    if configs > MAX_SETTLE_CONFIGS:
        raise TooLargeError(f"a settle size of {settle_size} in {space.label} allows {configs:.3g} configurations "
                            "per run-on, so proving a repetition could take as many steps; use a smaller "
                            "--settle-size")
    return None if bound_reached(space, cap) is not None else settle_size


def _mix64(z: int) -> int:
    """The splitmix64 output function: a bijection on 64-bit words."""
    mask = (1 << 64) - 1
    z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & mask
    z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & mask
    return z ^ (z >> 31)


def unit_seed(seed: int, index: int) -> int:
    """An independent stream per unit: mix(mix(seed) + (index + 1) * golden). The seed is mixed
    on its own first, so no simple relation between two seeds makes their units coincide."""
    return _mix64((_mix64(seed) + (index + 1) * 0x9E3779B97F4A7C15) & ((1 << 64) - 1)) or 1


@dataclass(frozen=True)
class Target:
    """When a sampled build may stop before its sample count: every key of one size seen has a
    relative standard error of at most `error`, or `seconds` of wall time have passed."""

    error: float | None = None
    size: int | None = None       # 1D length; 2D longer side
    seconds: float | None = None

    def __post_init__(self):
        if self.error is not None and not (0 < self.error < 1 and self.size is not None and self.size >= 1):
            raise SpaceError("an error target needs a bound between 0 and 1 and a key size >= 1, e.g. 5%@8")
        if self.seconds is not None and not (0 < self.seconds < math.inf):
            raise SpaceError("a time budget must be a finite time longer than 0 seconds, e.g. 30m")


def worst_error(space: Space, part: Partial, size: int, prior: Tally | None = None) -> tuple[float, int]:
    """The largest relative standard error among the keys of one size seen so far, and how
    many keys of that size were seen (inf and 0 before the first). prior: a sampled tally the
    new samples will be added to (--extend), counted in."""
    sums = {shape: (dict(zip(keys, s1)), dict(zip(keys, s2)))
            for shape, (keys, s1, s2) in sample_sums(space, part.raw, size=size).items()}
    samples, halting = part.halting + part.non_halting + part.undecided, part.halting
    if prior is not None:
        samples, halting = samples + prior.samples, halting + prior.halting
        for shape, group in prior.groups.items():
            if size_of(shape) == size:
                one, two = sums.setdefault(shape, ({}, {}))
                for k, c in group.items():
                    one[k] = one.get(k, 0) + c
                    two[k] = two.get(k, 0) + prior.moments[shape][k]
    images = images_per_sample(space)
    worst, seen = math.inf if not sums else 0.0, 0
    for one, two in sums.values():
        s1 = np.fromiter(one.values(), dtype=np.float64, count=len(one))
        s2 = np.fromiter((two[k] for k in one), dtype=np.float64, count=len(one))
        rel = relative_sample_errors(s1, s2, samples, images, halting)
        worst, seen = max(worst, float(rel.max())), seen + len(s1)
    return worst, seen


def sample(space: Space, cap: int, samples: int | None, *, seed: int = 1, deciders=ALL_DECIDERS,
           workers: int = 1, scheduler: str | None = None, until: Target | None = None,
           prior: Tally | None = None, spool: str | None = None, on_progress=None,
           budget_hours: float | None = DEFAULT_BUDGET_HOURS) -> Tally:
    """Run machines drawn uniformly from the full space (DESIGN.md section 4): `samples` of them,
    or fewer when `until` is met first. Reproducible from the seed, whatever the worker count:
    the samples are always whole work units 0..K-1 of the seed's stream. prior: the sampled
    tally these samples will extend, so that an error target counts its samples too. spool: a
    folder keeping finished units, as in build(), so a killed build resumes. budget_hours: a
    build with no time limit (--until 2h) is refused when its count would take longer; None
    turns the guard off. Units are planned lazily, so any count starts at once."""
    _check_run(space, cap)
    if samples is not None and (type(samples) is not int or not 1 <= samples < 1 << 63):
        raise SpaceError(f"--sample needs a positive number of machines below 2^63, got {samples!r}")
    if not isinstance(seed, int) or not 0 <= seed < 1 << 63:
        raise SpaceError(f"--seed must be a whole number from 0 to 2^63 - 1, got {seed!r}")
    if type(workers) is not int or workers < 1:
        raise SpaceError(f"--workers must be 1 or more, got {workers!r}")
    until = until or Target()
    if samples is None and until.seconds is None:
        raise SpaceError("a sampled build needs a ceiling: --sample N (the most machines to draw), "
                         "a time budget such as --until 2h, or both")
    if until.size is not None and until.size > cap + 1:
        raise SpaceError(f"no output of {space.label} at cap {cap} is longer than {cap + 1} cells, so an error "
                         f"target at size {until.size} can never be met; give a size from 1 to {cap + 1}")
    t0 = time.perf_counter()
    deadline = None if until.seconds is None else t0 + until.seconds
    bits = decider_bits(deciders)
    limit = math.inf if samples is None else -(-samples // SAMPLE_UNIT)  # units

    def count_of(k: int) -> int:
        return SAMPLE_UNIT if samples is None else min(SAMPLE_UNIT, samples - k * SAMPLE_UNIT)

    def task(k: int) -> tuple:
        return space.dims, space.states, space.symbols, cap, bits, k, unit_seed(seed, k), count_of(k)

    def expect(index):  # only whole units are spooled: a unit is fixed by (seed, index) alone
        ok = type(index) is int and 0 <= index < limit and count_of(index) == SAMPLE_UNIT
        return (str(index), SAMPLE_UNIT) if ok else None

    store = Spool(spool, {"kind": "sample", "space": space.to_dict(), "cap": cap, "deciders": bits,
                          "seed": seed, "unit": SAMPLE_UNIT}, expect) if spool else None
    spooled = store.finished() if store else {}
    from_disk = set(spooled)
    if budget_hours is not None and until.seconds is None:
        _sample_budget(space, cap, samples, limit, spooled, task, budget_hours, store)
    part, done, steps, drawn, resumed = Partial(), 0, 0, 0, 0
    worst, stopped = math.nan, "count"
    shown = "" if until.error is None else f"worst rel. error ? at size {until.size}"
    with kept(store), executors.Runner(workers if limit > 1 else 1, scheduler) as runner:
        while done < limit:
            # Rounds whose ends depend on the units done alone, so an error target stops every
            # worker count at the same unit; a plain count runs as one round, planned lazily.
            end = limit if until == Target() else min(limit, done + max(8, done // 8))
            ahead = {k: spooled.pop(k) for k in [k for k in spooled if done <= k < end]}  # by index
            skip = frozenset(ahead)
            steps += sum(r["steps"] for r in ahead.values())
            running = drawn + sum(count_of(k) for k in ahead)
            late = False

            def absorb() -> None:  # keep whole units 0..K-1 only: the table is --sample K x unit
                nonlocal done, drawn, resumed
                while done < end and done in ahead:
                    part.add(ahead.pop(done))
                    resumed += done in from_disk
                    drawn += count_of(done)
                    done += 1

            absorb()
            results = runner.stream((task(k) for k in range(done, end) if k not in skip),
                                    executors.run_sample_task)
            try:
                for index, result in results:
                    ahead[index] = result
                    if store and count_of(index) == SAMPLE_UNIT:
                        store.save(index, result)
                    steps += result["steps"]
                    running += count_of(index)
                    absorb()
                    if on_progress:
                        on_progress(done + len(ahead), None if limit == math.inf else limit,
                                    running, samples, steps, shown)
                    if deadline is not None and time.perf_counter() > deadline:
                        late = True
                        break
            finally:
                results.close()
            absorb()
            if until.error is not None:
                worst, seen = worst_error(space, part, until.size, prior)
                shown = f"worst rel. error {worst:.3g} over {seen:,} keys of size {until.size}"
                if worst <= until.error:
                    stopped = "target"
                    break
            if late:
                stopped = "time"
                break
    if done == 0:
        raise SpaceError(f"the time budget ran out before the first {SAMPLE_UNIT:,} samples finished; "
                         "give --until more time")
    tally = tally_from_sample(space, cap, part, drawn, seed, deciders=tuple(deciders), units=done)
    tally.seconds = time.perf_counter() - t0
    tally.resumed = resumed
    tally.spool_damaged = store.damaged if store else 0
    tally.spool_clean = None if store is None else partial(store.clean, lambda index: 0 <= index < done)
    if until != Target():
        tally.until = {"error": until.error, "size": until.size, "seconds": until.seconds,
                       "stopped_by": stopped, "worst_relative_error": None if math.isnan(worst) else worst}
    return tally


# Most machines a core samples in a second: about 4e6 at the cheapest spaces on this project's
# machine (1D (1,2) cap 1, 2D (1,2) cap 1); five times that, so the floor below is a true lower bound.
MAX_SAMPLES_PER_SECOND = 2e7
PILOT_SAMPLE_UNITS = 16  # builds of more units time their first one against the budget


def _sample_budget(space: Space, cap: int, samples: int, limit: int, spooled: dict, task, budget_hours: float,
                   store) -> None:
    """Refuse a sample count that would outlast the budget: at once when even the fastest sampling
    could not finish it, else from the time of its first unit not yet spooled (the unit is kept)."""
    hint = "lower --sample, give --until a time limit such as 2h, or raise --budget-hours"
    if samples / MAX_SAMPLES_PER_SECOND > budget_hours * 3600:
        raise TooLargeError(f"sampling {samples:,} machines takes at least "
                            f"{_cpu_time(samples / MAX_SAMPLES_PER_SECOND)}, over the budget of "
                            f"{budget_hours:g} CPU-hours; {hint}")
    left = limit - sum(1 for k in spooled if k < limit)
    if left <= PILOT_SAMPLE_UNITS:
        return  # a few units: the build itself is as quick as its estimate
    k = next(k for k in range(limit) if k not in spooled)
    t = time.perf_counter()
    result = executors.run_sample_task(task(k))[1]
    seconds = (time.perf_counter() - t) * left
    if seconds > budget_hours * 3600:
        raise TooLargeError(f"sampling {samples:,} machines of {space.label} at cap {cap} is estimated at "
                            f"{_cpu_time(seconds)} (timed on its first {SAMPLE_UNIT:,}), over the budget of "
                            f"{budget_hours:g} CPU-hours; {hint}")
    spooled[k] = result
    if store and task(k)[-1] == SAMPLE_UNIT:
        store.save(k, result)


def run_unit(space: Space, cap: int, unit, deciders=ALL_DECIDERS) -> dict:
    """The raw result of one unit of a plan."""
    return _core.run_unit(space.dims, space.states, space.symbols, cap, search_bits(space, cap, deciders),
                          unit.prefix, -1)
