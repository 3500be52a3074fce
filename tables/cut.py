"""The size cut (format 1.5, header field `cut`): a table that keeps its keys up to a size.

A (6,2) table holds millions of keys, most of them long strings that BDM never asks for. A
cut table keeps the shapes whose longer side is at most `keep_size` and records, per dropped
shape, the exact weight it held, how many distinct keys and the largest count among them. A
build cut in the core (`build --keep-size`) never sees the long keys: its records hold no key
count (null) and bound the largest count by the shape's weight. So:
- probabilities stay normalised by the true total (the dropped weight is part of it);
- every dropped key's count is at most that shape's largest count, which gives a certified
  lower bound on its CTM; the reader reports it as dropped, never as a value;
- the size histogram still checks every count: kept plus dropped weight per size equals it.
Mirror and dihedral images keep the longer side, so the kept keys stay closed under every
symmetry and `verify` checks them as before."""
from __future__ import annotations

import math
from dataclasses import dataclass, field

from ..errors import InconsistentTableError, TableError
from . import certify

MAX_DROPPED = 1 << 20  # dropped-shape records in one header: far above any cap's shapes


class DroppedKeyError(TableError, KeyError):
    """A key whose shape this table cut: its count is bounded, not known."""

    def __str__(self):  # KeyError would quote the message
        return str(self.args[0])


@dataclass
class Cut:
    keep_size: int
    dropped: dict = field(default_factory=dict)  # shape -> (weight, keys or None, bound on the largest count)

    @property
    def weight(self) -> int:
        return sum(w for w, _, _ in self.dropped.values())

    @property
    def keys(self) -> int | None:
        """Distinct keys dropped; None when a build cut in the core never saw some of them."""
        counts = [k for _, k, _ in self.dropped.values()]
        return None if None in counts else sum(counts)

    def cuts(self, shape: tuple) -> bool:
        """Whether keys of this shape were dropped (a longer side past keep_size)."""
        return max(shape) > self.keep_size

    def most(self, shape: tuple) -> int:
        """An upper bound on the count of any dropped key of this shape, exact where the key count
        is known (0: the shape held none)."""
        return self.dropped.get(tuple(shape), (0, 0, 0))[2]

    def header_field(self) -> dict:
        return {"max_size": self.keep_size,
                "dropped": [[list(s), str(w), k, str(top)] for s, (w, k, top) in sorted(self.dropped.items())]}


def of_tally(tally) -> Cut | None:
    # no output is longer than cap + 1 cells: a larger size keeps everything, and says so
    return None if tally.keep_size is None else Cut(min(tally.keep_size, tally.cap + 1), dict(tally.dropped))


def _whole(v, what: str) -> int:
    return certify.whole(v, what, "cut")


def parse(header: dict, dims: int, symbols: int, cap: int, kept_shapes) -> Cut | None:
    """The cut of a loaded header, checked for consistency with itself and the kept shapes;
    None when the table was never cut. The totals are checked by the loader (kept + dropped =
    blanks x halting) and by verify (per size, against the size histogram)."""
    spec = header.get("cut")
    if spec is None:
        return None
    if not isinstance(spec, dict) or not isinstance(spec.get("dropped"), list) or len(spec["dropped"]) > MAX_DROPPED:
        raise InconsistentTableError("the header's cut is malformed")
    keep_size = _whole(spec.get("max_size"), "max_size")  # the file's key
    if not 1 <= keep_size <= cap + 1:
        raise InconsistentTableError(f"the cut keeps keys up to size {keep_size}, which cap {cap} cannot mean")
    cut = Cut(keep_size)
    for entry in spec["dropped"]:
        if not (isinstance(entry, list) and len(entry) == 4 and isinstance(entry[0], list) and len(entry[0]) == dims):
            raise InconsistentTableError("a dropped-shape record is not [shape, weight, keys, largest count]")
        shape = tuple(_whole(x, "shape") for x in entry[0])
        weight, top = _whole(entry[1], "weight"), _whole(entry[3], "largest count")
        keys = None if entry[2] is None else _whole(entry[2], "key count")  # null: cut in the core, unseen
        if min(shape) < 1 or max(shape) > cap + 1 or not cut.cuts(shape):
            raise InconsistentTableError(f"the cut records shape {shape}, which it keeps or cap {cap} cannot reach")
        if shape in cut.dropped:
            raise InconsistentTableError(f"the cut records shape {shape} twice")
        # each dropped key counts at least once and at most `top` times; keys of a shape are finite
        if keys is None:  # never collected: the bound on the largest count is the weight itself
            possible = 1 <= top == weight
        else:
            possible = 1 <= keys <= symbols ** min(math.prod(shape), 64) and 1 <= top <= weight <= keys * top
        if not possible:
            raise InconsistentTableError(f"the cut's record of shape {shape} is impossible "
                                         f"(weight {weight}, {keys} keys, largest {top})")
        cut.dropped[shape] = (weight, keys, top)
    kept_too_big = [s for s in kept_shapes if cut.cuts(s)]
    if kept_too_big:
        raise InconsistentTableError(f"the table keeps shape {kept_too_big[0]}, past its cut at size {keep_size}")
    return cut
