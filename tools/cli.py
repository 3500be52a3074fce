"""The ctmtab command line. Errors print one line and exit non-zero:
1 a table failed verification, 2 bad input, 3 a broken internal invariant."""
from __future__ import annotations

import argparse
import json
import shlex
import signal
import sys
import time
from pathlib import Path

from .._version import __version__
from ..errors import CtmtabError

# Known busy beaver step counts S(n, m), the default cap where one is known
# (REFERENCES.md: OEIS A060843; Lafitte & Papazian 2007 for (2,3)).
KNOWN_CAPS = {(1, 2): 1, (2, 2): 6, (3, 2): 21, (4, 2): 107, (2, 3): 38}


class _Parser(argparse.ArgumentParser):
    """Usage errors in one line, like every other error."""

    def error(self, message):
        self.exit(2, f"{self.prog}: {message}; see {self.prog} --help\n")


def _space_args(p):
    p.add_argument("--dims", type=int, default=1, choices=(1, 2), help="1 (tape) or 2 (grid); default 1")
    p.add_argument("--states", type=int, default=3, help="working states n >= 1; default 3")
    p.add_argument("--symbols", type=int, default=2, help="symbols m >= 2; default 2")
    p.add_argument("--max-steps", type=int, default=None,
                   help="step cap T; default the busy beaver value S(n) where known")


def _parser() -> argparse.ArgumentParser:
    top = _Parser(prog="ctmtab", description="Exact coding-theorem tables from every small Turing machine.")
    top.add_argument("--version", action="version", version=f"ctmtab {__version__}")
    sub = top.add_subparsers(dest="command", metavar="COMMAND", required=True)

    p = sub.add_parser("build", help="enumerate a machine space and write a table file")
    _space_args(p)
    p.add_argument("-o", "--output", help="table file to write; default ctm-<space>-t<cap>.ctmt")
    p.add_argument("--deciders", default="all",
                   help="comma list of non-halting proofs: full-table, escapee, cycler, translated-cycler; 'all' or 'none'")
    p.add_argument("--workers", type=int, default=None, help="local processes; default every core")
    p.add_argument("--scheduler", metavar="ADDRESS", help="run the units on a Dask cluster (tcp://host:8786)")
    p.add_argument("--shard", metavar="I/N", help="build only units I mod N into a shard file (merge them later)")
    p.add_argument("--sample", type=int, metavar="N", help="run N machines drawn uniformly instead of all")
    p.add_argument("--seed", type=int, default=1, help="seed of --sample; default 1")
    p.add_argument("--split-depth", type=int, default=None,
                   help="branch points above the work-unit cut; default from the space")
    p.add_argument("--budget-hours", type=float, default=24.0,
                   help="refuse builds estimated above this many CPU-hours; default 24")
    p.add_argument("--notes", default="", help="free text stored in the header")
    p.add_argument("--builder", default=None, help="who built it, stored in the header; default user@host")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress or summary on stderr")

    p = sub.add_parser("info", help="summarise a table file")
    p.add_argument("table", help="a table file, or the name of a shipped table")
    p.add_argument("--json", action="store_true", help="machine-readable output")

    p = sub.add_parser("lookup", help="count, probability and CTM of keys")
    p.add_argument("table")
    p.add_argument("keys", nargs="+", help='keys such as 0110 (1D) or 01/10 (2D rows)')
    p.add_argument("--missing", choices=("raise", "nan", "fallback"), default="raise",
                   help="keys never produced: fail (default), NaN, or the fallback value")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("verify", help="check checksums, invariants and symmetry closure")
    p.add_argument("tables", nargs="+")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("merge", help="combine tables of one build into one")
    p.add_argument("-o", "--output", required=True)
    p.add_argument("tables", nargs="+")

    p = sub.add_parser("export", help="write the counts as CSV or JSON")
    p.add_argument("table")
    p.add_argument("--format", choices=("csv", "json"), default="csv")
    p.add_argument("-o", "--output", help="file to write; default stdout")

    p = sub.add_parser("validate", help="compare an estimator with the exact CTM of every key")
    p.add_argument("table")
    src = p.add_mutually_exclusive_group(required=True)
    src.add_argument("--estimator", metavar="SPEC",
                     help="zlib, lzma, bz2, entropy, or module:function taking a key text")
    src.add_argument("--values", metavar="FILE.csv", help="key,value rows")
    p.add_argument("--sizes", help="lengths (1D) or RxC shapes (2D): 5-11 or 3x3,4x4; default all")
    p.add_argument("--worst", type=int, default=10, help="disagreements to list; default 10")
    p.add_argument("--plot", metavar="FILE.png", help="scatter and per-size correlation")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("plot", help="PNG figures of a table: CTM by rank, halting times, mass by size")
    p.add_argument("table")
    p.add_argument("-o", "--output-dir", default=".", help="folder for the PNG files; default here")

    p = sub.add_parser("demo", help="a worked validation demo in an invented setting")
    p.add_argument("-o", "--output-dir", default="ctmtab-demo", help="folder for its figures")

    p = sub.add_parser("run", help="run one machine given in the compact notation (1RB1LB_1LA1RZ)")
    p.add_argument("machine")
    p.add_argument("--max-steps", type=int, default=10**9, help="default 10^9")
    p.add_argument("--blank", type=int, default=0)
    p.add_argument("--json", action="store_true")
    return top


def _command() -> str:
    """The command line as given, for a table's provenance."""
    return "ctmtab " + " ".join(shlex.quote(x) for x in sys.argv[1:])


def _emit(obj, as_json: bool, text: str) -> None:
    print(json.dumps(obj, indent=2, default=str) if as_json else text)


def _shard(text):
    if text is None:
        return None
    try:
        i, n = (int(x) for x in text.split("/"))
    except ValueError:
        raise CtmtabError(f"--shard {text!r} is not I/N, e.g. --shard 0/4") from None
    return i, n


def cmd_build(a) -> int:
    from ..enumerator import ALL_DECIDERS, Space, build
    from ..enumerator.executors import cores
    from ..tables import Table
    from .progress import Bar

    space = Space(a.dims, a.states, a.symbols)
    cap = a.max_steps
    if cap is None:
        cap = KNOWN_CAPS.get((a.states, a.symbols)) if a.dims == 1 else None
        if cap is None:
            raise CtmtabError(f"no busy beaver value is known for {space.label}; give --max-steps")
    deciders = {"all": ALL_DECIDERS, "none": ()}.get(a.deciders) or tuple(
        d.strip() for d in a.deciders.split(",") if d.strip())
    shard = _shard(a.shard)
    stem = f"ctm-{space.dims}d-n{space.states}-m{space.symbols}-t{cap}" + (f"-s{a.seed}" if a.sample else "")
    output = a.output or (stem + (f"-shard{shard[0]}of{shard[1]}" if shard else "") + ".ctmt")
    if not Path(output).resolve().parent.is_dir():
        raise CtmtabError(f"cannot write {output}: its folder does not exist")
    workers = a.workers if a.workers is not None else cores()
    spool = output + ".parts"
    t0 = time.perf_counter()
    bar = Bar(f"{space.label} cap {cap}", enabled=False if a.quiet else None)
    try:
        if a.sample is not None:
            if shard:
                raise CtmtabError("--shard splits exhaustive builds; give sampled shards their own --seed instead")
            from ..enumerator import sample
            tally = sample(space, cap, a.sample, seed=a.seed, deciders=deciders, workers=workers,
                           scheduler=a.scheduler, on_progress=bar)
        else:
            tally = build(space, cap, deciders=deciders, split_depth=a.split_depth, workers=workers,
                          scheduler=a.scheduler, shard=shard, spool=spool, budget_hours=a.budget_hours,
                          on_progress=bar)
    finally:
        bar.close()
    table = Table.from_tally(tally, command=_command(), notes=a.notes, builder=a.builder)
    table.header["build"]["resumed_units"] = tally.resumed
    table.header["build"]["workers"] = "dask" if a.scheduler else workers
    table.save(output)
    from ..enumerator.spool import Spool
    Spool.discard(spool)
    if not a.quiet:
        part = f" shard {shard[0]}/{shard[1]}," if shard else ""
        again = f", {tally.resumed} units resumed from {spool}" if tally.resumed else ""
        what = "sampled machines" if a.sample else "machines"
        print(f"{space.label} cap {cap}:{part} {tally.weight:,} {what}, {tally.distinct():,} outputs, "
              f"undecided {tally.undecided / tally.weight:.3%}, {time.perf_counter() - t0:.2f} s{again} -> {output}",
              file=sys.stderr)
    return 0


def cmd_info(a) -> int:
    from ..tables import load

    t = load(a.table)
    s = t.summary()
    if a.json:
        _emit(s, True, "")
        return 0
    lines = [
        f"{t.source}",
        f"  space      {s['label']} ({t.space.size:,} machines), cap {t.cap}, {s['mode']}"
        + (f", {s['sample']['size']:,} samples, seed {s['sample']['seed']}" if s.get("sample") else ""),
        f"  halting    {t.halting:,}  non-halting {t.non_halting:,}  undecided {t.undecided:,} "
        f"({s['undecided_fraction']:.3%})",
        f"  keys       {s['distinct_keys']:,} distinct; complete up to size "
        f"{max([int(x.split('x')[0]) for x in s['complete_shapes']] or [0]) if t.space.dims == 1 else s['complete_shapes']}",
        f"  CTM        {s['ctm_min']:.4f} to {s['ctm_max']:.4f} bits",
        f"  longest    {s['stats'].get('longest_run', '?')} steps, {s['stats'].get('most_nonblank', '?')} non-blank cells",
        f"  built      {s['build'].get('created', '?')} by {s['build'].get('by', '?')} in {s['build'].get('seconds', '?')} s",
        f"  command    {s['build'].get('command', '')}",
        f"  generator  {s['generator'].get('name', '?')} {s['generator'].get('version', '?')}, format {s['format'][0]}.{s['format'][1]}",
    ]
    if s["notes"]:
        lines.append(f"  notes      {s['notes']}")
    print("\n".join(lines))
    return 0


def cmd_lookup(a) -> int:
    from ..tables import load

    t = load(a.table)
    rows = []
    for key in a.keys:
        c = t.count(key)
        ctm = t.ctm(key, missing=a.missing)
        low, high = t.interval(key)
        rows.append({"key": key, "count": c, "probability": c / t.total, "ctm": ctm,
                     "ctm_low": low, "ctm_high": high})
    if a.json:
        _emit(rows, True, "")
    else:
        kind = "95% interval (sampled)" if t.mode == "sampled" else "certified interval"
        print(f"{'key':<20} {'count':>22} {'probability':>12} {'CTM bits':>10}  {kind}")
        for r in rows:
            print(f"{r['key']:<20} {r['count']:>22,} {r['probability']:>12.6g} {r['ctm']:>10.4f}  "
                  f"[{r['ctm_low']:.4f}, {r['ctm_high']:.4f}]")
    return 0


def cmd_verify(a) -> int:
    from ..tables import load, problems

    report, bad = [], 0
    for name in a.tables:
        try:
            found = problems(load(name))
        except CtmtabError as exc:
            found = [str(exc)]
        bad += bool(found)
        report.append({"table": name, "ok": not found, "problems": found})
        if not a.json:
            print(f"{name}: ok" if not found else f"{name}: FAILED\n" + "\n".join(f"  {p}" for p in found))
    if a.json:
        _emit(report, True, "")
    return 1 if bad else 0


def cmd_merge(a) -> int:
    from ..tables import load, merge

    merge([load(p) for p in a.tables], command=_command()).save(a.output)
    return 0


def cmd_export(a) -> int:
    from ..tables import load

    t = load(a.table)
    out = open(a.output, "w", newline="") if a.output else sys.stdout
    try:
        if a.format == "csv":
            t.write_csv(out)
        else:
            json.dump(t.to_json(), out, default=str)
            out.write("\n")
    finally:
        if a.output:
            out.close()
    return 0


def cmd_run(a) -> int:
    from ..enumerator.machine import run

    r = run(a.machine, a.max_steps, a.blank)
    obj = {"status": r.status, "steps": r.steps, "nonblank": r.nonblank, "cells": len(r.output),
           "head": r.head, "state": chr(65 + r.state),
           "output": r.output_text if len(r.output) <= 10_000 else None}
    text = (f"{r.status} after {r.steps:,} steps; {r.nonblank:,} non-blank of {len(r.output):,} visited cells"
            + (f"\n{r.output_text}" if len(r.output) <= 200 else ""))
    _emit(obj, a.json, text)
    return 0


def _sizes(text):
    if not text:
        return None
    out = []
    for part in text.split(","):
        part = part.strip()
        try:
            if "x" in part:
                out.append(tuple(int(v) for v in part.split("x")))
            elif "-" in part:
                lo, hi = (int(v) for v in part.split("-"))
                out += list(range(lo, hi + 1))
            else:
                out.append(int(part))
        except ValueError:
            raise CtmtabError(f"--sizes {text!r}: {part!r} is not a length, a range like 5-11 or a shape like 3x3") from None
    return out


def cmd_validate(a) -> int:
    from ..tables import load
    from .validate import resolve, validate, values_from_csv

    t = load(a.table)
    est = resolve(a.estimator) if a.estimator else None
    vals = values_from_csv(a.values) if a.values else None
    rep = validate(t, est, vals, sizes=_sizes(a.sizes), worst=a.worst)
    if a.plot:
        from .plots import plot_report
        plot_report(rep, a.plot, title=a.estimator or Path(a.values).name)
    if a.json:
        _emit(rep.to_dict(), True, "")
        return 0
    print(f"{rep.scored:,} of {rep.keys:,} keys scored ({rep.coverage:.1%})")
    print(f"Spearman {rep.spearman:+.4f}   Kendall {rep.kendall:+.4f}   "
          f"mean absolute error after a linear fit {rep.mae_linear:.3f} bits")
    print(f"{'size':>6} {'keys':>7} {'Spearman':>9} {'Kendall':>9}")
    for s, r in rep.by_size.items():
        print(f"{s:>6} {r['keys']:>7} {r['spearman']:>+9.3f} {r['kendall']:>+9.3f}")
    print("worst disagreements (exact CTM vs the fitted estimate):")
    for w in rep.worst:
        print(f"  {w['key']:>16}  exact {w['exact']:8.3f}  fitted {w['fitted']:8.3f}")
    return 0


def cmd_plot(a) -> int:
    from ..tables import load
    from .plots import plot_table

    for path in plot_table(load(a.table), a.output_dir):
        print(path)
    return 0


def cmd_demo(a) -> int:
    from .demo import run

    run(a.output_dir)
    return 0


COMMANDS = {"validate": cmd_validate, "plot": cmd_plot, "demo": cmd_demo, "build": cmd_build, "info": cmd_info, "lookup": cmd_lookup, "verify": cmd_verify,
            "merge": cmd_merge, "export": cmd_export, "run": cmd_run}


def main(argv=None) -> int:
    if hasattr(signal, "SIGPIPE"):
        signal.signal(signal.SIGPIPE, signal.SIG_DFL)  # `ctmtab export ... | head` ends quietly
    args = _parser().parse_args(argv)
    try:
        return COMMANDS[args.command](args)
    except CtmtabError as exc:
        print(f"ctmtab {args.command}: {exc}", file=sys.stderr)
        return exc.exit_code
    except (FileNotFoundError, IsADirectoryError, PermissionError) as exc:
        print(f"ctmtab {args.command}: {exc.strerror or exc}: {exc.filename or ''}".rstrip(": "), file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"ctmtab {args.command}: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
