"""The exact result of an enumeration, its symmetry expansion and its invariants."""
from __future__ import annotations

import functools
import itertools
import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import InvariantError, MergeError, TooLargeError
from .bounds import bound_reached
from .deciders import DECIDERS, STEP_BOUND
from .space import Space


@dataclass
class Partial:
    """Sum of work-unit results before symmetry expansion. Merging is exact
    integer addition, so any split of the tree gives the same sum."""

    raw: dict = field(default_factory=dict)  # flag byte + symbols -> weight on blank 0
    halting: int = 0
    non_halting: int = 0
    undecided: int = 0
    hist_steps: list = field(default_factory=list)
    hist_len: list = field(default_factory=list)
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
        _add_into(self.raw, unit["raw"])
        for name in ("halting", "non_halting", "undecided", "halting_nodes", "steps"):
            setattr(self, name, getattr(self, name) + unit[name])
        self.undecided_nodes += unit.get("undecided_nodes", 0)
        _add_lists(self.proven, unit.get("proven", []))
        if self.proven_nodes is not None:  # a spool record from before node counts leaves them unknown
            self.proven_nodes = _add_lists(self.proven_nodes, unit["proven_nodes"]) if "proven_nodes" in unit else None
        _add_into(self.undecided_by_size, unit.get("undecided_by_size", {}))
        _add_into(self.cut, unit.get("cut", {}))
        if unit.get("holdouts"):
            self.holdouts.append(unit["holdouts"])
        _add_into(self.late, unit.get("late", {}))
        self.late_halting += unit.get("late_halting", 0)
        self.late_proven += unit.get("late_proven", 0)
        _add_lists(self.late_nodes, unit.get("late_nodes", []))
        self.late_steps += unit.get("late_steps", 0)
        _add_lists(self.hist_steps, unit["hist_steps"])
        _add_lists(self.hist_len, unit["hist_len"])
        self.longest_run = max(self.longest_run, unit["longest_run"])
        self.most_nonblank = max(self.most_nonblank, unit["most_nonblank"])


def _add_into(total: dict, more: dict) -> dict:
    """Add the weights of `more` into `total`, key by key."""
    for k, w in more.items():
        total[k] = total.get(k, 0) + w
    return total


def _add_lists(a: list, b: list) -> list:
    """Add b into a in place, entry by entry, a growing as needed: O(len(b)), so that a run of
    millions of steps in one unit costs its own histogram once, not once per unit."""
    if len(a) < len(b):
        a.extend([0] * (len(b) - len(a)))
    for i, v in enumerate(b):
        if v:
            a[i] += v
    return a


def _trim(hist: list) -> list:
    end = len(hist)
    while end and hist[end - 1] == 0:
        end -= 1
    return hist[:end]


def size_of(shape: tuple) -> int:
    """The output-size histogram's index: the length in 1D, the longer side in 2D."""
    return max(shape)


def dihedral_images(grids: np.ndarray, cls: int) -> list[np.ndarray]:
    """Symmetry images of a stack of 2D outputs (K x rows x cols) for class cls:
    0 none (the first run halted at once), 1 the 4 rotations, 2 all 8 with the flip."""
    if cls == 0:
        return [grids]
    rots = [np.rot90(grids, k, axes=(1, 2)) for k in range(4)]
    if cls == 1:
        return rots
    flipped = grids[:, ::-1, :]
    return rots + [np.rot90(flipped, k, axes=(1, 2)) for k in range(4)]


def blank_perms(m: int) -> list[np.ndarray]:
    """The transpositions (0 b), b = 0..m-1, as symbol maps (b = 0 is the identity)."""
    perms = []
    for b in range(m):
        perm = np.arange(m, dtype=np.uint8)
        perm[0], perm[b] = b, 0
        perms.append(perm)
    return perms


def split_flag(flag: int) -> tuple[int, int]:
    """A raw key's flag byte: (symmetry class, non-blank symbols in use). The second is 0 unless
    the search wrote the non-blank symbols in first-use order (CTM_SEARCH_RELABEL)."""
    return flag & 3, flag >> 2


@functools.lru_cache(maxsize=None)
def symbol_maps(m: int, used: int) -> tuple:
    """The symbol maps that expand one raw output whose non-blank symbols are 1..used in
    first-use order: every injection of them into 1..m-1 (the others never occur), then every
    blank swap; as uint8 lookup arrays. (m-1)!/(m-1-used)! injections share the weight."""
    maps = []
    for inj in itertools.permutations(range(1, m), used):
        first = np.arange(m, dtype=np.uint8)
        first[1:used + 1] = inj
        for swap in blank_perms(m):
            maps.append(swap[first])
    return tuple(maps), math.perm(m - 1, used)


def _share(weight: int, images: int, used: int) -> int:
    """A raw weight split equally over its relabellings; it must divide (a bug otherwise)."""
    share, rest = divmod(weight, images)
    if rest:
        raise InvariantError(f"a raw weight {weight} with {used} symbols in use does not split over its "
                             f"{images} relabellings; this is a bug, please report it")
    return share


def expand_raw(space: Space, raw: dict, max_size: int | None = None, dropped: dict | None = None) -> dict:
    """Exhaustive raw outputs (flag byte + symbols -> weight on blank 0) -> shape -> {key: count}
    over every run: mirror (1D) or dihedral (2D) images of the output's class, times its symbol
    maps. Vectorised: one sort per output shape; sorted by shape, then key. One shape's images
    exist at a time (they come from raw outputs of that shape or, in 2D, its transpose), so the
    memory peak is the largest shape's, not the whole table's. With max_size, a shape whose
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
        if max_size is not None and size_of(shape) > max_size:
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
        _add_into(by_shape, shares)
    for shape, w in by_shape.items():
        old = dropped.get(shape)
        if old is None:
            dropped[shape] = (w, None, w)
        else:  # a shape also cut from expanded keys: the sum is exact, the key count is not known
            dropped[shape] = (old[0] + w, None, old[2] + w)


FULL_RELABELLING_MAX = 5  # sampled outputs take all m! symbol permutations up to m = 5 (120)


def relabelling(m: int) -> str:
    """Which symbol maps a sampled output takes (see sample_perms), as the header names it."""
    return "all" if m <= FULL_RELABELLING_MAX else "blank-swaps"


def sample_perms(m: int) -> list[np.ndarray]:
    """The symbol maps each sampled output is expanded by. Relabelling the non-blank symbols maps
    the space onto itself and blank-0 runs onto blank-0 runs, and the transpositions (0 b) are the
    blank symmetry, so every permutation of the m symbols leaves D unchanged. All m! of them up to
    m = 5: a group, so the sampled table is exactly closed under each. Beyond, the m
    transpositions only (the table is then closed under them in expectation, not exactly)."""
    if relabelling(m) == "all":
        return [np.array(p, dtype=np.uint8) for p in itertools.permutations(range(m))]
    return blank_perms(m)


def images_per_sample(space: Space) -> int:
    """Keys each halting sample adds: mirror (1D) or dihedral (2D) images times symbol maps."""
    return (2 if space.dims == 1 else 8) * len(sample_perms(space.symbols))


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


def sample_errors(s1, s2, samples: int, images: int, halting: int):
    """Standard error of each probability estimate p = S1 / (k H) of a sampled table (delta
    method for a ratio of two means over the N samples; Y = k for a halting sample, else 0):
    Var(p) ~ E[(X - p Y)^2] / (N E[Y]^2). Works on scalars and numpy arrays."""
    s1 = np.asarray(s1, dtype=np.float64)
    s2 = np.asarray(s2, dtype=np.float64)
    k, h, n = float(images), float(halting), float(samples)
    p = s1 / (k * h)
    var = (s2 - 2 * p * k * s1 + p * p * k * k * h) / n
    return np.sqrt(np.maximum(var, 0.0) / n) / (k * h / n)


def relative_sample_errors(s1, s2, samples: int, images: int, halting: int):
    """sample_errors divided by the estimates p = S1 / (k H)."""
    s1 = np.asarray(s1, dtype=np.float64)
    return sample_errors(s1, s2, samples, images, halting) / (s1 / (float(images) * halting))


@dataclass
class Tally:
    """Exact counts of one exhaustive build.

    groups maps a shape, (length,) in 1D, to {output symbols: count}, where a
    count is the number of (machine, blank) runs with that output. The totals
    count machines and hold for every blank alike, by the blank symmetry."""

    space: Space
    cap: int
    groups: dict = field(repr=False)
    halting: int
    non_halting: int
    undecided: int
    halting_nodes: int
    steps_hist: list
    length_hist: list
    longest_run: int
    most_nonblank: int
    steps: int
    deciders: tuple = ()
    units: int = 1               # work units of the plan, the top included
    covered: list | None = None  # unit indices of a shard; None = all
    weight: int | None = None    # machines the covered units stand for; None = the space size
    plan_ident: str = ""
    depth: int = 0
    shard: tuple | None = None
    seconds: float = 0.0         # wall time of the build
    resumed: int = 0             # units taken from the spool instead of computed
    mode: str = "exhaustive"     # or "sampled": totals and counts then count samples
    samples: int = 0
    seed: int = 0
    moments: dict | None = None  # sampled: shape -> {key: sum over samples of (images equal to key)^2}
    streams: list | None = None  # sampled: (seed, size) of every stream the samples came from
    until: dict | None = None    # sampled with a target: the target and what stopped the build
    proofs: dict | None = None   # decider name -> non-halting weight it proved; None: not recorded
    proof_nodes: dict | None = None  # decider name -> tree nodes it closed; None: not recorded
    undecided_by_size: dict | None = None  # (rows, cols) an undecided run had reached -> weight
    undecided_nodes: int = 0     # tree nodes left undecided
    step_bound: tuple | None = None  # (S, source) when cap >= a proven busy-beaver bound
    holdouts: list = field(default_factory=list, repr=False)  # packed undecided nodes, if kept
    relabelled: bool = False     # exhaustive, m >= 3: the search wrote symbols in first-use order
    max_size: int | None = None  # keys kept up to this size (longer side); None: every key
    dropped: dict = field(default_factory=dict)  # cut shapes -> (weight, keys, largest count)
    settle: dict | None = None   # the run-on past the cap: size, halting, proven, nodes, steps
    late_groups: dict = field(default_factory=dict, repr=False)  # shape -> {key: count halting past the cap}

    def __post_init__(self):
        if self.weight is None:
            self.weight = self.space.size

    @property
    def blanks(self) -> int:
        return self.space.symbols

    @property
    def total_count(self) -> int:
        """Every count, the cut ones included: probabilities stay normalised by the true total."""
        return sum(sum(g.values()) for g in self.groups.values()) + sum(w for w, _, _ in self.dropped.values())

    def count(self, symbols, shape=None) -> int:
        key = bytes(symbols)
        return self.groups.get(shape or (len(key),), {}).get(key, 0)

    def distinct(self) -> int:
        return sum(len(g) for g in self.groups.values())

    @property
    def images(self) -> int:
        """Keys each halting sample adds (sampled tallies)."""
        return images_per_sample(self.space)

    @classmethod
    def from_sample(cls, space: Space, cap: int, part: Partial, samples: int, seed: int, **extra) -> "Tally":
        """Every image of a uniform sample is a uniform sample: each halting run adds all its
        images. Keeps the first and second moments of the per-sample image counts, from which
        the reader derives standard errors."""
        groups: dict = {}
        moments: dict = {}
        for shape, (keys, s1, s2) in sorted(sample_sums(space, part.raw).items()):
            groups[shape] = dict(zip(keys, s1))
            moments[shape] = dict(zip(keys, s2))
        extra.setdefault("streams", [(seed, samples)])
        tally = cls(space=space, cap=cap, groups=groups, halting=part.halting, non_halting=part.non_halting,
                    undecided=part.undecided, halting_nodes=0, steps_hist=_trim(part.hist_steps),
                    length_hist=_trim(part.hist_len), longest_run=part.longest_run,
                    most_nonblank=part.most_nonblank, steps=part.steps, mode="sampled", samples=samples,
                    seed=seed, moments=moments, weight=samples, covered=None, **extra)
        tally.record_proofs(part)
        tally.check()
        return tally

    @classmethod
    def from_partial(cls, space: Space, cap: int, part: Partial, max_size: int | None = None, **extra) -> "Tally":
        """Expand mirror images and symbol relabellings, then check every invariant. max_size:
        keep keys up to that size only, with an exact record of the rest (Tally.dropped)."""
        dropped: dict = {}
        groups = expand_raw(space, part.raw, max_size, dropped)
        if part.cut:
            if max_size is None:
                raise InvariantError("units cut by size reached an uncut build (a bug)")
            cut_weights(space, part.cut, dropped)
        extra.update(max_size=max_size, dropped=dropped)
        if extra.get("settle") is not None:
            extra["settle"] = dict(extra["settle"], halting=part.late_halting, proven=part.late_proven,
                                   nodes=_add_lists([0, 0, 0], part.late_nodes), steps=part.late_steps)
            extra["late_groups"] = expand_raw(space, part.late)
        tally = cls(
            space=space,
            cap=cap,
            groups=groups,
            halting=part.halting,
            non_halting=part.non_halting,
            undecided=part.undecided,
            halting_nodes=part.halting_nodes,
            steps_hist=_trim(part.hist_steps),
            length_hist=_trim(part.hist_len),
            longest_run=part.longest_run,
            most_nonblank=part.most_nonblank,
            steps=part.steps,
            **extra,
        )
        tally.record_proofs(part)
        tally.check()
        return tally

    def record_proofs(self, part: Partial) -> None:
        """Which decider proved how much, the undecided weight by the size reached, and, at a
        cap at or past a proven busy-beaver bound, every undecided node proven by the bound."""
        self.proofs = {name: (part.proven[i] if i < len(part.proven) else 0) for i, name in enumerate(DECIDERS)}
        self.undecided_by_size = dict(sorted(part.undecided_by_size.items()))
        self.undecided_nodes = part.undecided_nodes
        if part.proven_nodes is not None:
            self.proof_nodes = {name: (part.proven_nodes[i] if i < len(part.proven_nodes) else 0)
                                for i, name in enumerate(DECIDERS)}
        bound = bound_reached(self.space, self.cap)
        if bound is not None and self.mode == "exhaustive":
            self.step_bound = bound
            self.proofs[STEP_BOUND] = self.undecided
            if self.proof_nodes is not None:
                self.proof_nodes[STEP_BOUND] = self.undecided_nodes
            self.non_halting += self.undecided
            self.undecided = 0
            self.undecided_by_size = {}
            self.undecided_nodes = 0

    def check(self) -> None:
        """Raise InvariantError unless every exactness invariant holds (a build's own)."""
        for fault in self.faults():
            raise InvariantError(f"{fault}; this is a bug, please report it")

    def check_input(self, name: str) -> None:
        """The same invariants for a tally read from a file, before it is combined with others: a
        file can break them, so the error is bad input naming the file, never a bug."""
        for fault in self.faults():
            raise MergeError(f"{name}: {fault}; the file is corrupt or was edited (ctmtab verify lists its problems)")

    def faults(self):
        """Every exactness invariant the tally breaks, one line each, the first first."""
        total = self.halting + self.non_halting + self.undecided
        if total != self.weight:
            yield f"halting + non-halting + undecided = {total}, not the weight of the covered units {self.weight}"
        if self.mode == "sampled" and self.weight != self.samples:
            yield f"the samples weigh {self.weight}, not the sample size {self.samples}"
        if self.mode == "exhaustive" and self.covered is None and self.weight != self.space.size:
            yield f"a complete build weighs {self.weight}, not the space size {self.space.size}"
        if self.proofs is not None and sum(self.proofs.values()) != self.non_halting:
            yield "the proofs by decider do not sum to the non-halting weight"
        settled = 0 if self.settle is None else self.settle["halting"] + self.settle["proven"]
        if self.undecided_by_size is not None and sum(self.undecided_by_size.values()) + settled != self.undecided:
            yield "the undecided weight by size (and what the run-on settled) does not sum to the undecided weight"
        if self.settle is not None:
            yield from self._settle_faults()
        if sum(self.steps_hist) != self.halting or sum(self.length_hist) != self.halting:
            yield "a histogram does not sum to the halting weight"
        per_run = self.images if self.mode == "sampled" else self.blanks
        if self.total_count != per_run * self.halting:
            yield (f"the expanded counts sum to {self.total_count}, not {per_run} x halting = "
                   f"{per_run * self.halting}; the symmetry expansion is inconsistent")
        by_size: dict = {}
        for shape, group in self.groups.items():
            by_size[size_of(shape)] = by_size.get(size_of(shape), 0) + sum(group.values())
        for shape, (weight, _, _) in self.dropped.items():
            if self.max_size is None or size_of(shape) <= self.max_size or shape in self.groups:
                yield f"shape {shape} is recorded as cut but the cut keeps it"
            by_size[size_of(shape)] = by_size.get(size_of(shape), 0) + weight
        for size, total in by_size.items():
            hist = self.length_hist[size] if size < len(self.length_hist) else 0
            if total != per_run * hist:
                yield f"size {size}: counts disagree with the output-size histogram"


    def _settle_faults(self):
        """The run-on's own invariants: its halts expand to blanks x its halting weight, none is
        larger than the settle size, and every node it left undecided outgrew that size."""
        k = self.settle["size"]
        if sum(sum(g.values()) for g in self.late_groups.values()) != self.blanks * self.settle["halting"]:
            yield "the halts past the cap do not expand to blanks x their weight"
        if any(size_of(s) > k for s in self.late_groups):
            yield f"a halt past the cap is larger than the settle size {k}"
        if any(max(r, c) <= k for r, c in (self.undecided_by_size or {})):
            yield f"an undecided node within the settle size {k} was left"


def combine_samples(tallies: list, where: list | None = None) -> Tally:
    """One sampled tally from sampled tallies of one space, cap and deciders whose streams are
    disjoint: counts, moments, totals and histograms add exactly. Streams that share a seed
    would count the same machines twice, so they are refused."""
    where = where or [f"table {i + 1}" for i in range(len(tallies))]
    first = tallies[0]
    owner: dict = {}
    for t, name in zip(tallies, where):
        if t.mode != "sampled":
            raise MergeError(f"{name} is an exhaustive table; only sampled tables combine with sampled ones")
        t.check_input(name)
        if (t.space, t.cap, set(t.deciders)) != (first.space, first.cap, set(first.deciders)):
            raise MergeError(f"{name} samples {t.space.label} at cap {t.cap} with deciders {list(t.deciders)}, "
                             f"not {first.space.label} at cap {first.cap} with {list(first.deciders)}; "
                             "only samples of one space, cap and decider set combine")
        for seed, _ in t.streams:
            if seed in owner:
                also = "itself" if owner[seed] == name else owner[seed]
                raise MergeError(f"{name} and {also} both hold samples of seed {seed}, which would count the "
                                 "same machines twice; draw the extra samples under a new --seed")
            owner[seed] = name
    names = [name if where.count(name) == 1 else f"{name} (part {i + 1})" for i, name in enumerate(where)]
    refuse_overlap(first.space, [(name, seed, size) for t, name in zip(tallies, names) for seed, size in t.streams])
    streams = sorted(s for t in tallies for s in t.streams)
    out = Tally(
        **summed(tallies), moments=add_groups(t.moments for t in tallies), deciders=tuple(first.deciders),
        units=sum(t.units for t in tallies), mode="sampled", samples=sum(n for _, n in streams),
        seed=streams[0][0], streams=streams, weight=sum(n for _, n in streams),
        seconds=sum(t.seconds for t in tallies),
    )
    out.check()
    return out


def refuse_overlap(space: Space, streams, fix: str = "draw the extra samples under another --seed") -> None:
    """MergeError when two work units of these (label, seed, size) streams draw from one stretch
    of the generator: distinct seeds alone do not keep streams apart (enumerator/streams.py)."""
    from .driver import SAMPLE_UNIT
    from .streams import first_overlap

    try:
        found = first_overlap(streams, space.entries, SAMPLE_UNIT)
    except TooLargeError as exc:
        raise MergeError(f"{', '.join(dict.fromkeys(label for label, _, _ in streams))}: {exc}") from None
    if found is not None:
        (i, sa, ua), (j, sb, ub) = found
        a, b = streams[i][0], streams[j][0]
        if a == b:  # one table's own streams: no choice of seed mends it
            raise MergeError(f"{a}: unit {ua} of seed {sa} and unit {ub} of seed {sb} draw overlapping stretches "
                             "of the sampling generator, so it counts the same machines twice; the file is corrupt "
                             "or was edited, rebuild it")
        raise MergeError(f"{a} (seed {sa}, unit {ua}) and {b} (seed {sb}, unit {ub}) draw overlapping stretches of "
                         f"the sampling generator, so they would count the same machines twice; {fix}")


def add_groups(sources) -> dict:
    """The key-by-key sum of several shape -> {key: count} maps, sorted by shape and key."""
    total: dict = {}
    for source in sources:
        for shape, g in source.items():
            _add_into(total.setdefault(shape, {}), g)
    return {s: dict(sorted(total[s].items())) for s in sorted(total)}


def summed(tallies: list) -> dict:
    """The fields that add (or take the maximum) when tallies of one space and cap combine:
    counts, totals, histograms, run records. Merges of shards and of samples both use it."""
    first = tallies[0]
    return dict(
        space=first.space, cap=first.cap, groups=add_groups(t.groups for t in tallies),
        halting=sum(t.halting for t in tallies), non_halting=sum(t.non_halting for t in tallies),
        undecided=sum(t.undecided for t in tallies), halting_nodes=sum(t.halting_nodes for t in tallies),
        steps_hist=_trim(functools.reduce(_add_lists, (t.steps_hist for t in tallies), [])),  # a fresh list
        length_hist=_trim(functools.reduce(_add_lists, (t.length_hist for t in tallies), [])),
        longest_run=max(t.longest_run for t in tallies), most_nonblank=max(t.most_nonblank for t in tallies),
        steps=sum(t.steps for t in tallies), **_summed_proofs(tallies),
    )


def _summed_proofs(tallies: list) -> dict:
    """Proof records add like counts; a part without them (an older file) leaves the sum unknown."""
    if any(t.proofs is None or t.undecided_by_size is None for t in tallies):
        return dict(proofs=None, proof_nodes=None, undecided_by_size=None, undecided_nodes=0, step_bound=None)
    proofs: dict = {}
    by_size: dict = {}
    nodes: dict | None = {} if all(t.proof_nodes is not None for t in tallies) else None
    for t in tallies:
        _add_into(proofs, t.proofs)
        _add_into(by_size, t.undecided_by_size)
        if nodes is not None:
            _add_into(nodes, t.proof_nodes)
    return dict(proofs=proofs, proof_nodes=nodes, undecided_by_size=dict(sorted(by_size.items())),
                undecided_nodes=sum(t.undecided_nodes for t in tallies), step_bound=tallies[0].step_bound,
                **_summed_settle(tallies))


def _summed_settle(tallies: list) -> dict:
    """The run-ons of shards add like their counts; shards settled to different sizes (or some
    not at all) would leave keys exact in one part and open in another, so they are refused."""
    sizes = {None if t.settle is None else t.settle["size"] for t in tallies}
    if len(sizes) > 1:
        raise MergeError("the parts were settled to different sizes (" + ", ".join(
            "none" if s is None else str(s) for s in sorted(sizes, key=lambda s: s or 0))
            + "); build every shard with one --settle-size")
    if sizes == {None}:
        return dict(settle=None, late_groups={})
    settle = {"size": sizes.pop(), "halting": 0, "proven": 0, "nodes": [0, 0, 0], "steps": 0}
    for t in tallies:
        for name in ("halting", "proven", "steps"):
            settle[name] += t.settle[name]
        settle["nodes"] = [a + b for a, b in zip(settle["nodes"], t.settle["nodes"])]
    return dict(settle=settle, late_groups=add_groups(t.late_groups for t in tallies))
