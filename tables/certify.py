"""Certified bounds of an exhaustive table (format 1.3, header field `certificate`; 1.5 adds
the tree nodes each proof closed, `proof_nodes`).

A run's output is the span it visited (1D) or its bounding box (2D), and that
only grows. So an undecided run that had reached size w at the cap can never
produce a key smaller than w: the true count of a key lies in [c, c + U_k],
where U_k is the undecided weight whose size still fits the key's shape, and
the true halting total in [H, H + U]. Tables written before 1.3 fall back to
U_k = U. At a cap at or past a proven busy-beaver bound, U = 0: exact."""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..model.bounds import step_bound
from ..model.deciders import STEP_BOUND
from ..model.space import Space
from ..errors import InconsistentTableError

MAX_SIZES = 1 << 20  # size records in one header: far above any cap's spans


@dataclass
class Certificate:
    proofs: dict                  # decider name (or "step-bound") -> non-halting weight
    by_size: list                 # (rows, cols, weight) of the undecided weight at the cap
    nodes: int                    # undecided tree nodes
    step_bound: dict | None       # {"steps": S, "source": ...} when the bound was reached
    proof_nodes: dict | None = None  # decider name -> tree nodes it closed (format 1.5; else None)
    settle: dict | None = None    # the run-on past the cap (format 1.6): size, halting, proven, nodes, steps
    _reach: dict = field(default_factory=dict, repr=False)

    def reach(self, shape: tuple) -> int:
        """Undecided weight (machines on one blank) that could still produce a key of this
        shape: 1D a span <= the length; 2D a box that fits the shape, either way round (the
        node's weight holds its rotated images too)."""
        shape = tuple(shape)
        if shape not in self._reach:
            if len(shape) == 1:
                self._reach[shape] = sum(w for r, c, w in self.by_size if c <= shape[0])
            else:
                kr, kc = shape
                self._reach[shape] = sum(w for r, c, w in self.by_size
                                         if (r <= kr and c <= kc) or (c <= kr and r <= kc))
        return self._reach[shape]


def header_field(tally) -> dict | None:
    """The header's `certificate` for a tally that recorded its proofs."""
    if tally.proofs is None or tally.undecided_by_size is None:
        return None
    out = {
        "proofs": {name: str(w) for name, w in tally.proofs.items()},
        "undecided_by_size": [[r, c, str(w)] for (r, c), w in sorted(tally.undecided_by_size.items())],
        "undecided_nodes": int(tally.undecided_nodes),
        "step_bound": None,
    }
    if tally.proof_nodes is not None:
        out["proof_nodes"] = {name: int(n) for name, n in tally.proof_nodes.items()}
    if tally.step_bound is not None:
        steps, source = tally.step_bound
        out["step_bound"] = {"steps": steps, "source": source}
    if tally.settle is not None:
        st = tally.settle
        out["settle"] = {"size": st["size"], "halting": str(st["halting"]), "proven": str(st["proven"]),
                         "nodes": [int(x) for x in st["nodes"]], "steps": int(st["steps"]),
                         "late_keys": [[list(s), len(g)] for s, g in sorted(tally.late_groups.items())]}
    return out


def whole(v, what: str, owner: str = "certificate") -> int:
    """A header count: an int or a decimal string of ASCII digits, never negative. `owner` names
    the header field in the error (the certificate, the cut)."""
    if isinstance(v, bool) or not isinstance(v, (int, str)) or (
            isinstance(v, str) and not (v.isascii() and v.isdigit())):
        raise InconsistentTableError(f"the {owner}'s {what} is not a whole number")
    v = int(v)
    if v < 0:
        raise InconsistentTableError(f"the {owner}'s {what} is negative")
    return v



def parse(header: dict, non_halting: int, undecided: int, cap: int, dims: int = 1,
          space: Space | None = None, mode: str = "exhaustive") -> Certificate | None:
    """The certificate of a loaded header, checked against the totals, the deciders the header
    lists and the one table of proven step bounds (model/bounds.py); None when absent."""
    cert = header.get("certificate")
    if cert is None:
        return None
    if not isinstance(cert, dict):
        raise InconsistentTableError("the header's certificate is not a map")
    proofs = cert.get("proofs")
    sizes = cert.get("undecided_by_size")
    if not isinstance(proofs, dict) or not isinstance(sizes, list) or len(sizes) > MAX_SIZES:
        raise InconsistentTableError("the certificate's proofs or undecided_by_size are malformed")
    parsed_proofs = {str(k): whole(v, f"proof weight of {k!r}") for k, v in proofs.items()}
    by_size = []
    for entry in sizes:
        if not isinstance(entry, list) or len(entry) != 3:
            raise InconsistentTableError("an undecided_by_size entry is not [rows, cols, weight]")
        r, c, w = whole(entry[0], "rows"), whole(entry[1], "cols"), whole(entry[2], "weight")
        # a run of at most cap steps visits at most cap + 1 cells along each axis; 1D has one row
        if not (1 <= r <= (1 if dims == 1 else cap + 1) and 1 <= c <= cap + 1):
            raise InconsistentTableError(f"an undecided size {r}x{c} cannot arise in {dims}D under cap {cap}")
        by_size.append((r, c, w))
    if sum(parsed_proofs.values()) != non_halting:
        raise InconsistentTableError("the certificate's proofs do not sum to the non-halting total")
    settle = parse_settle(cert.get("settle"), cap, dims)
    settled = 0 if settle is None else settle["halting"] + settle["proven"]
    if sum(w for _, _, w in by_size) + settled != undecided:
        raise InconsistentTableError("the certificate's undecided weight by size (and what its run-on settled) does "
                                     "not sum to the undecided total")
    if settle is not None and any(max(r, c) <= settle["size"] for r, c, _ in by_size):
        raise InconsistentTableError(f"the certificate leaves undecided weight within its settle size {settle['size']}, "
                                     "which the run-on decides")
    # a decider the build did not run proved nothing
    ran = header.get("deciders")
    if isinstance(ran, list):
        idle = [k for k, w in parsed_proofs.items() if w and k != STEP_BOUND and k not in ran]
        if idle:
            raise InconsistentTableError(f"the certificate credits {idle[0]!r} with non-halting weight, "
                                         "but the header's deciders do not list it")
    bound = cert.get("step_bound")
    if bound is not None:
        if not isinstance(bound, dict) or not isinstance(bound.get("source"), str):
            raise InconsistentTableError("the certificate's step_bound is malformed")
        check_step_bound(whole(bound.get("steps"), "step bound"), bound["source"], cap, undecided,
                         space, mode)
    elif parsed_proofs.get(STEP_BOUND):
        raise InconsistentTableError("the certificate credits the step bound with non-halting weight "
                                     "but claims no step bound")
    nodes = whole(cert.get("undecided_nodes", 0), "undecided_nodes")
    # a node stands for at least one machine (a sample counts one)
    if nodes > undecided or ("undecided_nodes" in cert and (nodes == 0) != (undecided == 0)):
        raise InconsistentTableError(f"the certificate's {nodes} undecided tree nodes contradict the "
                                     f"undecided total {undecided}")
    proof_nodes = cert.get("proof_nodes")
    if proof_nodes is not None:
        if not isinstance(proof_nodes, dict) or set(proof_nodes) != set(parsed_proofs):
            raise InconsistentTableError("the certificate's proof_nodes do not name the same proofs as its weights")
        proof_nodes = {str(k): whole(v, f"node count of {k!r}") for k, v in proof_nodes.items()}
        # a node stands for at least one machine, so a proof closes no more nodes than machines
        if any(n > parsed_proofs[k] or (n == 0) != (parsed_proofs[k] == 0) for k, n in proof_nodes.items()):
            raise InconsistentTableError("the certificate's proof_nodes contradict its proof weights")
    return Certificate(parsed_proofs, by_size, nodes, bound, proof_nodes, settle)


def parse_settle(st, cap: int, dims: int) -> dict | None:
    """The certificate's run-on record, by type and range: the settle size, the weight that halted
    past the cap and the weight proven there, node and step counts, and the late keys' summary."""
    if st is None:
        return None
    if not isinstance(st, dict) or not isinstance(st.get("nodes"), list) or len(st["nodes"]) != 3 \
            or not isinstance(st.get("late_keys"), list):
        raise InconsistentTableError("the certificate's settle record is malformed")
    size = whole(st.get("size"), "settle size")
    if not 1 <= size <= cap:
        raise InconsistentTableError(f"the certificate's settle size {size} is outside 1..cap {cap}")
    out = {"size": size, "halting": whole(st.get("halting"), "settled halting weight"),
           "proven": whole(st.get("proven"), "settled proven weight"),
           "nodes": [whole(x, "settle node count") for x in st["nodes"]],
           "steps": whole(st.get("steps"), "settle step count"), "late_keys": []}
    for entry in st["late_keys"]:
        if not (isinstance(entry, list) and len(entry) == 2 and isinstance(entry[0], list) and len(entry[0]) == dims):
            raise InconsistentTableError("the certificate's late key summary is malformed")
        shape, n = [whole(x, "late key side") for x in entry[0]], whole(entry[1], "late key count")
        if not (all(1 <= x <= size for x in shape) and n >= 1):
            raise InconsistentTableError(f"the certificate's late keys of shape {shape} cannot arise within its "
                                         f"settle size {size}")
        out["late_keys"].append((tuple(shape), n))
    if (out["halting"] == 0) != (not out["late_keys"]):
        raise InconsistentTableError("the certificate's settled halting weight contradicts its late keys")
    return out


def check_step_bound(steps: int, source: str, cap: int, undecided: int, space: Space | None,
                     mode: str = "exhaustive") -> None:
    """A claimed step bound must be the proven S(n, m) of exactly this space, with its source,
    at a cap that reaches it, in an exhaustive table with nothing left undecided: anything else
    would turn certified intervals into false points."""
    proven = None if space is None else step_bound(space)
    if mode != "exhaustive":
        raise InconsistentTableError("the certificate of a sampled table claims a step bound; only exhaustive "
                                     "builds use one")
    if space is not None and proven is None:
        raise InconsistentTableError(f"the certificate claims a step bound S = {steps}, but none is proven "
                                     f"for {space.label} (model/bounds.py)")
    if proven is not None and (steps, source) != proven:
        raise InconsistentTableError(f"the certificate claims the step bound S = {steps} ({source}), but the "
                                     f"proven bound for {space.label} is S = {proven[0]} ({proven[1]})")
    if steps > cap:
        raise InconsistentTableError(f"the certificate claims the step bound S = {steps} at cap {cap}, below it; "
                                     "a bound the runs never reached proves nothing")
    if undecided:
        raise InconsistentTableError(f"the certificate claims a step bound, yet {undecided} undecided "
                                     "machines remain")


def open_runs(cert: Certificate | None, blanks: int, undecided: int) -> tuple[int, int]:
    """(runs halting past the cap, runs still undecided) after the run-on: the certified bounds'
    normalisation lies between H + the first and H + both. No run-on: (0, every undecided run)."""
    settle = None if cert is None else cert.settle
    if settle is None:
        return 0, blanks * undecided
    late, proven = settle["halting"], settle["proven"]
    return blanks * late, blanks * (undecided - late - proven)


def bounds(c, u_key: int, u_total: int, total: int):
    """Certified CTM bounds in bits (numpy-friendly): the true probability lies in
    [c / (H + U), (c + U_k) / (H + U_k)], H the halting runs, U all undecided runs,
    U_k those that can still reach the key."""
    c = np.asarray(c, dtype=np.float64)
    u_key = np.asarray(u_key, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        low = np.where(c + u_key > 0, np.log2(total + u_key) - np.log2(c + u_key), np.inf)
        high = math.log2(total + u_total) - np.log2(c) if total + u_total else np.full_like(c, np.inf)
    return low, high
