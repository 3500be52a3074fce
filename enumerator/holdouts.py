"""The undecided nodes of a build as text, one line per node, for inspection
(`ctmtab run`) and for other provers:

    <partial machine> <weight> <step> <size>

The machine is in the compact notation (`---` an undefined entry; 2D moves are
N, E, S, W); the weight counts the machines the node stands for on one blank,
its mirror (2D: rotated and flipped) images included; the step is where it was
given up; the size is the span reached (1D) or the box ROWSxCOLS (2D)."""
from __future__ import annotations

from ..model.space import Space

MOVES = {1: "RL", 2: "NESW"}  # by the core's direction index (its MOVES; a test compares)
ENTRY_MOVE = 1  # def[e] of a MOVE entry (the core's CTM_ENTRY_MOVE)
HEADER = "# machine weight step size\n"


def records(space: Space, blob: bytes):
    """(defined, write, move, next, weight, step, rows, cols) per core record."""
    ne = space.entries
    size = 4 * ne + 16 + 24
    if len(blob) % size:
        raise ValueError("a holdout blob is not a whole number of records")
    for at in range(0, len(blob), size):
        r = blob[at:at + size]
        de, wr, mv, nx = r[:ne], r[ne:2 * ne], r[2 * ne:3 * ne], r[3 * ne:4 * ne]
        weight = int.from_bytes(r[4 * ne:4 * ne + 16], "little")
        tail = r[4 * ne + 16:]
        step, rows, cols = (int.from_bytes(tail[i:i + 8], "little", signed=True) for i in (0, 8, 16))
        yield de, wr, mv, nx, weight, step, rows, cols


def notation(space: Space, de, wr, mv, nx) -> str:
    moves = MOVES[space.dims]
    m = space.symbols
    groups = []
    for q in range(space.states):
        parts = []
        for s in range(m):
            e = q * m + s
            if de[e] == ENTRY_MOVE:
                parts.append(f"{wr[e]}{moves[mv[e]]}{chr(65 + nx[e])}")
            else:
                parts.append("---")
        groups.append("".join(parts))
    return "_".join(groups)


def lines(space: Space, blobs):
    for blob in blobs:
        for de, wr, mv, nx, weight, step, rows, cols in records(space, blob):
            size = str(cols) if space.dims == 1 else f"{rows}x{cols}"
            yield f"{notation(space, de, wr, mv, nx)} {weight} {step} {size}\n"
