"""The Block Decomposition Method over a table's public lookups (DESIGN.md section 7).

BDM(X) = sum over the distinct blocks r of X of CTM(r) + log2(n_r), n_r the number of
times r occurs (Zenil et al., Entropy 20(8):605, 2018). Blocks come from a dense view of
the table, so a decomposition is a few vectorised passes."""
from __future__ import annotations

import math

import numpy as np

from ..errors import CtmtabError
from ..tables import keys as keytext

# What happens to the cells that do not fill a whole block.
MODES = ("drop", "wrap", "shrink")


class BDM:
    """BDM with blocks of one size: an int in 1D, (rows, cols) in 2D.

    mode, for the cells that do not fill a block: 'drop' leaves them out; 'wrap' lets the last
    blocks wrap around to the start (a ring, or a torus in 2D); 'shrink' scores them with smaller
    blocks of the same table. stride: the step between blocks (default the block size, no
    overlap; 1 gives every overlapping block).
    missing: 'fallback' (default) scores a block the table never produced above every observed
    value, 'nan' makes the whole estimate NaN."""

    def __init__(self, table, block, mode: str = "drop", stride=None, missing: str = "fallback"):
        if mode not in MODES:
            raise CtmtabError(f"unknown BDM mode {mode!r}; use one of {', '.join(MODES)}")
        self.table = table
        self.dims = table.space.dims
        self.block = (block,) if isinstance(block, int) else tuple(block)
        if len(self.block) != self.dims or min(self.block) < 1:
            raise CtmtabError(f"block {block!r} does not fit a {self.dims}D table")
        stride = self.block if stride is None else ((stride,) * self.dims if isinstance(stride, int) else tuple(stride))
        if len(stride) != self.dims or min(stride) < 1:
            raise CtmtabError(f"stride {stride!r} is not {self.dims} positive whole numbers")
        self.stride = stride
        self.mode = mode
        self.missing = missing
        self.m = table.space.symbols
        self.ctm = table.dense(self.block, missing=missing)  # raises when the table lacks the size

    def _data(self, x) -> np.ndarray:
        """x as uint8 symbols: an array or nested list of integers (bool too) in 0..m-1, or key
        text as a table key is written ("0110", rows joined by "/"; over 10 symbols dotted cells,
        "3.11.0"). Floats, even whole ones, NaN, complex, objects and symbols outside the
        alphabet are refused with one error, never rounded or wrapped into another symbol."""
        x = keytext.data_array(x, self.m)
        if x.ndim != self.dims or x.size == 0:
            raise CtmtabError(f"BDM needs a non-empty {self.dims}D array of symbols, got {x.ndim} dimensions "
                              f"and {x.size} cells")
        return keytext.as_symbols(x, self.m, "the data", f" of this {self.table.space.label} table")

    def codes(self, x) -> np.ndarray:
        """Base-m codes of every block the decomposition takes (the remainder of 'shrink' aside)."""
        x = self._data(x)
        if self.dims == 1:
            (length,), (step,) = self.block, self.stride
            if self.mode == "wrap":
                n = len(x)
                x = np.concatenate([x, np.resize(x, length)])[: n - 1 + length]  # wrap around
            if len(x) < length:
                return np.zeros(0, dtype=np.int64)
            windows = np.lib.stride_tricks.sliding_window_view(x, length)[::step]  # a view, no copy
            code = windows[:, 0].astype(np.int64)
            for j in range(1, length):
                code *= self.m
                code += windows[:, j]
            return code
        (br, bc), (sr, sc) = self.block, self.stride
        rows, cols = x.shape
        if self.mode == "wrap":
            r0, c0 = np.arange(0, rows, sr), np.arange(0, cols, sc)
            x = np.pad(x, ((0, br), (0, bc)), mode="wrap")
        else:
            r0, c0 = np.arange(0, rows - br + 1, sr), np.arange(0, cols - bc + 1, sc)
        code = np.zeros((len(r0), len(c0)), dtype=np.int64)
        for i in range(br):
            for j in range(bc):
                code = code * self.m + x[np.ix_(r0 + i, c0 + j)]
        return code.reshape(-1)

    def fallbacks(self, x) -> int:
        """How many of the blocks BDM takes from x (the remainder of 'shrink' aside) the table never
        produced: each was scored with the missing-key policy, not with a value of the table."""
        if not hasattr(self, "_absent"):
            self._absent = np.isnan(self.table.dense(self.block, missing="nan"))
        codes = self.codes(x)
        return int(np.count_nonzero(self._absent[codes])) if len(codes) else 0

    def __call__(self, x) -> float:
        """BDM of one sequence or array, in bits."""
        codes = self.codes(x)
        total = _score(self.ctm, codes, self.m ** math.prod(self.block))
        if self.mode == "shrink":
            total += self._remainder(self._data(x))
        return total

    def _remainder(self, x) -> float:
        """Leftover cells after the full blocks, scored with smaller blocks of the same table."""
        if self.dims == 1:
            (length,), (step,) = self.block, self.stride
            last = ((len(x) - length) // step) * step + length if len(x) >= length else 0
            rest = x[last:]
            if len(rest) == 0:
                return 0.0
            return BDM(self.table, len(rest), "shrink", missing=self.missing)(rest) if len(rest) < length \
                else BDM(self.table, length, "shrink", self.stride, self.missing)(rest)
        (br, bc), (sr, sc) = self.block, self.stride
        rows, cols = x.shape
        end_r = ((rows - br) // sr) * sr + br if rows >= br else 0
        end_c = ((cols - bc) // sc) * sc + bc if cols >= bc else 0
        total = 0.0
        for part in (x[:end_r, end_c:], x[end_r:, :end_c], x[end_r:, end_c:]):
            if part.size:
                shape = (min(br, part.shape[0]), min(bc, part.shape[1]))
                total += BDM(self.table, shape, "shrink", missing=self.missing)(part)
        return total


def _score(ctm: np.ndarray, codes: np.ndarray, size: int) -> float:
    if len(codes) == 0:
        return 0.0
    counts = np.bincount(codes, minlength=size) if size <= 1 << 24 else None
    if counts is None:
        uniq, n = np.unique(codes, return_counts=True)
    else:
        uniq = np.flatnonzero(counts)
        n = counts[uniq]
    return float(np.sum(ctm[uniq]) + np.sum(np.log2(n)))
