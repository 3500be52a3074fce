"""Work units: a deterministic cut of the search tree, and the exact
(de)serialisation of one unit's result for the spool."""
from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass

import msgpack

from ..errors import SpaceError
from .deciders import SEARCH_RELABEL
from .native import core as _core
from ..model.space import Space, default_depth  # noqa: F401  (its callers)

# Index 0 is the top of the tree (everything above the cut); 1..N are subtrees.
TOP = 0


@dataclass(frozen=True)
class Unit:
    index: int
    prefix: tuple
    weight: int  # machines the subtree stands for

    @property
    def uid(self) -> str:
        return "top" if self.index == TOP else ".".join(map(str, self.prefix))


@dataclass
class Plan:
    space: Space
    cap: int
    deciders: tuple
    depth: int
    top: dict
    units: list  # Unit 1..N
    bits: int = 0  # the core's decider and search-option bits

    @property
    def count(self) -> int:
        """Units including the top."""
        return len(self.units) + 1

    @property
    def ident(self) -> str:
        """Fingerprint of the build: space, cap, deciders and the unit list."""
        what = [self.space.to_dict(), self.cap, sorted(self.deciders), self.depth]
        if self.bits & SEARCH_RELABEL:  # other unit prefixes; binary plans keep their old idents
            what.append("relabel")
        h = hashlib.sha256(json.dumps(what, sort_keys=True).encode())
        for u in self.units:
            h.update(repr(u.prefix).encode())
        return h.hexdigest()[:24]

    def unit(self, index: int) -> Unit:
        if index == TOP:
            return Unit(TOP, (), self.space.size - sum(u.weight for u in self.units))
        return self.units[index - 1]

    def select(self, shard: tuple | None) -> list[int]:
        """Unit indices of shard (i, N): those congruent to i mod N; all without a shard."""
        if shard is None:
            return list(range(self.count))
        i, n = shard
        return [k for k in range(self.count) if k % n == i]


def make_plan(space: Space, cap: int, depth: int, bits: int, deciders: tuple) -> Plan:
    if depth < 0 or depth >= max(1, space.entries):
        raise SpaceError(f"a split depth of {depth} does not fit {space.label}; use 0 to {max(0, space.entries - 1)}")
    top = _core.run_unit(space.dims, space.states, space.symbols, cap, bits, (), depth if depth > 0 else -1)
    cuts = top.pop("cuts")
    units = [Unit(i + 1, tuple(p), w) for i, (p, w) in enumerate(cuts)]
    return Plan(space, cap, tuple(deciders), depth, top, units, bits)


def unit_weight_ok(result: dict, weight: int) -> bool:
    return result["halting"] + result["non_halting"] + result["undecided"] == weight


def unit_settle_ok(result: dict) -> bool:
    """The run-on splits the undecided weight: halted past the cap, proven, or still undecided."""
    left = sum(result.get("undecided_by_size", {}).values())
    return result.get("late_halting", 0) + result.get("late_proven", 0) + left == result["undecided"]


# ---- spool records: exact, no pickle. Integers too wide for msgpack travel as decimal strings.

def _enc(v: int):
    return v if -(1 << 63) <= v < (1 << 63) else str(v)


def _dec(v) -> int:
    if isinstance(v, bool) or not isinstance(v, (int, str)):
        raise ValueError("not an integer")
    return int(v)


INT_FIELDS = ("halting", "non_halting", "undecided", "halting_nodes", "longest_run", "most_nonblank", "steps",
              "undecided_nodes")


def dump_result(result: dict) -> bytes:
    """Every field of a result: integers, lists of integers, the raw map of bytes to integers,
    the undecided weight by size and the holdout records (a map, so that fields the core gains
    later travel too)."""
    rec = {}
    for name, v in result.items():
        if name == "undecided_by_size":
            rec[name] = {"sizes": [[r, c, _enc(w)] for (r, c), w in sorted(v.items())]}
        elif isinstance(v, bytes):
            rec[name] = v
        elif isinstance(v, dict):
            rec[name] = {"pairs": [[k, _enc(x)] for k, x in sorted(v.items())]}
        elif isinstance(v, (list, tuple)):
            rec[name] = [_enc(x) for x in v]
        else:
            rec[name] = _enc(v)
    return msgpack.packb(rec, use_bin_type=True)


def load_result(data: bytes) -> dict:
    rec = msgpack.unpackb(data, raw=False, strict_map_key=True)
    out = {}
    for name, v in rec.items():
        if name == "undecided_by_size":
            out[name] = {(_dec(r), _dec(c)): _dec(w) for r, c, w in v["sizes"]}
        elif isinstance(v, bytes):
            out[name] = v
        elif isinstance(v, dict):
            out[name] = {bytes(k): _dec(x) for k, x in v["pairs"]}
        elif isinstance(v, list):
            out[name] = [_dec(x) for x in v]
        else:
            out[name] = _dec(v)
    for name in INT_FIELDS + ("raw", "hist_steps", "hist_len", "proven", "undecided_by_size"):
        if name not in out:  # a record missing one is damaged
            raise ValueError(f"no {name}")
    return out
