import functools
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))  # the brute force and helpers

from ctmtab.enumerator import Space, build  # noqa: E402


@functools.lru_cache(maxsize=None)
def exact_table(n: int, m: int, cap: int, split: int = 0):
    """A 1D exhaustive tally, cached across tests."""
    return build(Space(1, n, m), cap, split_depth=split, budget_hours=None)


@functools.lru_cache(maxsize=None)
def brute_force(dims: int, n: int, m: int, cap: int):
    """The independent brute force of a whole space (tests/bruteforce.py), once per session."""
    from bruteforce import brute_force_1d, brute_force_2d

    return (brute_force_1d if dims == 1 else brute_force_2d)(n, m, cap)
