"""Exact merging of tables that cover disjoint parts of one build."""
from __future__ import annotations

import numpy as np

from ..errors import MergeError
from .table import Group, Table

SAME = ("space", "cap", "mode", "formalism", "blanks")


def merge(tables: list[Table]) -> Table:
    """Sum tables of the same space, cap and mode. Exhaustive tables must cover
    disjoint units (a complete table covers all of them, so two never merge)."""
    if len(tables) < 2:
        raise MergeError("merge needs at least two tables")
    first = tables[0]
    for t in tables[1:]:
        for key in SAME:
            if t.header.get(key) != first.header.get(key):
                raise MergeError(f"{t.source} differs from {first.source} in {key} "
                                 f"({t.header.get(key)!r} vs {first.header.get(key)!r}); only one build's parts merge")
    if first.mode == "exhaustive":
        covers = [t.header.get("units", {}).get("covered") for t in tables]
        if covers.count("all") and len(tables) > 1:
            whole = tables[covers.index("all")]
            raise MergeError(f"{whole.source} already covers every work unit; merging it would count "
                             "machines twice (merge shards of one build instead)")
    raise MergeError("merging exhaustive shards needs the shard metadata of a sharded build")
