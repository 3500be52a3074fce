"""What a table says about itself: the summary behind `info`, and the CSV and JSON exports."""
from __future__ import annotations

import math

import numpy as np

from . import format as fmt
from . import sampled


def summary(t) -> dict:
    # the rarest key has the largest CTM, the commonest the smallest
    top = max((max(g.counts) for g in t.groups.values()), default=0)
    low = min((min(g.counts) for g in t.groups.values()), default=0)
    log_total = math.log2(t.total) if t.total else math.nan
    return {
        "space": t.space.to_dict(),
        "label": t.space.label,
        "cap": t.cap,
        "mode": t.mode,
        "space_size": t.space_size,
        "halting": t.halting,
        "non_halting": t.non_halting,
        "undecided": t.undecided,
        "undecided_fraction": t.undecided / (t.header["sample"]["size"] if t.mode == "sampled"
                                                else t.space_size),
        "sample": t.header.get("sample"),
        "distinct_keys": t.distinct,
        "keys_by_shape": {"x".join(map(str, s)): len(t.groups[s]) for s in t.shapes},
        "complete_shapes": ["x".join(map(str, s)) for s in t.shapes
                            if len(t.groups[s]) == t.space.symbols ** math.prod(s)],
        "ctm_min": log_total - math.log2(int(top)) if top else math.nan,
        "ctm_max": log_total - math.log2(int(low)) if low else math.nan,
        "stats": t.header.get("stats", {}),
        "deciders": t.header.get("deciders", []),
        "certificate": certificate_summary(t),
        "cut": None if t.cut is None else {
            "keep_size": t.cut.keep_size, "dropped_keys": t.cut.keys, "dropped_weight": t.cut.weight,
            "dropped": [{"shape": "x".join(map(str, sh)), "weight": w, "keys": k, "largest_count": top}
                        for sh, (w, k, top) in sorted(t.cut.dropped.items())]},
        "format": t.header.get("_format", [fmt.MAJOR, fmt.MINOR]),
        "generator": t.header.get("generator", {}),
        "build": t.header.get("build", {}),
        "notes": t.header.get("notes", ""),
        **(sample_summary(t) if t.mode == "sampled" else {}),
    }


def certificate_summary(t) -> dict | None:
    cert = t.certificate
    if cert is None or t.mode != "exhaustive":
        return None
    return {"exact": t.exact, "exact_by": t.exact_by, "step_bound": cert.step_bound, "undecided_nodes": cert.nodes,
            "proofs": dict(cert.proofs), "proof_nodes": cert.proof_nodes,
            "settle": None if cert.settle is None else {k: v for k, v in cert.settle.items() if k != "late_keys"},
            "widest_interval_by_shape": t.interval_widths()}


def sample_summary(t) -> dict:
    """Per output size (1D length, 2D longer side): keys seen, the median and worst relative
    standard error, and the keys seen fewer than min_seen times."""
    by_size: dict = {}
    for shape in t.shapes:
        rel = sampled.relative_errors(t, shape)
        entry = by_size.setdefault(max(shape), {"rel": [], "rare": 0})
        entry["rel"].append(rel)
        entry["rare"] += int(np.count_nonzero(sampled.group_seen(t.groups[shape]) < t.min_seen))
    rows = []
    for size, entry in sorted(by_size.items()):
        rel = np.concatenate(entry["rel"])
        rows.append({"size": size, "keys": len(rel), "median_relative_error": float(np.median(rel)),
                     "worst_relative_error": float(rel.max()), "rare_keys": entry["rare"]})
    return {"streams": [list(x) for x in t.streams], "min_seen": t.min_seen,
            "rare_keys": sum(r["rare_keys"] for r in rows), "errors_by_size": rows}


def write_csv(t, out) -> None:
    """One row per key: the exact count, and for sampled tables the probability, its standard
    error, the CTM and its 95% interval (not certified)."""
    if t.mode != "sampled":  # the exact count, the CTM and its certified interval
        out.write("key,count,ctm,ctm_low,ctm_high\n")
        log_total = math.log2(t.total) if t.total else math.nan
        for shape in t.shapes:
            g = t.groups[shape]
            low, high = t._certified(shape, g.counts, g.rows(t.space.symbols))
            for row, c, lo, hi in zip(g.rows(t.space.symbols), g.counts, low, high):
                out.write(f"{t.key_text(shape, row)},{int(c)},{log_total - math.log2(int(c)):.6g},"
                          f"{lo:.6g},{hi:.6g}\n")
        return
    out.write("key,count,probability,standard_error,ctm,ctm_low,ctm_high\n")
    if not t.total:
        return  # no halting sample: no rows
    log_total = math.log2(t.total)
    for shape in t.shapes:
        g = t.groups[shape]
        counts = np.asarray(g.counts, dtype=np.float64)
        p = counts / t.total
        se = sampled.errors(t, counts, np.asarray(g.moments, dtype=np.float64))
        low, high = sampled.interval95(p, se)
        for row, c, pi, e, lo, hi in zip(g.rows(t.space.symbols), g.counts, p, se, low, high):
            out.write(f"{t.key_text(shape, row)},{int(c)},{pi:.6g},{e:.3g},"
                      f"{log_total - math.log2(int(c)):.6g},{lo:.6g},{hi:.6g}\n")


def to_json(t) -> dict:
    meta = {k: v for k, v in t.header.items() if k not in ("body",) and not k.startswith("_")}
    return {"meta": meta, "counts": dict(t.items()),
            "hist_steps": t.steps_hist.tolist(), "hist_len": t.length_hist.tolist()}
