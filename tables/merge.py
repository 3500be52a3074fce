"""Exact merging of the shards of one build, or of sampled tables, into one table."""
from __future__ import annotations

import dataclasses

from ..model.symmetry import images_per_sample
from ..model.tally import combine_samples, summed
from ..errors import MergeError
from .table import Table
from .verify import shard_weight_problems

SAME = ("space", "cap", "mode", "formalism", "blanks", "deciders")


def merge(tables: list[Table], *, command: str = "", builder: str | None = None, notes: str = "") -> Table:
    """Sum shards of one build. Refuses tables of another space, cap or build,
    a shard given twice, overlapping shards, and an incomplete set. Sampled
    tables of one space, cap and decider set merge when their seeds differ."""
    if len(tables) < 2:
        raise MergeError("merge needs at least two tables")
    first = tables[0]
    for t in tables:
        if t.cut is not None and t.mode == "sampled":
            raise MergeError(f"{t.source} is cut at size {t.cut.keep_size}, so its dropped keys cannot be added up; "
                             "merge or extend the uncut tables, then cut the result with ctmtab cut")
        if _cut_size(t) != _cut_size(first):
            raise MergeError(f"{t.source} keeps {_kept(t)}, {first.source} {_kept(first)}; cut every shard "
                             f"to one size first (ctmtab cut --keep-size N)")
    for t in tables[1:]:
        for key in SAME:
            if t.header.get(key) != first.header.get(key):
                raise MergeError(f"{t.source} differs from {first.source} in {key} "
                                 f"({t.header.get(key)!r} vs {first.header.get(key)!r}); only one build's parts merge")
    if first.mode == "sampled":
        return merge_samples(tables, command=command, builder=builder, notes=notes)
    units = [t.header.get("units", {}) for t in tables]
    for t, u in zip(tables, units):
        if u.get("covered") == "all":
            raise MergeError(f"{t.source} already covers every work unit; merging it would count machines "
                             "twice (merge the shards of one build instead)")
        if u.get("plan") != units[0].get("plan"):
            raise MergeError(f"{t.source} is a shard of another build (plan {u.get('plan')} vs "
                             f"{units[0].get('plan')}); rebuild the shards with one command")
    seen: dict[int, str] = {}
    for t, u in zip(tables, units):
        for k in u.get("covered", []):
            if k in seen:
                what = "is given twice" if seen[k] == t.source else f"overlaps {seen[k]}"
                raise MergeError(f"{t.source} {what} (unit {k}); give each shard once")
            seen[k] = t.source
    count = units[0].get("count", 0)
    missing = sorted(set(range(count)) - set(seen))
    if missing:
        of = units[0]["shard"][1] if units[0].get("shard") else 0
        shards = sorted({k % of for k in missing}) if of else []
        hint = " (shards " + ", ".join(f"{i}/{of}" for i in shards) + ")" if shards else ""
        raise MergeError(f"{len(missing)} of {count} work units are missing{hint}; add the missing shard files")
    tallies = [t.to_tally() for t in tables]
    for t, tally in zip(tables, tallies):  # what a file can break is bad input, named, never a bug
        tally.check_input(str(t.source))
        wrong = shard_weight_problems(t, [])
        if wrong:
            raise MergeError(f"{t.source}: {wrong[0]}; the file is corrupt or was edited, rebuild that shard")
    weight = sum(t.weight for t in tallies)
    if weight != first.space.size:
        raise MergeError(f"the shards' units weigh {weight} machines in all, not the space size "
                         f"{first.space.size}: one of {', '.join(str(t.source) for t in tables)} is corrupt or was "
                         "edited (ctmtab verify, with the compiled core, names it)")
    merged = dataclasses.replace(tallies[0], **summed(tallies), dropped=_summed_cuts(tallies), covered=None,
                                 shard=None, weight=None)
    merged.seconds = sum(float(t.header.get("build", {}).get("seconds", 0)) for t in tables)
    merged.check()
    return Table.from_tally(merged, command=command, notes=_notes(notes, tables), builder=builder)


def _notes(notes: str, tables: list[Table]) -> str:
    parts = "merged from " + ", ".join(str(t.source) for t in tables)
    return f"{notes}; {parts}" if notes else parts


def _cut_size(t: Table) -> int | None:
    return None if t.cut is None else t.cut.keep_size


def _kept(t: Table) -> str:
    return "every key" if t.cut is None else f"keys up to size {t.cut.keep_size}"


def _summed_cuts(tallies: list) -> dict:
    """The dropped shapes of cut shards. Weights add exactly; the distinct keys of a shape
    cannot be counted across shards, and a dropped key's count is at most the sum of its
    shards' largest counts, itself at most the shape's weight: the record keeps the weight
    as the bound, as a build cut in the core does (tables/cut.py)."""
    weights: dict = {}
    for t in tallies:
        for shape, (w, _, _) in t.dropped.items():
            weights[shape] = weights.get(shape, 0) + w
    return {shape: (w, None, w) for shape, w in sorted(weights.items())}


def merge_samples(tables: list[Table], *, command: str = "", builder: str | None = None, notes: str = "") -> Table:
    """One sampled table from sampled tables drawn under different seeds: exact sums of the
    counts, moments, totals and histograms. A seed in two tables is refused."""
    for t in tables:
        check_expansion(t)
    merged = combine_samples([t.to_tally() for t in tables], [str(t.source) for t in tables])
    return Table.from_tally(merged, command=command, notes=_notes(notes, tables), builder=builder)


def check_expansion(t: Table) -> None:
    """A sampled table whose samples were expanded into another number of images than this
    version's (format 1.1, m >= 3) cannot be added to: its counts would mix two estimators."""
    if t.mode == "sampled" and t.header["sample"]["images_per_sample"] != images_per_sample(t.space):
        raise MergeError(f"{t.source} expanded each sample into {t.header['sample']['images_per_sample']} "
                         f"images, this ctmtab into {images_per_sample(t.space)}; rebuild it with this version")
