import functools
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))  # the brute force and helpers

from ctmtab.enumerator import Space, build  # noqa: E402


@functools.lru_cache(maxsize=None)
def exact_table(n: int, m: int, cap: int, split: int = 0):
    """A 1D exhaustive tally, cached across tests."""
    return build(Space(1, n, m), cap, split_depth=split, budget_hours=None)
