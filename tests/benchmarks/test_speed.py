"""Speed figures for README.md. Measure with:
    python3 -m pytest tests/benchmarks -n 0 --benchmark-enable --benchmark-columns=min,mean,rounds
In the normal test run each benchmark runs once, as a test."""
import numpy as np
import pytest

from ctmtab.enumerator import Space, build, run, sample
from ctmtab.model.tally import Tally
from ctmtab.tables import Table, load, loads

CHAMPION_5 = "1RB1LC_1RC1RB_1RD0LE_1LA1LD_1RZ0LA"  # S(5) = 47,176,870 steps (arXiv:2509.12337, verified)


@pytest.mark.parametrize("n,cap", [(3, 21), (4, 107)])
def test_exhaustive_build(benchmark, n, cap):
    tally = benchmark.pedantic(build, args=(Space(1, n, 2), cap), kwargs={"budget_hours": None},
                               rounds=5 if n == 4 else 20, iterations=1)
    benchmark.extra_info["steps"] = tally.steps
    benchmark.extra_info["halting_nodes"] = tally.halting_nodes


@pytest.mark.parametrize("relabel", [False, True], ids=["plain", "relabelled"])
@pytest.mark.parametrize("n,m,cap", [(2, 3, 38), pytest.param(2, 4, 200, marks=pytest.mark.slow)])
def test_symbol_relabelling(benchmark, n, m, cap, relabel):
    """The first-use symbol order against the plain search: the same table, fewer nodes. The
    relabelled case passes no new keyword, so it also times an older checkout's default build
    (PYTHONPATH pointing at it), for a comparison across versions."""
    kwargs = {"budget_hours": None} if relabel else {"budget_hours": None, "relabel": False}
    tally = benchmark.pedantic(build, args=(Space(1, n, m), cap), kwargs=kwargs,
                               rounds=20 if m == 3 else 2, iterations=1)
    benchmark.extra_info["steps"] = tally.steps
    benchmark.extra_info["halting_nodes"] = tally.halting_nodes


def test_champion_simulation(benchmark):
    r = benchmark.pedantic(run, args=(CHAMPION_5, 10**8), rounds=5, iterations=1)
    assert r.steps == 47_176_870
    benchmark.extra_info["steps"] = r.steps


@pytest.fixture(scope="module")
def big_table_bytes():
    """A table of 2^17 = 131,072 keys (every string of length 17); counts invented, for timing only."""
    rng = np.random.default_rng(3)
    keys = np.array(np.meshgrid(*[[0, 1]] * 17, indexing="ij")).reshape(17, -1).T.astype(np.uint8)
    counts = 2 * rng.integers(1, 10**9, size=len(keys))  # even, so halting = total / 2 blanks
    group = {bytes(k): int(c) for k, c in zip(keys, counts)}
    halting = sum(group.values()) // 2
    space = Space(1, 9, 2)
    tally = Tally(space=space, cap=500, groups={(17,): group}, halting=halting, non_halting=0,
                  undecided=space.size - halting, halting_nodes=0, steps_hist=[0, halting],
                  length_hist=[0] * 17 + [halting], longest_run=1, most_nonblank=1, steps=0)
    return Table.from_tally(tally).to_bytes()


def test_load_100k_keys(benchmark, big_table_bytes):
    t = benchmark(loads, big_table_bytes)
    assert t.distinct == 2**17
    benchmark.extra_info["file_bytes"] = len(big_table_bytes)


@pytest.mark.parametrize("cut", [None, 8], ids=["whole", "cut-at-8"])
def test_vectorised_lookup(benchmark, cut):
    t = load("1d-n4-m2-t107")
    if cut:  # a table cut by size serves its kept keys as fast as the whole one
        t = t.cut_at(cut)
    keys = np.random.default_rng(1).integers(0, 2, size=(1_000_000, 8)).astype(np.uint8)
    t.lookup(keys[:10])  # build the cached dense counts once
    out = benchmark(t.lookup, keys)
    assert not np.isnan(out["ctm"]).any()
    benchmark.extra_info["keys"] = len(keys)


@pytest.mark.parametrize("length", [12, 18])
def test_vectorised_lookup_on_the_6_state_table(benchmark, length):
    """The cut (6,2) table (523,386 keys) serves lookups as fast as the small ones."""
    t = load("1d-n6-m2-t1000-upto18")
    keys = np.random.default_rng(length).integers(0, 2, size=(1_000_000, length)).astype(np.uint8)
    t.lookup(keys[:10])
    out = benchmark(t.lookup, keys)
    assert (np.isnan(out["ctm"]) == (out["count"] == 0)).all()  # only strings never produced lack a value
    benchmark.extra_info["keys"] = len(keys)


def test_dense_view_lookup(benchmark):
    t = load("1d-n4-m2-t107")
    dense = t.dense(8)
    codes = np.random.default_rng(2).integers(0, 256, size=10_000_000)
    out = benchmark(np.take, dense, codes)
    assert len(out) == len(codes)
    benchmark.extra_info["keys"] = len(codes)


def test_bdm_1d_throughput(benchmark):
    from ctmtab.tools.bdm import BDM
    bdm = BDM(load("1d-n5-m2-t500"), 11)
    x = np.random.default_rng(4).integers(0, 2, 11 * 1_000_000)
    value = benchmark(bdm, x)
    assert np.isfinite(value)
    benchmark.extra_info["blocks"] = 1_000_000


def test_bdm_2d_throughput(benchmark):
    from ctmtab.tools.bdm import BDM
    bdm = BDM(load("2d-n4-m2-t2000"), (3, 3))
    x = np.random.default_rng(4).integers(0, 2, (3000, 3000))
    value = benchmark(bdm, x)
    assert np.isfinite(value)
    benchmark.extra_info["blocks"] = 1_000_000


@pytest.mark.parametrize("n,m,cap", [(4, 4, 1000), (5, 2, 1000)])
def test_sampling_per_core(benchmark, n, m, cap):
    """Samples per second on one core, the whole sampled build (C sampler with every decider,
    then the symmetry expansion): 500,000 samples divided by the time."""
    tally = benchmark.pedantic(sample, args=(Space(1, n, m), cap, 500_000), kwargs={"seed": 7, "workers": 1},
                               rounds=5, iterations=1)
    assert tally.samples == 500_000 and tally.undecided < tally.samples // 100
    benchmark.extra_info["samples"] = tally.samples


@pytest.fixture(scope="module")
def holdouts_52():
    """The nodes that 8 work units of 1D (5,2) at cap 500 leave undecided without the CPS."""
    from ctmtab.enumerator import plan
    from ctmtab.enumerator.native import core
    from ctmtab.enumerator import holdouts
    space = Space(1, 5, 2)
    p = plan(space, 500, None, ("full-table", "escapee", "cycler", "translated-cycler"))
    blobs = [core.run_unit(1, 5, 2, 500, 15, u.prefix, -1, True)["holdouts"] for u in p.units[::len(p.units) // 8][:8]]
    nodes = []
    for de, wr, mv, nx, *_ in (r for blob in blobs for r in holdouts.records(space, blob)):
        nodes.append(tuple(np.frombuffer(x, dtype) for x, dtype in
                           ((de, np.int8), (wr, np.uint8), (mv, np.int8), (nx, np.uint8))))
    return nodes


def test_ngram_cps_on_52_holdouts(benchmark, holdouts_52):
    """n-gram CPS over every node the other deciders leave (the full schedule, one call each)."""
    from ctmtab.enumerator.native import core

    def prove_all():
        return sum(core.cps_prove(5, 2, *node) > 0 for node in holdouts_52)

    proved = benchmark.pedantic(prove_all, rounds=3, iterations=1)
    benchmark.extra_info.update(nodes=len(holdouts_52), proved=proved)
    assert proved > 0.9 * len(holdouts_52)


@pytest.fixture(scope="module")
def bdm_inputs():
    """10,000 sequences of 30 bits and a 200 x 200 binary array, drawn at random: timing only."""
    from ctmtab.tools.bdm import BDM
    rng = np.random.default_rng(27)
    return (BDM(load("1d-n5-m2-t500"), 12, on_missing="ignore"), rng.integers(0, 2, (10_000, 30)),
            BDM(load("2d-n4-m2-t2000"), (4, 4), on_missing="ignore"), rng.integers(0, 2, (200, 200)))


def test_bdm_many_sequences(benchmark, bdm_inputs):
    bdm, seqs, _, _ = bdm_inputs
    bdm.estimate_many(seqs[:10])  # the dense view, once
    cols = benchmark(bdm.estimate_many, seqs)
    assert len(cols["bdm"]) == 10_000


def test_bdm_perturbation_200x200(benchmark, bdm_inputs):
    _, _, bdm, x = bdm_inputs
    out = benchmark(bdm.perturbation, x)
    assert out.shape == x.shape
