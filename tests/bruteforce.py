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


# 2D: directions N, E, S, W as (row step, column step); north is up (row - 1)
STEPS_2D = ((-1, 0), (0, 1), (1, 0), (0, -1))


def brute_force_2d(n: int, m: int, cap: int):
    """Returns (counts, halting): counts[(rows, cols, code)] over every (machine, blank)
    run, the code row-major from the north-west cell; halting[b] per blank.

    Option o of an entry: o < m is HALT(write o); otherwise v = o - m gives write
    v // (4n), direction (v // n) % 4 in N, E, S, W order, next v % n."""
    options = 4 * n * m + m
    entries = n * m
    total = options**entries
    side = 2 * cap + 1
    counts: Counter = Counter()
    halting = [0] * m
    idx = np.arange(total, dtype=np.int64)
    table = decode(idx, options, entries)
    dr = np.array([s[0] for s in STEPS_2D])
    dc = np.array([s[1] for s in STEPS_2D])
    for blank in range(m):
        grid = np.full((total, side, side), blank, dtype=np.uint8)
        r = np.full(total, cap, dtype=np.int64)
        c = np.full(total, cap, dtype=np.int64)
        rlo, rhi, clo, chi = r.copy(), r.copy(), c.copy(), c.copy()
        state = np.zeros(total, dtype=np.int64)
        alive = np.arange(total)
        for step in range(1, cap + 1):
            if len(alive) == 0:
                break
            rows = alive
            opt = table[rows, state[rows] * m + grid[rows, r[rows], c[rows]]]
            stop = opt < m
            done = rows[stop]
            grid[done, r[done], c[done]] = opt[stop]
            halting[blank] += len(done)
            _tally_2d(counts, grid[done], rlo[done], rhi[done], clo[done], chi[done], m)
            rows, v = rows[~stop], opt[~stop] - m
            grid[rows, r[rows], c[rows]] = v // (4 * n)
            d = (v // n) % 4
            r[rows] += dr[d]
            c[rows] += dc[d]
            state[rows] = v % n
            rlo[rows] = np.minimum(rlo[rows], r[rows])
            rhi[rows] = np.maximum(rhi[rows], r[rows])
            clo[rows] = np.minimum(clo[rows], c[rows])
            chi[rows] = np.maximum(chi[rows], c[rows])
            alive = rows
    return counts, halting


def _tally_2d(counts: Counter, grids, rlo, rhi, clo, chi, m: int) -> None:
    for g, a, b, x, y in zip(grids, rlo, rhi, clo, chi):
        box = g[a: b + 1, x: y + 1]
        code = 0
        for s in box.reshape(-1).tolist():
            code = code * m + s
        counts[(box.shape[0], box.shape[1], code)] += 1
