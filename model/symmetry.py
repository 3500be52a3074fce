"""The symmetries of a machine space that every table shares: mirror and dihedral images of an
output, the blank swap and the relabelling of symbols. Each maps the space onto itself, so the
distribution D is the same on both sides of it (docs/DESIGN.md)."""
from __future__ import annotations

import functools
import itertools
import math

import numpy as np


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


def images_per_sample(space) -> int:
    """Keys each halting sample adds: mirror (1D) or dihedral (2D) images times symbol maps."""
    return (2 if space.dims == 1 else 8) * len(sample_perms(space.symbols))


def images_for(dims: int, m: int, relabelling: str) -> int:
    """images_per_sample of a table that names its relabelling ("all", or "blank-swaps" as every
    format 1.1 file with m >= 3 expanded): the reader's check of a header."""
    return (2 if dims == 1 else 8) * (math.factorial(m) if relabelling == "all" else m)

