"""Dense views of a table: the counts or CTM of every key of one shape, indexed by base-m code,
kept in a bounded cache across calls."""
from __future__ import annotations

import math
import operator

import numpy as np

from ..errors import TableError

MAX_DENSE = 1 << 26  # keys in one dense view: 512 MiB of float64
DENSE_LOOKUP = 1 << 20  # lookup() indexes a dense count array up to this many keys (8 MiB), else searches
CACHE_BYTES = 256 << 20  # dense arrays kept across calls, at most; beyond, each call builds its own


def dense_keys(t, shape) -> int | None:
    """m^cells, the keys of one shape, when at most MAX_DENSE; None above (the power itself
    is never computed for long shapes: 2^(10^9) alone takes seconds)."""
    cells = math.prod(shape)
    if cells > MAX_DENSE.bit_length() - 1:  # m >= 2, so m^cells > MAX_DENSE
        return None
    keys = t.space.symbols ** cells
    return keys if keys <= MAX_DENSE else None


def cached(t, key, make) -> np.ndarray:
    """t._dense[key], made once while the kept arrays stay under CACHE_BYTES."""
    if key in t._dense:
        return t._dense[key]
    out = make()
    out.setflags(write=False)
    if sum(a.nbytes for a in t._dense.values()) + out.nbytes <= CACHE_BYTES:
        t._dense[key] = out
    return out


def new_dense_counts(t, shape) -> np.ndarray:
    dense = np.zeros(dense_keys(t, shape), dtype=np.float64)
    g = t.groups.get(shape)
    if g is not None:  # the loader stores every shape of at most 2^64 keys as codes
        dense[g.codes.astype(np.intp)] = np.asarray(g.counts, dtype=np.float64)
    return dense


def dense_counts(t, shape) -> np.ndarray:
    return cached(t, ("counts", shape), lambda: new_dense_counts(t, shape))


def dense(t, shape, missing: str = "nan") -> np.ndarray:
    """CTM of every key of one shape (an int length in 1D, (rows, cols) in 2D),
    indexed by base-m code, most significant symbol first (row-major in 2D)."""
    try:
        shape = (operator.index(shape),) if not isinstance(shape, (tuple, list)) else tuple(
            operator.index(s) for s in shape)
    except TypeError:
        raise TableError(f"shape {shape!r} is not a length or a (rows, cols) pair of whole numbers") from None
    if len(shape) != t.space.dims or min(shape) < 1:
        raise TableError(f"shape {shape} does not fit a {t.space.dims}D table; give "
                         + ("a length >= 1" if t.space.dims == 1 else "(rows, cols), each >= 1"))
    if dense_keys(t, shape) is None:
        raise TableError(f"a dense view of shape {shape} would hold {t.space.symbols}^{math.prod(shape)} "
                         f"keys, over {MAX_DENSE:,}; use lookup() instead")
    if missing not in ("nan", "fallback"):
        raise TableError("a dense view needs missing='nan' or 'fallback'")
    t._refuse_dropped(f"(every key of shape {'x'.join(map(str, shape))})", shape)
    t.require_halting()

    def make():  # in place on a fresh count array: one array of m^cells floats at a time
        kept = t._dense.get(("counts", shape))
        out = kept.copy() if kept is not None else new_dense_counts(t, shape)
        absent = out == 0
        with np.errstate(divide="ignore"):
            np.log2(out, out=out)
        np.subtract(math.log2(t.total), out, out=out)
        out[absent] = t._missing(None, missing)
        return out

    return cached(t, (missing, shape), make)
