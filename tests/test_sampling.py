"""Sampled tables: uniform machines, reproducible streams, honest standard errors."""
import subprocess
import sys

import pytest

from ctmtab.enumerator import Space, sample
from ctmtab.errors import MergeError, SpaceError
from ctmtab.tables import Table, load, loads, merge, problems


def within_four_se(sampled, exact):
    """Every key the sample saw: its estimate lies within 4 standard errors of the exact value
    (the exact tables are checked against brute force and published values elsewhere)."""
    checked = 0
    for key, _ in sampled.items():
        se = sampled.standard_error(key)
        if se > 0:
            assert abs(sampled.probability(key) - exact.probability(key)) < 4 * se, key
            checked += 1
    return checked


@pytest.mark.parametrize("n,cap,name", [(3, 21, "1d-n3-m2-t21"), (4, 107, "1d-n4-m2-t107")])
def test_sampled_estimates_lie_within_four_standard_errors(n, cap, name):
    t = loads(Table.from_tally(sample(Space(1, n, 2), cap, 400_000, seed=42)).to_bytes())
    assert within_four_se(t, load(name)) > 50
    assert problems(t) == []
    assert t.mode == "sampled" and t.header["sample"] == {
        "size": 400_000, "seed": 42, "halting_samples": t.halting, "images_per_sample": 4}


def test_2d_sampling_within_four_standard_errors():
    t = loads(Table.from_tally(sample(Space(2, 2, 2), 2000, 200_000, seed=3)).to_bytes())
    assert within_four_se(t, load("2d-n2-m2-t2000")) > 10


def test_sample_is_reproducible_and_independent_of_workers():
    a = sample(Space(1, 4, 2), 107, 120_000, seed=9)
    b = sample(Space(1, 4, 2), 107, 120_000, seed=9, workers=2)
    c = sample(Space(1, 4, 2), 107, 120_000, seed=10)
    assert a.groups == b.groups and a.halting == b.halting
    assert a.groups != c.groups


def test_standard_errors_shrink_like_one_over_root_n():
    small = loads(Table.from_tally(sample(Space(1, 3, 2), 21, 25_000, seed=1)).to_bytes())
    large = loads(Table.from_tally(sample(Space(1, 3, 2), 21, 400_000, seed=1)).to_bytes())
    ratio = small.standard_error("0") / large.standard_error("0")
    assert 3 < ratio < 5  # sqrt(16) = 4


def test_sampled_interval_and_merge_refusal():
    t = loads(Table.from_tally(sample(Space(1, 3, 2), 21, 50_000, seed=5)).to_bytes())
    low, high = t.interval("0")
    assert low < t.ctm("0") < high
    with pytest.raises(MergeError, match="sampled"):
        merge([t, t])


def test_bad_sample_requests():
    with pytest.raises(SpaceError, match="positive"):
        sample(Space(1, 3, 2), 21, 0)
    r = subprocess.run([sys.executable, "-m", "ctmtab", "build", "--sample", "10", "--shard", "0/2",
                        "-o", "/tmp/never.ctmt"], capture_output=True, text=True)
    assert r.returncode == 2 and "--seed" in r.stderr and len(r.stderr.strip().splitlines()) == 1
