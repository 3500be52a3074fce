"""`ctmtab list`: one row per shipped table, from its header alone where that suffices."""
from __future__ import annotations

import math

from ..model.space import Space
# tables/ is imported where it is used: the command line's parser reads the constants below for
# its help on every command, and must not pay for the reader's imports

TIGHT_BITS = 0.1  # default: a certified interval at most this wide counts as tight for BDM

BLOCK_RULE = ("the largest size S such that the table holds every key of every size up to S (2D: every "
              "shape up to SxS) and, in an exhaustive table that is not exact, every certified interval "
              "there is at most {tight:g} bits wide; sampled tables: the completeness alone (their values carry "
              "standard errors)")


def _label(shape) -> str:
    return "x".join(map(str, shape))


def _within(shape, k: int) -> bool:
    return max(shape) <= k


def _prefix(good: dict, dims: int) -> int:
    """The largest k such that every size up to k (2D: every shape up to k x k) is good."""
    k = 0
    while True:
        need = [(k + 1,)] if dims == 1 else [(r, c) for r in range(1, k + 2) for c in range(1, k + 2)
                                             if max(r, c) == k + 1]
        if not all(good.get(s, False) for s in need):
            return k
        k += 1


def _widths(name: str, header: dict, shapes: list) -> tuple[dict, bool]:
    """shape -> the widest certified interval (bits) among its keys, and whether the body was read.
    Where no undecided run can reach a shape the width is the same for every key, from the header;
    elsewhere it depends on the smallest count, so the table is loaded."""
    from ..tables import certify
    from ..tables.load import load

    space = header["space"]
    m, halting = space["symbols"], int(header["totals"]["halting"])
    undecided = int(header["totals"]["undecided"])
    if undecided == 0:
        return {s: 0.0 for s in shapes}, False
    cert = certify.parse(header, int(header["totals"]["non_halting"]), undecided, header["cap"], space["dims"],
                         Space(space["dims"], space["states"], m), header["mode"])
    if cert is not None and all(cert.reach(s) == 0 for s in shapes):
        late, left = certify.open_runs(cert, m, undecided)
        low, high = certify.bounds([1.0], 0, left, m * halting + late)  # the same for every count
        return {s: float(high[0] - low[0]) for s in shapes}, False
    widths = {tuple(int(x) for x in w["shape"].split("x")): w["widest"] for w in load(name).interval_widths()}
    return {s: widths[s] for s in shapes}, True


def describe(name: str, tight: float = TIGHT_BITS) -> dict:
    """The list row of one shipped table."""
    from ..tables.load import SHIPPED, SUFFIX, load_header

    header, size = load_header(name)
    space = header["space"]
    dims, m = space["dims"], space["symbols"]
    label = Space(dims, space["states"], m).label
    totals = {k: int(v) for k, v in header["totals"].items()}
    runs = header["sample"]["size"] if header["mode"] == "sampled" else totals["space_size"]
    complete = [tuple(s) for s, k in header["keys"]["groups"] if k == m ** math.prod(s)]
    upto = _prefix({s: True for s in complete}, dims)
    if header["mode"] == "sampled":
        kind, read = "sampled", False
        block = upto
    else:
        kind = "exact" if totals["undecided"] == 0 else "capped"
        shapes = [s for s in complete if _within(s, upto)]
        widths, read = _widths(name, header, shapes) if shapes else ({}, False)
        block = _prefix({s: w <= tight for s, w in widths.items()}, dims)
    settle = ((header.get("certificate") or {}).get("settle") or {}).get("size")
    return {"name": name, "file": str(SHIPPED / (name + SUFFIX)), "space": label, "dims": dims,
            "states": space["states"], "symbols": m, "cap": header["cap"], "kind": kind,
            "undecided_fraction": totals["undecided"] / runs, "settled_up_to": settle,
            "complete_shapes": [_label(s) for s in complete], "complete_up_to": _size(upto, dims),
            "block": _size(block, dims), "distinct_keys": header["keys"]["distinct"],
            "file_bytes": size, "body_read": read}


def _size(k: int, dims: int):
    """A size as the user writes it: a length in 1D, RxC in 2D; None for none."""
    if k == 0:
        return None
    return k if dims == 1 else f"{k}x{k}"


def catalog(tight: float = TIGHT_BITS) -> list[dict]:
    from ..tables.load import shipped

    return [describe(name, tight) for name in shipped()]
