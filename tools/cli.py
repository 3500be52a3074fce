"""The ctmtab command line. Errors print one line and exit non-zero:
1 a table failed verification, 2 bad input, 3 a broken internal invariant."""
from __future__ import annotations

import argparse
import errno
import json
import math
import os
import shlex
import signal
import sys
import threading
import time
from pathlib import Path

from .._version import __version__
from ..model.bounds import STEP_BOUNDS
from ..model.deciders import DECIDERS
from ..errors import DEFAULT_MIN_SEEN, CtmtabError, OutputError, RareKeyWarning
from ..extras import require
from .bdm_input import read_inputs
from .terminal import one_line as _line, printable as _printable

# build's default cap: the proven busy beaver value S(n, m) (model/bounds.py) up to this many
# steps. Longer ones are asked for by --max-steps (the exact (5,2) build takes 51 minutes on 2 cores).
DEFAULT_CAP_LIMIT = 1000


class _Parser(argparse.ArgumentParser):
    """Usage errors in one line, like every other error."""

    def error(self, message):
        self.exit(2, f"{self.prog}: {message}; see {self.prog} --help\n")


class _KeysParser(_Parser):
    """lookup's parser: Python 3.11 leaves keys after an option (lookup T --missing nan 0110)
    unmatched once the keys may be none (--keys-from), so it parses them intermixed."""

    _inner = False

    def parse_known_args(self, args=None, namespace=None):
        if self._inner:  # the intermixed parse calls back here
            return super().parse_known_args(args, namespace)
        self._inner = True
        try:
            return self.parse_known_intermixed_args(args, namespace)
        finally:
            self._inner = False


SPACE_DEFAULTS = {"dims": 1, "states": 3, "symbols": 2}


def _hours(text: str) -> float:
    """--budget-hours: a positive finite number (nan or inf would switch the guard off)."""
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not (0 < value < math.inf):
        raise argparse.ArgumentTypeError(f"{text!r} is not a positive number of hours, e.g. 24")
    return value


def _check_text(argv) -> None:
    """Arguments and the builder name go into table headers as UTF-8 text: refuse bytes that are
    not UTF-8 before any work, not when the finished table is written."""
    from ..tables.convert import BUILDER_ENV

    named = [(f"argument {os.fsencode(x)!r}", x) for x in argv]
    named.append((f"${BUILDER_ENV}", os.environ.get(BUILDER_ENV, "")))
    for what, text in named:
        try:
            text.encode("utf-8")
        except UnicodeEncodeError:
            raise CtmtabError(f"{what} is not valid UTF-8 text; table headers keep the command line "
                              "as text, so give a UTF-8 name or value") from None


def _check_fields(a) -> None:
    """--builder and --notes are shown as one line each by info: refuse line breaks and other
    control characters, which would forge lines there."""
    for flag in ("builder", "notes"):
        text = getattr(a, flag, None)
        bad = next((c for c in text or "" if not c.isprintable()), None)
        if bad is not None:
            raise CtmtabError(f"--{flag} holds the control character {bad!r}; give one line of plain text")


def _space_args(p):
    # Defaults are filled in later, so that --extend can tell a given option from a default.
    p.add_argument("--dims", type=int, default=None, choices=(1, 2), help="1 (tape) or 2 (grid); default 1")
    p.add_argument("--states", type=int, default=None, help="working states n >= 1; default 3")
    p.add_argument("--symbols", type=int, default=None, help="symbols m >= 2; default 2")
    p.add_argument("--max-steps", type=int, default=None,
                   help=f"step cap T; default the busy beaver value S(n, m) where it is known and at most "
                        f"{DEFAULT_CAP_LIMIT:,}")


def _parser() -> argparse.ArgumentParser:
    top = _Parser(prog="ctmtab", description="Exact coding-theorem tables from every small Turing machine.")
    top.add_argument("--version", action="version", version=f"ctmtab {__version__}")
    sub = top.add_subparsers(dest="command", metavar="COMMAND", required=True)

    p = sub.add_parser("build", help="enumerate a machine space and write a table file")
    _space_args(p)
    p.add_argument("-o", "--output", help="table file to write; default ctm-<space>-t<cap>.ctmt")
    p.add_argument("--deciders", default="all",
                   help="comma list of non-halting proofs: " + ", ".join(DECIDERS) + "; 'all' or 'none'")
    p.add_argument("--workers", type=int, default=None, help="local processes; default every core")
    p.add_argument("--scheduler", metavar="ADDRESS", help="run the units on a Dask cluster (tcp://host:8786)")
    p.add_argument("--shard", metavar="I/N", help="build only units I mod N into a shard file (merge them later)")
    p.add_argument("--sample", type=int, metavar="N",
                   help="run N machines drawn uniformly instead of all (with --until: at most N)")
    p.add_argument("--seed", type=int, default=None,
                   help="seed of a sampled build; default 1, or with --extend one above the table's seeds")
    p.add_argument("--until", action="append", metavar="TARGET", default=[],
                   help="stop sampling early: 5%%@8 (every key of size 8 seen has a relative standard "
                        "error <= 5%%) or a time budget such as 90s, 30m, 2h; may be given twice")
    p.add_argument("--extend", metavar="TABLE",
                   help="add new samples (under a new seed) to this sampled table; writes it in place unless -o")
    p.add_argument("--split-depth", type=int, default=None,
                   help="branch points above the work-unit cut; default from the space")
    p.add_argument("--budget-hours", type=_hours, default=24.0,
                   help="refuse builds estimated above this many CPU-hours; default 24")
    p.add_argument("--holdouts", metavar="FILE",
                   help="write every undecided node, one line each: machine, weight, step, size")
    p.add_argument("--keep-size", type=int, default=None, metavar="K",
                   help="keep only keys whose size (2D: longer side) is at most K, with an exact record of "
                        "the weight dropped per size (see cut); default every key")
    p.add_argument("--settle-size", type=int, default=None, metavar="K",
                   help="run every node still undecided at the cap whose output fits K cells (2D: KxK) on past "
                        "the cap until it halts, repeats or outgrows K, so every key up to size K gets tight "
                        "certified bounds; the counts stay the cap's. Default: the --keep-size; 0: off")
    p.add_argument("--notes", default="", help="free text stored in the header")
    p.add_argument("--builder", default=None,
                   help="who built it, stored in the header; default $CTMTAB_BUILDER, else nothing")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress or summary on stderr")

    p = sub.add_parser("info", help="summarise a table file")
    p.add_argument("table", help="a table file, or the name of a shipped table")
    p.add_argument("--json", action="store_true", help="machine-readable output")

    p = sub.add_parser("lookup", help="count, probability and CTM of keys")
    p.__class__ = _KeysParser  # keys may follow the options
    p.add_argument("table")
    p.add_argument("keys", nargs="*", help='keys such as 0110 (1D) or 01/10 (2D rows)')
    p.add_argument("--keys-from", metavar="FILE", action="append", default=[],
                   help="also read keys from FILE, one a line (blank lines skipped); - reads stdin. "
                        "Rows follow the order given: the command line's keys first")
    p.add_argument("--missing", choices=("raise", "nan", "fallback"), default="raise",
                   help="keys never produced: fail at the first (default), or go on with a row of NaN "
                        "or of the fallback value for each")
    p.add_argument("--min-seen", type=int, default=DEFAULT_MIN_SEEN, metavar="K",
                   help=f"sampled tables: warn about keys seen in fewer than K samples; default {DEFAULT_MIN_SEEN}")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("bdm", help="BDM of sequences or a 2D array, with its interval or standard error")
    p.add_argument("table")
    p.add_argument("input", nargs="?", default="-", metavar="FILE",
                   help="1D: one sequence per line; 2D: a CSV matrix (a line without commas: one cell per "
                        "character) or a .npy array; - or nothing: standard input")
    p.add_argument("--block", required=True, metavar="B", help="block size: a length (1D), RxC or one side (2D)")
    p.add_argument("--boundary", choices=("drop", "wrap", "shrink"), default="drop",
                   help="cells past the last full block: left out (default), wrapped around, or scored with "
                        "smaller blocks")
    p.add_argument("--stride", metavar="S", help="step between blocks, as --block; default the block size")
    p.add_argument("--alphabet", metavar="SYMBOLS",
                   help="characters standing for the symbols 0..m-1 in order, e.g. ACGT; default digits")
    p.add_argument("--min-seen", type=int, default=DEFAULT_MIN_SEEN, metavar="K",
                   help=f"sampled tables: a block seen in fewer than K samples is rare; default {DEFAULT_MIN_SEEN}")
    p.add_argument("--json", action="store_true", help="a list of objects, one per input")

    from .catalog import BLOCK_RULE, TIGHT_BITS

    p = sub.add_parser("list", help="the shipped tables: space, cap, kind, complete sizes, BDM block, file size",
                       description="One row per shipped table, read from its header (the body only where a "
                                   "certified width depends on the counts). kind: exact (nothing undecided), "
                                   "capped (exhaustive, with undecided weight at the cap) or sampled. complete: "
                                   "the sizes held completely (every key of every size up to it). block: the "
                                   "BDM block size it suits, " + BLOCK_RULE.format(tight=TIGHT_BITS).replace("%", "%%")
                                   + " (--tight).")
    p.add_argument("--tight", type=float, default=TIGHT_BITS, metavar="BITS",
                   help=f"the widest certified interval that counts as tight for the block; default {TIGHT_BITS}")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("verify", help="check checksums, invariants and symmetry closure")
    p.add_argument("tables", nargs="+")
    p.add_argument("--json", action="store_true")

    # "trim" is its name of old
    p = sub.add_parser("cut", aliases=["trim"], help="keep the keys up to a size, with an exact record of the rest")
    p.add_argument("table")
    p.add_argument("--keep-size", type=int, required=True, metavar="K",
                   help="keep keys whose size (2D: longer side) is at most K")
    p.add_argument("-o", "--output", help="file to write; default <table>-upto<K>.ctmt here")

    p = sub.add_parser("merge", help="combine tables of one build into one")
    p.add_argument("-o", "--output", required=True)
    p.add_argument("tables", nargs="+")
    p.add_argument("--notes", default="", help="free text stored in the header, before the list of parts")
    p.add_argument("--builder", default=None,
                   help="who merged it, stored in the header; default $CTMTAB_BUILDER, else nothing")

    p = sub.add_parser("export", help="write the counts as CSV or JSON")
    p.add_argument("table")
    p.add_argument("--format", choices=("csv", "json"), default="csv")
    p.add_argument("-o", "--output", help="file to write; default stdout")

    p = sub.add_parser("validate", help="compare an estimator with the CTM of every key (exact, or a capped or "
                                        "sampled table's reference values)")
    p.add_argument("table")
    src = p.add_mutually_exclusive_group(required=True)
    src.add_argument("--estimator", metavar="SPEC",
                     help="zlib, lzma, bz2, entropy, or module:function taking a key text; the module is "
                          "looked for in the current folder first, then on the Python path")
    src.add_argument("--values", metavar="FILE.csv", help="key,value rows")
    p.add_argument("--sizes", help="lengths (1D) or RxC shapes (2D): 5-11 or 3x3,4x4; default all")
    p.add_argument("--worst", type=int, default=10, help="disagreements to list; default 10")
    p.add_argument("--plot", metavar="FILE.png", help="scatter and per-size correlation (.png, .pdf or .svg)")
    p.add_argument("--json", action="store_true")

    p = sub.add_parser("plot", help="PNG figures of a table: CTM by rank, halting times, mass by size")
    p.add_argument("table")
    p.add_argument("-o", "--output-dir", default=".", help="folder for the PNG files; default here")

    p = sub.add_parser("demo", help="a worked validation demo in an invented setting")
    p.add_argument("-o", "--output-dir", default="ctmtab-demo", help="folder for its figures")

    p = sub.add_parser("run", help="run one machine given in the compact notation (1RB1LB_1LA1RZ)")
    p.add_argument("machine")
    p.add_argument("--max-steps", type=int, default=10**8,
                   help="default 10^8; a run that would fill more than 2^28 tape cells is refused")
    p.add_argument("--blank", type=int, default=0)
    p.add_argument("--json", action="store_true")
    return top


def _command() -> str:
    """The command line as given, for a table's provenance."""
    return "ctmtab " + " ".join(shlex.quote(x) for x in sys.argv[1:])


def _finite(obj):
    """obj with every NaN or infinity as None: --json output is strict JSON (RFC 8259), where
    null stands for a value that is not a number (an unseen key's CTM, an unbounded interval)."""
    if isinstance(obj, float) or (hasattr(obj, "dtype") and getattr(obj, "ndim", 1) == 0):
        try:
            value = float(obj)
        except (TypeError, ValueError):
            return obj
        if not math.isfinite(value):
            return None
        return obj if isinstance(obj, float) else obj.item()
    if isinstance(obj, dict):
        return {k: _finite(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_finite(v) for v in obj]
    return obj


def _json(obj, **kw) -> str:
    return json.dumps(_finite(obj), default=str, allow_nan=False, **kw)


def _emit(obj, as_json: bool, text: str) -> None:
    print(_json(obj, indent=2) if as_json else _printable(text))


def _shard(text):
    if text is None:
        return None
    try:
        i, n = (int(x) for x in text.split("/"))
    except ValueError:
        raise CtmtabError(f"--shard {text!r} is not I/N, e.g. --shard 0/4") from None
    return i, n


_UNITS = {"s": 1, "m": 60, "h": 3600, "d": 86400}


def _until(texts):
    """--until values -> a Target: 5%@8 or 0.05@8 (error bound at a key size), 90s / 30m / 2h."""
    from ..enumerator import Target

    error = size = seconds = None
    for text in texts:
        t = text.strip().lower()
        try:
            if "@" in t:
                bound, at = t.split("@")
                error = float(bound[:-1]) / 100 if bound.endswith("%") else float(bound)
                size = int(at)
            elif t and t[-1] in _UNITS:
                seconds = float(t[:-1]) * _UNITS[t[-1]]
            else:
                raise ValueError
        except ValueError:
            raise CtmtabError(f"--until {text!r} is neither an error target like 5%@8 nor a time like 30m") from None
    return Target(error=error, size=size, seconds=seconds)


def _deciders(text: str) -> tuple:
    from ..enumerator import ALL_DECIDERS

    if text in ("all", "none"):
        return ALL_DECIDERS if text == "all" else ()
    return tuple(d.strip() for d in text.split(",") if d.strip())


def _extend_base(a):
    """--extend: the table to add to, and the space, cap and deciders it fixes."""
    from ..tables import load

    base = load(a.extend)
    if base.mode != "sampled":  # before the flags are compared with it
        raise CtmtabError(f"{a.extend} is an exhaustive table; only sampled tables can be extended")
    given = {"dims": a.dims, "states": a.states, "symbols": a.symbols, "max_steps": a.max_steps}
    has = {"dims": base.space.dims, "states": base.space.states, "symbols": base.space.symbols,
           "max_steps": base.cap}
    for name, value in given.items():
        if value is not None and value != has[name]:
            raise CtmtabError(f"--{name.replace('_', '-')} {value} contradicts {a.extend} ({has[name]}); "
                              "leave it out, the table fixes the space and the cap")
    from .extend import check_extension, next_seed

    if a.seed is None:
        a.seed = next_seed(base)
    check_extension(base, a.seed, a.sample, where=str(a.extend))  # before any work
    a.dims, a.states, a.symbols, a.max_steps = has["dims"], has["states"], has["symbols"], has["max_steps"]
    if a.deciders == "all":
        a.deciders = ",".join(base.header.get("deciders", [])) or "none"
    elif set(_deciders(a.deciders)) != set(base.header.get("deciders", [])):
        raise CtmtabError(f"--deciders contradicts {a.extend}; leave it out, the table fixes the deciders")
    return base


def cmd_build(a) -> int:
    from ..enumerator import Space, build
    from ..enumerator.executors import cores
    from ..tables import Table
    from .progress import Bar

    sampled = a.sample is not None or bool(a.until) or a.extend is not None
    base = _extend_base(a) if a.extend else None
    for name, value in SPACE_DEFAULTS.items():
        if getattr(a, name) is None:
            setattr(a, name, value)
    space = Space(a.dims, a.states, a.symbols)
    cap = a.max_steps
    if cap is None:
        bound = STEP_BOUNDS.get((a.states, a.symbols)) if a.dims == 1 else None
        if bound is None:
            raise CtmtabError(f"no busy beaver value is known for {space.label}; give --max-steps")
        if bound[0] > DEFAULT_CAP_LIMIT:
            raise CtmtabError(f"the busy beaver value of {space.label} is {bound[0]:,} steps, too long a cap to take "
                              f"unasked; give --max-steps {bound[0]} for the exact table, or a shorter cap")
        cap = bound[0]
    deciders = _deciders(a.deciders)
    shard = _shard(a.shard)
    if sampled and shard:
        raise CtmtabError("--shard splits exhaustive builds; give sampled shards their own --seed instead")
    if a.until and not sampled:
        raise CtmtabError("--until needs a sampled build")
    if a.keep_size is not None and a.keep_size < 1:
        raise CtmtabError(f"--keep-size must be 1 or more, got {a.keep_size}")
    if a.settle_size is not None and sampled:
        raise CtmtabError("--settle-size runs on the undecided nodes of an exhaustive build; drop --sample")
    if a.settle_size is not None and a.settle_size < 0:
        raise CtmtabError(f"--settle-size must be 0 (off) or more, got {a.settle_size}")
    if a.keep_size is not None and base is not None:
        raise CtmtabError("--keep-size cannot cut an extended table (its dropped keys' samples could not be "
                          "added to later); extend the uncut table, then run ctmtab cut")
    seed = 1 if a.seed is None else a.seed
    stem = f"ctm-{space.dims}d-n{space.states}-m{space.symbols}-t{cap}" + (f"-s{seed}" if sampled else "")
    if base is not None and not a.output and not Path(a.extend).is_file():
        raise CtmtabError(f"{a.extend} is a shipped table; give -o for the extended copy")
    output = a.output or (a.extend if base else stem + (f"-shard{shard[0]}of{shard[1]}" if shard else "") + ".ctmt")
    if not Path(output).resolve().parent.is_dir():
        raise CtmtabError(f"cannot write {output}: its folder does not exist")
    if Path(output).is_dir():  # refused now, not after the build
        raise CtmtabError(f"cannot write {output}: it is a folder; give a file name")
    if a.scheduler is not None and not a.scheduler.strip():
        raise CtmtabError("--scheduler is empty; give the Dask scheduler's address, e.g. tcp://host:8786, "
                          "or leave it out to use local workers")
    if a.workers is not None and a.workers < 1:
        raise CtmtabError(f"--workers must be 1 or more, got {a.workers}")
    if a.holdouts is not None and sampled:
        raise CtmtabError("--holdouts lists the undecided nodes of an exhaustive build; drop --sample")
    if a.holdouts is not None and Path(a.holdouts).is_dir():
        raise CtmtabError(f"cannot write holdouts to {a.holdouts}: it is a folder; give a file name")
    if a.holdouts is not None and Path(a.holdouts).resolve() == Path(output).resolve():
        raise OutputError(f"--holdouts {a.holdouts} is the table's own file {output}; give another file name")
    workers = a.workers if a.workers is not None else cores()
    # The spool sits beside the table; a device or pipe gets it in this folder, under the default name.
    special = Path(output).exists() and not Path(output).is_file()
    spool = (stem + ".ctmt.parts") if special else output + ".parts"
    t0 = time.perf_counter()
    bar = Bar(f"{space.label} cap {cap}", enabled=False if a.quiet else None)
    workers_field = "dask" if a.scheduler else workers
    try:
        if base is not None:
            from .extend import extend
            table, tally = extend(base, a.sample, seed=seed, until=_until(a.until), workers=workers,
                                  scheduler=a.scheduler, spool=spool, on_progress=bar,
                                  budget_hours=a.budget_hours, command=_command(), notes=a.notes,
                                  builder=a.builder)
        elif sampled:
            from ..enumerator import sample
            tally = sample(space, cap, a.sample, seed=seed, deciders=deciders, workers=workers,
                           scheduler=a.scheduler, until=_until(a.until), spool=spool,
                           on_progress=bar, budget_hours=a.budget_hours)
        else:
            tally = build(space, cap, deciders=deciders, split_depth=a.split_depth, workers=workers,
                          scheduler=a.scheduler, shard=shard, spool=spool, budget_hours=a.budget_hours,
                          on_progress=bar, holdouts=a.holdouts is not None, keep_size=a.keep_size,
                          settle_size=_settle_size(a, space, cap))
    finally:
        bar.close()
    if getattr(tally, "spool_damaged", 0):
        print(f"ctmtab build: warning: {tally.spool_damaged} spool part(s) in {spool} failed their seal "
              "check (damaged, moved or from another build); their units were recomputed", file=sys.stderr)
    if base is None:
        table = Table.from_tally(tally, command=_command(), notes=a.notes, builder=a.builder,
                                 workers=workers_field)
        if sampled and a.keep_size is not None:
            table = table.cut_at(a.keep_size)
    try:
        table.save(output)
        if a.holdouts is not None:
            from ..enumerator import holdouts
            from ..fsutil import write_atomic
            write_atomic(a.holdouts, (holdouts.HEADER + "".join(holdouts.lines(space, tally.holdouts))).encode())
    except OSError as exc:  # the spool stays: the same command resumes once the cause is fixed
        if Path(spool).is_dir():
            exc.hint = f"the finished units are kept in {spool}; fix this and run the same command again"
        raise
    unused, others = tally.spool_clean() if getattr(tally, "spool_clean", None) else (0, [])
    if unused or others:  # even with -q: a folder left behind is worth a line
        what = [f"{unused} finished unit(s) this build did not use"] if unused else []
        if others:
            what.append(f"{len(others)} file(s) it did not write ({', '.join(map(repr, others[:3]))}"
                        + (", ..." if len(others) > 3 else "") + ")")
        print(f"ctmtab build: note: {_printable(spool)} was kept: it holds {' and '.join(what)}; remove it "
              "when no build needs them", file=sys.stderr)
    if not a.quiet:
        part = f" shard {shard[0]}/{shard[1]}," if shard else ""
        again = f", {tally.resumed} units resumed from {spool}" if tally.resumed else ""
        what = f"sampled machines (seed {seed})" if sampled else "machines"
        stop = ""
        if tally.until:
            worst = tally.until["worst_relative_error"]
            stop = f", stopped by the {tally.until['stopped_by']}" + (
                f" (worst relative error {worst:.3g} at size {tally.until['size']})" if worst is not None else "")
        added = ""
        if base is not None:
            added = (f"; the table now holds {table.header['sample']['size']:,} samples, {table.distinct:,} outputs, "
                     f"undecided {_percent(table.undecided / table.header['sample']['size'])}")
        left = ("exact (every run left at the cap proven by the step bound)" if tally.step_bound
                else "exact (every run decided, no step bound used)" if not tally.undecided and not sampled
                else f"undecided {_percent(tally.undecided / tally.weight)}")
        print(f"{space.label} cap {cap}:{part} {tally.weight:,} {what}, {tally.distinct():,} outputs, "
              f"{left}{stop}{added}, {time.perf_counter() - t0:.2f} s{again} "
              f"-> {output}", file=sys.stderr)
    return 0


def _settle_size(a, space, cap) -> int | None:
    """--settle-size, or by default the kept size where a run-on of that size is affordable."""
    from ..enumerator.driver import check_settle

    if a.settle_size is not None:
        return a.settle_size or None
    if a.keep_size is None:
        return None
    size = min(a.keep_size, cap)
    try:
        return check_settle(space, cap, size, a.keep_size)
    except CtmtabError:
        if not a.quiet:
            print(f"ctmtab build: note: no run-on past the cap, since one of size {size} could take too many "
                  "steps; give a smaller --settle-size for tight bounds on the small keys", file=sys.stderr)
        return None


def _percent(fraction: float) -> str:
    """A fraction as a percentage with three significant digits, so a small one is not 0.000%."""
    if not fraction:
        return "0%"
    pct = 100 * fraction
    return f"{pct:.3f}%" if pct >= 1 else f"{pct:.3g}%"


def cmd_info(a) -> int:
    from ..tables import load

    t = load(a.table)
    s = t.summary()
    if a.json:
        _emit({"file": t.source, **s}, True, "")
        return 0
    lines = [
        _line(t.source),
        f"  space      {s['label']} ({t.space.size:,} machines), cap {t.cap}, {s['mode']}"
        + (f", {s['sample']['size']:,} samples, seed {s['sample']['seed']}" if s.get("sample") else ""),
        f"  halting    {t.halting:,}  non-halting {t.non_halting:,}  undecided {t.undecided:,} "
        f"({_percent(s['undecided_fraction'])})",
        f"  keys       {s['distinct_keys']:,} distinct; "
        + (f"complete up to size {max([int(x.split('x')[0]) for x in s['complete_shapes']] or [0])}"
           if t.space.dims == 1 else f"complete at shapes {', '.join(s['complete_shapes']) or 'none'}"),
        f"  CTM        {s['ctm_min']:.4f} to {s['ctm_max']:.4f} bits" + (" (the kept keys)" if t.cut else "") if t.total
        else "  CTM        none: no run halted",
        f"  longest    {s['stats'].get('longest_run', '?')} steps, {s['stats'].get('most_nonblank', '?')} non-blank cells",
        f"  built      {_line(s['build'].get('created', '?'))}"
        + (f" by {_line(s['build']['by'])}" if s["build"].get("by") else "") + f" in {s['build'].get('seconds', '?')} s",
        f"  command    {_line(s['build'].get('command', ''))}",
        f"  generator  {_line(s['generator'].get('name', '?'))} {_line(s['generator'].get('version', '?'))}, "
        f"format {s['format'][0]}.{s['format'][1]}",
    ]
    if s["notes"]:
        lines.append(f"  notes      {_line(s['notes'])}")
    if t.cut is not None:
        c = t.cut
        lines.insert(4, f"  cut        keys up to size {c.keep_size} kept; {_keys(c)} of {len(c.dropped)} longer shapes "
                        f"dropped ({_percent(c.weight / t.total) if t.total else '0%'} of the counts, kept in the "
                        "total); lookups of them give a lower bound")
    if t.mode == "exhaustive":
        lines += _certificate_lines(t)
    if t.mode == "sampled":
        lines[1:2] = [lines[1], "  streams    " + ", ".join(f"seed {seed} ({n:,})" for seed, n in s["streams"])]
        lines.append(f"  error      relative standard error of each probability (95% interval ~ +-1.96x); "
                     f"{s['rare_keys']:,} keys seen in fewer than {s['min_seen']} samples")
        lines.append(f"  {'size':>6} {'keys':>10} {'median':>9} {'worst':>9} {'rare':>9}")
        rows = s["errors_by_size"]
        shown = next((i + 1 for i, r in enumerate(rows) if r["rare_keys"] == r["keys"]), len(rows))
        for r in rows[:shown]:
            lines.append(f"  {r['size']:>6} {r['keys']:>10,} {r['median_relative_error']:>9.3g} "
                         f"{r['worst_relative_error']:>9.3g} {r['rare_keys']:>9,}")
        if shown < len(rows):  # the long tail, where every key is rare (all of it is in --json)
            tail = rows[shown:]
            lines.append(f"  sizes {tail[0]['size']}-{tail[-1]['size']}: {sum(r['keys'] for r in tail):,} keys, "
                         f"{sum(r['rare_keys'] for r in tail):,} of them rare")
    print(_printable("\n".join(lines)))  # notes, command and builder come from the file
    return 0


def _node_funnel(cert) -> str:
    """Tree nodes left undecided after each proof in turn, from every node that did not halt."""
    left = sum(cert.proof_nodes.values()) + cert.nodes
    steps = [f"{left:,} did not halt"]
    for name, n in cert.proof_nodes.items():
        if n:
            left -= n
            steps.append(f"{name} {left:,}")
    return " -> ".join(steps) + " left"


def _certificate_lines(t) -> list:
    """What was proven, what remains undecided, and the widest certified interval per size."""
    cert = t.certificate
    if cert is None:
        return ["  certified  by the total undecided weight (a table older than format 1.3)"]
    out = []
    if cert.step_bound is not None:
        bound = cert.step_bound
        out.append(f"  exact      every run left at the cap is proven non-halting by the step bound "
                   f"S = {bound['steps']:,} ({bound['source']}): intervals are points")
    elif t.exact:
        out.append("  exact      every run halted or was proven non-halting by the proofs below, no step "
                   "bound used: intervals are points")
    elif cert.settle is not None and any(cert.settle["nodes"]):  # the count is the cap's, before the run-on
        out.append(f"  undecided  {cert.nodes:,} tree nodes were undecided at the cap; the run-on settled those "
                   f"within size {cert.settle['size']} (list the cap's with build --holdouts)")
    else:
        out.append(f"  undecided  {cert.nodes:,} tree nodes remain (list them with build --holdouts)")
    if cert.settle is not None:
        st = cert.settle
        if not any(st["nodes"]):
            out.append(f"  settled    keys up to size {st['size']} are certified for unbounded time: no node "
                       f"undecided at the cap fitted size {st['size']}")
        else:
            out.append(f"  settled    keys up to size {st['size']} are certified for unbounded time: every node "
                       f"undecided there was run on past the cap ({st['steps']:,} steps): {st['halting']:,} "
                       f"machines halted later, {st['proven']:,} repeat forever, the rest outgrew size {st['size']}")
    proofs = ", ".join(f"{name} {w:,}" for name, w in cert.proofs.items() if w)
    out.append(f"  proofs     {proofs or 'none'}")
    if cert.proof_nodes is not None:
        out.append("  nodes      " + _node_funnel(cert))
    widths = t.interval_widths()
    if widths:
        out.append("  widest certified interval by size (bits): " + ", ".join(
            f"{w['shape']}: {w['widest']:.3g}" for w in widths[:16]) + (" ..." if len(widths) > 16 else ""))
    return out


def cmd_lookup(a) -> int:
    from ..tables import load
    from .lookups import look_up, read_keys

    if a.min_seen < 0:
        raise CtmtabError(f"--min-seen {a.min_seen} is negative; give 0 (no warnings) or more")
    if a.keys_from.count("-") > 1:
        raise CtmtabError("--keys-from - is given twice; stdin can be read once")
    typed = [(None, k) for k in a.keys] + [x for src in a.keys_from for x in read_keys(src)]
    if not typed:
        raise CtmtabError("no keys to look up; give keys such as 0110, or --keys-from FILE (- for stdin)")
    t = load(a.table)
    t.min_seen = a.min_seen
    rows, rare = look_up(t, typed, a.missing)
    if a.json:
        _emit(rows, True, "")
    else:
        sampled = t.mode == "sampled"
        kind = "95% interval (sampled)" if sampled else {"step-bound": "exact (step bound)",
                                                          "proofs": "exact (every run decided)"}.get(
            t.exact_by, "certified interval")
        lines = [f"{'key':<20} {'count':>22} {'probability':>12}" + (f" {'std error':>10}" if sampled else "")
                 + f" {'CTM bits':>10}  {kind}, its width in bits"]
        for r in rows:
            if r.get("dropped"):
                lines.append(f"{r['key']:<20} {'dropped (size cut)':>22} {'':>12}" + (f" {'':>10}" if sampled else "")
                             + f" {'':>10}  CTM >= {r['ctm_low']:.4f}"
                             + (" (certified)" if not sampled else " (approximate 95%, from the sample)"))
                continue
            # the width as well: a certified interval 1.9e-05 bits wide prints as a point at 4 decimals
            lines.append(f"{r['key']:<20} {r['count']:>22,} {r['probability']:>12.6g}"
                         + (f" {r['standard_error']:>10.3g}" if sampled else "")
                         + f" {r['ctm']:>10.4f}  [{r['ctm_low']:.4f}, {r['ctm_high']:.4f}] width "
                         + f"{r['interval_width']:.2g}" + ("  settled" if r.get("settled") else ""))
        print("\n".join(lines))
    for key, times in rare[:10]:
        print(f"ctmtab lookup: warning: {key} was seen in {times:.3g} samples, fewer than "
              f"--min-seen {a.min_seen}; its estimate is rough", file=sys.stderr)
    if len(rare) > 10:
        print(f"ctmtab lookup: warning: {len(rare) - 10:,} more keys were seen in fewer than --min-seen "
              f"{a.min_seen} samples (--json marks each as rare)", file=sys.stderr)
    return 0


def cmd_list(a) -> int:
    from .catalog import BLOCK_RULE, catalog

    if not (a.tight >= 0 and math.isfinite(a.tight)):
        raise CtmtabError(f"--tight {a.tight} is not a width in bits; give a number >= 0, e.g. 0.1")
    rows = catalog(a.tight)
    if a.json:
        _emit({"block_rule": BLOCK_RULE.format(tight=a.tight), "tables": rows}, True, "")
        return 0
    head = f"{'name':<26} {'space':<9} {'cap':>11}  {'kind':<40} {'complete':>8} {'block':>6} {'file':>9}"
    lines = [head]
    for r in rows:
        kind = r["kind"] if r["kind"] == "exact" else f"{r['kind']}, {_percent(r['undecided_fraction'])} undecided"
        if r["settled_up_to"] and r["kind"] == "capped":
            kind += f", settled {r['settled_up_to']}"
        complete = r["complete_up_to"] or "none"
        complete = f"1-{complete}" if r["dims"] == 1 and complete != "none" else f"<={complete}"
        size = r["file_bytes"]
        size = f"{size / 1e6:.1f} MB" if size >= 1e6 else f"{size / 1e3:.1f} kB"
        lines.append(f"{r['name']:<26} {r['space']:<9} {r['cap']:>11,}  {kind:<40} {complete:>8} "
                     f"{str(r['block'] or '-'):>6} {size:>9}")
    lines.append(f"block: {BLOCK_RULE.format(tight=a.tight)}")
    print("\n".join(lines))
    return 0


def _block_arg(text, dims: int, flag: str):
    """--block, --stride: a length in 1D; RxC, or one side for a square, in 2D."""
    parts = text.lower().split("x") if text is not None else None
    if parts is None:
        return None
    if not all(p.isascii() and p.isdigit() and int(p) > 0 for p in parts) or len(parts) > dims or (
            dims == 1 and len(parts) != 1):
        want = "a whole number >= 1" if dims == 1 else "RxC such as 4x4, or one side such as 4"
        raise CtmtabError(f"{flag} {text!r} is not a size for this {dims}D table; give {want}")
    sizes = [int(p) for p in parts]
    return sizes[0] if dims == 1 else (sizes[0], sizes[-1])


def cmd_bdm(a) -> int:
    import warnings

    import numpy as np

    from ..tables import load
    from .bdm import BDM

    if a.min_seen < 0:
        raise CtmtabError(f"--min-seen {a.min_seen} is negative; give 0 (no warnings) or more")
    t = load(a.table)
    t.min_seen = a.min_seen
    dims = t.space.dims
    bdm = BDM(t, _block_arg(a.block, dims, "--block"), mode=a.boundary,
              stride=_block_arg(a.stride, dims, "--stride"), on_missing="ignore")
    inputs = read_inputs(a.input, t, a.alphabet)
    by_shape = {}
    for i, (_, x) in enumerate(inputs):
        by_shape.setdefault(x.shape, []).append(i)
    cols = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RareKeyWarning)  # counted per input, and told once below
        for idx in by_shape.values():
            part = bdm.estimate_many(np.stack([inputs[i][1] for i in idx]))
            for k, v in part.items():
                cols.setdefault(k, np.zeros(len(inputs), dtype=v.dtype))[idx] = v
    names = ["bdm"] + (["standard_error"] if t.mode == "sampled" else ["bdm_low", "bdm_high"]) + [
        "fallbacks", "rare", "dropped_cells"]
    label = "line" if dims == 1 and not a.input.endswith(".npy") else "input"
    if a.json:
        rows = [{label: int(lab)} for lab, _ in inputs]
        for k in names:
            for r, v in zip(rows, cols[k].tolist()):
                r[k] = v
        print(_json(rows, indent=1))
    else:
        table = [[label] + names] + [[lab] + [f"{cols[k][i]:.4f}" if cols[k].dtype.kind == "f" else f"{cols[k][i]}"
                                             for k in names] for i, (lab, _) in enumerate(inputs)]
        widths = [max(len(r[j]) for r in table) for j in range(len(table[0]))]
        print("\n".join("  ".join(c.rjust(w) for c, w in zip(r, widths)) for r in table))
    fell, blocks = int(cols["fallbacks"].sum()), int(cols["blocks"].sum())
    if fell:
        never = "seen in this sample" if t.mode == "sampled" else "produced by this table"
        hit = int(np.count_nonzero(cols["fallbacks"]))
        print(f"ctmtab bdm: warning: {fell:,} of the {blocks:,} blocks (in {hit:,} of {len(inputs):,} inputs) were "
              f"never {never} and were scored with the fallback value {t.fallback():.4f} bits; use smaller "
              "blocks or a table that holds them", file=sys.stderr)
    rare = int(cols["rare"].sum())
    if rare and a.min_seen > 0:
        print(f"ctmtab bdm: warning: {rare:,} blocks were seen in fewer than --min-seen {a.min_seen} samples; "
              "their CTM values are rough", file=sys.stderr)
    return 0


def cmd_verify(a) -> int:
    """Every file, each reported: a table that fails is 1, a file that cannot be read 2; the
    exit code is the worst."""
    from ..errors import NotATableError
    from ..tables import load, problems

    report, worst = [], 0
    for name in a.tables:
        code, notes = 0, []
        try:
            found = problems(load(name), notes)
            code = 1 if found else 0
        except NotATableError as exc:  # missing, empty, special or another kind of file: unreadable
            found, code = [str(exc)], 2
        except CtmtabError as exc:
            found, code = [str(exc)], 1
        except OSError as exc:
            found, code = [f"{exc.strerror}: {exc.filename}" if exc.strerror and exc.filename else str(exc)], 2
        worst = max(worst, code)
        report.append({"table": name, "ok": not found, "problems": found, "not_checked": notes})
        if not a.json:
            print(_printable(f"{name}: ok" if not found else f"{name}: FAILED\n" + "\n".join(f"  {p}" for p in found)))
            for note in notes:
                print(_printable(f"  not checked: {note}"))
    if a.json:
        _emit(report, True, "")
    return worst


def _keys(cut) -> str:
    return "keys (never collected: cut during the build)" if cut.keys is None else f"{cut.keys:,} keys"


def _not_an_input(output, inputs, flag: str, verb: str) -> None:
    """Refuse an output that is one of the command's input tables (by path, symlink, hard link or
    shipped name): writing it would replace what is being read."""
    from ..fsutil import same_file
    from ..tables.load import resolve

    for name in inputs:
        try:
            path = resolve(name)
        except CtmtabError:
            continue  # the load reports it
        if same_file(output, path):
            raise OutputError(f"{flag} {output} is the table being {verb} ({name}); writing it would destroy "
                              "the table. Give another file name")


def cmd_cut(a) -> int:
    from ..tables import load

    out = a.output or f"{Path(a.table).name.removesuffix('.ctmt')}-upto{a.keep_size}.ctmt"
    _not_an_input(out, [a.table], "-o", "cut")
    t = load(a.table)
    cut = t.cut_at(a.keep_size)
    cut.save(out)
    c = cut.cut
    print(f"{out}: kept {cut.distinct:,} keys up to size {c.keep_size}, dropped {_keys(c)} of "
          f"{len(c.dropped)} shapes ({_percent(c.weight / cut.total) if cut.total else '0%'} of the counts)",
          file=sys.stderr)
    return 0


def cmd_merge(a) -> int:
    from ..tables import load, merge

    _not_an_input(a.output, a.tables, "-o", "merged")
    merge([load(p) for p in a.tables], command=_command(), builder=a.builder, notes=a.notes).save(a.output)
    return 0


def cmd_export(a) -> int:
    from ..tables import load

    import io

    from ..fsutil import write_atomic

    if a.output:
        _not_an_input(a.output, [a.table], "-o", "exported")
    t = load(a.table)
    out = io.StringIO() if a.output else sys.stdout
    if a.format == "csv":
        t.write_csv(out)
    else:
        out.write(_json(t.to_json()) + "\n")  # strict JSON: null for a non-finite value
    if a.output:  # all or nothing under the final name
        write_atomic(a.output, out.getvalue().encode())
    return 0


def cmd_run(a) -> int:
    from ..enumerator.machine import run

    r = run(a.machine, a.max_steps, a.blank)
    obj = {"status": r.status, "steps": r.steps, "nonblank": r.nonblank, "cells": len(r.output),
           "head": r.head, "state": chr(65 + r.state),
           "output": r.output_text if len(r.output) <= 10_000 else None}
    what = (f"escapes after {r.steps:,} steps (from there on it moves into blank cells forever: it never halts)"
            if r.status == "escapes" else f"{r.status} after {r.steps:,} steps")
    text = (f"{what}; {r.nonblank:,} non-blank of {len(r.output):,} visited cells"
            + (f"\n{r.output_text}" if len(r.output) <= 200 else ""))
    _emit(obj, a.json, text)
    return 0


def cmd_validate(a) -> int:
    from ..tables import load
    from .validate import resolve, shapes_from_text, validate, values_from_csv

    require("scipy.stats", *(["matplotlib"] if a.plot else []), load=False)  # before any work
    if a.worst < 0:
        raise CtmtabError(f"--worst {a.worst} is negative; give 0 or more")
    if a.plot:
        _not_an_input(a.plot, [a.table] + ([a.values] if a.values else []), "--plot", "validated")
        from .plots import figure_format
        figure_format(a.plot)  # before any work: a figure it cannot write fails fast
    est = resolve(a.estimator) if a.estimator else None  # before the load: bad input fails fast
    vals = values_from_csv(a.values) if a.values else None
    t = load(a.table)
    rep = validate(t, est, vals, sizes=shapes_from_text(t, a.sizes), worst=a.worst)
    if rep.rare:  # one line for all of them: a sampled table can hold millions of rare keys
        print(f"ctmtab validate: warning: {rep.rare:,} of the {rep.keys:,} keys were seen in fewer than "
              f"{t.min_seen} samples; their CTM values are rough", file=sys.stderr)
    if a.plot:
        from .plots import plot_report
        plot_report(rep, a.plot, title=a.estimator or Path(a.values).name)
    if a.json:
        _emit(rep.to_dict(), True, "")
        return 0
    ref = f"{rep.reference} CTM" + (" of a sampled table" if rep.sampled else "")
    print(f"{rep.scored:,} of {rep.keys:,} keys scored ({rep.coverage:.1%}), against the {ref}")
    # within sizes first: pooled over lengths, a correlation mostly says that longer keys score higher
    if "within" in rep.undefined:
        print(f"within sizes: Spearman and Kendall undefined ({rep.undefined['within']})")
    else:
        print(f"within sizes: Spearman {rep.spearman:+.4f}   Kendall {rep.kendall:+.4f}   "
              "(the per-size correlations' mean, weighted by keys scored)")
    if "pooled" in rep.undefined:  # NaN in words: no rank correlation exists here
        print(f"pooled:       Spearman and Kendall undefined ({rep.undefined['pooled']})")
    else:
        print(f"pooled:       Spearman {rep.spearman_pooled:+.4f}   Kendall {rep.kendall_pooled:+.4f}   "
              "(every size at once, so key length weighs in)")
    print(f"mean absolute error after a linear fit {rep.mae_linear:.3f} bits")
    print(f"{'size':>6} {'keys':>7} {'Spearman':>9} {'Kendall':>9}")
    for s, r in rep.by_size.items():
        if s in rep.undefined:
            print(f"{s:>6} {r['keys']:>7} {'undefined':>9} ({rep.undefined[s]} at this size)")
        else:
            print(f"{s:>6} {r['keys']:>7} {r['spearman']:>+9.3f} {r['kendall']:>+9.3f}")
    print(f"worst disagreements ({ref} vs the fitted estimate):")
    for w in rep.worst:
        print(f"  {w['key']:>16}  {rep.reference} {w['reference']:8.3f}  fitted {w['fitted']:8.3f}")
    return 0


def _output_dir(folder: str) -> None:
    p = Path(folder)
    if (p.exists() or p.is_symlink()) and not p.is_dir():
        raise CtmtabError(f"-o {folder} is a file, not a folder; give a folder for the figures "
                          "(figures of the same name in it are replaced)")


def cmd_plot(a) -> int:
    from ..tables import load
    from .plots import plot_table

    require("matplotlib", load=False)  # before any work; the plots import it
    _output_dir(a.output_dir)
    for path in plot_table(load(a.table), a.output_dir):
        print(path)
    return 0


def cmd_demo(a) -> int:
    from .demo import run

    _output_dir(a.output_dir)
    run(a.output_dir)
    return 0


COMMANDS = {"bdm": cmd_bdm, "validate": cmd_validate, "plot": cmd_plot, "demo": cmd_demo, "build": cmd_build,
            "info": cmd_info, "lookup": cmd_lookup, "list": cmd_list, "verify": cmd_verify, "merge": cmd_merge,
            "cut": cmd_cut, "trim": cmd_cut, "export": cmd_export, "run": cmd_run}


_OS_HINTS = {
    errno.ENOSPC: "the disk or device is full; free some space, or write somewhere else",
    errno.EDQUOT: "the disk quota is used up; free some space, or write somewhere else",
    errno.EROFS: "the file system is read-only; write somewhere else",
    errno.EACCES: "check the permissions, or write somewhere else",
    errno.EPERM: "check the permissions, or write somewhere else",
}


def _os_error_line(exc: OSError) -> str:
    """One line for any OSError: what failed on which file, and what to do."""
    where = exc.filename or "standard output"
    reason = exc.strerror or str(exc)
    hint = getattr(exc, "hint", None) or _OS_HINTS.get(exc.errno)
    return f"{where}: {reason}" + (f"; {hint}" if hint else "")


def _quiet_stdout() -> None:
    """After a failed write to stdout, point it at the null device so the exit flush cannot fail
    again and print a traceback (the recipe of the Python signal docs)."""
    if sys.stdout is not sys.__stdout__:  # redirected in-process (tests): not ours to touch
        return
    try:
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
    except (OSError, ValueError, AttributeError):
        pass


def main(argv=None) -> int:
    if hasattr(signal, "SIGPIPE"):
        signal.signal(signal.SIGPIPE, signal.SIG_DFL)  # `ctmtab export ... | head` ends quietly
    parser = _parser()
    args, extra = parser.parse_known_args(argv)
    if args.command == "bdm" and args.input == "-" and len(extra) == 1 and (extra[0] == "-" or not extra[0].startswith("-")):
        args.input = extra[0]  # FILE after an option: argparse leaves an optional positional unfilled there
    elif extra:
        parser.error(f"unrecognized arguments: {' '.join(extra)}")
    try:
        if args.command in ("build", "merge"):  # the commands that store their command line
            _check_text(sys.argv[1:] if argv is None else argv)
            _check_fields(args)
        code = COMMANDS[args.command](args)
        sys.stdout.flush()  # a full stdout fails here, inside the handlers below
        return code
    except CtmtabError as exc:
        print(f"ctmtab {args.command}: {exc}", file=sys.stderr)
        return exc.exit_code
    except OSError as exc:
        if exc.filename is None:
            _quiet_stdout()
        if exc.errno == errno.EPIPE:  # the reader went away: nothing more to say to it
            return 141
        print(f"ctmtab {args.command}: {_os_error_line(exc)}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"ctmtab {args.command}: interrupted", file=sys.stderr)
        _exit_now_if_threads_hang(130)
        return 130


def _exit_now_if_threads_hang(code: int) -> None:
    """After an interrupt, a process pool's manager thread can stay blocked on a queue that a
    killed worker held (seen under heavy load), and the interpreter's exit joins it forever.
    Every write is atomic and done by now, so end the process at once; only when running as the
    command (tests that call main() in-process keep their threads)."""
    if sys.stdout is not sys.__stdout__:
        return
    others = [t for t in threading.enumerate() if t is not threading.main_thread() and t.is_alive()
              and not t.daemon]
    for t in others:
        t.join(timeout=2)
    if any(t.is_alive() for t in others):
        sys.stdout.flush()
        sys.stderr.flush()
        os._exit(code)


if __name__ == "__main__":
    sys.exit(main())
