"""Sampled tables: standard errors, how often each key was seen, and the warning for rare keys
(exhaustive tables are exact: their errors are 0)."""
from __future__ import annotations

import math
import warnings

import numpy as np

from ..errors import RareKeyWarning
from ..model.stats import relative_sample_errors, sample_errors
from .group import Group


def standard_error(t, key) -> float:
    """Sampled tables: the standard error of the probability estimate (delta method, see
    model/stats.py). Exhaustive tables are exact: 0."""
    if t.mode != "sampled":
        return 0.0
    t.require_halting()
    shape, pos = t._find(key)
    if pos < 0:
        return math.nan  # never seen: see interval() for its one-sided bound
    return float(errors(t, int(t.groups[shape].counts[pos]), int(t.groups[shape].moments[pos])))


def seen(t, key) -> float:
    """Sampled tables: how many samples produced the key, S1^2 / S2 (exact when each of them
    gave it the same number of images; the count alone overstates keys that are their own
    images, such as 0000). Exhaustive tables: its count."""
    shape, pos = t._find(key)
    t._refuse_dropped(key, shape)
    if pos < 0:
        return 0.0
    g = t.groups[shape]
    if t.mode != "sampled":
        return float(g.counts[pos])
    return float(seen_of(np.float64(g.counts[pos]), np.float64(g.moments[pos])))


def errors(t, s1, s2, formula=sample_errors):
    sample = t.header["sample"]
    return formula(s1, s2, sample["size"], sample["images_per_sample"], t.halting)


def relative_errors(t, shape) -> np.ndarray:
    """Sampled tables: standard error / estimate for every key of one shape seen, in key order."""
    shape = (shape,) if isinstance(shape, int) else tuple(shape)
    g = t.groups.get(shape)
    if t.mode != "sampled" or g is None:
        return np.zeros(0 if g is None else len(g))
    return errors(t, np.asarray(g.counts, dtype=np.float64), np.asarray(g.moments, dtype=np.float64),
                        relative_sample_errors)


def rare(t, min_seen: int | None = None) -> int:
    """Sampled tables: how many keys were seen fewer than min_seen times (default
    t.min_seen); their estimates are rough. Exhaustive tables: 0."""
    limit = t.min_seen if min_seen is None else min_seen
    if t.mode != "sampled":
        return 0
    return sum(int(np.count_nonzero(group_seen(g) < limit)) for g in t.groups.values())


def group_seen(g: Group) -> np.ndarray:
    """How many samples produced each key of one group (S1^2 / S2)."""
    return seen_of(np.asarray(g.counts, dtype=np.float64), np.asarray(g.moments, dtype=np.float64))


def warn_rare(t, key, c) -> None:
    if t.mode == "sampled" and c > 0 and t.min_seen > 0:
        times = seen(t, key)
        if times < t.min_seen:
            warnings.warn(RareKeyWarning(
                f"{key!r} was seen in {times:.3g} samples, fewer than {t.min_seen}; its estimate "
                "is rough (sample more, or set min_seen to silence this)"), stacklevel=3)


def moments_of(t, shape, rows) -> np.ndarray:
    g = t.groups.get(shape)
    if g is None:
        return np.zeros(len(rows))
    pos = t._position(shape, np.ascontiguousarray(rows, dtype=np.uint8))
    vals = np.asarray(g.moments, dtype=np.float64)
    return np.where(pos >= 0, vals[np.maximum(pos, 0)], 0.0)


def seen_of(s1, s2):
    """Samples behind a key: S1^2 / S2 (n samples of x images each give n x^2 / x^2 = n)."""
    return s1 * s1 / s2


def ctm_errors(t, g: Group) -> np.ndarray:
    """The standard error of each key's CTM in one group, in bits: se(p) / (p ln 2) (delta method)."""
    counts = np.asarray(g.counts, dtype=np.float64)
    return errors(t, counts, np.asarray(g.moments, dtype=np.float64)) / (counts / t.total) / math.log(2)


def unseen_bound(t) -> float:
    """The CTM lower bound of a key never seen in H halting samples: p <= 3/H at 95% (the rule
    of three)."""
    return math.log2(t.halting / 3) if t.halting > 3 else 0.0


def interval95(p, se):
    """CTM bounds, in bits, of the approximate 95% interval p +- 1.96 se (numpy); inf where a
    bound of the probability is not above 0."""
    hi_p, lo_p = p + 1.96 * se, p - 1.96 * se
    with np.errstate(divide="ignore", invalid="ignore"):
        low = np.where(hi_p > 0, -np.log2(np.maximum(hi_p, 1e-300)), np.inf)
        high = np.where(lo_p > 0, -np.log2(np.maximum(lo_p, 1e-300)), np.inf)
    return low, high
