"""Tables cut by size (format 1.5, tables/cut.py): what is kept is the uncut table's, what is
dropped is recorded exactly, and a dropped key is reported with a certified lower bound, never
a value. The uncut tables are the reference: their exact counts decide every check."""
import math
import subprocess
import sys

import numpy as np
import pytest

from ctmtab.enumerator import Space, build
from ctmtab.errors import InconsistentTableError, MergeError, TableError
from ctmtab.tables import Table, load, loads, problems
from ctmtab.tables.cut import DroppedKeyError
from ctmtab.tools.bdm import BDM

from hostile import with_header

pytestmark = pytest.mark.core

# 2D (3,2) at cap 2000 takes about 8 s a build: the slow lane of .ci/run
TWO_D_CASE = pytest.param(Space(2, 3, 2), 2000, 2, marks=pytest.mark.ci_slow, id="2d-n3-m2-t2000")


def cli(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "ctmtab", *map(str, args)], capture_output=True, text=True,
                          timeout=120, cwd=cwd)


def _record(full: Table, max_size: int) -> dict:
    """The dropped record, computed from the uncut table's keys by plain Python."""
    out = {}
    for key, c in full.items():
        shape = (len(key),) if full.space.dims == 1 else (key.count("/") + 1, len(key.split("/")[0]))
        if max(shape) > max_size:
            w, k, top = out.get(shape, (0, 0, 0))
            out[shape] = (w + c, k + 1, max(top, c))
    return out


@pytest.fixture(scope="module")
def full32():
    return Table.from_tally(build(Space(1, 3, 2), 21))


@pytest.mark.parametrize("max_size", [1, 4, 6])
def test_a_cut_build_keeps_the_uncut_counts_and_records_the_rest_exactly(full32, max_size):
    cut = Table.from_tally(build(Space(1, 3, 2), 21, keep_size=max_size))
    kept = {k: c for k, c in full32.items() if len(k) <= max_size}
    assert dict(cut.items()) == kept
    assert cut.total == full32.total  # normalised by the true total
    for key in list(kept)[:50]:
        assert cut.ctm(key) == full32.ctm(key) and cut.interval(key) == full32.interval(key)
    # trimming the uncut table records every dropped shape exactly; the core's cut never saw the
    # keys, so it records the same weights with no key count and a weaker bound
    trimmed = full32.cut_at(max_size)
    assert trimmed.cut.dropped == _record(full32, max_size) and trimmed.body() == cut.body()
    assert {s: (w, None, w) for s, (w, _, _) in trimmed.cut.dropped.items()} == cut.cut.dropped
    for t in (cut, trimmed):
        back = loads(t.to_bytes())
        assert problems(back) == [] and back.cut.dropped == t.cut.dropped


@pytest.mark.parametrize("in_core", [False, True])
def test_a_dropped_key_gets_a_certified_lower_bound_never_a_value(full32, in_core):
    cut = Table.from_tally(build(Space(1, 3, 2), 21, keep_size=4)) if in_core else full32.cut_at(4)
    for key, c in full32.items():
        if len(key) > 4:
            low, high = cut.interval(key)
            assert low <= full32.ctm(key) + 1e-12 and high == math.inf
    # trimmed, the bound is the shape's largest count: tight for the commonest key of each length
    for shape, (weight, _, top) in cut.cut.dropped.items():
        commonest = max((c for k, c in full32.items() if len(k) == shape[0]))
        assert top == (weight if in_core else commonest)
    with pytest.raises(DroppedKeyError, match="cut"):
        cut.count("01010")
    with pytest.raises(DroppedKeyError, match="at most that size"):
        cut.ctm("01010")
    with pytest.raises(DroppedKeyError):
        cut.ctm("01010", missing="fallback")  # a fallback would be a made-up value
    assert math.isnan(cut.ctm("01010", missing="nan"))
    out = cut.lookup(["0110", "01010", "0"])
    assert out["dropped"].tolist() == [False, True, False]
    assert math.isnan(out["ctm"][1]) and math.isnan(out["count"][1])
    assert out["ctm_low"][1] <= full32.ctm("01010") and out["ctm_high"][1] == math.inf
    assert out["ctm"][0] == full32.ctm("0110")
    with pytest.raises(DroppedKeyError):
        cut.lookup(["01010"], missing="raise")
    with pytest.raises(DroppedKeyError):
        cut.dense(5)
    assert np.array_equal(cut.dense(4), full32.dense(4))


def test_bounds_of_a_capped_cut_table_hold_against_the_exact_table():
    # at cap 30 the (4,2) table leaves runs undecided; the certified lower bound of a dropped
    # key must still lie below its exact CTM from the cap-107 table (exact by S(4) = 107)
    exact = load("1d-n4-m2-t107")
    capped = Table.from_tally(build(Space(1, 4, 2), 30, keep_size=7))
    assert capped.undecided > 0
    for key, c in exact.items():
        if len(key) > 7 and capped.cut.most((len(key),)):
            assert capped.interval(key)[0] <= exact.ctm(key) + 1e-12, key


def test_a_cut_2d_table_verifies_and_keeps_its_rotations():
    full = load("2d-n3-m2-t2000")
    cut = full.cut_at(3)
    assert max(max(s) for s in cut.shapes) == 3 and problems(cut) == []
    assert cut.cut.dropped == _record(full, 3)
    for (r, c), rec in cut.cut.dropped.items():
        assert cut.cut.dropped[(c, r)] == rec
    assert cut.interval("0000/0000")[0] <= full.ctm("0000/0000")


def test_cutting_again_only_keeps_fewer_sizes(full32):
    once = full32.cut_at(6)
    twice = once.cut_at(3)
    assert twice.cut.dropped == full32.cut_at(3).cut.dropped and twice.total == full32.total
    with pytest.raises(TableError, match="already cut at size 6"):
        once.cut_at(6)
    with pytest.raises(TableError, match="whole number"):
        full32.cut_at(0)


@pytest.mark.parametrize("space, cap, keep", [(Space(1, 4, 2), 107, 7), TWO_D_CASE])
def test_cut_shards_merge_to_the_whole_cut_build(space, cap, keep):
    # A big build runs as shards cut in the core, each small enough to keep; their merge must be
    # the whole cut build's table key for key, with the dropped weights exact by shape. One
    # shard is built uncut and trimmed, so its records carry key counts the merge cannot add.
    from ctmtab.tables import merge
    whole = Table.from_tally(build(space, cap, keep_size=keep))
    shards = [Table.from_tally(build(space, cap, shard=(i, 3), keep_size=keep)) for i in (0, 1)]
    shards.append(Table.from_tally(build(space, cap, shard=(2, 3))).cut_at(keep))
    merged = loads(merge([loads(t.to_bytes()) for t in shards]).to_bytes())
    assert dict(merged.items()) == dict(whole.items()) and merged.total == whole.total
    assert merged.cut.dropped == whole.cut.dropped  # weights exact; no key count; bound = weight
    assert merged.certificate.by_size == whole.certificate.by_size and problems(merged) == []


def test_cut_tables_merge_only_at_one_size_and_sampled_ones_not_at_all(full32):
    from ctmtab.tables import merge
    halves = [Table.from_tally(build(Space(1, 3, 2), 21, shard=(i, 2))) for i in (0, 1)]
    with pytest.raises(MergeError, match="cut every shard to one size first"):
        merge([halves[0].cut_at(4), halves[1].cut_at(5)])
    with pytest.raises(MergeError, match="cut every shard to one size first"):
        merge([halves[0].cut_at(4), halves[1]])
    s = load("1d-n4-m4-t2000-sampled")
    with pytest.raises(MergeError, match="merge or extend the uncut tables"):
        merge([s.cut_at(4), s.cut_at(4)])


def test_bdm_uses_a_cut_table_up_to_its_size_and_refuses_longer_blocks(full32):
    cut = full32.cut_at(4)
    s = "0110100110010110"
    assert BDM(cut, block=4)(s) == BDM(full32, block=4)(s)
    with pytest.raises(DroppedKeyError):
        BDM(cut, block=5, missing="fallback")(s)


@pytest.mark.parametrize("edit, fragment", [
    (lambda h: h["cut"].update(max_size=0), "cannot mean"),
    (lambda h: h["cut"]["dropped"][0].__setitem__(0, [2]), "which it keeps"),
    (lambda h: h["cut"]["dropped"].append(h["cut"]["dropped"][0]), "twice"),
    (lambda h: h["cut"]["dropped"][0].__setitem__(3, "0"), "impossible"),
    (lambda h: h["cut"]["dropped"][0].__setitem__(2, 0), "impossible"),
    (lambda h: h["cut"]["dropped"][0].__setitem__(1, str(10**30)), "impossible"),
    (lambda h: h["cut"].update(max_size=2), "past its cut"),
    (lambda h: h["cut"].update(dropped="all"), "malformed"),
    (lambda h: h["cut"]["dropped"].pop(), "sum"),
    (lambda h: (h["cut"]["dropped"][0].__setitem__(1, str(int(h["cut"]["dropped"][0][1]) + 2)),
                h["cut"]["dropped"][1].__setitem__(1, str(int(h["cut"]["dropped"][1][1]) - 2))),
     "disagree with the size histogram"),  # the total holds; the sizes do not
])
def test_resealed_cut_records_with_absurd_content_are_refused(full32, edit, fragment):
    data = full32.cut_at(4).to_bytes()
    with pytest.raises(InconsistentTableError, match=fragment):
        loads(with_header(data, edit))


def test_the_command_line_trims_and_reports_dropped_keys(tmp_path):
    r = cli("cut", "1d-n4-m2-t107", "--keep-size", "8", cwd=tmp_path)
    assert r.returncode == 0 and "dropped 1,322 keys" in r.stderr, r.stderr
    out = tmp_path / "1d-n4-m2-t107-upto8.ctmt"
    assert out.is_file()
    r = cli("lookup", out, "0110", "000000000")
    assert r.returncode == 0 and "dropped (size cut)" in r.stdout and "(certified)" in r.stdout
    r = cli("info", out)
    assert "keys up to size 8 kept" in r.stdout
    r = cli("trim", out, "--keep-size", "9")  # the old name of cut
    assert r.returncode != 0 and "already cut at size 8" in r.stderr and "Traceback" not in r.stderr
    r = cli("build", "--states", "2", "--keep-size", "3", "--shard", "0/2", "-o", tmp_path / "a.ctmt")
    assert r.returncode == 0, r.stderr
    r = cli("build", "--states", "2", "--keep-size", "3", "--shard", "1/2", "-o", tmp_path / "b.ctmt")
    assert r.returncode == 0, r.stderr
    r = cli("merge", tmp_path / "a.ctmt", tmp_path / "b.ctmt", "-o", tmp_path / "ab.ctmt")
    assert r.returncode == 0 and cli("verify", tmp_path / "ab.ctmt").returncode == 0, r.stderr
    assert load(tmp_path / "ab.ctmt").cut.keep_size == 3
    r = cli("build", "--states", "2", "--keep-size", "0", "-o", tmp_path / "x.ctmt")
    assert r.returncode != 0 and "--keep-size must be 1 or more" in r.stderr
    r = cli("verify", out)
    assert r.returncode == 0


def test_a_size_past_any_output_keeps_everything_and_still_loads(full32):
    whole = full32.cut_at(10**9)
    assert whole.cut.keep_size == 22 and whole.cut.dropped == {}  # cap 21: at most 22 cells
    back = loads(whole.to_bytes())
    assert dict(back.items()) == dict(full32.items()) and problems(back) == []


@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
def test_a_sampled_table_cut_keeps_its_errors_and_reports_dropped_keys():
    s = load("1d-n4-m4-t2000-sampled")
    cut = s.cut_at(5)
    back = loads(cut.to_bytes())
    assert problems(back) == [] and back.total == s.total
    assert back.standard_error("0123") == s.standard_error("0123")
    out = back.lookup(["0123", "012301"])
    assert out["dropped"].tolist() == [False, True] and math.isnan(out["standard_error"][1])
    assert back.interval("012301")[1] == math.inf


@pytest.mark.parametrize("space, cap, keep", [(Space(1, 4, 2), 107, 7), TWO_D_CASE, (Space(1, 2, 3), 38, 4)])
def test_a_build_cut_in_the_core_keeps_the_same_keys_and_dropped_weights(space, cap, keep):
    whole = Table.from_tally(build(space, cap))
    core_cut = Table.from_tally(build(space, cap, keep_size=keep, workers=2))
    trimmed = whole.cut_at(keep)
    assert dict(core_cut.items()) == dict(trimmed.items())
    assert {s: w for s, (w, _, _) in core_cut.cut.dropped.items()} == {s: w for s, (w, _, _) in trimmed.cut.dropped.items()}
    assert all(k is None and top == w for w, k, top in core_cut.cut.dropped.values())  # never collected
    assert core_cut.total == whole.total and problems(loads(core_cut.to_bytes())) == []
    for key, _ in list(whole.items())[::7]:  # the weaker bound still holds
        if core_cut.dropped(whole.parse_key(key)[0]):
            assert core_cut.interval(key)[0] <= whole.ctm(key) + 1e-12


def test_a_cut_build_does_not_resume_an_uncut_spool(tmp_path):
    # the spool's identity names the cut, so the parts of an uncut build (whose units hold every
    # output) and of a cut one (whose units hold only the weight of the long ones) never mix
    from ctmtab.enumerator.driver import _exhaustive_spool, plan
    p = plan(Space(1, 4, 2), 60)
    idents = {_exhaustive_spool(tmp_path / str(k), p, p.select(None), k).fingerprint for k in (None, 5, 6)}
    assert len(idents) == 3


def test_every_cut_of_the_shipped_tables_loads_back():
    # the size histogram of a cut table still runs to its longest dropped size, and the body's
    # declared size must allow for it (a review found cut tables refused as oversized)
    for name in ("1d-n5-m2-t500", "1d-n4-m4-t2000-sampled", "2d-n3-m2-t2000"):
        t = load(name)
        for k in (1, 3):
            back = loads(t.cut_at(k).to_bytes())
            assert back.total == t.total and back.cut.keep_size == k


def test_a_sampled_dropped_bound_is_no_higher_than_what_the_uncut_table_allows():
    s = load("1d-n4-m4-t2000-sampled")
    cut = s.cut_at(5)
    never = "1" * 85  # a length the sample never produced: the rule of three, as uncut
    assert cut.interval(never)[0] == pytest.approx(s.interval(never)[0]) and math.isfinite(cut.interval(never)[0])
    shape = (6,)
    top_key = max(s.items(6), key=lambda kc: kc[1])[0]
    assert cut.dropped_bound(shape) <= s.ctm(top_key)
    with pytest.raises(DroppedKeyError):
        cut.seen(top_key)
    assert cut.min_seen == s.min_seen


def test_a_record_cut_in_the_core_must_bound_by_its_weight(full32):
    data = Table.from_tally(build(Space(1, 3, 2), 21, keep_size=4)).to_bytes()
    with pytest.raises(InconsistentTableError, match="impossible"):
        loads(with_header(data, lambda h: h["cut"]["dropped"][0].__setitem__(3, "1")))


def test_a_huge_keep_size_keeps_everything_without_overflow(full32):
    t = Table.from_tally(build(Space(1, 3, 2), 21, keep_size=10**20))
    assert t.cut.keep_size == 22 and dict(t.items()) == dict(full32.items())


def test_the_shipped_6_state_table_covers_every_string_to_length_16_and_bdm_needs_no_fallback():
    # (4n+2)^(2n) machines, OEIS A141475's formula, at n = 6: 26^12
    t = load("1d-n6-m2-t1000-upto18")
    assert t.space_size == 26 ** 12 == 95_428_956_661_682_176
    assert t.cut.keep_size == 18 and problems(t) == []
    assert all(len(t.groups[(n,)]) == 2 ** n for n in range(1, 17))
    assert len(t.groups[(17,)]) < 2 ** 17  # 131,070: two strings of length 17 never appear
    # blocks of 12: the (5,2) table misses 2 of the 4,096 (REFERENCES.md: complete to 11), this one none
    x = np.random.default_rng(2026).integers(0, 2, 12 * 20_000)
    assert BDM(t, 12).fallbacks(x) == 0
    assert BDM(load("1d-n5-m2-t500"), 12).fallbacks(x) > 0
    # a dropped key: no value, a certified lower bound from the dropped weight of its length
    out = t.lookup(["0" * 19])
    assert out["dropped"][0] and np.isnan(out["ctm"][0])
    # a key's count is at most its length's dropped weight w plus the undecided runs U that can still
    # reach that length, so P <= (w + U) / (H + U) (README: the per-size bounds, and cut tables)
    w, u = t.cut.dropped[(19,)][2], t.undecided_reach((19,))
    assert out["ctm_low"][0] == pytest.approx(math.log2(t.total + u) - math.log2(w + u), abs=1e-9)
    assert 15 < out["ctm_low"][0] <= math.log2(t.total) - math.log2(w)
    # each string's mirror image and complement come from mirrored / blank-swapped machines
    for key in ("0111010010", "1100101000011"):
        mirror, swapped = key[::-1], key.translate(str.maketrans("01", "10"))
        assert t.count(key) == t.count(mirror) == t.count(swapped) > 0
