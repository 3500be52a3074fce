"""A build's Tally into a Table, with its header, and back (merge and extend add tallies)."""
from __future__ import annotations

import datetime
import os

from .._version import __version__
from ..model.space import Space
from ..errors import TableError
from ..model.symmetry import relabelling
from . import certify
from . import cut as sizecut
from .group import group_of

FORMALISM = "busy-beaver: entries MOVE(write, direction, next) or HALT(write); every transition is a step"
BUILDER_ENV = "CTMTAB_BUILDER"


def table_from_tally(cls, tally, *, command: str = "", notes: str = "", builder: str | None = None, workers=None):
    m = tally.space.symbols
    groups = {shape: group_of(shape, entries, m, None if tally.moments is None else tally.moments[shape])
              for shape, entries in tally.groups.items()}
    late = {shape: group_of(shape, entries, m) for shape, entries in tally.late_groups.items()}
    header = {
        "kind": "ctmtab-table",
        "space": tally.space.to_dict(),
        "formalism": FORMALISM,
        "cap": tally.cap,
        "blanks": list(range(tally.space.symbols)),
        "mode": tally.mode,
        "totals": {
            "space_size": str(tally.space.size),
            "halting": str(tally.halting),
            "non_halting": str(tally.non_halting),
            "undecided": str(tally.undecided),
        },
        "invariant": "halting + non_halting + undecided = space_size; counts sum to blanks x halting",
        "symmetries": symmetries(tally.space, tally.mode, tally.relabelled),
        "deciders": list(tally.deciders),
        "stats": {
            "halting_nodes": tally.halting_nodes,
            "longest_run": tally.longest_run,
            "most_nonblank": tally.most_nonblank,
            "steps_simulated": tally.steps,
        },
        "units": {
            "count": tally.units,
            "depth": tally.depth,
            "plan": tally.plan_ident,
            "covered": "all" if tally.covered is None else list(tally.covered),
            "weight": str(tally.weight),
            "shard": None if tally.shard is None else list(tally.shard),
        },
        "generator": {"name": "ctmtab", "version": __version__},
        "build": {
            "command": command,
            "seconds": round(tally.seconds, 3),
            "created": datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"),
            "by": builder if builder is not None else _whoami(),
        },
        "notes": notes,
    }
    if tally.mode == "sampled":
        streams = tally.streams or [(tally.seed, tally.samples)]
        header["sample"] = {"size": tally.samples, "seed": streams[0][0], "halting_samples": tally.halting,
                            "images_per_sample": tally.images, "streams": [list(s) for s in streams],
                            "relabelling": relabelling(tally.space.symbols)}
        if tally.until:
            header["build"]["until"] = tally.until
        header["invariant"] = ("halting + non_halting + undecided = sample size (totals count samples); "
                               "counts sum to images_per_sample x halting")
    if workers is not None:  # a build's own: its worker count (or "dask") and units resumed
        header["build"]["resumed_units"] = tally.resumed
        header["build"]["workers"] = workers
    certificate = certify.header_field(tally)
    if certificate is not None:
        header["certificate"] = certificate
    cut = sizecut.of_tally(tally)
    if cut is not None:
        header["cut"] = cut.header_field()
    table = cls(header, groups, list(tally.steps_hist), list(tally.length_hist), late=late)
    header["keys"] = table._key_summary()
    return table


def tally_of(t):
    """The exact tally behind this table (for merging)."""
    from ..model.tally import Tally

    if t.cut is not None and t.mode == "sampled":  # a dropped key's moments are gone
        raise TableError(f"{t.source} is cut at size {t.cut.keep_size}, so its dropped keys cannot be "
                         "added to another table's; merge or extend the uncut tables, then cut the result")
    m = t.space.symbols
    groups = {s: {row.tobytes(): int(c) for row, c in zip(t.groups[s].rows(m), t.groups[s].counts)}
              for s in t.shapes}
    units, stats = t.header.get("units", {}), t.header.get("stats", {})
    covered = units.get("covered")
    shard = units.get("shard")
    sampled = {}
    if t.mode == "sampled":
        sample = t.header["sample"]
        sampled = dict(
            mode="sampled", samples=sample["size"], seed=t.streams[0][0], streams=list(t.streams),
            moments={s: {row.tobytes(): int(c) for row, c in zip(t.groups[s].rows(m), t.groups[s].moments)}
                     for s in t.shapes},
            seconds=float(t.header.get("build", {}).get("seconds", 0)))
    return Tally(
        space=t.space, cap=t.cap, groups=groups, halting=t.halting,
        non_halting=t.non_halting, undecided=t.undecided,
        halting_nodes=stats.get("halting_nodes", 0), steps_hist=t.steps_hist.tolist(),
        length_hist=t.length_hist.tolist(), longest_run=stats.get("longest_run", 0),
        most_nonblank=stats.get("most_nonblank", 0), steps=stats.get("steps_simulated", 0),
        deciders=tuple(t.header.get("deciders", [])), units=units.get("count", 1),
        covered=None if covered == "all" else list(covered),
        weight=int(units.get("weight", t.space_size)), plan_ident=units.get("plan", ""),
        depth=units.get("depth", 0), shard=None if shard is None else tuple(shard), **sampled,
        relabelled="symbol-relabelling" in t.header.get("symmetries", []),
        keep_size=None if t.cut is None else t.cut.keep_size,
        dropped={} if t.cut is None else dict(t.cut.dropped),
        **certificate_fields(t),
    )


def certificate_fields(t) -> dict:
    cert = t.certificate
    if cert is None:
        return {}
    bound = cert.step_bound
    m = t.space.symbols
    return dict(proofs=dict(cert.proofs), undecided_by_size={(r, c): w for r, c, w in cert.by_size},
                proof_nodes=None if cert.proof_nodes is None else dict(cert.proof_nodes),
                undecided_nodes=cert.nodes,
                step_bound=None if bound is None else (bound["steps"], bound["source"]),
                settle=None if cert.settle is None else dict(cert.settle),
                late_groups={s: {row.tobytes(): int(c) for row, c in zip(g.rows(m), g.counts)}
                             for s, g in t.late.items()})


def symmetries(space: Space, mode: str, relabelled: bool = False) -> list[str]:
    """The symmetries behind the counts, as the header lists them. Exhaustive builds search one
    machine per class and weight it: mirror (1D) or dihedral (2D), blank swaps, state relabelling,
    and with 3 or more symbols the first-use order of the non-blank symbols (relabelled).
    Sampled builds draw plain machines and add each output's images: mirror or dihedral, and the
    symbol maps of tally.sample_perms (all m! permutations, or the m blank swaps)."""
    shape = "mirror" if space.dims == 1 else "dihedral"
    if mode == "sampled":
        return [shape, "symbol-permutation" if relabelling(space.symbols) == "all" else "blank-swap"]
    return [shape, "blank-swap", "state-relabelling"] + (["symbol-relabelling"] if relabelled else [])


def _whoami() -> str:
    """The default build.by: what the user configured in $CTMTAB_BUILDER, else nothing. Tables
    are shared, so the user and host name are never recorded unasked."""
    return " ".join(os.environ.get(BUILDER_ENV, "").split())
