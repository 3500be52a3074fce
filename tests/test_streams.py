"""Sampled streams that overlap. Seeds are chosen here by inverting the generator's mixing by hand
(nothing below calls an inverse of the package): one seed whose units are seed 1's shifted by 5
units (the example of issue 25), and one whose first draws start 100 machines inside a unit of
seed 1. Both are refused by merge, --extend and verify; an ordinary pair of seeds is not."""
import random
import subprocess
import sys

import numpy as np
import pytest

from ctmtab.enumerator import Space, sample
from ctmtab.enumerator.driver import unit_seed
from ctmtab.enumerator.native import core as _core
from ctmtab.model.streams import SAMPLE_UNIT, first_overlap, places
from ctmtab.errors import MergeError
from ctmtab.tables import Table, load, merge, problems

from hostile import with_header

pytestmark = pytest.mark.core

MASK, GOLDEN = (1 << 64) - 1, 0x9E3779B97F4A7C15
C1, C2 = 0xBF58476D1CE4E5B9, 0x94D049BB133111EB  # splitmix64's finaliser (Steele, Lea & Flood 2014)
SPACE, CAP = Space(1, 3, 2), 21


def mix(z):
    z = ((z ^ (z >> 30)) * C1) & MASK
    z = ((z ^ (z >> 27)) * C2) & MASK
    return z ^ (z >> 31)


def unshift(z, s):
    """The inverse of z ^= z >> s: the top s bits are z's, each next s bits follow from them."""
    x = z
    for _ in range(64 // s + 1):
        x = z ^ (x >> s)
    return x


def unmix(z):
    z = (unshift(z, 31) * pow(C2, -1, 1 << 64)) & MASK
    z = (unshift(z, 27) * pow(C1, -1, 1 << 64)) & MASK
    return unshift(z, 30)


def xorshift(x):
    """One step of the core's generator state (xorshift64, shifts 12, 25, 27; Vigna 2016)."""
    x ^= x >> 12
    x ^= (x << 25) & MASK
    return x ^ (x >> 27)


def my_unit_seed(seed, k):
    return mix((mix(seed) + (k + 1) * GOLDEN) & MASK)


def first_state(unit):
    """The core seeds a unit's generator with splitmix64 of its unit seed, low bit set."""
    return mix((unit + GOLDEN) & MASK) | 1


def seed_of_unit(unit):
    """A seed below 2^63 one of whose units has this unit seed: (seed, unit index)."""
    for k in range(64):
        seed = unmix((unmix(unit) - (k + 1) * GOLDEN) & MASK)
        if seed < 1 << 63:
            return seed, k
    raise AssertionError("no seed below 2^63")


SHIFTED = unmix((mix(1) + 5 * GOLDEN) & MASK)  # seed 1 shifted by 5 units


def inside(offset_machines=100, unit=2):
    """A seed and a unit of it whose generator starts `offset_machines` machines into unit
    `unit` of seed 1: the draws of one machine are n x m states."""
    state = first_state(my_unit_seed(1, unit))
    for _ in range(SPACE.entries * offset_machines):
        state = xorshift(state)
    while not state & 1:  # only odd states can start a unit (the core sets the low bit)
        for _ in range(SPACE.entries):
            state = xorshift(state)
        offset_machines += 1
    return seed_of_unit((unmix(state) - GOLDEN) & MASK) + (offset_machines,)


def cli(*args):
    return subprocess.run([sys.executable, "-m", "ctmtab", *map(str, args)], capture_output=True, text=True)


def test_my_mix_is_the_packages_and_inverts():
    for _ in range(50):
        x = random.getrandbits(64)
        assert unmix(mix(x)) == x
    for seed, k in [(1, 0), (7, 12), (2**63 - 1, 3)]:
        assert unit_seed(seed, k) == my_unit_seed(seed, k)


def test_places_follow_the_generator_step_by_step():
    rng = random.Random(25)
    for _ in range(3):
        walk = [rng.getrandbits(64) | 1]
        for _ in range(4000):
            walk.append(xorshift(walk[-1]))
        at = [int(v) for v in places(np.array(walk, dtype=np.uint64))]
        assert all((at[i] - at[0]) % MASK == i for i in range(len(walk)))  # one step is one place
    assert int(places(np.array([1], dtype=np.uint64))[0]) == 0


@pytest.mark.ci_slow  # about 5-10 s of sampling and subprocesses
def test_the_issue_example_is_refused_and_really_overlaps(tmp_path):
    assert SHIFTED < 1 << 63 and SHIFTED != 1
    assert all(unit_seed(SHIFTED, k) == unit_seed(1, k + 5) for k in range(3))  # the same machines
    a = Table.from_tally(sample(SPACE, CAP, 8 * SAMPLE_UNIT, seed=1))
    b = Table.from_tally(sample(SPACE, CAP, 3 * SAMPLE_UNIT, seed=SHIFTED))
    with pytest.raises(MergeError, match=rf"seed 1, unit 5\).*seed {SHIFTED}, unit 0\)"):
        merge([a, b])
    pa, pb = tmp_path / "a.ctmt", tmp_path / "b.ctmt"
    a.save(pa)
    b.save(pb)
    r = cli("merge", "-o", tmp_path / "m.ctmt", pa, pb)
    assert r.returncode == 2 and f"seed {SHIFTED}" in r.stderr and len(r.stderr.splitlines()) == 1, r.stderr
    r = cli("build", "--extend", pa, "--seed", SHIFTED, "--sample", 75_000, "-o", tmp_path / "x.ctmt", "-q")
    assert r.returncode == 2 and "choose another --seed" in r.stderr and not (tmp_path / "x.ctmt").exists()
    # one file listing both streams (re-sealed): verify finds the overlap in it
    both = Table.from_tally(sample(SPACE, CAP, 11 * SAMPLE_UNIT, seed=1))
    forged = tmp_path / "f.ctmt"
    forged.write_bytes(with_header(both.to_bytes(), lambda h: h["sample"].update(
        streams=[[1, 8 * SAMPLE_UNIT], [SHIFTED, 3 * SAMPLE_UNIT]])))
    assert any("unit 5 of seed 1 and unit 0 of seed" in p for p in problems(load(forged)))
    r = cli("verify", forged)
    assert r.returncode == 1 and "overlapping stretches" in r.stdout
    r = cli("build", "--extend", forged, "--seed", 5, "--sample", 1000, "-o", tmp_path / "y.ctmt", "-q")
    assert r.returncode == 2 and f"{forged}: unit 5 of seed 1 and unit 0 of seed {SHIFTED}" in r.stderr, r.stderr
    assert "rebuild it" in r.stderr and len(r.stderr.splitlines()) == 1


def test_a_seed_starting_inside_another_units_draws_is_refused():
    seed, k, offset = inside()
    unit = my_unit_seed(seed, k)
    assert unit != my_unit_seed(1, 2)  # not the same unit seed: only the draws coincide
    # the core really draws the same machines: unit 2 of seed 1 from its machine `offset` on
    bits = 31
    late = _core.sample_unit(1, 3, 2, CAP, bits, my_unit_seed(1, 2), offset + 50)
    early = _core.sample_unit(1, 3, 2, CAP, bits, my_unit_seed(1, 2), offset)
    ours = _core.sample_unit(1, 3, 2, CAP, bits, unit, 50)
    for name in ("halting", "non_halting", "undecided"):
        assert late[name] - early[name] == ours[name]
    assert {key: w - early["raw"].get(key, 0) for key, w in late["raw"].items()
            if w != early["raw"].get(key, 0)} == ours["raw"]
    streams = [("a", 1, 3 * SAMPLE_UNIT), ("b", seed, (k + 1) * SAMPLE_UNIT)]
    assert first_overlap(streams, SPACE.entries, SAMPLE_UNIT) == ((0, 1, 2), (1, seed, k))  # stream, seed, unit
    # it starts `offset` machines in: a unit of fewer machines than that ends before it
    assert first_overlap([("a", 1, 2 * SAMPLE_UNIT + offset), ("b", seed, (k + 1) * SAMPLE_UNIT)],
                         SPACE.entries, SAMPLE_UNIT) is None


@pytest.mark.ci_slow  # about 5-10 s of sampling and subprocesses
def test_ordinary_seeds_are_disjoint_and_merge():
    streams = [("a", 1, 40 * SAMPLE_UNIT), ("b", 2, 40 * SAMPLE_UNIT), ("c", 2026, 400 * SAMPLE_UNIT)]
    assert first_overlap(streams, SPACE.entries, SAMPLE_UNIT) is None
    a = Table.from_tally(sample(SPACE, CAP, 50_000, seed=1))
    b = Table.from_tally(sample(SPACE, CAP, 50_000, seed=2))
    assert merge([a, b]).header["sample"]["streams"] == [[1, 50_000], [2, 50_000]]
    assert problems(load("1d-n4-m4-t2000-sampled")) == []  # its 40,000 units are disjoint
