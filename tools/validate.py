"""Validating any estimator against a table's CTM values: exact ones, or for capped and sampled
tables the reference values they give.

Longer keys have larger CTM and so do most estimates of them, so a correlation over keys of
every length mostly measures that keys differ in length. The headline is therefore the mean of
the correlations within each size, weighted by the keys scored at each size; the pooled figure
comes second, labelled pooled."""
from __future__ import annotations

import csv
import importlib
import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import CtmtabError
from ..extras import require
from ..tables import keys, sampled
from .baselines import CODECS, block_entropy, compressed_bits

BUILTINS = ("zlib", "lzma", "bz2", "entropy")


def builtin(name: str):
    if name in CODECS:
        return lambda key: compressed_bits(key, name)
    if name == "entropy":
        return lambda key: block_entropy(key, 1)
    raise CtmtabError(f"unknown estimator {name!r}; use one of {', '.join(BUILTINS)}, module:function, "
                      "or --values FILE.csv")


def resolve(spec: str):
    """A built-in name, or module:function taking a key text and returning a number."""
    if ":" not in spec:
        return builtin(spec)
    mod, _, fn = spec.partition(":")
    if not mod.strip() or not fn.strip():
        raise CtmtabError(f"estimator {spec!r} names no module or no function; give module:function, "
                          "e.g. mypkg.scores:score")
    try:
        found = getattr(_import_here(mod), fn)
    except Exception as exc:  # any failure while importing user code is bad input, not a crash
        raise CtmtabError(f"cannot import estimator {spec!r} ({_one_line(exc)}); give module:function "
                          "in the current folder or on PYTHONPATH") from None
    if not callable(found):
        raise CtmtabError(f"estimator {spec!r} names a {type(found).__name__} value, not a function; "
                          "give module:function")
    return found


def _import_here(name: str):
    """Import a user's module as `python -c` would: from the current folder first. The console
    script's sys.path lacks it, so it goes in for this import only."""
    import os
    import sys

    here = os.getcwd()
    sys.path.insert(0, here)
    try:
        return importlib.import_module(name)
    finally:
        try:
            sys.path.remove(here)  # the first entry equal to it: the one put in above
        except ValueError:
            pass


def _one_line(exc: BaseException) -> str:
    text = " ".join(str(exc).split())
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__


def values_from_csv(path) -> dict:
    """key,value rows (a header line is skipped) -> {key: float}. UTF-8, with or without a
    byte-order mark; a key given twice is refused (which value was meant is unknowable)."""
    out, first = {}, {}
    try:
        with open(path, newline="", encoding="utf-8-sig") as f:
            for i, row in enumerate(csv.reader(f)):
                if not row or (i == 0 and not _is_number(row[-1])):
                    continue
                if len(row) != 2 or not _is_number(row[1]):
                    raise CtmtabError(f"{path}: line {i + 1} is not key,value; fix the file")
                if not math.isfinite(float(row[1])):  # a NaN would silently leave the key unscored
                    raise CtmtabError(f"{path}: line {i + 1} gives the value {row[1].strip()!r}, not a finite "
                                      "number; give a number, or leave the key out")
                key = row[0].strip()
                if key in first:
                    raise CtmtabError(f"{path}: key {key!r} on line {i + 1} was already given on line "
                                      f"{first[key]}; keep one value per key")
                first[key] = i + 1
                out[key] = float(row[1])
    except FileNotFoundError:
        raise CtmtabError(f"no values file {path}; check the path") from None
    except UnicodeDecodeError as exc:
        raise CtmtabError(f"{path} is not UTF-8 text (byte 0x{exc.object[exc.start]:02x} at offset "
                          f"{exc.start}); save it as UTF-8") from None
    except csv.Error as exc:
        raise CtmtabError(f"{path} is not a CSV file ({_one_line(exc)}); give key,value rows") from None
    return out


def shapes_from_text(table, text: str | None):
    """--sizes text -> the table's shapes it selects (None: all). 1D: lengths and ranges such as
    5-11; 2D: shapes such as 3x3. Ranges are matched against the table's own sizes, so a huge
    range costs nothing."""
    if text is None:
        return None
    have = table.shapes
    out = []
    for part in text.split(","):
        part = part.strip()
        try:
            if "x" in part:
                shape = tuple(int(v) for v in part.split("x"))
                if len(shape) != table.space.dims or min(shape) < 1:
                    raise ValueError
                out.append(shape)
            elif "-" in part:
                lo, hi = (int(v) for v in part.split("-"))
                if table.space.dims != 1 or lo < 1 or lo > hi:
                    raise ValueError
                out += [s for s in have if lo <= s[0] <= hi]
            else:
                n = int(part)
                if table.space.dims != 1 or n < 1:
                    raise ValueError
                out.append((n,))
        except ValueError:
            kind = "a length, a range like 5-11" if table.space.dims == 1 else "a shape like 3x3"
            raise CtmtabError(f"--sizes {text!r}: {part!r} is not {kind} for this "
                              f"{table.space.dims}D table") from None
    return list(dict.fromkeys(out))


def _is_number(text: str) -> bool:
    """A plain ASCII decimal number; float() alone also takes "1_0" and other scripts' digits."""
    if not text.isascii() or "_" in text:
        return False
    try:
        float(text)
        return True
    except ValueError:
        return False


def canonical_values(table, values: dict) -> dict:
    """values re-keyed by the table's own key text (tables/keys.py), so "0.1.1.0" scores the key
    0110. Text that is no key (an ambiguous spelling over 10 symbols, a sign, a leading zero), or
    one key given under two spellings, is refused; a key of other symbols or dimensions than the
    table's is left out, unscored like any key the table lacks."""
    m, dims = table.space.symbols, table.space.dims
    out, spelled = {}, {}
    for text, value in values.items():
        try:
            cells = keys.parse(str(text), m, "the values' key")
        except keys.OutsideAlphabetError:
            continue
        except CtmtabError as exc:
            raise CtmtabError(f"{exc} (keys are written as export writes them)") from None
        if dims == 2 and cells.ndim == 1:
            cells = cells[None, :]
        if cells.ndim != dims or cells.max() >= m:
            continue
        key = keys.write(m, cells.shape, cells.reshape(-1))
        if key in out:
            raise CtmtabError(f"the values give the key {key} twice, as {spelled[key]!r} and {text!r}; "
                              "keep one value per key")
        out[key], spelled[key] = value, text
    return out


WITHIN = "mean of the per-size correlations, weighted by the keys scored at each size"


@dataclass
class Report:
    keys: int
    scored: int
    spearman: float  # within sizes (WITHIN): the headline
    kendall: float
    mae_linear: float
    slope: float
    intercept: float
    by_size: dict = field(default_factory=dict)
    worst: list = field(default_factory=list)
    pairs: tuple = (None, None)  # reference CTM, estimated arrays (for plots)
    rare: int = 0  # sampled tables: keys scored that were seen in fewer than table.min_seen samples
    undefined: dict = field(default_factory=dict)  # "within", "pooled" or a size -> why its correlations are NaN
    spearman_pooled: float = math.nan  # over every key at once: driven by key length
    kendall_pooled: float = math.nan
    reference: str = "exact"  # "exact", or "reference" for a capped or sampled table
    sampled: bool = False
    errors: np.ndarray | None = None  # sampled tables: each scored key's CTM standard error, bits

    @property
    def coverage(self) -> float:
        return self.scored / self.keys if self.keys else 0.0

    def to_dict(self) -> dict:
        return {"keys": self.keys, "scored": self.scored, "coverage": self.coverage,
                "spearman": self.spearman, "kendall": self.kendall, "headline": WITHIN,
                "spearman_pooled": self.spearman_pooled, "kendall_pooled": self.kendall_pooled,
                "reference": f"{self.reference} CTM" + (" (sampled)" if self.sampled else ""),
                "mae_after_linear_fit": self.mae_linear,
                "fit": {"slope": self.slope, "intercept": self.intercept},
                "by_size": self.by_size, "worst": self.worst, "rare_keys": self.rare,
                "undefined": self.undefined}


def _corr(exact: np.ndarray, est: np.ndarray, ref: str = "exact") -> tuple:
    """(Spearman, Kendall, None), or (NaN, NaN, why in words) where no rank correlation exists."""
    from scipy import stats

    if len(exact) < 2:
        return math.nan, math.nan, "fewer than 2 keys scored"
    if np.ptp(exact) == 0:
        return math.nan, math.nan, f"every key scored has the same {ref} CTM"
    if np.ptp(est) == 0:
        return math.nan, math.nan, "the estimator is constant"
    return float(stats.spearmanr(exact, est).statistic), float(stats.kendalltau(exact, est).statistic), None


def validate(table, estimator=None, values: dict | None = None, sizes=None, worst: int = 10) -> Report:
    """Score every key of the chosen sizes (lengths in 1D, shapes in 2D; default all) with the
    estimator (a callable on the key text) or with given values, against the table's CTM (exact,
    or the reference values of a capped or sampled table)."""
    if (estimator is None) == (values is None):
        raise CtmtabError("give an estimator or a values file, not both")
    require("scipy.stats")  # the [stats] extra, checked before the scoring
    if values is not None:
        values = canonical_values(table, values)
    shapes = table.shapes if sizes is None else [(s,) if isinstance(s, int) else tuple(s) for s in sizes]
    keys, exact, est, size, errs = [], [], [], [], []
    rare = 0
    log_total = math.log2(table.total) if table.total else math.nan
    for shape in shapes:
        if shape in table.groups and table.mode == "sampled" and table.min_seen > 0:
            rare += int(np.count_nonzero(table.group_seen(table.groups[shape]) < table.min_seen))
        if table.mode == "sampled" and shape in table.groups:  # items() runs in group order
            errs.append(sampled.ctm_errors(table, table.groups[shape]))
        for key, count in table.items(shape):
            keys.append(key)
            exact.append(log_total - math.log2(count))  # table.ctm(key), without a lookup per key
            size.append("x".join(map(str, shape)))
            if values is not None:
                est.append(values.get(key, math.nan))
                continue
            try:
                v = estimator(key)
            except Exception as exc:  # a broken estimator must not pass for one that covers nothing
                raise CtmtabError(f"the estimator failed on key {key!r} ({_one_line(exc)}); fix it, or "
                                  "return NaN for keys it cannot score") from None
            try:
                est.append(float(v))
            except (TypeError, ValueError):
                raise CtmtabError(f"the estimator returned {v!r:.60} for key {key!r}, not a number; "
                                  "return a number, or NaN for keys it cannot score") from None
    if not keys:
        held = ", ".join("x".join(map(str, x)) for x in table.shapes[:4]) + (", ..." if len(table.shapes) > 4 else "")
        raise CtmtabError(f"the table holds no keys of the chosen sizes (it holds sizes {held or 'none'}); "
                          "choose others with --sizes")
    exact, est = np.array(exact), np.array(est, dtype=float)
    ok = np.isfinite(est)
    if not ok.any():  # nothing to compare: say so rather than print NaN correlations
        why = ("the values file names none of them (keys are symbol strings such as "
               f"{keys[0]!r})" if values is not None else "the estimator gave NaN or inf for every one")
        raise CtmtabError(f"none of the {len(keys):,} keys was scored: {why}")
    e, v = exact[ok], est[ok]
    ref = "exact" if table.exact else "reference"
    rho, tau, why = _corr(e, v, ref)
    undefined = {} if why is None else {"pooled": why}
    if ok.sum() >= 2 and np.ptp(v) > 0:
        slope, intercept = np.polyfit(v, e, 1)
    else:
        slope, intercept = 0.0, float(np.mean(e)) if len(e) else math.nan
    resid = e - (slope * v + intercept)
    mae = float(np.mean(np.abs(resid))) if len(e) else math.nan
    by_size = {}
    sizes_arr = np.array(size)
    for s in dict.fromkeys(size):
        sel = (sizes_arr == s) & ok
        r, t, why = _corr(exact[sel], est[sel], ref)
        if why is not None:
            undefined[s] = why
        by_size[s] = {"keys": int((sizes_arr == s).sum()), "scored": int(sel.sum()), "spearman": r, "kendall": t}
    within = [(r["scored"], r["spearman"], r["kendall"]) for s, r in by_size.items() if s not in undefined]
    if within:
        n = sum(w for w, _, _ in within)
        rho_in, tau_in = (sum(w * x for w, x, _ in within) / n, sum(w * x for w, _, x in within) / n)
    else:
        rho_in = tau_in = math.nan
        undefined["within"] = "no size has a rank correlation"
    order = np.argsort(-np.abs(resid))[:worst]
    kept = np.array(keys)[ok]
    worst_rows = [{"key": str(kept[i]), "reference": float(e[i]), "estimate": float(v[i]),
                   "fitted": float(slope * v[i] + intercept)} for i in order]
    errors = np.concatenate(errs)[ok] if table.mode == "sampled" else None
    return Report(len(keys), int(ok.sum()), rho_in, tau_in, mae, float(slope), float(intercept),
                  by_size, worst_rows, (e, v), rare, undefined, rho, tau, ref, table.mode == "sampled", errors)
