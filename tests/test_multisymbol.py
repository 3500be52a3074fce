"""The shipped exhaustive tables of 3, 4 and 5 symbols against published busy-beaver facts, and
rebuilt from the command each one records (the slow lane)."""
import shlex

import pytest

from ctmtab.enumerator import Space, build, run
from ctmtab.model.bounds import bound_reached
from ctmtab.tables import load, problems

CHAMPION_24 = "1RB2LA1RA1RA_1LB1LA3RB1RZ"  # S(2,4) = 3,932,964 steps, 2,050 non-zero cells (arXiv:2509.12337)
EXACT_24 = "1d-n2-m4-t3932964-exact"
NEW_TABLES = [EXACT_24, "1d-n3-m3-t10000", "2d-n2-m3-t2000"]


def test_exact_two_state_four_symbol_table():
    t = load(EXACT_24)
    assert t.space == Space(1, 2, 4) and t.cap == 3_932_964
    assert t.space_size == 20**8  # (2nm + m)^(nm) machines (REFERENCES.md: follows from the definition)
    # arXiv:2509.12337 (verified): S(2,4) = 3,932,964 and the champion leaves 2,050 non-zero cells
    assert t.header["stats"]["longest_run"] == 3_932_964
    assert t.header["stats"]["most_nonblank"] == 2_050
    assert len(t.steps_hist) == 3_932_964 + 1 and t.steps_hist[-1] > 0
    assert t.undecided == 0 and t.exact and t.certificate.step_bound["steps"] == 3_932_964
    assert max(row["widest"] for row in t.interval_widths()) == 0.0
    # the champion's own output is among the keys (its run by the one-machine simulator)
    r = run(CHAMPION_24, 10**7)
    assert r.status == "halted" and r.steps == 3_932_964 and r.nonblank == 2_050
    assert t.count("".join(map(str, r.output))) >= 1
    assert problems(t) == []


def test_three_state_three_symbol_table_is_not_called_exact():
    # S(3,3) is unknown; its champion runs about 1.19 x 10^17 steps (memory, bbchallenge), far
    # past any cap here, so no bound may make this table exact
    t = load("1d-n3-m3-t10000")
    assert bound_reached(t.space, t.cap) is None
    assert not t.exact and t.undecided > 0
    assert problems(t) == []


@pytest.mark.ci_slow
@pytest.mark.core
@pytest.mark.parametrize("name", NEW_TABLES)
def test_shipped_multi_symbol_tables_rebuild_key_by_key(name):
    t = load(name)
    words = shlex.split(t.header["build"]["command"])
    opt = {w: words[i + 1] for i, w in enumerate(words) if w.startswith("--")}
    space = Space(int(opt.get("--dims", 1)), int(opt["--states"]), int(opt["--symbols"]))
    assert space == t.space and int(opt["--max-steps"]) == t.cap
    fresh = build(space, t.cap, workers=2, budget_hours=None)
    assert (fresh.halting, fresh.non_halting, fresh.undecided) == (t.halting, t.non_halting, t.undecided)
    assert dict(t.items()) == {t.key_text(s, bytes(k)): c for s, g in fresh.groups.items() for k, c in g.items()}


def test_the_reader_and_the_sampler_agree_on_images_per_sample():
    # two derivations of one number: the reader's closed form (model.symmetry.images_for, from a
    # header's relabelling) and the sampler's count of the maps it applies (sample_perms)
    from ctmtab.model.symmetry import images_for, images_per_sample, relabelling

    for dims in (1, 2):
        for m in range(2, 10):
            space = Space(dims, 2, m)
            assert images_for(dims, m, relabelling(m)) == images_per_sample(space)
