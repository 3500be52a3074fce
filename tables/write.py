"""A table's body as the format stores it, and the atomic write of a file."""
from __future__ import annotations

import numpy as np

from . import format as fmt
from .arrays import encode_counts, encode_hist
from .group import Group


def body(t) -> dict:
    out = {
        "groups": [group_spec(t.groups[shape]) for shape in t.shapes],
        "hist_steps": encode_hist(t.steps_hist),
        "hist_len": encode_hist(t.length_hist),
    }
    if t.late:  # since 1.6: halts past the cap (certificate "settle"), keyed as the groups
        out["late"] = [group_spec(t.late[shape]) for shape in sorted(t.late)]
    return out


def group_spec(g: Group) -> dict:
    if g.codes is not None:
        keys = {"kind": "code64", "data": g.codes.astype("<u8").tobytes()}
    else:
        keys = {"kind": "symbols", "data": np.ascontiguousarray(g.symbols).tobytes()}
    spec = {"shape": list(g.shape), "n": len(g), "keys": keys, "counts": encode_counts([int(c) for c in g.counts])}
    if g.moments is not None:
        spec["moments"] = encode_counts([int(c) for c in g.moments])
    return spec


def table_bytes(t) -> bytes:
    header = {k: v for k, v in t.header.items() if not k.startswith("_") and k != "body"}
    return fmt.encode(header, body(t))


def save(t, path) -> None:
    fmt.write_atomic(path, table_bytes(t))
