"""Forged files, re-sealed with valid checksums: certificates, totals and shards that lie. The
reader refuses what it can refute, verify (with the compiled core) re-derives each shard's
weight, and merge and --extend report a file's lie as bad input (exit 2), never as our bug."""
import subprocess
import sys

import pytest

from ctmtab.enumerator import Space, build, sample
from ctmtab.model.bounds import STEP_BOUNDS
from ctmtab.errors import InconsistentTableError, MergeError
from ctmtab.tables import Table, load, loads, merge, problems

from hostile import with_header

pytestmark = pytest.mark.core


def cli(*args):
    return subprocess.run([sys.executable, "-m", "ctmtab", *map(str, args)], capture_output=True, text=True)


def one_line(r, code, fragment):
    text = r.stdout + r.stderr
    assert r.returncode == code and fragment in text and "Traceback" not in text, text


def as_exact(h, steps=None, source=None):
    """Move the undecided weight into a step-bound proof: every interval of the file becomes a point."""
    cert, undecided = h["certificate"], int(h["totals"]["undecided"])
    h["totals"]["non_halting"] = str(int(h["totals"]["non_halting"]) + undecided)
    h["totals"]["undecided"] = "0"
    cert["proofs"]["step-bound"] = str(undecided)
    if cert.get("proof_nodes") is not None:
        cert["proof_nodes"]["step-bound"] = cert["undecided_nodes"]
    cert["undecided_by_size"], cert["undecided_nodes"] = [], 0
    if steps is not None:
        cert["step_bound"] = {"steps": steps, "source": source}


def drop_undecided(h, weight=False):
    """Delete the undecided weight from the totals and the certificate (and from units.weight)."""
    undecided = int(h["totals"]["undecided"])
    h["totals"]["undecided"] = "0"
    h["certificate"]["undecided_by_size"], h["certificate"]["undecided_nodes"] = [], 0
    if weight:
        h["units"]["weight"] = str(int(h["units"]["weight"]) - undecided)


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """1D (4,2) at cap 50 (far below S(4,2) = 107), and 1D (3,2) cap 15 whole and in 3 shards."""
    d = tmp_path_factory.mktemp("forged")
    out = {"a42": d / "a42.ctmt", "s01": d / "s01.ctmt"}
    out["a42"].write_bytes(Table.from_tally(build(Space(1, 4, 2), 50)).to_bytes())
    out["s01"].write_bytes(Table.from_tally(build(Space(1, 3, 2), 15, shard=(0, 1))).to_bytes())
    for i in range(3):
        out[f"s{i}3"] = d / f"s{i}3.ctmt"
        out[f"s{i}3"].write_bytes(Table.from_tally(build(Space(1, 3, 2), 15, shard=(i, 3))).to_bytes())
    out["dir"] = d
    return out


def forge(files, name, edit, tag):
    path = files["dir"] / f"{name}-{tag}.ctmt"
    path.write_bytes(with_header(files[name].read_bytes(), edit))
    return path


# ---- item: step bounds the one table of proven values does not hold

@pytest.mark.parametrize("steps,source,fragment", [
    # S(4,2) = 107 (Brady 1983; OEIS A060843): a claim of 50 is not the proven value
    (50, "Brady 1983; OEIS A060843", "the proven bound for 1D (4,2) is S = 107"),
    (107, "Brady 1983; OEIS A060843", "at cap 50, below it"),       # the right S, a cap short of it
    (107, "my own search", "the proven bound for 1D (4,2) is S = 107"),  # the right S, another source
])
def test_a_step_bound_that_is_not_the_proven_one_is_refused(files, steps, source, fragment):
    assert STEP_BOUNDS[(4, 2)][0] == 107  # Brady 1983; OEIS A060843
    path = forge(files, "a42", lambda h: as_exact(h, steps, source), f"{steps}-{len(source)}")
    with pytest.raises(InconsistentTableError, match=fragment.replace("(", r"\(").replace(")", r"\)")):
        loads(path.read_bytes())  # the reader refuses: its intervals never become points
    one_line(cli("verify", path), 1, fragment)
    one_line(cli("lookup", path, "0110"), 2, fragment)


def test_a_2d_table_claiming_a_step_bound_is_refused(tmp_path):
    t = Table.from_tally(build(Space(2, 2, 2), 5))
    assert t.undecided > 0
    path = tmp_path / "d2.ctmt"
    path.write_bytes(with_header(t.to_bytes(), lambda h: as_exact(h, 5, "OEIS A060843")))
    one_line(cli("verify", path), 1, "none is proven for 2D (2,2)")


def test_a_sampled_table_claiming_a_step_bound_is_refused():
    data = Table.from_tally(sample(Space(1, 2, 2), 6, 25_000, seed=3)).to_bytes()
    with pytest.raises(InconsistentTableError, match="sampled table claims a step bound"):
        loads(with_header(data, lambda h: h["certificate"].update(step_bound={"steps": 6, "source": "x"})))


def test_step_bound_weight_without_a_bound_and_idle_deciders_are_refused(files):
    with pytest.raises(InconsistentTableError, match="claims no step bound"):
        loads(with_header(files["a42"].read_bytes(), as_exact))
    def idle(h):  # a build without deciders proved nothing
        h["deciders"] = []
    with pytest.raises(InconsistentTableError, match="deciders do not list it"):
        loads(with_header(files["a42"].read_bytes(), idle))


def test_undecided_nodes_must_fit_the_undecided_weight(files):
    for nodes in (0, 10**12):
        with pytest.raises(InconsistentTableError, match="undecided tree nodes"):
            loads(with_header(files["a42"].read_bytes(), lambda h: h["certificate"].update(undecided_nodes=nodes)))


# ---- item: totals against the units' weight

def test_a_whole_shard_with_its_undecided_weight_deleted_is_refused(files):
    assert problems(load(files["s01"])) == []
    for weight, fragment in [(False, "not the weight"), (True, "not the space size")]:
        path = forge(files, "s01", lambda h: drop_undecided(h, weight), f"w{weight}")
        with pytest.raises(InconsistentTableError, match=fragment):
            loads(path.read_bytes())
        one_line(cli("verify", path), 1, fragment)


def test_a_partial_shard_with_its_undecided_weight_deleted_fails_verify(files):
    path = forge(files, "s03", lambda h: drop_undecided(h, True), "noundec")
    t = load(path)  # consistent everywhere in the file: only a rebuilt plan refutes it
    truth = build(Space(1, 3, 2), 15, shard=(0, 3))
    assert t.undecided == 0 < truth.undecided
    assert problems(t) == [f"the shard's units weigh {truth.weight} machines, not the "
                           f"{truth.weight - truth.undecided} its header and totals claim"]
    one_line(cli("verify", path), 1, f"units weigh {truth.weight} machines")


# ---- item: a shard that claims another index is bad input, exit 2, never exit 3

@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
def test_a_shard_claiming_another_index_fails_verify_and_merge(files, tmp_path):
    def relabel(h):
        h["units"]["shard"] = [1, 3]
        h["units"]["covered"] = list(range(1, h["units"]["count"], 3))
    both = forge(files, "s03", relabel, "as1")
    only = forge(files, "s03", lambda h: h["units"].update(shard=[1, 3]), "as1only")
    with pytest.raises(InconsistentTableError, match="not those of shard 1/3"):
        loads(only.read_bytes())
    one_line(cli("verify", only), 1, "not those of shard 1/3")
    one_line(cli("verify", both), 1, "the shard's units weigh")
    out = tmp_path / "m.ctmt"
    for parts, fragment in [([both, files["s03"], files["s23"]], f"{both}: the shard's units weigh"),
                            ([files["s03"], both, files["s23"]], f"{both}: the shard's units weigh"),
                            ([only, files["s13"], files["s23"]], "not those of shard 1/3")]:
        one_line(cli("merge", "-o", out, *parts), 2, fragment)
    assert not out.exists()
    assert cli("merge", "-o", out, files["s03"], files["s13"], files["s23"]).returncode == 0
    assert load(out).body() == Table.from_tally(build(Space(1, 3, 2), 15)).body()


def test_without_the_plan_the_sum_of_the_shards_still_refuses(files, monkeypatch):
    """Where the plan cannot be rebuilt (no core), the shards' weights must still add up."""
    monkeypatch.setattr(sys.modules["ctmtab.tables.merge"], "shard_weight_problems", lambda t, notes: [])
    parts = [load(files["s03"]), load(forge(files, "s03", lambda h: drop_undecided(h, True), "w2")),
             load(files["s23"])]
    parts[1].header["units"]["shard"], parts[1].header["units"]["covered"] = [1, 3], list(range(1, 359, 3))
    assert parts[0].header["units"]["count"] == 359
    with pytest.raises(MergeError, match="not the space size 7529536"):  # 40^4 machines, OEIS A141475
        merge(parts)


def test_extending_or_merging_a_forged_sampled_table_is_bad_input(tmp_path):
    tally = sample(Space(1, 3, 2), 21, 25_000, seed=5)
    hist = list(tally.length_hist)
    size = next(i for i, v in enumerate(hist) if v)
    hist[size] -= 1  # one halting sample moved to another size: its counts no longer match
    hist[size + 1] += 1
    tally.length_hist = hist
    path = tmp_path / "forged.ctmt"
    Table.from_tally(tally).save(path)
    assert load(path).halting == tally.halting  # the reader's own checks pass
    one_line(cli("build", "--extend", path, "--sample", 25_000, "-o", tmp_path / "x.ctmt", "-q"), 2,
             f"{path}: size {size}: counts disagree")
    other = tmp_path / "other.ctmt"
    Table.from_tally(sample(Space(1, 3, 2), 21, 25_000, seed=6)).save(other)
    one_line(cli("merge", "-o", tmp_path / "m.ctmt", other, path), 2, f"{path}: size {size}")


# ---- small item: what made a table exact

def test_exact_says_what_made_it_exact():
    by_bound, by_proofs, open_ = load("1d-n4-m2-t107"), load("2d-n2-m2-t2000"), load("2d-n3-m2-t2000")
    assert by_bound.exact and by_bound.exact_by == "step-bound"
    # no step bound is proven in 2D, yet every 2D (2,2) run was decided
    assert by_proofs.exact and by_proofs.certificate.step_bound is None and by_proofs.exact_by == "proofs"
    assert not open_.exact and open_.exact_by is None
    assert by_proofs.summary()["certificate"]["exact_by"] == "proofs"
    r = cli("lookup", "2d-n2-m2-t2000", "1")
    assert "exact (every run decided)" in r.stdout and "step bound" not in r.stdout
    assert "exact (step bound)" in cli("lookup", "1d-n4-m2-t107", "0110").stdout
    info = cli("info", "2d-n2-m2-t2000").stdout
    assert "no step bound used" in info and "step bound S" not in info


def test_without_the_core_verify_says_what_it_did_not_check(files):
    from test_without_core import BLOCK
    forged = forge(files, "s03", lambda h: drop_undecided(h, True), "nocore")
    code = BLOCK + "from ctmtab.tools.cli import main; sys.exit(main(sys.argv[1:]))"
    r = subprocess.run([sys.executable, "-c", code, "verify", forged], capture_output=True, text=True)
    assert r.returncode == 0 and "not checked: the weight of the shard's units was not recomputed" in r.stdout
    r = subprocess.run([sys.executable, "-c", code, "merge", "-o", files["dir"] / "nc.ctmt", forged,
                        files["s13"], files["s23"]], capture_output=True, text=True)
    one_line(r, 2, "not the space size 7529536")  # 40^4 machines, OEIS A141475
