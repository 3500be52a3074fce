"""The (5,2) builds: too slow for CI, run with
    python3 -m pytest tests/benchmarks/test_speed_52.py -m slow -n 0 --benchmark-enable -s
Each records its wall time, the undecided weight and the checks of the published table."""
import pytest

from ctmtab.enumerator import Space, build

pytestmark = pytest.mark.slow


@pytest.mark.parametrize("workers", [1, 2])
def test_52_cap_500(benchmark, workers):
    t = benchmark.pedantic(build, args=(Space(1, 5, 2), 500), kwargs={"workers": workers},
                           rounds=1, iterations=1)
    # Soler-Toscano et al., PLoS ONE 2014: every string of length <= 11 (verified, abstract);
    # 99,608 distinct strings (memory)
    assert all(len(t.groups[(k,)]) == 2**k for k in range(1, 12))
    assert t.distinct() == 99_608
    # arXiv:2509.12337 (verified): 48,379,894 halting nodes with no cap; cap 500 finds fewer, by < 0.01%
    assert 0 < 48_379_894 - t.halting_nodes < 4_838
    benchmark.extra_info.update(undecided=t.undecided, undecided_fraction=t.undecided / t.space.size,
                                steps=t.steps, halting_nodes=t.halting_nodes)


@pytest.mark.parametrize("cap", [2_000, 10_000])
def test_52_larger_caps(benchmark, cap):
    t = benchmark.pedantic(build, args=(Space(1, 5, 2), cap), kwargs={"workers": 2}, rounds=1, iterations=1)
    benchmark.extra_info.update(undecided=t.undecided, undecided_fraction=t.undecided / t.space.size,
                                steps=t.steps, distinct=t.distinct(), halting_nodes=t.halting_nodes)
    print(f"\ncap {cap}: undecided {t.undecided} ({t.undecided / t.space.size:.4%}), "
          f"{t.distinct()} strings, {t.halting_nodes} halting nodes, {t.seconds:.1f} s")


@pytest.mark.parametrize("n", [3, 4])
def test_2d_cap_2000(benchmark, n):
    t = benchmark.pedantic(build, args=(Space(2, n, 2), 2000), kwargs={"workers": 2}, rounds=1, iterations=1)
    benchmark.extra_info.update(undecided_fraction=t.undecided / t.space.size, distinct=t.distinct(),
                                steps=t.steps, longest_run=t.longest_run)
