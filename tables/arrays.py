"""Columnar arrays of the table body: base-m key codes and exact counts.

Counts are stored as `limbs` little-endian uint64 words per entry, so they stay
exact beyond 2^64. Keys are uint64 base-m codes (most significant symbol
first) when m^length fits 64 bits, else one uint8 per symbol."""
from __future__ import annotations

import numpy as np

U64 = np.dtype("<u8")


def limbs_needed(values) -> int:
    top = max(values, default=0)
    return max(1, (top.bit_length() + 63) // 64)


def encode_counts(values: list) -> dict:
    """Exact Python ints -> {"limbs", "data"}."""
    limbs = limbs_needed(values)
    if limbs == 1:
        return {"limbs": 1, "data": np.asarray(values, dtype=U64).tobytes()}
    words = np.empty((len(values), limbs), dtype=U64)
    mask = (1 << 64) - 1
    for i, v in enumerate(values):
        for j in range(limbs):
            words[i, j] = (v >> (64 * j)) & mask
    return {"limbs": limbs, "data": words.tobytes()}


def decode_counts(spec: dict, n: int) -> np.ndarray:
    """-> uint64 array (one limb) or object array of exact Python ints."""
    limbs = spec["limbs"]
    words = np.frombuffer(spec["data"], dtype=U64)
    if limbs == 1:
        return words
    words = words.reshape(n, limbs)
    out = np.empty(n, dtype=object)
    for i in range(n):
        out[i] = sum(int(words[i, j]) << (64 * j) for j in range(limbs))
    return out


def exact_sum(counts: np.ndarray) -> int:
    """Sum without uint64 wrap-around."""
    if counts.dtype == object:
        return int(sum(counts))
    lo = int(np.sum(counts & np.uint64(0xFFFFFFFF), dtype=np.uint64))
    hi = int(np.sum(counts >> np.uint64(32), dtype=np.uint64))
    return (hi << 32) + lo


def fits_code64(m: int, cells: int) -> bool:
    """m^cells <= 2^64 (keys of that shape fit uint64 codes), without computing the power of a
    hostile length."""
    return cells <= 64 and m**cells <= 1 << 64


def codes_of(symbols: np.ndarray, m: int) -> np.ndarray:
    """Rows of symbols (N x L, each in 0..m-1) -> uint64 base-m codes."""
    symbols = np.asarray(symbols)
    n, length = symbols.shape
    if m == 2 and 0 < length <= 64:  # binary: the rows' bits packed, read as one big-endian word
        words = np.zeros((n, 8), dtype=np.uint8)
        words[:, :(length + 7) // 8] = np.packbits(symbols.astype(np.uint8, copy=False), axis=1)
        code = words.view(">u8").reshape(n).astype(np.uint64)
        code >>= np.uint64(64 - length)
        return code
    code = np.zeros(n, dtype=np.uint64)
    mm = np.uint64(m)
    unsigned = symbols.dtype.kind in "bu"  # a signed column would send uint64 sums through float64
    for j in range(length):  # in place: one temporary at most per column
        code *= mm
        code += symbols[:, j] if unsigned else symbols[:, j].astype(np.uint64)
    return code


def symbols_of(codes: np.ndarray, m: int, length: int) -> np.ndarray:
    """uint64 codes -> N x L uint8 symbols."""
    out = np.empty((len(codes), length), dtype=np.uint8)
    rest = codes.copy()
    mm = np.uint64(m)
    for j in range(length - 1, -1, -1):
        out[:, j] = (rest % mm).astype(np.uint8)
        rest //= mm
    return out


SPARSE_MIN = 4096  # histograms at least this long are stored sparse when at most a quarter is non-zero


class Hist:
    """A histogram held as its non-zero entries: a run of 47 million steps has a step histogram
    of 47 million entries, nearly all zero, which as a list would take 400 MB and seconds to
    load. Reads like a list of exact ints (len, indexing, iteration, ==); total() and items()
    never touch the zeros."""

    __slots__ = ("n", "at", "values")

    def __init__(self, n: int, at, values: list):
        self.n = int(n)
        self.at = np.asarray(at, dtype=np.int64)  # strictly increasing indices below n
        self.values = [int(v) for v in values]    # exact, non-zero

    @classmethod
    def of(cls, values) -> "Hist":
        if isinstance(values, Hist):
            return values
        values = list(values)
        at = [i for i, v in enumerate(values) if v]
        return cls(len(values), at, [values[i] for i in at])

    def __len__(self) -> int:
        return self.n

    def __getitem__(self, i):
        if isinstance(i, slice):
            return self.tolist()[i]
        if i < 0:
            i += self.n
        if not 0 <= i < self.n:
            raise IndexError("histogram index out of range")
        j = int(np.searchsorted(self.at, i))
        return self.values[j] if j < len(self.at) and self.at[j] == i else 0

    def items(self):
        """(index, count) of the non-zero entries, in order."""
        return zip(self.at.tolist(), self.values)

    def total(self) -> int:
        return sum(self.values)

    def tolist(self) -> list:
        out = [0] * self.n
        for i, v in self.items():
            out[i] = v
        return out

    def __iter__(self):
        return iter(self.tolist())

    def __array__(self, dtype=None, copy=None):
        out = np.zeros(self.n, dtype=dtype or np.float64)
        out[self.at] = self.values
        return out

    def __eq__(self, other) -> bool:
        if isinstance(other, (Hist, list, tuple)):
            other = Hist.of(other)
            return self.n == other.n and self.values == other.values and np.array_equal(self.at, other.at)
        return NotImplemented

    def __repr__(self) -> str:
        return f"Hist(n={self.n}, non-zero={len(self.values)})"


def encode_hist(values) -> dict:
    """A histogram: {"n", "limbs", "data"} of every entry, or, for a long one that is mostly
    zero (a cap of millions of steps), {"n", "at", "limbs", "data"} of its non-zero entries only,
    "at" their indices as uint64."""
    n = len(values)
    if isinstance(values, Hist):
        if n >= SPARSE_MIN and 4 * len(values.values) <= n:
            return dict(encode_counts(values.values), n=n, at=values.at.astype(U64).tobytes())
        values = values.tolist()
    if n >= SPARSE_MIN:
        at = [i for i, v in enumerate(values) if v]
        if 4 * len(at) <= n:
            return dict(encode_counts([values[i] for i in at]), n=n, at=np.asarray(at, dtype=U64).tobytes())
    return dict(encode_counts(values), n=n)
