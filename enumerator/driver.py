"""Exhaustive builds: the work-unit plan, the cost estimate that refuses
hopeless requests, the executors, shards, resume, and the exact merge."""
from __future__ import annotations

import time
from dataclasses import dataclass

from ..errors import InvariantError, SpaceError, TooLargeError
from . import _core, executors
from .space import Space, check_cap
from .spool import Spool
from .tally import Partial, Tally
from .units import Plan, default_depth, make_plan, unit_weight_ok

# Decider names and their bits in the C core. None of them may change a count.
DECIDERS = {"full-table": 1, "escapee": 2, "cycler": 4, "translated-cycler": 8}
ALL_DECIDERS = tuple(DECIDERS)

# Cost model of the estimate, from the (4,2) and (5,2) builds on this project's machine
# (README.md, Performance): simulated steps and branch points per second on one core.
STEPS_PER_SECOND = 2e8
NODES_PER_SECOND = 1.5e6
DEFAULT_BUDGET_HOURS = 24.0


def decider_bits(names) -> int:
    bits = 0
    for name in names:
        if name not in DECIDERS:
            raise SpaceError(f"unknown decider {name!r}; choose from {', '.join(DECIDERS)}")
        bits |= DECIDERS[name]
    return bits


@dataclass(frozen=True)
class Estimate:
    nodes: float
    steps: float

    @property
    def seconds(self) -> float:
        """Single-core seconds."""
        return self.steps / STEPS_PER_SECOND + self.nodes / NODES_PER_SECOND


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


def plan(space: Space, cap: int, depth: int | None = None, deciders=ALL_DECIDERS) -> Plan:
    """The deterministic unit list of a build (top of the tree run exactly)."""
    _prepare(space, cap)
    depth = default_depth(space) if depth is None else depth
    return make_plan(space, cap, depth, decider_bits(deciders), tuple(deciders))


def estimate(space: Space, cap: int, deciders=ALL_DECIDERS, walks: int = 20_000, seed: int = 1,
             at: Plan | None = None) -> Estimate:
    """Cost of an exhaustive build: the top of the tree exactly, then Knuth's
    random-walk estimate (Math. Comp. 29, 1975) inside every unit, which keeps
    the variance far below that of walks from the root. `at`: a plan at the
    default depth already made, so it is not made twice."""
    p = at if at is not None else plan(space, cap, None, deciders)
    bits = decider_bits(deciders)
    per_unit = max(4, walks // max(1, len(p.units)))
    nodes, steps = float(p.top["halting_nodes"]), float(p.top["steps"])
    for u in p.units:
        en, es = _core.probe(space.dims, space.states, space.symbols, cap, bits, seed + u.index, per_unit,
                             u.prefix)
        nodes, steps = nodes + en, steps + es
    return Estimate(nodes, steps)


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
) -> Tally:
    """Enumerate every machine of the space under cap; return the exact tally.

    split_depth cuts the tree into work units (default: from the space alone).
    workers > 1 runs units in a local process pool; scheduler runs them on a Dask
    cluster. shard=(i, N) builds units i mod N only. spool names a folder where
    finished units are kept, so a killed build resumes. The tally is the same for
    every split, executor, shard merge and resume. on_progress(done, total,
    weight_done, weight_total, steps) is called as units finish."""
    _prepare(space, cap)
    if shard is not None:
        i, n = shard
        if not (isinstance(i, int) and isinstance(n, int) and n >= 1 and 0 <= i < n):
            raise SpaceError(f"shard {i}/{n} does not exist; use I/N with 0 <= I < N")
    if workers < 1:
        raise SpaceError(f"--workers must be 1 or more, got {workers}")
    t0 = time.perf_counter()
    # The default-depth plan is cheap and serves the estimate too; another depth (0 runs the
    # whole tree as its top) is planned only after the estimate has let the build through.
    p = plan(space, cap, None, deciders) if split_depth in (None, default_depth(space)) else None
    if budget_hours is not None:
        est = estimate(space, cap, deciders, at=p)
        share = 1 if shard is None else shard[1]
        if est.seconds / share > budget_hours * 3600:
            raise TooLargeError(
                f"an exhaustive {space.label} build at cap {cap} is estimated at "
                f"{est.seconds / share / 3600:,.0f} CPU-hours, over the budget of {budget_hours:g}; "
                "lower --max-steps, use fewer states or symbols, split it with --shard, or raise --budget-hours"
            )
    if p is None:
        p = plan(space, cap, split_depth, deciders)
    chosen = p.select(shard)
    store = Spool(spool, p) if spool else None
    results = store.finished(chosen) if store else {}
    resumed = len(results)
    part = Partial()
    weight_total = sum(p.unit(k).weight for k in chosen)
    weight_done, done, steps = 0, 0, 0

    def accept(index: int, result: dict) -> None:
        nonlocal weight_done, done, steps
        if not unit_weight_ok(result, p.unit(index).weight):
            raise InvariantError(f"unit {p.unit(index).uid} does not add up to its weight (a bug)")
        part.add(result)
        weight_done += p.unit(index).weight
        done += 1
        steps += result["steps"]
        if on_progress:
            on_progress(done, len(chosen), weight_done, weight_total, steps)

    for index, result in sorted(results.items()):
        accept(index, result)
    if 0 in chosen and 0 not in results:
        if store:
            store.save(0, p.top)
        accept(0, p.top)
    bits = decider_bits(deciders)
    tasks = [(space.dims, space.states, space.symbols, cap, bits, k, p.unit(k).prefix)
             for k in chosen if k != 0 and k not in results]
    for index, result in executors.stream(tasks, workers, scheduler):
        if store:
            store.save(index, result)
        accept(index, result)
    tally = Tally.from_partial(
        space, cap, part, deciders=tuple(deciders), units=p.count,
        covered=None if shard is None else chosen, weight=weight_total,
        plan_ident=p.ident, depth=p.depth, shard=shard,
    )
    tally.seconds = time.perf_counter() - t0
    tally.resumed = resumed
    return tally


SAMPLE_UNIT = 25_000  # samples per work unit: the result never depends on the worker count


def unit_seed(seed: int, index: int) -> int:
    """An independent stream per unit (splitmix64 of the seed and the unit index)."""
    mask = (1 << 64) - 1
    z = (seed * 0x9E3779B97F4A7C15 + (index + 1) * 0xBF58476D1CE4E5B9) & mask
    z = ((z ^ (z >> 30)) * 0x94D049BB133111EB) & mask
    return (z ^ (z >> 31)) or 1


def sample(space: Space, cap: int, samples: int, *, seed: int = 1, deciders=ALL_DECIDERS, workers: int = 1,
           scheduler: str | None = None, on_progress=None) -> Tally:
    """Run `samples` machines drawn uniformly from the full space (DESIGN.md section 4).
    Reproducible from the seed, whatever the worker count."""
    _check_run(space, cap)
    if not isinstance(samples, int) or samples < 1:
        raise SpaceError(f"--sample needs a positive number of machines, got {samples!r}")
    if not isinstance(seed, int) or not 0 <= seed < 1 << 63:
        raise SpaceError(f"--seed must be a whole number from 0 to 2^63 - 1, got {seed!r}")
    t0 = time.perf_counter()
    bits = decider_bits(deciders)
    counts = [min(SAMPLE_UNIT, samples - i) for i in range(0, samples, SAMPLE_UNIT)]
    tasks = [(space.dims, space.states, space.symbols, cap, bits, k, unit_seed(seed, k), c)
             for k, c in enumerate(counts)]
    part, done, steps = Partial(), 0, 0
    for index, result in executors.stream(tasks, workers, scheduler, executors.run_sample_task):
        part.add(result)
        done += 1
        steps += result["steps"]
        if on_progress:
            on_progress(done, len(tasks), part.halting + part.non_halting + part.undecided, samples, steps)
    tally = Tally.from_sample(space, cap, part, samples, seed, deciders=tuple(deciders), units=len(tasks))
    tally.seconds = time.perf_counter() - t0
    return tally


def run_unit(space: Space, cap: int, unit, deciders=ALL_DECIDERS) -> dict:
    """The raw result of one unit of a plan."""
    return _core.run_unit(space.dims, space.states, space.symbols, cap, decider_bits(deciders), unit.prefix, -1)
