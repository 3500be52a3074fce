"""Exhaustive builds: the work-unit plan over the tree-normal-form search, the
cost estimate that refuses hopeless requests, and the exact merge."""
from __future__ import annotations

import time
from dataclasses import dataclass

from ..errors import SpaceError, TooLargeError
from . import _core
from .space import Space, check_cap
from .tally import Partial, Tally

# Decider names and their bits in the C core. None of them may change a count.
DECIDERS = {"full-table": 1, "escapee": 2, "cycler": 4}
ALL_DECIDERS = tuple(DECIDERS)

# Cost model for the estimate, fitted on this project's own builds (see DEVELOPERS.md).
STEPS_PER_SECOND = 3e8
NODES_PER_SECOND = 2e7
DEFAULT_BUDGET_HOURS = 24.0


def decider_bits(names) -> int:
    bits = 0
    for name in names:
        if name not in DECIDERS:
            raise SpaceError(f"unknown decider {name!r}; choose from {', '.join(DECIDERS)}")
        bits |= DECIDERS[name]
    return bits


@dataclass(frozen=True)
class Unit:
    """A subtree of the search: the move choices from the root to its branch
    point. The 'top' unit holds everything above the split depth."""

    prefix: tuple

    @property
    def uid(self) -> str:
        return "top" if not self.prefix else ".".join(map(str, self.prefix))


@dataclass(frozen=True)
class Estimate:
    nodes: float
    steps: float

    @property
    def seconds(self) -> float:
        return self.steps / STEPS_PER_SECOND + self.nodes / NODES_PER_SECOND


def estimate(space: Space, cap: int, deciders=ALL_DECIDERS, walks: int = 4000, seed: int = 1) -> Estimate:
    """Knuth's random-walk estimate of the search size (Knuth, Math. Comp. 29, 1975)."""
    _prepare(space, cap)
    nodes, steps = _core.probe(space.states, space.symbols, cap, decider_bits(deciders), seed, walks)
    return Estimate(nodes, steps)


def _prepare(space: Space, cap: int) -> None:
    check_cap(cap)
    if space.dims != 1:
        raise SpaceError(f"{space.label}: exhaustive 2D builds are not available yet; use --dims 1")
    space.check_countable()


def plan(space: Space, cap: int, depth: int, deciders=ALL_DECIDERS) -> tuple[dict, list[Unit]]:
    """Run the top of the tree down to `depth` branch points and list the
    subtrees below it. Deterministic for a given space, cap and depth."""
    _prepare(space, cap)
    top = _core.run_unit(space.states, space.symbols, cap, decider_bits(deciders), (), depth)
    units = [Unit(tuple(p)) for p in top.pop("cuts")]
    return top, units


def run_unit(space: Space, cap: int, unit: Unit, deciders=ALL_DECIDERS) -> dict:
    return _core.run_unit(space.states, space.symbols, cap, decider_bits(deciders), unit.prefix, -1)


def build(
    space: Space,
    cap: int,
    *,
    deciders=ALL_DECIDERS,
    split_depth: int = 0,
    budget_hours: float | None = DEFAULT_BUDGET_HOURS,
    on_unit=None,
) -> Tally:
    """Enumerate the whole space under `cap` and return the exact tally.

    split_depth > 0 cuts the tree into work units at that many branch points;
    the tally is the same for every split. budget_hours refuses, before any
    work, a request whose estimated cost is larger."""
    _prepare(space, cap)
    if budget_hours is not None:
        est = estimate(space, cap, deciders)
        if est.seconds > budget_hours * 3600:
            raise TooLargeError(
                f"an exhaustive {space.label} build at cap {cap} is estimated at "
                f"{est.seconds / 3600:,.0f} CPU-hours, over the budget of {budget_hours:g}; "
                "lower --max-steps, use fewer states or symbols, or raise --budget-hours"
            )
    t0 = time.perf_counter()
    part = Partial()
    if split_depth <= 0:
        part.add(run_unit(space, cap, Unit(()), deciders))
        n_units = 1
    else:
        top, units = plan(space, cap, split_depth, deciders)
        part.add(top)
        for i, unit in enumerate(units):
            part.add(run_unit(space, cap, unit, deciders))
            if on_unit:
                on_unit(i + 1, len(units))
        n_units = len(units) + 1
    tally = Tally.from_partial(space, cap, part, deciders=tuple(deciders), units=n_units)
    tally.seconds = time.perf_counter() - t0
    return tally
