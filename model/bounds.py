"""Proven busy-beaver step bounds S(n, m), in one place, with their sources.

S(n, m) is the most steps any halting n-state m-symbol 1D machine makes from a
blank tape, the halting transition included (our formalism: docs/DESIGN.md section 1;
a HALT entry writes and does not move, which changes no step count). At a cap
>= S(n, m) a run that has not halted never halts, so every undecided node of
such a build is proven non-halting by the bound, and the table is exact."""
from __future__ import annotations

from .space import Space

_PAPER = "bbchallenge Collaboration, Determination of the fifth Busy Beaver value, arXiv:2509.12337 (2025)"
_COQ = _PAPER + ", and its machine-checked Coq proof"

# (states, symbols) -> (S, source); 1D only: no 2D bound is proven.
STEP_BOUNDS: dict[tuple[int, int], tuple[int, str]] = {
    (1, 2): (1, "OEIS A060843"),
    (2, 2): (6, "Rado 1962; OEIS A060843"),
    (3, 2): (21, "Lin & Rado 1965; OEIS A060843"),
    (4, 2): (107, "Brady 1983; OEIS A060843"),
    (5, 2): (47_176_870, _COQ),
    (2, 3): (38, "Lafitte & Papazian 2007"),
    (2, 4): (3_932_964, _COQ),
}


def step_bound(space: Space) -> tuple[int, str] | None:
    """(S, source) for a 1D space whose busy-beaver step bound is proven, else None."""
    if space.dims != 1:
        return None
    return STEP_BOUNDS.get((space.states, space.symbols))


def bound_reached(space: Space, cap: int) -> tuple[int, str] | None:
    """(S, source) when cap >= S(n, m) is proven, so nothing undecided can ever halt."""
    found = step_bound(space)
    return found if found is not None and cap >= found[0] else None
