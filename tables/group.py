"""The keys of one output shape and their exact counts (and, sampled, second moments), as the
reader holds them: base-m codes where they fit 64 bits, symbol rows beyond."""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .arrays import codes_of, fits_code64, symbols_of


@dataclass
class Group:
    """All keys of one shape: sorted base-m codes (or symbol rows) and exact counts."""

    shape: tuple
    codes: np.ndarray | None   # uint64, sorted, when m^size fits 64 bits
    symbols: np.ndarray | None  # N x size uint8 otherwise, sorted
    counts: np.ndarray          # uint64, or object ints when wider
    moments: np.ndarray | None = None  # sampled tables: per-key sums of squared image counts

    def __len__(self):
        return len(self.counts)

    def rows(self, m: int) -> np.ndarray:
        """Every key as a row of symbols."""
        if self.symbols is not None:
            return self.symbols
        return symbols_of(self.codes, m, math.prod(self.shape))


def group_of(shape: tuple, entries: dict, m: int, moments: dict | None = None) -> Group:
    """One shape's keys (symbol bytes -> exact count), sorted by code, or by row where the codes
    would not fit 64 bits; counts (and moments) as uint64 where they fit."""
    keys = list(entries)
    counts = np.asarray(list(entries.values()), dtype=object)
    size = math.prod(shape)
    rows = np.frombuffer(b"".join(keys), dtype=np.uint8).reshape(len(keys), size)
    if fits_code64(m, size):
        codes = codes_of(rows, m)
        order = np.argsort(codes, kind="stable")
        g = Group(shape, codes[order], None, counts[order])
    else:
        order = np.lexsort(rows.T[::-1])
        g = Group(shape, None, rows[order], counts[order])
    if moments is not None:
        mom = np.asarray([moments[k] for k in keys], dtype=object)[order]
        g.moments = mom.astype(np.uint64) if max(mom, default=0) < 1 << 64 else mom
    if max(g.counts, default=0) < 1 << 64:
        g.counts = g.counts.astype(np.uint64)
    return g
