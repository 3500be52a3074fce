"""A deliberately simple brute force over every machine of a full space.

It shares no code with ctmtab: its own option encoding, its own simulator
(numpy over all machines at once) and every blank run for real, so it checks
the tree search, the multiplicities and the symmetry expansion from outside.

One pass at the largest cap tallies each output by the step its run halted at;
up_to() then gives the table of any smaller cap, because a run that halts at
step s does the same under every cap >= s and is cut off under every cap < s."""
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


def _options(n: int, m: int, moves: int):
    """Per option o: halts?, symbol written, move index, next state.
    o < m is HALT(write o); otherwise v = o - m gives write v // (moves n),
    move (v // n) % moves, next v % n."""
    o = np.arange(moves * n * m + m)
    v = np.maximum(o - m, 0)
    halt = o < m
    write = np.where(halt, o, v // (moves * n)).astype(np.uint8)
    return halt, write, (v // n) % moves, np.where(halt, 0, v % n)


def brute_force_1d(n: int, m: int, cap: int, chunk: int = 1 << 18):
    """Returns (counts, halts): counts[(step, length, code)] over every (machine, blank)
    run that halts at `step` <= cap; halts[b][step] the machines halting at `step` on blank b.

    Directions: move 0 is right, 1 is left."""
    options = 2 * n * m + m
    entries = n * m
    total = options**entries
    width = 2 * cap + 1
    halt, write, move, nxt = _options(n, m, 2)
    step_of = np.where(move == 0, 1, -1)
    counts: Counter = Counter()
    halts = [[0] * (cap + 1) for _ in range(m)]
    for start in range(0, total, chunk):
        table = decode(np.arange(start, min(total, start + chunk), dtype=np.int64), options, entries)
        table = table[(table < m).any(axis=1)]  # a table without a HALT entry never halts
        flat_table = table.astype(np.uint8).reshape(-1)
        for blank in range(m):
            tape = np.full((len(table), width), blank, dtype=np.uint8)
            flat = tape.reshape(-1)
            # the live runs only: machine row, head, visited span, state
            row = np.arange(len(table), dtype=np.int64)
            head = np.full(len(table), cap, dtype=np.int64)
            lo, hi = head.copy(), head.copy()
            state = np.zeros(len(table), dtype=np.int64)
            for step in range(1, cap + 1):
                if len(row) == 0:
                    break
                cell = row * width + head
                opt = flat_table[row * entries + state * m + flat[cell]]
                flat[cell] = write[opt]
                stop = halt[opt]
                if stop.any():
                    halts[blank][step] += int(stop.sum())
                    # a run of `step` steps stays within `step` cells of the origin
                    off = cap - step
                    _tally(counts, step, tape[row[stop], off: cap + step + 1], lo[stop] - off, hi[stop] - off, m)
                    keep = ~stop
                    row, head, lo, hi, opt = row[keep], head[keep], lo[keep], hi[keep], opt[keep]
                head = head + step_of[opt]
                state = nxt[opt]
                np.minimum(lo, head, out=lo)
                np.maximum(hi, head, out=hi)
    return counts, halts


def _tally(counts: Counter, step: int, tape, lo, hi, m: int) -> None:
    assert (hi - lo + 1).max() * np.log2(m) < 62, "outputs too long for int64 codes"
    code = np.ones(len(tape), dtype=np.int64)  # a leading 1 keeps the length: one sort key
    for j in range(tape.shape[1]):
        inside = (j >= lo) & (j <= hi)
        code = np.where(inside, code * m + tape[:, j].astype(np.int64), code)
    keys, mult = np.unique(code, return_counts=True)
    for key, k in zip(keys.tolist(), mult.tolist()):
        n = 0
        while m ** (n + 1) <= key:
            n += 1
        counts[(step, n, key - m**n)] += k


def up_to(counts: Counter, cap: int) -> dict:
    """The outputs of the runs that halt within `cap` steps, without the step: {key: count}."""
    out: Counter = Counter()
    for (step, *key), c in counts.items():
        if step <= cap:
            out[tuple(key)] += c
    return dict(out)


def code_of(symbols: bytes, m: int) -> int:
    c = 0
    for s in symbols:
        c = c * m + s
    return c


# 2D: directions N, E, S, W as (row step, column step); north is up (row - 1)
STEPS_2D = ((-1, 0), (0, 1), (1, 0), (0, -1))


def brute_force_2d(n: int, m: int, cap: int):
    """Returns (counts, halts): counts[(step, rows, cols, code)] over every (machine, blank)
    run that halts at `step` <= cap, the code row-major from the north-west cell;
    halts[b][step] the machines halting at `step` on blank b.

    Moves 0..3 are N, E, S, W."""
    options = 4 * n * m + m
    entries = n * m
    side = 2 * cap + 1
    halt, write, move, nxt = _options(n, m, 4)
    dr = np.array([s[0] for s in STEPS_2D])[move]
    dc = np.array([s[1] for s in STEPS_2D])[move]
    table = decode(np.arange(options**entries, dtype=np.int64), options, entries)
    table = table[(table < m).any(axis=1)]  # a table without a HALT entry never halts
    counts: Counter = Counter()
    halts = [[0] * (cap + 1) for _ in range(m)]
    for blank in range(m):
        grid = np.full((len(table), side, side), blank, dtype=np.uint8)
        row = np.arange(len(table))
        r = np.full(len(table), cap, dtype=np.int64)
        c = r.copy()
        rlo, rhi, clo, chi = r.copy(), r.copy(), c.copy(), c.copy()
        state = np.zeros(len(table), dtype=np.int64)
        for step in range(1, cap + 1):
            if len(row) == 0:
                break
            opt = table[row, state * m + grid[row, r, c]]
            grid[row, r, c] = write[opt]
            stop = halt[opt]
            if stop.any():
                halts[blank][step] += int(stop.sum())
                off = cap - step
                win = grid[row[stop], off: cap + step + 1, off: cap + step + 1]
                _tally_2d(counts, step, win, rlo[stop] - off, rhi[stop] - off, clo[stop] - off, chi[stop] - off, m)
                keep = ~stop
                row, r, c, opt = row[keep], r[keep], c[keep], opt[keep]
                rlo, rhi, clo, chi = rlo[keep], rhi[keep], clo[keep], chi[keep]
            r = r + dr[opt]
            c = c + dc[opt]
            state = nxt[opt]
            np.minimum(rlo, r, out=rlo)
            np.maximum(rhi, r, out=rhi)
            np.minimum(clo, c, out=clo)
            np.maximum(chi, c, out=chi)
    return counts, halts


def _tally_2d(counts: Counter, step: int, grids, rlo, rhi, clo, chi, m: int) -> None:
    rows = rhi - rlo + 1
    assert rows.max() < 64 and (rows * (chi - clo + 1)).max() * np.log2(m) + 6 < 62, "outputs too large for int64"
    code = np.ones(len(grids), dtype=np.int64)  # a leading 1 keeps the area
    for i in range(grids.shape[1]):  # north to south, then west to east: row-major in the box
        for j in range(grids.shape[2]):
            inside = (i >= rlo) & (i <= rhi) & (j >= clo) & (j <= chi)
            code = np.where(inside, code * m + grids[:, i, j].astype(np.int64), code)
    keys, mult = np.unique(code * 64 + rows, return_counts=True)
    for key, k in zip(keys.tolist(), mult.tolist()):
        r, key = key % 64, key // 64
        area = 0
        while m ** (area + 1) <= key:
            area += 1
        counts[(step, r, area // r, key - m**area)] += k
