"""Work units, executors, shards, resume and progress: none may change a single byte of the body."""
import io
import os
import signal
import subprocess
import sys
import time

import pytest

from ctmtab.enumerator import Space, build, plan
from ctmtab.errors import MergeError
from ctmtab.tables import Table, load, merge
from ctmtab.tools.progress import Bar

from hostile import sections


def body(table_or_bytes) -> bytes:
    data = table_or_bytes if isinstance(table_or_bytes, bytes) else table_or_bytes.to_bytes()
    return data[sections(data)[0]:]


@pytest.fixture(scope="module")
def single_42():
    return Table.from_tally(build(Space(1, 4, 2), 107))


def test_plan_is_deterministic_and_covers_the_space():
    a, b = plan(Space(1, 4, 2), 107), plan(Space(1, 4, 2), 107)
    assert [u.prefix for u in a.units] == [u.prefix for u in b.units] and a.ident == b.ident
    assert sum(a.unit(k).weight for k in range(a.count)) == Space(1, 4, 2).size
    assert plan(Space(1, 4, 2), 106).ident != a.ident


@pytest.mark.parametrize("workers", [2])
def test_worker_count_gives_identical_body(single_42, workers):
    assert body(Table.from_tally(build(Space(1, 4, 2), 107, workers=workers))) == body(single_42)


@pytest.mark.parametrize("depth", [0, 2, 5])
def test_split_depth_gives_identical_body(single_42, depth):
    assert body(Table.from_tally(build(Space(1, 4, 2), 107, split_depth=depth))) == body(single_42)


@pytest.mark.ci_slow  # about 30 s; test_enumerator checks every subset on (3,2) in the quick lane
def test_every_decider_subset_gives_identical_counts_on_42_and_33():
    for space, cap in ((Space(1, 4, 2), 107), (Space(1, 3, 3), 12)):
        ref = build(space, cap)
        for subset in ((), ("translated-cycler",), ("cycler", "escapee")):
            t = build(space, cap, deciders=subset, budget_hours=None)
            assert t.groups == ref.groups and t.steps_hist == ref.steps_hist
            assert t.non_halting + t.undecided == ref.non_halting + ref.undecided
        weaker = build(space, cap, deciders=("full-table", "escapee", "cycler"))
        # what the deciders left, before the step bound S(4) = 107 (Brady 1983) proves the rest
        assert ref.undecided + ref.proofs.get("step-bound", 0) < weaker.undecided + weaker.proofs.get("step-bound", 0)


def shard_tables(space, cap, n):
    return [Table.from_tally(build(space, cap, shard=(i, n))) for i in range(n)]


def test_shards_merge_into_the_single_machine_table(single_42):
    parts = shard_tables(Space(1, 4, 2), 107, 3)
    assert all(p.header["units"]["covered"] != "all" for p in parts)
    merged = merge(parts)
    assert body(merged) == body(single_42)
    assert merged.header["units"]["covered"] == "all"


@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
def test_shards_of_33_merge_into_the_single_machine_table():
    single = Table.from_tally(build(Space(1, 3, 3), 12))
    assert body(merge(shard_tables(Space(1, 3, 3), 12, 4))) == body(single)


def test_merge_refuses_missing_duplicate_and_foreign_shards(single_42):
    parts = [loadable(p) for p in shard_tables(Space(1, 4, 2), 107, 3)]
    with pytest.raises(MergeError, match="missing.*shards 2/3"):
        merge(parts[:2])
    with pytest.raises(MergeError, match="given twice|overlaps"):
        merge([parts[0], parts[0], parts[1], parts[2]])
    other = loadable(Table.from_tally(build(Space(1, 4, 2), 100, shard=(2, 3))))
    with pytest.raises(MergeError, match="differs .* in cap"):
        merge(parts[:2] + [other])
    deeper = loadable(Table.from_tally(build(Space(1, 4, 2), 107, shard=(2, 3), split_depth=3)))
    with pytest.raises(MergeError, match="another build"):
        merge(parts[:2] + [deeper])
    with pytest.raises(MergeError, match="covers every work unit"):
        merge([loadable(single_42), parts[0]])


def loadable(table):
    from ctmtab.tables import loads
    return loads(table.to_bytes())


def test_shard_tables_verify_on_their_own():
    from ctmtab.tables import problems
    for p in shard_tables(Space(1, 3, 2), 21, 2):
        assert problems(loadable(p)) == []


def test_progress_bar_shows_units_rate_and_eta():
    out = io.StringIO()
    bar = Bar("test", enabled=True, stream=out)
    build(Space(1, 4, 2), 107, on_progress=bar)
    bar.close()
    last = out.getvalue().strip().split("\r")[-1]
    assert "914/914 units" in last and "machines/s" in last and "ETA" in last


def test_no_progress_bar_when_stderr_is_not_a_terminal(tmp_path):
    r = subprocess.run([sys.executable, "-m", "ctmtab", "build", "--states", "4", "-o", str(tmp_path / "t.ctmt")],
                       capture_output=True, text=True)
    assert r.returncode == 0 and "\r" not in r.stderr and "units" not in r.stderr


def spooled_units(parts) -> int:
    """Units on disk in a spool folder (parts hold batches), counted from the part files."""
    import msgpack
    n = 0
    for p in parts.glob("*.part") if parts.exists() else ():
        try:
            n += len(msgpack.unpackb(p.read_bytes(), raw=False)["units"])
        except Exception:  # a part being renamed into place
            pass
    return n


@pytest.mark.ci_slow  # about 35 s: a (3,3) build, killed, resumed and built again
def test_killed_build_resumes_to_an_identical_table(tmp_path):
    """SIGKILL a real build mid-run, start the same command again, compare bytes."""
    out = tmp_path / "t.ctmt"
    parts = tmp_path / "t.ctmt.parts"
    cmd = [sys.executable, "-m", "ctmtab", "build", "--states", "3", "--symbols", "3", "--max-steps", "20",
           "--workers", "1", "-o", str(out), "-q"]
    proc = subprocess.Popen(cmd, start_new_session=True)
    deadline = time.time() + 120
    total = plan(Space(1, 3, 3), 20).count
    while time.time() < deadline:
        if spooled_units(parts) >= total // 3:
            break
        time.sleep(0.05)
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()
    assert not out.exists(), "the build finished before it could be killed; make it longer"
    finished = spooled_units(parts)
    assert 0 < finished < total
    r = subprocess.run(cmd[:-1], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    assert f"{finished} units resumed" in r.stderr
    resumed = load(out)
    assert resumed.header["build"]["resumed_units"] == finished
    assert not parts.exists()
    fresh = Table.from_tally(build(Space(1, 3, 3), 20))
    assert body(out.read_bytes()) == body(fresh)


def test_spool_of_another_build_is_refused(tmp_path):
    out = tmp_path / "t.ctmt"
    (tmp_path / "t.ctmt.parts").mkdir()
    (tmp_path / "t.ctmt.parts" / "plan.json").write_text('{"plan": "other"}')
    r = subprocess.run([sys.executable, "-m", "ctmtab", "build", "--states", "3", "-o", str(out)],
                       capture_output=True, text=True)
    assert r.returncode == 2 and "different build" in r.stderr


@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
def test_dask_local_cluster_gives_identical_body(single_42):
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None, silence_logs=40) as cluster:
        t = build(Space(1, 4, 2), 107, scheduler=cluster.scheduler_address)
    assert body(Table.from_tally(t)) == body(single_42)


def test_unreachable_scheduler_is_one_line(tmp_path):
    r = subprocess.run([sys.executable, "-m", "ctmtab", "build", "--states", "3", "--scheduler",
                        "tcp://127.0.0.1:9", "-o", str(tmp_path / "never.ctmt")], capture_output=True, text=True)
    assert r.returncode == 2 and "Dask scheduler" in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1


@pytest.mark.parametrize("text", ["3/3", "a/b", "-1/2", "1"])
def test_bad_shard_is_one_line(text, tmp_path):
    r = subprocess.run([sys.executable, "-m", "ctmtab", "build", "--shard", text, "-o", str(tmp_path / "never.ctmt")],
                       capture_output=True, text=True)
    assert r.returncode == 2 and "shard" in r.stderr and len(r.stderr.strip().splitlines()) == 1
