"""A worked demo in an invented setting (demo data only, never a check value).

The Tidewater Rhythm Lab (a fictional lab) asks volunteers to tap left (0) or right (1)
"as randomly as you can". Its in-house complexity score counts switches between left and
right. Before using the score in a study, the lab checks it against the algorithmic
probability from the shipped (5,2) table, next to zlib, and scores its (invented) volunteer
sequences with BDM."""
from __future__ import annotations

from pathlib import Path

import numpy as np

from ..extras import require
from ..tables import load
from .baselines import compressed_bits
from .bdm import BDM
from .plots import plot_report, plot_table
from .validate import builtin, validate


def switch_score(key: str) -> float:
    """The lab's in-house score: switches between neighbouring taps, plus the length."""
    taps = [c for c in key if c in "01"]
    return float(len(taps) + sum(a != b for a, b in zip(taps, taps[1:])))


def invented_volunteers(seed: int = 2026) -> dict:
    """Five invented tapping sequences of 48 taps (demo data)."""
    rng = np.random.default_rng(seed)
    return {
        "V01 alternator": np.tile([0, 1], 24),
        "V02 blocks of four": np.tile([0, 0, 0, 0, 1, 1, 1, 1], 6),
        "V03 coin-like": rng.integers(0, 2, 48),
        "V04 mostly left": (rng.random(48) < 0.15).astype(int),
        "V05 drifting": np.concatenate([np.tile([0, 1], 8), rng.integers(0, 2, 16), np.zeros(16, int)]),
    }


def run(folder="ctmtab-demo", out=print) -> dict:
    require("matplotlib", "scipy.stats")  # before any output: it draws and correlates
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    table = load("1d-n5-m2-t500")
    sizes = list(range(5, 12))
    out("Tidewater Rhythm Lab (fictional): is the switch score a fair complexity proxy?")
    out(f"Reference: {table.space.label} table, cap {table.cap}, every string of length 5..11\n")
    results = {}
    for name, est in (("switch score", switch_score), ("zlib", builtin("zlib"))):
        rep = validate(table, est, sizes=sizes)
        results[name] = rep.to_dict()
        out(f"{name:>13}: within sizes Spearman {rep.spearman:+.3f}  Kendall {rep.kendall:+.3f}  "
            f"(pooled Spearman {rep.spearman_pooled:+.3f})  MAE after linear fit {rep.mae_linear:.2f} bits  "
            f"coverage {rep.coverage:.0%}")
        plot_report(rep, folder / f"validate-{name.replace(' ', '-')}.png", title=name)
    worst = results["switch score"]["worst"][:3]
    out("\nWhere the switch score is most wrong (reference CTM vs the fitted score):")
    for w in worst:
        out(f"  {w['key']:>12}  reference {w['reference']:.2f} bits, fitted {w['fitted']:.2f}")
    out("\nVolunteers (48 taps): BDM with blocks of 11 (the remainder in smaller blocks) vs zlib")
    bdm = BDM(table, 11, mode="shrink")
    rows = {}
    for name, taps in invented_volunteers().items():
        rows[name] = {"bdm": bdm(taps), "zlib_bits": compressed_bits(taps), "switch": switch_score(
            "".join(map(str, taps)))}
        out(f"  {name:<20} BDM {rows[name]['bdm']:7.1f} bits   zlib {rows[name]['zlib_bits']:5.0f} bits   "
            f"switch score {rows[name]['switch']:.0f}")
    figures = plot_table(table, folder)
    out(f"\nFigures in {folder}/: " + ", ".join(sorted(p.name for p in folder.glob('*.png'))))
    return {"validation": results, "volunteers": rows, "figures": [str(f) for f in figures]}
