"""Everything a collaborator can check in a table beyond its checksums."""
from __future__ import annotations

import functools

import numpy as np

from ..model.space import default_depth
from ..model.symmetry import blank_perms, dihedral_images
from ..errors import CoreMissingError, CtmtabError, TooLargeError
from .table import Table


def problems(table: Table, notes: list | None = None) -> list[str]:
    """Every invariant the table breaks, as one line each; empty when it is sound. notes, when
    given, receives a line for each check that could not run here (no compiled core, too large)."""
    notes = [] if notes is None else notes
    out = shard_weight_problems(table, notes)
    t = table
    covered = t.header.get("units", {}).get("covered") == "all"
    per_run = t.blanks
    if t.mode == "sampled":
        per_run = t.header["sample"]["images_per_sample"]
        if t.halting + t.non_halting + t.undecided != t.header["sample"]["size"]:
            out.append("halting + non_halting + undecided samples do not add up to the sample size")
    elif covered and t.halting + t.non_halting + t.undecided != t.space_size:
        out.append(f"halting + non_halting + undecided = {t.halting + t.non_halting + t.undecided}, "
                   f"not the space size {t.space_size}")
    if t.space_size != t.space.size:
        out.append(f"the recorded space size {t.space_size} is not {t.space.label}'s {t.space.size}")
    if t.total != per_run * t.halting:
        out.append(f"the counts sum to {t.total}, not {per_run} x halting = {per_run * t.halting}")
    if t.steps_hist.total() != t.halting:
        out.append("the halting-step histogram does not sum to the halting total")
    if t.length_hist.total() != t.halting:
        out.append("the output-size histogram does not sum to the halting total")
    if len(t.steps_hist) > t.cap + 1:
        out.append(f"the step histogram reaches past the cap {t.cap}")
    if t.mode == "sampled":
        out += _streams(t, notes)
    for shape in t.shapes:
        out += [f"shape {shape}: {p}" for p in _closure(t, shape)]
        if t.mode == "sampled":
            out += [f"shape {shape}: {p}" for p in _moments(t, shape)]
    for shape in sorted(t.late):  # the halts past the cap come in whole symmetry classes too
        out += [f"halts past the cap, shape {shape}: {p}" for p in _late_closure(t, shape)]
    if t.cut is not None and t.space.dims == 2:  # a shape and its rotation hold the same keys
        for shape, record in t.cut.dropped.items():
            if t.cut.dropped.get(shape[::-1]) != record:
                out.append(f"the cut's record of shape {shape} differs from that of its rotation {shape[::-1]}")
    # the dropped weight is still in the size histogram, size by size
    for size, total in sorted(t.weight_by_size().items()):
        if size >= len(t.length_hist) or total != per_run * t.length_hist[size]:
            out.append(f"size {size}: the counts disagree with the output-size histogram")
    return out


def shard_weight_problems(t: Table, notes: list) -> list[str]:
    """A shard's weight, rebuilt: the plan (the top of the tree, cut at the header's depth) gives
    every unit's weight, and the shard's covered units must weigh what its totals add up to. Only
    the compiled core can rebuild a plan; the loader has already tied the totals to units.weight
    and, for a file covering every unit, to the space size."""
    units = t.header.get("units", {})
    covered = units.get("covered", "all")
    if t.mode != "exhaustive" or covered == "all" or len(covered) == units.get("count"):
        return []
    depth = units.get("depth", 0)
    if not 1 <= depth <= default_depth(t.space) + 1:  # a deeper top can cost as much as a build
        notes.append(f"the weight of the shard's units was not recomputed (split depth {depth}: rebuilding "
                     "its plan costs too much here); rebuild the shard to check it")
        return []
    deciders = tuple(t.header.get("deciders", []))
    relabel = "symbol-relabelling" in t.header.get("symmetries", [])
    try:
        p = _plan(t.space, t.cap, depth, deciders, relabel)
    except CoreMissingError:
        notes.append("the weight of the shard's units was not recomputed (no compiled core here); "
                     "verify it where ctmtab can build")
        return []
    except CtmtabError as exc:
        return [f"the shard's plan cannot be rebuilt ({exc})"]
    if p.ident != units.get("plan") or p.count != units.get("count"):
        return [f"the plan {units.get('plan')!r} of {units.get('count')} units is not the plan rebuilt from "
                f"the space, cap, deciders and depth ({p.ident!r}, {p.count} units)"]
    weight = sum(p.unit(k).weight for k in covered)
    if weight != int(units.get("weight", -1)):
        return [f"the shard's units weigh {weight} machines, not the {units.get('weight')} its header and "
                "totals claim"]
    return []


def _streams(t: Table, notes: list) -> list[str]:
    """The table's own streams must draw from disjoint stretches of the generator."""
    from ..model.streams import SAMPLE_UNIT, first_overlap

    try:
        found = first_overlap([(None, seed, size) for seed, size in t.streams], t.space.entries, SAMPLE_UNIT)
    except TooLargeError as exc:
        notes.append(f"the streams were not checked for overlap: {exc}")
        return []
    if found is None:
        return []
    (_, sa, ua), (_, sb, ub) = found
    return [f"unit {ua} of seed {sa} and unit {ub} of seed {sb} draw overlapping stretches of the sampling "
            "generator: the table counts those machines twice"]


@functools.lru_cache(maxsize=4)  # the shards of one build share their plan
def _plan(space, cap: int, depth: int, deciders: tuple, relabel: bool):
    # the one use of the enumerator in tables/ (tests/test_layers.py): only the compiled core can
    # rebuild a plan, so this import is lazy and its absence a note, never a failure
    from ..enumerator.driver import plan

    return plan(space, cap, depth, deciders, relabel)


def _moments(table: Table, shape: tuple) -> list[str]:
    """Moments no sample could give. A sample adds X in 1..k images of the key (k images per
    sample), X^2 to S2: so S1 <= S2 <= k S1, and over the H halting samples S1^2 <= H S2
    (Cauchy-Schwarz; below it the variance is negative and the standard error a false 0)."""
    g = table.groups[shape]
    k, h = table.header["sample"]["images_per_sample"], table.halting
    s1, s2 = g.counts, g.moments
    f1, f2 = np.asarray(s1, dtype=np.float64), np.asarray(s2, dtype=np.float64)
    rules = [("S1 > S2 (a sum of squared image counts below their sum)", f1, f2, lambda a, b: a > b),
             (f"S2 > {k} x S1 (over {k} images in one sample)", f2, k * f1, lambda a, b: b > k * a),
             (f"S1^2 > H x S2 (a standard error below what {h} halting samples allow)",
              f1 * f1, h * f2, lambda a, b: a * a > h * b)]
    out = []
    for name, left, right, exact in rules:
        if exact is rules[0][3] and s1.dtype != object and s2.dtype != object:
            bad = np.flatnonzero(s1 > s2)  # exact in uint64
        else:  # floats decide all but a narrow band around equality, exact integers the band
            sure = left > right * (1 + 1e-9)
            band = np.flatnonzero(~sure & (left >= right * (1 - 1e-9)))
            bad = np.union1d(np.flatnonzero(sure),
                             [i for i in band if exact(int(s1[i]), int(s2[i]))]).astype(np.int64)
        if len(bad):
            out.append(f"{len(bad)} keys have impossible moments, {name}, e.g. "
                       f"{table.key_text(shape, g.rows(table.space.symbols)[bad[0]])}")
    return out


def _images(table: Table, shape: tuple, rows: np.ndarray):
    """Every symmetry image of each row that must carry the same count."""
    m = table.space.symbols
    if table.space.dims == 1:
        yield "reversal", shape, rows[:, ::-1]
    else:
        grids = rows.reshape(len(rows), *shape)
        names = ["rotation 90", "rotation 180", "rotation 270", "flip", "flip+90", "flip+180", "flip+270"]
        for name, img in zip(names, dihedral_images(grids, 2)[1:]):
            yield name, tuple(img.shape[1:]), img.reshape(len(rows), -1)
    sample = table.header.get("sample") or {}
    if table.mode == "sampled" and m > 2 and sample.get("relabelling") != "all":
        return  # each sample took the transpositions only: closed in expectation, not exactly
    # the transpositions (0 b) generate every permutation of the m symbols: closed under them,
    # the counts are closed under all m! relabellings (common practice, group theory)
    for b, perm in enumerate(blank_perms(m)[1:], start=1):
        yield f"symbol swap (0 {b})", shape, perm[rows]


def _closure(table: Table, shape: tuple) -> list[str]:
    g = table.groups[shape]
    m = table.space.symbols
    rows = g.rows(m)
    counts = np.asarray(g.counts, dtype=object)
    out = []
    for name, img_shape, img in _images(table, shape, rows):
        pos = table._position(img_shape, np.ascontiguousarray(img))
        other = table.groups.get(img_shape)
        if other is None:
            out.append(f"no key of shape {img_shape} for the {name} images")
            continue
        theirs = np.asarray(other.counts, dtype=object)[np.maximum(pos, 0)]
        bad = np.flatnonzero((pos < 0) | (theirs != counts))
        if len(bad):
            out.append(f"{len(bad)} keys differ in count from their {name} image, "
                       f"e.g. {table.key_text(shape, rows[bad[0]])}")
    return out


def _late_closure(table: Table, shape: tuple) -> list[str]:
    """The run-on's halts (table.late) closed under the same images, count for count (exact: the
    groups are small, so a dict of rows serves)."""
    m = table.space.symbols
    index = {s: {row.tobytes(): int(c) for row, c in zip(g.rows(m), g.counts)} for s, g in table.late.items()}
    rows = table.late[shape].rows(m)
    mine = [index[shape][r.tobytes()] for r in rows]
    out = []
    for name, img_shape, img in _images(table, shape, rows):
        theirs = index.get(img_shape, {})
        bad = [i for i, r in enumerate(np.ascontiguousarray(img)) if theirs.get(r.tobytes()) != mine[i]]
        if bad:
            out.append(f"{len(bad)} keys differ in count from their {name} image, "
                       f"e.g. {table.key_text(shape, rows[bad[0]])}")
    return out
