"""The exact result of a build, the record that tables and builds share: totals, counts by key,
histograms and what the deciders proved, with the invariants every build checks and the sums by
which shards and samples combine."""
from __future__ import annotations

import functools
from dataclasses import dataclass, field

from ..errors import InvariantError, MergeError, TooLargeError
from .bounds import bound_reached
from .deciders import DECIDERS, STEP_BOUND
from .space import Space
from .streams import SAMPLE_UNIT, first_overlap
from .symmetry import images_per_sample, size_of


def add_into(total: dict, more: dict) -> dict:
    """Add the weights of `more` into `total`, key by key."""
    for k, w in more.items():
        total[k] = total.get(k, 0) + w
    return total


def add_lists(a: list, b: list) -> list:
    """Add b into a in place, entry by entry, a growing as needed: O(len(b)), so that a run of
    millions of steps in one unit costs its own histogram once, not once per unit."""
    if len(a) < len(b):
        a.extend([0] * (len(b) - len(a)))
    for i, v in enumerate(b):
        if v:
            a[i] += v
    return a


def trim_hist(hist: list) -> list:
    end = len(hist)
    while end and hist[end - 1] == 0:
        end -= 1
    return hist[:end]



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
    keep_size: int | None = None  # keys kept up to this size (longer side); None: every key
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

    def record_proofs(self, part) -> None:
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
            if self.keep_size is None or size_of(shape) <= self.keep_size or shape in self.groups:
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
    of the generator: distinct seeds alone do not keep streams apart (model/streams.py)."""
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
            add_into(total.setdefault(shape, {}), g)
    return {s: dict(sorted(total[s].items())) for s in sorted(total)}


def summed(tallies: list) -> dict:
    """The fields that add (or take the maximum) when tallies of one space and cap combine:
    counts, totals, histograms, run records. Merges of shards and of samples both use it."""
    first = tallies[0]
    return dict(
        space=first.space, cap=first.cap, groups=add_groups(t.groups for t in tallies),
        halting=sum(t.halting for t in tallies), non_halting=sum(t.non_halting for t in tallies),
        undecided=sum(t.undecided for t in tallies), halting_nodes=sum(t.halting_nodes for t in tallies),
        steps_hist=trim_hist(functools.reduce(add_lists, (t.steps_hist for t in tallies), [])),  # a fresh list
        length_hist=trim_hist(functools.reduce(add_lists, (t.length_hist for t in tallies), [])),
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
        add_into(proofs, t.proofs)
        add_into(by_size, t.undecided_by_size)
        if nodes is not None:
            add_into(nodes, t.proof_nodes)
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

