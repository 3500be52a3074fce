"""The exact result of an enumeration, its symmetry expansion and its invariants."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import InvariantError
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

    def add(self, unit: dict) -> None:
        raw = self.raw
        for key, w in unit["raw"].items():
            raw[key] = raw.get(key, 0) + w
        for name in ("halting", "non_halting", "undecided", "halting_nodes", "steps"):
            setattr(self, name, getattr(self, name) + unit[name])
        self.hist_steps = _add_lists(self.hist_steps, unit["hist_steps"])
        self.hist_len = _add_lists(self.hist_len, unit["hist_len"])
        self.longest_run = max(self.longest_run, unit["longest_run"])
        self.most_nonblank = max(self.most_nonblank, unit["most_nonblank"])


def _add_lists(a: list, b: list) -> list:
    if len(a) < len(b):
        a, b = b, a
    out = list(a)
    for i, v in enumerate(b):
        out[i] += v
    return out


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


def _expand_2d(raw: dict, m: int) -> dict:
    """flag, rows, cols, cells -> {image bytes (with its shape): count}, blank swaps included."""
    by_class: dict = {}
    for key, w in raw.items():
        rows, cols = key[1] | key[2] << 8, key[3] | key[4] << 8
        by_class.setdefault((key[0], rows, cols), []).append((key[5:], w))
    flat: dict = {}
    perms = blank_perms(m)
    for (cls, rows, cols), items in by_class.items():
        grids = np.frombuffer(b"".join(k for k, _ in items), dtype=np.uint8).reshape(len(items), rows, cols)
        weights = [w for _, w in items]
        for img in dihedral_images(grids, cls):
            shape = img.shape[1:]
            for perm in perms:
                keys = np.ascontiguousarray(perm[img]).reshape(len(items), -1)
                for k, w in zip(map(bytes, keys), weights):
                    slot = (shape, k)
                    flat[slot] = flat.get(slot, 0) + w
    return flat


def blank_swaps(m: int) -> list[bytes]:
    """The same transpositions as bytes.translate tables."""
    rest = bytes(range(m, 256))
    return [perm.tobytes() + rest for perm in blank_perms(m)]


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

    def __post_init__(self):
        if self.weight is None:
            self.weight = self.space.size

    @property
    def blanks(self) -> int:
        return self.space.symbols

    @property
    def total_count(self) -> int:
        return sum(sum(g.values()) for g in self.groups.values())

    def count(self, symbols, shape=None) -> int:
        key = bytes(symbols)
        return self.groups.get(shape or (len(key),), {}).get(key, 0)

    def distinct(self) -> int:
        return sum(len(g) for g in self.groups.values())

    @property
    def images(self) -> int:
        """Keys each halting sample adds: its symmetry images times the blanks."""
        return (2 if self.space.dims == 1 else 8) * self.space.symbols

    @classmethod
    def from_sample(cls, space: Space, cap: int, part: Partial, samples: int, seed: int, **extra) -> "Tally":
        """Every image of a uniform sample is a uniform sample: each halting run adds all its
        images. Keeps the first and second moments of the per-sample image counts, from which
        the reader derives standard errors."""
        sum1: dict = {}
        sum2: dict = {}
        perms = blank_perms(space.symbols)
        for key, n in part.raw.items():
            if space.dims == 1:
                out = np.frombuffer(key[1:], dtype=np.uint8)
                shapes_imgs = [((len(out),), img) for img in (out, out[::-1])]
            else:
                rows, cols = key[1] | key[2] << 8, key[3] | key[4] << 8
                grid = np.frombuffer(key[5:], dtype=np.uint8).reshape(1, rows, cols)
                shapes_imgs = [(img.shape[1:], img[0]) for img in dihedral_images(grid, 2)]
            seen: dict = {}
            for shape, img in shapes_imgs:
                for perm in perms:
                    k = (shape, np.ascontiguousarray(perm[img]).tobytes())
                    seen[k] = seen.get(k, 0) + 1
            for k, x in seen.items():
                sum1[k] = sum1.get(k, 0) + n * x
                sum2[k] = sum2.get(k, 0) + n * x * x
        groups: dict = {}
        moments: dict = {}
        for shape, k in sorted(sum1):
            groups.setdefault(shape, {})[k] = sum1[(shape, k)]
            moments.setdefault(shape, {})[k] = sum2[(shape, k)]
        tally = cls(space=space, cap=cap, groups=groups, halting=part.halting, non_halting=part.non_halting,
                    undecided=part.undecided, halting_nodes=0, steps_hist=_trim(part.hist_steps),
                    length_hist=_trim(part.hist_len), longest_run=part.longest_run,
                    most_nonblank=part.most_nonblank, steps=part.steps, mode="sampled", samples=samples,
                    seed=seed, moments=moments, weight=samples, covered=None, **extra)
        tally.check()
        return tally

    @classmethod
    def from_partial(cls, space: Space, cap: int, part: Partial, **extra) -> "Tally":
        """Expand mirror images and blank relabellings, then check every invariant."""
        if space.dims == 1:
            swaps = blank_swaps(space.symbols)
            flat: dict = {}
            for key, w in part.raw.items():
                out = key[1:]
                images = (out, out[::-1]) if key[0] else (out,)
                for img in images:
                    for table in swaps:
                        k = ((len(img),), img.translate(table))
                        flat[k] = flat.get(k, 0) + w
        else:
            flat = _expand_2d(part.raw, space.symbols)
        groups: dict = {}
        for shape, k in sorted(flat):
            groups.setdefault(shape, {})[k] = flat[(shape, k)]
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
        tally.check()
        return tally

    def check(self) -> None:
        """Raise InvariantError unless every exactness invariant holds."""
        total = self.halting + self.non_halting + self.undecided
        if total != self.weight:
            raise InvariantError(
                f"halting + non-halting + undecided = {total}, not the weight of the covered "
                f"units {self.weight}; this is a bug, please report it"
            )
        if self.mode == "exhaustive" and self.covered is None and self.weight != self.space.size:
            raise InvariantError("a complete build does not cover the space size; this is a bug")
        if sum(self.steps_hist) != self.halting or sum(self.length_hist) != self.halting:
            raise InvariantError("a histogram does not sum to the halting weight; this is a bug")
        per_run = self.images if self.mode == "sampled" else self.blanks
        if self.total_count != per_run * self.halting:
            raise InvariantError(
                f"the expanded counts sum to {self.total_count}, not {per_run} x halting = "
                f"{per_run * self.halting}; the symmetry expansion is inconsistent (a bug)"
            )
        by_size: dict = {}
        for shape, group in self.groups.items():
            by_size[size_of(shape)] = by_size.get(size_of(shape), 0) + sum(group.values())
        for size, total in by_size.items():
            hist = self.length_hist[size] if size < len(self.length_hist) else 0
            if total != per_run * hist:
                raise InvariantError(f"size {size}: counts disagree with the output-size histogram (a bug)")
