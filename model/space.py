"""Machine spaces (d, n, m) of the busy-beaver formalism (DESIGN.md section 1)."""
from __future__ import annotations

from dataclasses import dataclass

from ..errors import SpaceError, TooLargeError

# The C core keeps weights in 128 bits: the space size times the symmetry
# factor (2 in 1D, 8 in 2D) times the m blank images must stay below 2**127.
COUNT_BITS = 127
MAX_ENTRIES = 64
MAX_CAP = 5 * 10**7  # past S(5) = 47,176,870; a 1D unit holds two tapes of 2 cap + 3 cells


@dataclass(frozen=True)
class Space:
    """dims in {1, 2}; states n >= 1; symbols m >= 2."""

    dims: int
    states: int
    symbols: int

    def __post_init__(self):
        for name in ("dims", "states", "symbols"):
            if not isinstance(getattr(self, name), int) or isinstance(getattr(self, name), bool):
                raise SpaceError(f"{name} must be a whole number, got {getattr(self, name)!r}")
        if self.dims not in (1, 2):
            raise SpaceError(f"dimension {self.dims} is not supported; use 1 or 2")
        if self.states < 1:
            raise SpaceError(f"a machine needs at least 1 state, got {self.states}; use --states 1 or more")
        if self.symbols < 2:
            raise SpaceError(
                f"a machine needs at least 2 symbols, got {self.symbols}; use --symbols 2 or more"
            )
        if self.symbols > 255:
            raise SpaceError(f"{self.symbols} symbols is over the limit of 255; use fewer symbols")

    @property
    def directions(self) -> int:
        return 2 if self.dims == 1 else 4

    @property
    def entries(self) -> int:
        """Entries of the transition table, n*m."""
        return self.states * self.symbols

    @property
    def options(self) -> int:
        """Choices per entry: every MOVE(write, direction, next) and every HALT(write)."""
        return self.directions * self.states * self.symbols + self.symbols

    @property
    def size(self) -> int:
        """Number of machines, options^(n*m), exact."""
        return self.options**self.entries

    @property
    def label(self) -> str:
        return f"{self.dims}D ({self.states},{self.symbols})"

    def to_dict(self) -> dict:
        return {"dims": self.dims, "states": self.states, "symbols": self.symbols}

    def check_entries(self) -> None:
        """Refuse a transition table larger than the core holds."""
        if self.entries > MAX_ENTRIES:
            raise TooLargeError(
                f"{self.label} has {self.entries} table entries, over the core's limit of "
                f"{MAX_ENTRIES}; use fewer states or symbols"
            )

    def check_countable(self) -> None:
        """Refuse a space whose exact counts would not fit the core's 128 bits. Exhaustive builds
        only: a sampled build counts samples, so any space with at most MAX_ENTRIES entries can be
        sampled."""
        self.check_entries()
        if (self.size * 8 * self.symbols).bit_length() > COUNT_BITS:
            raise TooLargeError(
                f"{self.label} holds {self.size:.3e} machines, too many for exact 128-bit "
                "counts; use fewer states or symbols"
            )


def check_cap(cap) -> int:
    if not isinstance(cap, int) or isinstance(cap, bool):
        raise SpaceError(f"the step cap must be a whole number, got {cap!r}")
    if cap < 1:
        raise SpaceError(f"the step cap must be at least 1, got {cap}; use --max-steps 1 or more")
    if cap > MAX_CAP:
        raise SpaceError(f"a step cap of {cap} is over the limit of {MAX_CAP}; use a smaller --max-steps")
    return cap


def default_depth(space: Space) -> int:
    """Cut depth used when none is given: a function of the space only, so that
    every worker count, shard split and resume sees the same units. With 3 or more symbols the
    first-use symbol order makes each unit several times larger, so one level less keeps the
    per-unit overhead small (1D (2,3), (2,4), (3,3) all build faster at 3 than at 4)."""
    return max(0, min(4 if space.symbols == 2 else 3, space.entries - 1))
