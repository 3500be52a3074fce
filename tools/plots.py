"""Figures of a table (PNG) and of a validation report (PNG, PDF or SVG), by matplotlib, no display needed."""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from ..errors import CtmtabError
from ..extras import require


def _plt():
    require("matplotlib")  # the [plot] extra: one line naming it, not a traceback
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def plot_table(table, folder) -> list[Path]:
    """CTM against rank, the halting-step histogram, and the mass by output size."""
    table.require_halting()  # nothing to draw, and log2(0), without one halting run
    plt = _plt()
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    sampled = table.mode == "sampled"
    label = f"{table.space.label}, cap {table.cap}" + (", sampled" if sampled else "")
    out = []
    counts = np.concatenate([np.asarray(g.counts, dtype=float) for g in table.groups.values()])
    order = np.argsort(-counts, kind="stable")
    ctm = math.log2(table.total) - np.log2(counts[order])
    fig, ax = plt.subplots(figsize=(6, 4))
    ranks = np.arange(1, len(ctm) + 1)
    ax.plot(ranks, ctm, lw=1)
    if sampled:  # the estimates' approximate 95% band, from the table's standard errors
        se = _ctm_errors(table)[order]
        ax.fill_between(ranks, ctm - 1.96 * se, ctm + 1.96 * se, alpha=0.3, lw=0, label="approximate 95% band")
        ax.legend(loc="upper left")  # "best" scans every point
    ax.set_xscale("log")
    ax.set(xlabel="rank", ylabel="CTM (bits)" + (", estimated" if sampled else ""), title=f"CTM by rank — {label}")
    out.append(_save(fig, folder / "ctm-rank.png"))
    fig, ax = plt.subplots(figsize=(6, 4))
    steps = np.asarray(table.steps_hist, dtype=float)
    nz = np.flatnonzero(steps)
    ax.bar(nz, steps[nz] / table.halting, width=1.0)
    ax.set_yscale("log")
    ax.axvline(table.cap, color="red", ls="--", label=f"cap {table.cap}")
    ax.set(xlabel="halting step", ylabel="fraction of halting machines", title=f"Halting times — {label}")
    ax.legend()
    out.append(_save(fig, folder / "halting-steps.png"))
    fig, ax = plt.subplots(figsize=(6, 4))
    sizes = np.asarray(table.length_hist, dtype=float)
    nz = np.flatnonzero(sizes)
    ax.bar(nz, sizes[nz] / table.halting)
    ax.set_yscale("log")
    ax.set(xlabel="output size (cells; longer side in 2D)", ylabel="probability mass",
           title=f"Mass by output size — {label}")
    out.append(_save(fig, folder / "mass-by-size.png"))
    return out


def _ctm_errors(table) -> np.ndarray:
    """A sampled table's CTM standard errors in bits, in group order."""
    from ..tables import sampled

    return np.concatenate([sampled.ctm_errors(table, g) for g in table.groups.values()])


FIGURE_FORMATS = ("png", "pdf", "svg")


def figure_format(path) -> str:
    """The format a figure's file name asks for by its extension: png, pdf or svg. Any other is
    refused, since matplotlib would write a PNG under any name."""
    suffix = Path(path).suffix
    if suffix.lower().lstrip(".") not in FIGURE_FORMATS:
        named = f"its extension {suffix!r}" if suffix else "it has no extension, which"
        raise CtmtabError(f"cannot write a figure to {path}: {named} names no format written here; "
                          "end the name in .png, .pdf or .svg")
    return suffix.lower().lstrip(".")


def _corr_text(value: float) -> str:
    return "undefined" if math.isnan(value) else f"{value:.3f}"


def plot_report(report, path, title: str = "") -> Path:
    """Scatter of the table's CTM against the estimate (with error bars from a sampled table), and
    the rank correlation per size. The format
    follows the file name: .png, .pdf or .svg."""
    kind = figure_format(path)
    plt = _plt()
    exact, est = report.pairs
    ref = f"{report.reference} CTM" + (", sampled" if report.sampled else "")
    fig, (a, b) = plt.subplots(1, 2, figsize=(11, 4.5))
    if report.sampled and report.errors is not None:  # estimates: each with its 95% error bar
        a.errorbar(est, exact, yerr=1.96 * report.errors, fmt="o", ms=2, alpha=0.4, elinewidth=0.6,
                   label="±1.96 standard errors")
    else:
        a.scatter(est, exact, s=6, alpha=0.4)
    if len(est):
        xs = np.linspace(np.min(est), np.max(est), 50)
        a.plot(xs, report.slope * xs + report.intercept, color="red", lw=1, label="linear fit")
        a.legend(loc="upper left")  # "best" scans every point
    a.set(xlabel="estimate", ylabel=f"{ref} (bits)",
          title=f"{title} within sizes: Spearman {_corr_text(report.spearman)}, Kendall "
                f"{_corr_text(report.kendall)}\npooled: Spearman {_corr_text(report.spearman_pooled)}")
    names = list(report.by_size)
    b.bar(range(len(names)), [report.by_size[n]["spearman"] for n in names])
    b.set_xticks(range(len(names)), names, rotation=90 if len(names) > 12 else 0)
    b.set(xlabel="key size", ylabel="Spearman", title="rank correlation per size", ylim=(-1, 1))
    return _save(fig, Path(path), kind)


def _save(fig, path: Path, kind: str = "png") -> Path:
    import io

    from ..fsutil import write_atomic

    fig.tight_layout()
    buf = io.BytesIO()
    fig.savefig(buf, dpi=110, format=kind)
    write_atomic(path, buf.getvalue(), durable=False)  # a killed plot leaves no half figure
    import matplotlib.pyplot as plt

    plt.close(fig)
    return path
