"""validate, honestly (issue 27, item 6; item 7's estimator from the current folder): the headline
correlation is within sizes, checked against scipy computed here, the pooled one second; capped and
sampled tables are a reference, not exact; sampled plots carry error bars."""
import json
import math
import subprocess
import sys

import numpy as np
import pytest
from scipy import stats

from ctmtab.tables import load
from ctmtab.tools import plots
from ctmtab.tools.validate import resolve, validate


def ctm(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "ctmtab", *map(str, args)], capture_output=True, text=True, cwd=cwd)


def runs(key: str) -> float:
    """A test estimator: the number of runs of equal symbols, plus the length."""
    return float(len(key) + sum(a != b for a, b in zip(key, key[1:])))


def test_within_size_headline_and_pooled_against_scipy():
    t = load("1d-n5-m2-t500")
    rep = validate(t, runs, sizes=range(5, 12))
    ref, est, rho, tau, n = [], [], [], [], []
    for length in range(5, 12):
        keys = [k for k, _ in t.items(length)]
        r = np.array([t.ctm(k) for k in keys])  # the single-key API, not validate's own sums
        e = np.array([runs(k) for k in keys])
        ref.append(r), est.append(e), n.append(len(keys))
        rho.append(stats.spearmanr(r, e).statistic)
        tau.append(stats.kendalltau(r, e).statistic)
        assert rep.by_size[str(length)]["spearman"] == pytest.approx(rho[-1], abs=1e-12)
        assert rep.by_size[str(length)]["kendall"] == pytest.approx(tau[-1], abs=1e-12)
    assert rep.spearman == pytest.approx(np.average(rho, weights=n), abs=1e-12)
    assert rep.kendall == pytest.approx(np.average(tau, weights=n), abs=1e-12)
    pooled = stats.spearmanr(np.concatenate(ref), np.concatenate(est)).statistic
    assert rep.spearman_pooled == pytest.approx(pooled, abs=1e-12)
    assert rep.kendall_pooled == pytest.approx(stats.kendalltau(np.concatenate(ref), np.concatenate(est)).statistic,
                                               abs=1e-12)
    assert pooled > 0.5 > rep.spearman  # length drives the pooled figure


@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
def test_the_command_leads_with_within_sizes_and_names_the_reference(tmp_path):
    r = ctm("validate", "1d-n5-m2-t500", "--estimator", "zlib", "--sizes", "5-7")
    assert r.returncode == 0, r.stderr
    lines = r.stdout.splitlines()
    assert "reference CTM" in lines[0] and lines[1].startswith("within sizes") and lines[2].startswith("pooled")
    assert "exact" not in r.stdout  # capped at 500 steps: a reference, not exact values
    rep = json.loads(ctm("validate", "1d-n5-m2-t500", "--estimator", "zlib", "--sizes", "5-7", "--json").stdout)
    assert rep["reference"] == "reference CTM" and "weighted by the keys" in rep["headline"]
    sizes = [rep["by_size"][s] for s in ("5", "6", "7")]
    assert rep["spearman"] == pytest.approx(sum(s["scored"] * s["spearman"] for s in sizes)
                                            / sum(s["scored"] for s in sizes))
    exact = ctm("validate", "1d-n4-m2-t107", "--estimator", "zlib", "--sizes", "5-7").stdout
    assert "against the exact CTM" in exact
    sampled = ctm("validate", "1d-n4-m4-t2000-sampled", "--estimator", "zlib", "--sizes", "4").stdout
    assert "reference CTM of a sampled table" in sampled


@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
def test_a_sampled_report_plots_error_bars(monkeypatch, tmp_path):
    t = load("1d-n4-m4-t2000-sampled")
    rep = validate(t, runs, sizes=[4])
    figures = []
    monkeypatch.setattr(plots, "_save", lambda fig, path, kind="png": figures.append(fig) or path)
    plots.plot_report(rep, tmp_path / "v.png")
    ax = figures[0].axes[0]
    assert "sampled" in ax.get_ylabel() and "reference" in ax.get_ylabel()
    bars = [c for c in ax.containers if c.__class__.__name__ == "ErrorbarContainer"]
    assert len(bars) == 1
    # the error bars: 1.96 standard errors of each CTM, se(p) / (p ln 2), from the table's own errors
    keys = [k for k, _ in t.items(4)]
    se = np.array([t.standard_error(k) / t.probability(k) / math.log(2) for k in keys])
    assert np.allclose(rep.errors, se)
    t.min_seen = 0
    figures.clear()
    plots.plot_table(t, tmp_path)
    assert "sampled" in figures[0].axes[0].get_title()


def test_estimator_module_from_the_current_folder(tmp_path, monkeypatch):
    (tmp_path / "labscores_27.py").write_text("def complexity(key):\n    return float(key.count('1'))\n")
    r = ctm("validate", "1d-n4-m2-t107", "--estimator", "labscores_27:complexity", "--sizes", "4", "--json",
            cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert json.loads(r.stdout)["scored"] == 16
    elsewhere = ctm("validate", "1d-n4-m2-t107", "--estimator", "labscores_27:complexity", cwd=tmp_path.parent)
    assert elsewhere.returncode == 2 and "current folder" in elsewhere.stderr
    assert len(elsewhere.stderr.strip().splitlines()) == 1 and "Traceback" not in elsewhere.stderr
    monkeypatch.chdir(tmp_path)
    before = list(sys.path)
    assert resolve("labscores_27:complexity")("0110") == 2.0
    assert sys.path == before  # the folder went in for that import only
