"""Adding samples to a sampled table: a new stream of the same space, cap and deciders, drawn
under a seed the table does not hold yet, summed exactly into a new table that records how it
grew (build.extended). The command line's `build --extend` is a call of extend()."""
from __future__ import annotations

from ..errors import CtmtabError
from ..model.tally import combine_samples, refuse_overlap
from ..tables import Table
from ..tables.merge import check_expansion

# the new stream checked for overlap before any work, when no sample count bounds it (an error
# or time target): what lies past these is checked when the samples are added
CHECKED_AHEAD = 10**8


def next_seed(table: Table) -> int:
    """The seed an extension draws under when none is given: one past the table's largest."""
    return max(s for s, _ in table.streams) + 1


def check_extension(table: Table, seed: int, samples: int | None = None, where: str | None = None) -> None:
    """Refuse, before any work, an extension that could not be added: an exhaustive table, one of
    an older expansion, a seed the table holds, or a stream overlapping one of its streams."""
    where = where or str(table.source)
    if table.mode != "sampled":
        raise CtmtabError(f"{where} is an exhaustive table; only sampled tables can be extended")
    check_expansion(table)
    seeds = {s for s, _ in table.streams}
    if seed in seeds:
        raise CtmtabError(f"{where} already holds samples of seed {seed}; choose a new --seed "
                          f"(e.g. {next_seed(table)}) or leave it out")
    if seed >= 1 << 63:
        free = next(k for k in range(len(seeds) + 1) if k not in seeds)
        raise CtmtabError(f"{where} holds samples of seed 2^63 - 1, the largest, so no seed follows its "
                          f"seeds; give an unused lower one, e.g. --seed {free}")
    ahead = min(samples, CHECKED_AHEAD) if samples is not None and samples > 0 else CHECKED_AHEAD
    refuse_overlap(table.space, [(where, s, n) for s, n in table.streams] + [("the new samples", seed, ahead)],
                   "choose another --seed")


def extend(table: Table, samples: int | None = None, *, seed: int | None = None, until=None,
           workers: int = 1, scheduler: str | None = None, spool: str | None = None, on_progress=None,
           budget_hours: float | None = None, command: str = "", notes: str = "",
           builder: str | None = None):
    """Draw `samples` more machines (or until the `until` target, counting the table's own
    samples) and add them to `table`. Returns (the extended table, the tally of the new samples).
    seed: default one past the table's largest. The table itself is not changed."""
    from ..enumerator import sample
    from ..enumerator.driver import DEFAULT_BUDGET_HOURS

    seed = next_seed(table) if seed is None else seed
    check_extension(table, seed, samples)
    prior = table.to_tally()
    deciders = tuple(table.header.get("deciders", []))
    added = sample(table.space, table.cap, samples, seed=seed, deciders=deciders, workers=workers,
                   scheduler=scheduler, until=until, prior=prior, spool=spool, on_progress=on_progress,
                   budget_hours=DEFAULT_BUDGET_HOURS if budget_hours is None else budget_hours)
    return extended(table, prior, added, command=command, notes=notes, builder=builder,
                    workers="dask" if scheduler else workers), added


def extended(table: Table, prior, added, *, command: str = "", notes: str = "", builder: str | None = None,
             workers=None) -> Table:
    """The table of `prior` (the table's own tally) plus the new samples `added`, with the
    commands that made it, the first one first."""
    notes = "; ".join(x for x in (table.header.get("notes", ""), notes) if x)
    out = Table.from_tally(combine_samples([prior, added], [str(table.source), "the new samples"]),
                           command=command, notes=notes, builder=builder, workers=workers)
    before = table.header.get("build", {})
    earlier = before.get("extended", {}).get("commands") or [before.get("command", "")]
    out.header["build"]["extended"] = {"from": str(table.source), "commands": earlier + [command]}
    if added.until:
        out.header["build"]["until"] = added.until
    return out
