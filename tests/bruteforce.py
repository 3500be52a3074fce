"""A deliberately simple brute force over every machine of a full space.

It shares no code with ctmtab: its own option encoding, its own simulator
(numpy over all machines at once) and every blank run for real, so it checks
the tree search, the multiplicities and the symmetry expansion from outside."""
from __future__ import annotations

from collections import Counter

import numpy as np


def decode(index: np.ndarray, options: int, entries: int) -> np.ndarray:
    """Option of every entry for each machine index (mixed radix, entry 0 lowest)."""
    out = np.empty((len(index), entries), dtype=np.int64)
    rest = index.copy()
    for e in range(entries):
        out[:, e] = rest % options
        rest //= options
    return out


def brute_force_1d(n: int, m: int, cap: int, chunk: int = 1 << 19):
    """Returns (counts, halting, steps_hist): counts[(length, code)] over every
    (machine, blank) run; halting[b] and steps_hist[b] per blank.

    Option o of an entry: o < m is HALT(write o); otherwise v = o - m gives
    write v // (2n), direction (v // n) % 2 (0 right, 1 left), next v % n."""
    options = 2 * n * m + m
    entries = n * m
    total = options**entries
    width = 2 * cap + 1
    counts: Counter = Counter()
    halting = [0] * m
    steps_hist = [[0] * (cap + 1) for _ in range(m)]
    for start in range(0, total, chunk):
        idx = np.arange(start, min(total, start + chunk), dtype=np.int64)
        table = decode(idx, options, entries)
        for blank in range(m):
            tape = np.full((len(idx), width), blank, dtype=np.uint8)
            flat = tape.reshape(-1)
            head = np.full(len(idx), cap, dtype=np.int64)
            lo, hi = head.copy(), head.copy()
            state = np.zeros(len(idx), dtype=np.int64)
            alive = np.arange(len(idx))
            for step in range(1, cap + 1):
                if len(alive) == 0:
                    break
                rows = alive
                cell = rows * width + head[rows]
                opt = table[rows, state[rows] * m + flat[cell]]
                stop = opt < m
                done = rows[stop]
                flat[cell[stop]] = opt[stop]
                halting[blank] += len(done)
                steps_hist[blank][step] += len(done)
                # a run of `step` steps stays within `step` cells of the origin
                window = slice(cap - step, cap + step + 1)
                _tally(counts, tape[done, window], lo[done] - (cap - step), hi[done] - (cap - step), m)
                keep = ~stop
                rows, v, cell = rows[keep], opt[keep] - m, cell[keep]
                flat[cell] = v // (2 * n)
                h = head[rows] + np.where((v // n) % 2 == 0, 1, -1)
                head[rows] = h
                state[rows] = v % n
                lo[rows] = np.minimum(lo[rows], h)
                hi[rows] = np.maximum(hi[rows], h)
                alive = rows
    return counts, halting, steps_hist


def _tally(counts: Counter, tape, lo, hi, m: int) -> None:
    if len(tape) == 0:
        return
    code = np.zeros(len(tape), dtype=np.int64)
    for j in range(tape.shape[1]):
        inside = (j >= lo) & (j <= hi)
        code = np.where(inside, code * m + tape[:, j].astype(np.int64), code)
    keys, mult = np.unique(np.stack([hi - lo + 1, code], axis=1), axis=0, return_counts=True)
    for (length, c), k in zip(keys.tolist(), mult.tolist()):
        counts[(length, c)] += k


def code_of(symbols: bytes, m: int) -> int:
    c = 0
    for s in symbols:
        c = c * m + s
    return c
