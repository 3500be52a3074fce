"""Sampled tables: uniform machines, reproducible streams, honest standard errors, incremental
sampling, stopping targets. The exact tables they are checked against are themselves checked
against brute force and published values in test_enumerator.py and test_bruteforce.py."""
import io
import json
import math
import re
import subprocess
import sys
import warnings

import numpy as np
import pytest
from scipy import stats

from ctmtab.enumerator import Space, Target, sample
from ctmtab.errors import InconsistentTableError, MergeError, RareKeyWarning, SpaceError
from ctmtab.tables import Table, load, loads, merge, problems
from ctmtab.tools.progress import Bar

from hostile import with_header


def table_of(tally) -> Table:
    t = loads(Table.from_tally(tally).to_bytes())
    t.min_seen = 0  # these tests read rare keys on purpose
    return t


def cli(*args):
    return subprocess.run([sys.executable, "-m", "ctmtab", *map(str, args)], capture_output=True, text=True)


def within_four_se(sampled, exact):
    """Every key the sample saw: its estimate lies within 4 standard errors of the exact value."""
    checked = 0
    for key, _ in sampled.items():
        se = sampled.standard_error(key)
        if se > 0:
            assert abs(sampled.probability(key) - exact.probability(key)) < 4 * se, key
            checked += 1
    return checked


@pytest.mark.parametrize("n,m,cap,name", [(3, 2, 21, "1d-n3-m2-t21"), (4, 2, 107, "1d-n4-m2-t107"),
                                          (2, 3, 38, "1d-n2-m3-t38")])
def test_sampled_estimates_lie_within_four_standard_errors(n, m, cap, name):
    t = table_of(sample(Space(1, n, m), cap, 400_000, seed=42))
    assert within_four_se(t, load(name)) > 50
    assert problems(t) == []  # closed under mirror and every blank swap, exactly
    assert t.mode == "sampled" and t.header["sample"] == {
        "size": 400_000, "seed": 42, "halting_samples": t.halting, "images_per_sample": 2 * math.factorial(m),
        "streams": [[42, 400_000]], "relabelling": "all"}


def test_many_symbols_take_the_blank_swaps_only():
    t = table_of(sample(Space(1, 1, 6), 5, 30_000, seed=2))
    assert t.header["sample"]["relabelling"] == "blank-swaps" and t.header["sample"]["images_per_sample"] == 12
    assert problems(t) == []


def test_2d_sampling_within_four_standard_errors():
    t = table_of(sample(Space(2, 2, 2), 2000, 200_000, seed=3))
    assert within_four_se(t, load("2d-n2-m2-t2000")) > 10


def orbit(key: str) -> str:
    """The class of a binary string under reversal and complement: one halting sample adds
    exactly the images of its output, so it falls in exactly one class."""
    comp = key.translate(str.maketrans("01", "10"))
    return min(key, key[::-1], comp, comp[::-1])


@pytest.mark.parametrize("n,cap,name", [(3, 21, "1d-n3-m2-t21"), (4, 107, "1d-n4-m2-t107")])
def test_chi_square_goodness_of_fit_against_the_exact_distribution(n, cap, name):
    # Pearson's chi-square test (scipy.stats.chisquare) on the output class of each halting
    # sample, with classes of expected count < 5 pooled: a common-practice rule for the test.
    sampled, exact = table_of(sample(Space(1, n, 2), cap, 300_000, seed=11)), load(name)
    observed, expected = {}, {}
    for key, c in sampled.items():
        observed[orbit(key)] = observed.get(orbit(key), 0) + c
    for key, c in exact.items():
        expected[orbit(key)] = expected.get(orbit(key), 0) + c
    assert set(observed) <= set(expected)
    k = sampled.header["sample"]["images_per_sample"]
    assert all(v % k == 0 for v in observed.values())  # k images per sample, all in one class
    classes = sorted(expected, key=lambda o: -expected[o])
    f_obs = np.array([observed.get(o, 0) // k for o in classes], dtype=float)
    f_exp = np.array([expected[o] for o in classes], dtype=float) / exact.total * sampled.halting
    big = f_exp >= 5
    f_obs = np.append(f_obs[big], f_obs[~big].sum())
    f_exp = np.append(f_exp[big], f_exp[~big].sum())
    assert f_obs.sum() == sampled.halting and big.sum() > 20
    assert stats.chisquare(f_obs, f_exp).pvalue > 0.001


@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
def test_doubling_the_sample_halves_the_variance_and_the_reported_error_is_calibrated():
    # Measured over 150 independent seeds at N and 2N samples, for six common keys of (3,2).
    exact, keys = load("1d-n3-m2-t21"), ["0", "1", "00", "01", "000", "010"]
    estimates, z = {10_000: [], 20_000: []}, []
    for size in estimates:
        for seed in range(150):
            t = table_of(sample(Space(1, 3, 2), 21, size, seed=1000 + seed))
            estimates[size].append([t.probability(k) for k in keys])
            z += [(t.probability(k) - exact.probability(k)) / t.standard_error(k) for k in keys]
    var_n, var_2n = (np.var(np.array(v), axis=0, ddof=1) for v in estimates.values())
    ratio = float(np.mean(var_n / var_2n))
    assert 1.4 < ratio < 2.8, ratio  # 2 expected
    assert 0.8 < float(np.std(z)) < 1.25  # the standard errors match the spread they predict


def test_sample_is_reproducible_and_independent_of_workers():
    a = sample(Space(1, 4, 2), 107, 120_000, seed=9)
    b = sample(Space(1, 4, 2), 107, 120_000, seed=9, workers=2)
    c = sample(Space(1, 4, 2), 107, 120_000, seed=10)
    assert a.groups == b.groups and a.halting == b.halting and a.moments == b.moments
    assert a.groups != c.groups


def test_a_sampled_table_is_never_exact():
    t = table_of(sample(Space(1, 4, 2), 107, 100_000, seed=4))
    for key, _ in t.items():
        low, high = t.interval(key)
        assert t.standard_error(key) > 0 and low < t.ctm(key) < high, key
    assert t.interval("0101010101010101")[1] == math.inf  # never seen: no upper CTM bound


def test_standard_errors_shrink_like_one_over_root_n():
    small = table_of(sample(Space(1, 3, 2), 21, 25_000, seed=1))
    large = table_of(sample(Space(1, 3, 2), 21, 400_000, seed=1))
    assert 3 < small.standard_error("0") / large.standard_error("0") < 5  # sqrt(16) = 4


def test_extending_with_a_new_seed_is_an_exact_merge():
    a = table_of(sample(Space(1, 3, 2), 21, 60_000, seed=1))
    b = table_of(sample(Space(1, 3, 2), 21, 40_000, seed=2))
    ab, ba = merge([a, b]), merge([b, a])
    assert ab.body() == ba.body() and problems(ab) == []
    assert ab.header["sample"]["streams"] == [[1, 60_000], [2, 40_000]]
    assert ab.header["sample"]["size"] == 100_000 and ab.halting == a.halting + b.halting
    for key, c in ab.items():
        assert c == a.count(key) + b.count(key)
        i = ab._find(key)
        assert int(ab.groups[i[0]].moments[i[1]]) == sum(
            int(t.groups[i[0]].moments[p]) for t in (a, b) for p in [t._find(key)[1]] if p >= 0)
    with pytest.raises(MergeError, match="seed 1"):
        merge([a, ab])
    with pytest.raises(MergeError, match="exhaustive"):
        merge([ab, load("1d-n3-m2-t21")])
    with pytest.raises(MergeError, match="cap"):
        merge([a, table_of(sample(Space(1, 3, 2), 30, 10_000, seed=7))])


def test_a_table_expanded_the_older_way_is_not_mixed_in(monkeypatch):
    import ctmtab.enumerator.accumulate as accumulate
    import ctmtab.model.symmetry as symmetry
    with monkeypatch.context() as patch:  # format 1.1 expanded each sample by the m blank swaps only
        for module in (symmetry, accumulate):
            patch.setattr(module, "sample_perms", symmetry.blank_perms)
        older = loads(Table.from_tally(sample(Space(1, 2, 3), 38, 25_000, seed=8)).to_bytes(), where="old.ctmt")
    assert older.header["sample"]["images_per_sample"] == 6
    with pytest.raises(MergeError, match="old.ctmt .* rebuild"):
        merge([older, table_of(sample(Space(1, 2, 3), 38, 25_000, seed=9))])


@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
def test_cli_extend_in_place_and_refusals(tmp_path):
    path = tmp_path / "s.ctmt"
    assert cli("build", "--states", 3, "--sample", 50_000, "--seed", 4, "-o", path, "-q").returncode == 0
    before = load(path)
    r = cli("build", "--extend", path, "--sample", 50_000, "-q")
    assert r.returncode == 0, r.stderr
    after = load(path)
    assert after.streams == [(4, 50_000), (5, 50_000)] and after.halting > before.halting
    assert len(after.header["build"]["extended"]["commands"]) == 2 and problems(after) == []
    for args, fragment in [(["--seed", 4], "already holds samples of seed 4"),
                           (["--states", 4], "contradicts"),
                           (["--max-steps", 30], "contradicts")]:
        r = cli("build", "--extend", path, "--sample", 1000, *args)
        assert r.returncode == 2 and fragment in r.stderr and len(r.stderr.strip().splitlines()) == 1
    assert load(path).body() == after.body()  # a refused extension leaves the file alone
    r = cli("build", "--extend", "1d-n3-m2-t21", "--sample", 1000, "-o", tmp_path / "x.ctmt")
    assert r.returncode == 2 and "exhaustive" in r.stderr
    other = tmp_path / "o.ctmt"
    assert cli("build", "--states", 3, "--sample", 20_000, "--seed", 5, "-o", other, "-q").returncode == 0
    r = cli("merge", "-o", tmp_path / "m.ctmt", path, other)
    assert r.returncode == 2 and "seed 5" in r.stderr and len(r.stderr.strip().splitlines()) == 1


@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
def test_error_target_stops_at_the_same_unit_for_any_worker_count():
    target = Target(error=0.05, size=5)
    one = sample(Space(1, 4, 2), 107, 20_000_000, seed=3, until=target)
    two = sample(Space(1, 4, 2), 107, 20_000_000, seed=3, until=target, workers=2)
    assert one.samples == two.samples < 20_000_000 and one.groups == two.groups
    assert one.until["stopped_by"] == "target" and one.samples % 25_000 == 0
    t = table_of(one)
    # checks come at round ends, each round at most 1/8 of the units done: 85% had not met it
    earlier = 25_000 * int(one.samples * 0.85 / 25_000)
    assert 0 < t.relative_errors(5).max() <= 0.05 < table_of(sample(
        Space(1, 4, 2), 107, earlier, seed=3)).relative_errors(5).max()
    # the same prefix of the stream, asked for by count, is the same table
    assert sample(Space(1, 4, 2), 107, one.samples, seed=3).groups == one.groups


@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
def test_an_error_target_counts_the_table_being_extended():
    base = sample(Space(1, 4, 2), 107, 4_000_000, seed=1)
    target = Target(error=0.05, size=5)
    alone = sample(Space(1, 4, 2), 107, 20_000_000, seed=2, until=target)
    more = sample(Space(1, 4, 2), 107, 20_000_000, seed=2, until=target, prior=base)
    assert more.samples < alone.samples and more.until["stopped_by"] == "target"
    both = merge([table_of(base), table_of(more)])
    assert 0 < both.relative_errors(5).max() <= 0.05


def test_time_budget_and_progress_shows_the_worst_error():
    out = io.StringIO()
    tally = sample(Space(1, 4, 4), 2000, None, seed=2, until=Target(error=0.01, size=6, seconds=1.5),
                   on_progress=Bar("t", enabled=True, stream=out))
    assert tally.until["stopped_by"] == "time" and tally.samples % 25_000 == 0
    assert re.search(r"worst rel\. error [0-9.e-]+ over [0-9,]+ keys of size 6", out.getvalue())
    with pytest.raises(SpaceError, match="ceiling"):
        sample(Space(1, 4, 4), 2000, None, until=Target(error=0.05, size=6))


def test_rare_keys_warn():
    t = loads(Table.from_tally(sample(Space(1, 3, 2), 21, 50_000, seed=5)).to_bytes())
    rare = next(k for k, c in t.items() if c < t.min_seen)
    with pytest.warns(RareKeyWarning, match="seen"):
        t.ctm(rare)
    with pytest.warns(RareKeyWarning, match="keys were seen"):
        out = t.lookup([rare, "0"])
    assert out["standard_error"][1] == pytest.approx(t.standard_error("0"))
    assert t.summary()["rare_keys"] == sum(t.seen(k) < t.min_seen for k, _ in t.items()) > 0
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        t.ctm("0")  # common keys stay quiet
        t.min_seen = 0
        t.ctm(rare)


def test_seen_counts_samples_not_images():
    # By hand: in 1D (n,4) a sample whose output is a constant string of length 4 gives 12 of its
    # 48 images equal to 0000 (2 mirrors x the 6 permutations sending its symbol to 0); one with
    # four distinct symbols gives 0123 twice (itself relabelled, and its mirror relabelled).
    t = table_of(sample(Space(1, 4, 4), 1000, 300_000, seed=6))
    assert t.count("0000") % 12 == 0 and t.seen("0000") == pytest.approx(t.count("0000") / 12)
    assert t.count("0123") % 2 == 0 and t.seen("0123") == pytest.approx(t.count("0123") / 2)
    assert math.isnan(t.standard_error("0123012301230123")) and t.seen("0123012301230123") == 0


@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
def test_no_deciders_and_decider_order_still_extend(tmp_path):
    path = tmp_path / "n.ctmt"
    assert cli("build", "--states", 2, "--sample", 30_000, "--deciders", "none", "-o", path, "-q").returncode == 0
    assert cli("build", "--extend", path, "--sample", 30_000, "-q").returncode == 0
    other = tmp_path / "e.ctmt"
    assert cli("build", "--states", 2, "--sample", 30_000, "--deciders", "escapee,cycler", "-o", other,
               "-q").returncode == 0
    r = cli("build", "--extend", other, "--sample", 30_000, "--deciders", "cycler,escapee", "-q")
    assert r.returncode == 0, r.stderr
    assert load(path).streams == [(1, 30_000), (2, 30_000)] and load(path).header["deciders"] == []


def test_cli_lookup_warns_and_info_and_export_show_the_errors(tmp_path):
    path = tmp_path / "s.ctmt"
    assert cli("build", "--states", 3, "--sample", 50_000, "--seed", 5, "-o", path, "-q").returncode == 0
    t = load(path)
    rare = next(k for k, c in t.items() if c < 10)
    r = cli("lookup", path, "0", rare)
    assert r.returncode == 0 and "95% interval" in r.stdout
    assert r.stderr.count("warning") == 1 and rare in r.stderr
    assert "warning" not in cli("lookup", path, rare, "--min-seen", 1).stderr
    info = json.loads(cli("info", path, "--json").stdout)
    assert info["mode"] == "sampled" and info["streams"] == [[5, 50_000]]
    assert [r["size"] for r in info["errors_by_size"]][:3] == [1, 2, 3]
    assert "relative standard error" in cli("info", path).stdout
    rows = cli("export", path).stdout.splitlines()
    assert rows[0] == "key,count,probability,standard_error,ctm,ctm_low,ctm_high"
    key, count, p, se, ctm, low, high = rows[1].split(",")
    assert float(low) < float(ctm) < float(high) and float(se) > 0


@pytest.mark.parametrize("edit", [
    lambda h: h["sample"].update(streams=[[1, 10], [1, 49_990]]),
    lambda h: h["sample"].update(streams=[[1, 10]]),
    lambda h: h["sample"].update(streams="all"),
])
def test_malformed_streams_are_refused(edit):
    data = Table.from_tally(sample(Space(1, 2, 2), 6, 50_000, seed=1)).to_bytes()
    with pytest.raises(InconsistentTableError, match="stream|seed"):
        loads(with_header(data, edit))


def test_bad_sample_requests(tmp_path):
    with pytest.raises(SpaceError, match="positive"):
        sample(Space(1, 3, 2), 21, 0)
    r = cli("build", "--sample", 10, "--shard", "0/2", "-o", tmp_path / "never.ctmt")
    assert r.returncode == 2 and "--seed" in r.stderr and len(r.stderr.strip().splitlines()) == 1
    for target, fragment in [("5x", "neither"), ("200%@3", "between 0 and 1"), ("0s", "longer than 0"),
                             ("infs", "finite")]:
        r = cli("build", "--until", target, "-o", tmp_path / "never.ctmt")
        assert r.returncode == 2 and fragment in r.stderr and len(r.stderr.strip().splitlines()) == 1


@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
def test_the_shipped_four_symbol_table():
    t = load("1d-n4-m4-t2000-sampled")
    t.min_seen = 0
    build, sample_ = t.header["build"], t.header["sample"]
    assert t.mode == "sampled" and t.space == Space(1, 4, 4) and t.cap == 2000
    assert sample_["size"] == 10**9 and build["seconds"] > 0
    assert "--sample 1000000000" in build["command"] and "--max-steps 2000" in build["command"]
    assert all(len(t.groups[(n,)]) == 4**n for n in range(1, 9))  # every string up to length 8
    # an independent sample (another seed) agrees within 4 combined standard errors
    fresh = table_of(sample(Space(1, 4, 4), 2000, 1_000_000, seed=99))
    checked = 0
    for key, _ in fresh.items():
        if len(key) <= 4:
            se = math.hypot(t.standard_error(key), fresh.standard_error(key))
            assert abs(t.probability(key) - fresh.probability(key)) < 4 * se, key
            checked += 1
    assert checked == 4 + 16 + 64 + 256
