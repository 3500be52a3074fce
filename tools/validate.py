"""Validating any estimator against a table's exact CTM values."""
from __future__ import annotations

import csv
import importlib
import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import CtmtabError
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
    try:
        return getattr(importlib.import_module(mod), fn)
    except (ImportError, AttributeError) as exc:
        raise CtmtabError(f"cannot import estimator {spec!r} ({exc}); give module:function on PYTHONPATH") from None


def values_from_csv(path) -> dict:
    """key,value rows (a header line is skipped) -> {key: float}."""
    out = {}
    try:
        with open(path, newline="") as f:
            for i, row in enumerate(csv.reader(f)):
                if not row or (i == 0 and not _is_number(row[-1])):
                    continue
                if len(row) != 2 or not _is_number(row[1]):
                    raise CtmtabError(f"{path}: line {i + 1} is not key,value; fix the file")
                out[row[0].strip()] = float(row[1])
    except FileNotFoundError:
        raise CtmtabError(f"no values file {path}; check the path") from None
    return out


def _is_number(text: str) -> bool:
    try:
        float(text)
        return True
    except ValueError:
        return False


@dataclass
class Report:
    keys: int
    scored: int
    spearman: float
    kendall: float
    mae_linear: float
    slope: float
    intercept: float
    by_size: dict = field(default_factory=dict)
    worst: list = field(default_factory=list)
    pairs: tuple = (None, None)  # exact, estimated arrays (for plots)

    @property
    def coverage(self) -> float:
        return self.scored / self.keys if self.keys else 0.0

    def to_dict(self) -> dict:
        return {"keys": self.keys, "scored": self.scored, "coverage": self.coverage,
                "spearman": self.spearman, "kendall": self.kendall, "mae_after_linear_fit": self.mae_linear,
                "fit": {"slope": self.slope, "intercept": self.intercept},
                "by_size": self.by_size, "worst": self.worst}


def _corr(exact: np.ndarray, est: np.ndarray) -> tuple:
    from scipy import stats

    if len(exact) < 2 or np.ptp(exact) == 0 or np.ptp(est) == 0:
        return math.nan, math.nan
    return float(stats.spearmanr(exact, est).statistic), float(stats.kendalltau(exact, est).statistic)


def validate(table, estimator=None, values: dict | None = None, sizes=None, worst: int = 10) -> Report:
    """Score every key of the chosen sizes (lengths in 1D, shapes in 2D; default all) with the
    estimator (a callable on the key text) or with given values, against the exact CTM."""
    if (estimator is None) == (values is None):
        raise CtmtabError("give an estimator or a values file, not both")
    shapes = table.shapes if sizes is None else [(s,) if isinstance(s, int) else tuple(s) for s in sizes]
    keys, exact, est, size = [], [], [], []
    for shape in shapes:
        for key, _count in table.items(shape):
            keys.append(key)
            exact.append(table.ctm(key))
            size.append("x".join(map(str, shape)))
            if values is not None:
                est.append(values.get(key, math.nan))
            else:
                try:
                    v = float(estimator(key))
                except Exception:  # an estimator that cannot score a key counts as uncovered
                    v = math.nan
                est.append(v)
    if not keys:
        raise CtmtabError("the table holds no keys of the chosen sizes")
    exact, est = np.array(exact), np.array(est, dtype=float)
    ok = np.isfinite(est)
    e, v = exact[ok], est[ok]
    rho, tau = _corr(e, v)
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
        r, t = _corr(exact[sel], est[sel])
        by_size[s] = {"keys": int((sizes_arr == s).sum()), "scored": int(sel.sum()), "spearman": r, "kendall": t}
    order = np.argsort(-np.abs(resid))[:worst]
    kept = np.array(keys)[ok]
    worst_rows = [{"key": str(kept[i]), "exact": float(e[i]), "estimate": float(v[i]),
                   "fitted": float(slope * v[i] + intercept)} for i in order]
    return Report(len(keys), int(ok.sum()), rho, tau, mae, float(slope), float(intercept),
                  by_size, worst_rows, (e, v))
