"""From the core's work-unit results to a Tally: exact sums of units (Partial), then the
symmetry expansion of the raw outputs into every key they stand for."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import InvariantError
from ..model.space import Space
from ..model.symmetry import dihedral_images, images_per_sample, sample_perms, size_of, split_flag, symbol_maps
from ..model.tally import Tally, add_into, add_lists, trim_hist


@dataclass
class Partial:
    """Sum of work-unit results before symmetry expansion. Merging is exact
    integer addition, so any split of the tree gives the same sum."""

    raw: dict = field(default_factory=dict)  # flag byte + symbols -> weight on blank 0
    halting: int = 0
    non_halting: int = 0
    undecided: int = 0
    steps_hist: list = field(default_factory=list)  # the units' "hist_steps"
    length_hist: list = field(default_factory=list)  # the units' "hist_len"
    halting_nodes: int = 0
    longest_run: int = 0
    most_nonblank: int = 0
    steps: int = 0
    undecided_nodes: int = 0
    proven: list = field(default_factory=list)  # non-halting weight by decider, in DECIDERS order
    proven_nodes: list | None = field(default_factory=list)  # tree nodes by decider; None: a unit lacked them
    cut: dict = field(default_factory=dict)  # keep_size: class byte + uint32 rows, cols -> raw weight
    undecided_by_size: dict = field(default_factory=dict)  # (rows, cols) at the cap -> weight
    holdouts: list = field(default_factory=list)  # per unit: packed undecided nodes (core records)
    # the run-on past the cap (settle_size): halting outputs keyed as raw, the weight that halted,
    # the weight proven (a repeated configuration or a closed table), tree nodes and steps
    late: dict = field(default_factory=dict)
    late_halting: int = 0
    late_proven: int = 0
    late_nodes: list = field(default_factory=list)  # halting leaves, proven, outgrown
    late_steps: int = 0

    def add(self, unit: dict) -> None:
        add_into(self.raw, unit["raw"])
        for name in ("halting", "non_halting", "undecided", "halting_nodes", "steps"):
            setattr(self, name, getattr(self, name) + unit[name])
        self.undecided_nodes += unit.get("undecided_nodes", 0)
        add_lists(self.proven, unit.get("proven", []))
        if self.proven_nodes is not None:  # a spool record from before node counts leaves them unknown
            self.proven_nodes = add_lists(self.proven_nodes, unit["proven_nodes"]) if "proven_nodes" in unit else None
        add_into(self.undecided_by_size, unit.get("undecided_by_size", {}))
        add_into(self.cut, unit.get("cut", {}))
        if unit.get("holdouts"):
            self.holdouts.append(unit["holdouts"])
        add_into(self.late, unit.get("late", {}))
        self.late_halting += unit.get("late_halting", 0)
        self.late_proven += unit.get("late_proven", 0)
        add_lists(self.late_nodes, unit.get("late_nodes", []))
        self.late_steps += unit.get("late_steps", 0)
        add_lists(self.steps_hist, unit["hist_steps"])
        add_lists(self.length_hist, unit["hist_len"])
        self.longest_run = max(self.longest_run, unit["longest_run"])
        self.most_nonblank = max(self.most_nonblank, unit["most_nonblank"])


def _share(weight: int, images: int, used: int) -> int:
    """A raw weight split equally over its relabellings; it must divide (a bug otherwise)."""
    share, rest = divmod(weight, images)
    if rest:
        raise InvariantError(f"a raw weight {weight} with {used} symbols in use does not split over its "
                             f"{images} relabellings; this is a bug, please report it")
    return share


def expand_raw(space: Space, raw: dict, keep_size: int | None = None, dropped: dict | None = None) -> dict:
    """Exhaustive raw outputs (flag byte + symbols -> weight on blank 0) -> shape -> {key: count}
    over every run: mirror (1D) or dihedral (2D) images of the output's class, times its symbol
    maps. Vectorised: one sort per output shape; sorted by shape, then key. One shape's images
    exist at a time (they come from raw outputs of that shape or, in 2D, its transpose), so the
    memory peak is the largest shape's, not the whole table's. With keep_size, a shape whose
    longer side passes it keeps only its record in `dropped`: shape -> (weight, keys, largest
    count), and never becomes a dict of keys."""
    m = space.symbols
    by_kind: dict = {}
    for key, w in raw.items():
        cls, used = split_flag(key[0])
        if space.dims == 1:
            shape, cells = (len(key) - 1,), key[1:]
        else:
            shape, cells = (key[1] | key[2] << 8, key[3] | key[4] << 8), key[5:]
        bodies, ws = by_kind.setdefault((shape, cls, used), ([], []))
        bodies.append(cells)
        ws.append(w)
    # every count is at most blanks x halting <= m x the space size: int64 sums while that fits
    wide = m * space.size >= 1 << 62
    kinds: dict = {}  # raw shape -> [(cls, used, grids, shares)]
    for (shape, cls, used), (bodies, ws) in sorted(by_kind.items()):
        grids = np.frombuffer(b"".join(bodies), dtype=np.uint8).reshape(len(bodies), *shape)
        if used and int(grids.max()) > used:
            raise InvariantError(f"a raw output uses a symbol past the {used} in use; this is a bug")
        count = symbol_maps(m, used)[1]
        shares = np.array([_share(w, count, used) for w in ws], dtype=object if wide else np.int64)
        kinds.setdefault(shape, []).append((cls, used, grids, shares))
    del by_kind
    targets = sorted(set(kinds) | ({s[::-1] for s in kinds} if space.dims == 2 else set()))
    out = {}
    for shape in targets:
        rows, weights = [], []
        for source in {shape, shape[::-1]} if space.dims == 2 else {shape}:
            for cls, used, grids, shares in kinds.get(source, []):
                if space.dims == 1:
                    imgs = [grids, grids[:, ::-1]] if cls else [grids]
                else:
                    imgs = [g for g in dihedral_images(grids, cls) if tuple(g.shape[1:]) == shape]
                for img in imgs:
                    flat = img.reshape(len(img), -1)
                    for perm in symbol_maps(m, used)[0]:
                        rows.append(perm[flat])
                        weights.append(shares)
        if not rows:
            continue
        rows = np.ascontiguousarray(np.concatenate(rows))
        weights = np.concatenate(weights)
        keys, inverse = np.unique(rows.view(np.dtype((np.void, rows.shape[1]))).ravel(), return_inverse=True)
        del rows
        order = np.argsort(inverse.reshape(-1), kind="stable")
        ids = inverse.reshape(-1)[order]
        starts = np.flatnonzero(np.r_[True, ids[1:] != ids[:-1]])
        sums = np.add.reduceat(weights[order], starts)
        del order, ids, weights
        if keep_size is not None and size_of(shape) > keep_size:
            dropped[shape] = (int(sums.sum()), len(sums), int(sums.max()))
            continue
        out[shape] = dict(zip(map(bytes, keys), map(int, sums)))
    return out


def cut_weights(space: Space, cut: dict, dropped: dict) -> None:
    """Add the weight of outputs the core kept only by class and size (keep_size) into `dropped`,
    image by image: a raw weight w of class c spreads w x m x (its mirror or dihedral images) over
    its symbol maps, half of the 2D rotations turning rows x cols into cols x rows. Their keys
    were never seen, so the record holds no key count and bounds the largest count by the weight."""
    m = space.symbols
    images = {0: 1, 1: 2} if space.dims == 1 else {0: 1, 1: 4, 2: 8}
    by_shape: dict = {}
    for key, w in cut.items():
        cls, rows, cols = key[0], int.from_bytes(key[1:5], "little"), int.from_bytes(key[5:9], "little")
        n = images[cls]
        if space.dims == 1:
            shares = {(cols,): w * m * n}
        elif n == 1 or rows == cols:
            shares = {(rows, cols): w * m * n}
        else:
            shares = {(rows, cols): w * m * n // 2, (cols, rows): w * m * n // 2}
        add_into(by_shape, shares)
    for shape, w in by_shape.items():
        old = dropped.get(shape)
        if old is None:
            dropped[shape] = (w, None, w)
        else:  # a shape also cut from expanded keys: the sum is exact, the key count is not known
            dropped[shape] = (old[0] + w, None, old[2] + w)


def sample_sums(space: Space, raw: dict, size: int | None = None) -> dict:
    """Expand sampled outputs (flag byte + symbols -> samples) into every symmetry and blank
    image: shape -> (keys, S1, S2), where S1 sums X and S2 sums X^2 over the samples, X being
    how many of a sample's images equal the key. size: only outputs of that size (the images
    of an output keep its size). Vectorised: one sort per output shape."""
    m = space.symbols
    by_shape: dict = {}
    for key, n in raw.items():
        if space.dims == 1:
            shape, cells = (len(key) - 1,), key[1:]
        else:
            shape, cells = (key[1] | key[2] << 8, key[3] | key[4] << 8), key[5:]
        if size is None or size_of(shape) == size:
            bodies, ns = by_shape.setdefault(shape, ([], []))
            bodies.append(cells)
            ns.append(n)
    perms = sample_perms(m)
    images: dict = {}  # output shape -> [(rows, index of the sample's output)]
    weights, offset = [], 0
    for shape, (bodies, ns) in sorted(by_shape.items()):
        k = len(bodies)
        grids = np.frombuffer(b"".join(bodies), dtype=np.uint8).reshape(k, *shape)
        imgs = [grids, grids[:, ::-1]] if space.dims == 1 else dihedral_images(grids, 2)
        ids = np.arange(offset, offset + k, dtype=np.int64)
        for img in imgs:
            flat = img.reshape(k, -1)
            for perm in perms:
                images.setdefault(tuple(img.shape[1:]), []).append((perm[flat], ids))
        weights += ns
        offset += k
    # exact integers: int64 while S2 cannot overflow it, Python ints beyond
    wide = sum(weights) * images_per_sample(space) ** 2 >= 1 << 62
    n_of = np.array(weights, dtype=object if wide else np.int64)
    out = {}
    for shape, parts in images.items():
        rows = np.ascontiguousarray(np.concatenate([r for r, _ in parts]))
        ids = np.concatenate([i for _, i in parts])
        keys, key_id = np.unique(rows.view(np.dtype((np.void, rows.shape[1]))).ravel(), return_inverse=True)
        pairs, x = np.unique(key_id.reshape(-1).astype(np.int64) * offset + ids, return_counts=True)
        kid = pairs // offset
        n = n_of[pairs % offset]
        x = x.astype(object if wide else np.int64)
        starts = np.flatnonzero(np.r_[True, kid[1:] != kid[:-1]])
        s1 = np.add.reduceat(n * x, starts)
        s2 = np.add.reduceat(n * x * x, starts)
        out[shape] = ([bytes(k) for k in keys], [int(v) for v in s1], [int(v) for v in s2])
    return out



def tally_from_sample(space: Space, cap: int, part: Partial, samples: int, seed: int, **extra) -> Tally:
    """Every image of a uniform sample is a uniform sample: each halting run adds all its
    images. Keeps the first and second moments of the per-sample image counts, from which
    the reader derives standard errors."""
    groups: dict = {}
    moments: dict = {}
    for shape, (keys, s1, s2) in sorted(sample_sums(space, part.raw).items()):
        groups[shape] = dict(zip(keys, s1))
        moments[shape] = dict(zip(keys, s2))
    extra.setdefault("streams", [(seed, samples)])
    tally = Tally(space=space, cap=cap, groups=groups, halting=part.halting, non_halting=part.non_halting,
                undecided=part.undecided, halting_nodes=0, steps_hist=trim_hist(part.steps_hist),
                length_hist=trim_hist(part.length_hist), longest_run=part.longest_run,
                most_nonblank=part.most_nonblank, steps=part.steps, mode="sampled", samples=samples,
                seed=seed, moments=moments, weight=samples, covered=None, **extra)
    tally.record_proofs(part)
    tally.check()
    return tally


def tally_from_partial(space: Space, cap: int, part: Partial, keep_size: int | None = None, **extra) -> Tally:
    """Expand mirror images and symbol relabellings, then check every invariant. keep_size:
    keep keys up to that size only, with an exact record of the rest (Tally.dropped)."""
    dropped: dict = {}
    groups = expand_raw(space, part.raw, keep_size, dropped)
    if part.cut:
        if keep_size is None:
            raise InvariantError("units cut by size reached an uncut build (a bug)")
        cut_weights(space, part.cut, dropped)
    extra.update(keep_size=keep_size, dropped=dropped)
    if extra.get("settle") is not None:
        extra["settle"] = dict(extra["settle"], halting=part.late_halting, proven=part.late_proven,
                               nodes=add_lists([0, 0, 0], part.late_nodes), steps=part.late_steps)
        extra["late_groups"] = expand_raw(space, part.late)
    tally = Tally(
        space=space,
        cap=cap,
        groups=groups,
        halting=part.halting,
        non_halting=part.non_halting,
        undecided=part.undecided,
        halting_nodes=part.halting_nodes,
        steps_hist=trim_hist(part.steps_hist),
        length_hist=trim_hist(part.length_hist),
        longest_run=part.longest_run,
        most_nonblank=part.most_nonblank,
        steps=part.steps,
        **extra,
    )
    tally.record_proofs(part)
    tally.check()
    return tally
