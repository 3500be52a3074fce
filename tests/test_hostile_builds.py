"""Builds given hostile input: spools that are not theirs, addresses that are not Dask
schedulers, sizes no build could use, and signals. Each must end in one line (or finish) without
deleting a file it did not write.

Servers here listen on 127.0.0.1 only, with an OS-chosen port, and every loop is bounded."""
import http.server
import os
import re
import signal
import socket
import subprocess
import sys
import textwrap
import threading
import time
import tracemalloc
from pathlib import Path

import msgpack
import pytest

from ctmtab.enumerator import Space, Target, executors, plan, sample
from ctmtab.enumerator import spool as spool_mod
from ctmtab.model.streams import SAMPLE_UNIT
from ctmtab.errors import CtmtabError
from ctmtab.tables import load
from ctmtab.tools import cli as cli_mod

SPACE = ["--states", "2", "--max-steps", "6"]  # 1D (2,2) cap 6: 12 units, milliseconds
# about 50 s of subprocesses, sockets and signals: the CI lane (.ci/run runs it after the quick one)
pytestmark = pytest.mark.ci_slow


def ctm(*args, env=None, timeout=120, **kw):
    full = {**os.environ, **(env or {})}
    return subprocess.run([sys.executable, "-m", "ctmtab", *map(str, args)], capture_output=True, text=True,
                          timeout=timeout, env=full, **kw)


def one_line(r, code=2) -> str:
    lines = r.stderr.strip().splitlines()
    assert r.returncode == code and len(lines) == 1 and "Traceback" not in r.stderr, r.stderr
    return lines[0]


def units_on_disk(folder: Path) -> list[int]:
    """Unit indices in a spool, read from the part files with msgpack alone."""
    out = []
    for p in sorted(folder.glob("part-*.part")):
        rec = msgpack.unpackb(p.read_bytes(), raw=False)
        out += [u[0] for u in rec["units"]]
    return sorted(out)


# ---- item 6: the spool deletes only what the build wrote

@pytest.fixture()
def sample_spool(tmp_path, monkeypatch):
    """The spool a killed 10-unit sampled build of (2,2) cap 6 leaves behind (one part per unit)."""
    monkeypatch.setattr(spool_mod, "FLUSH_SECONDS", 0.0)
    out = tmp_path / "s.ctmt"
    sample(Space(1, 2, 2), 6, 10 * SAMPLE_UNIT, spool=str(out) + ".parts")  # sample() never cleans up
    folder = Path(str(out) + ".parts")
    assert units_on_disk(folder) == list(range(10))
    return out, folder


def build_in_process(capsys, *args) -> tuple[int, str]:
    code = cli_mod.main(["build", *SPACE, "--workers", "1", *map(str, args)])
    return code, capsys.readouterr().err


def test_a_smaller_sample_resumes_and_keeps_the_units_it_did_not_use(sample_spool, capsys):
    out, folder = sample_spool
    code, err = build_in_process(capsys, "--sample", 4 * SAMPLE_UNIT, "-o", out)
    assert code == 0, err
    assert load(out).header["sample"]["size"] == 4 * SAMPLE_UNIT and "4 units resumed" in err
    # one part per unit here: the parts of units 0-3 were used up, those of 4-9 must stay
    assert units_on_disk(folder) == list(range(4, 10)), "units the build did not use were deleted"
    assert "was kept" in err and "6 finished unit(s) this build did not use" in err
    # the full count then uses every one of them, and only then is the folder removed
    code, err = build_in_process(capsys, "--sample", 10 * SAMPLE_UNIT, "-o", out)
    assert code == 0 and "6 units resumed" in err and not folder.exists(), err


def test_an_until_target_leaves_no_spool_of_its_own(tmp_path, capsys, monkeypatch):
    # units finished past the target's stop were written by this very run: they go with it
    monkeypatch.setattr(spool_mod, "FLUSH_SECONDS", 0.0)
    out = tmp_path / "u.ctmt"
    code, err = build_in_process(capsys, "--sample", 10**8, "--until", "20%@3", "-o", out)
    assert code == 0 and "stopped by the target" in err, err
    assert not Path(str(out) + ".parts").exists() and "was kept" not in err


def test_another_shard_under_the_same_output_is_refused(tmp_path, monkeypatch):
    monkeypatch.setattr(spool_mod, "FLUSH_SECONDS", 0.0)
    out = tmp_path / "t.ctmt"
    from ctmtab.enumerator import build
    build(Space(1, 3, 2), 21, shard=(0, 2), spool=str(out) + ".parts")  # build() never cleans up
    folder = Path(str(out) + ".parts")
    before = {p.name: p.read_bytes() for p in folder.iterdir()}
    assert units_on_disk(folder)
    line = one_line(ctm("build", "--states", "3", "--max-steps", "21", "--shard", "1/2", "-o", out, "-q"))
    assert str(folder) in line and "shard 0/2" in line and "another -o" in line
    assert {p.name: p.read_bytes() for p in folder.iterdir()} == before and not out.exists()
    # the shard it belongs to resumes from it, and removes it
    r = ctm("build", "--states", "3", "--max-steps", "21", "--shard", "0/2", "-o", out)
    assert r.returncode == 0 and "units resumed" in r.stderr and not folder.exists(), r.stderr


def test_a_linked_folder_of_user_files_is_refused_and_left_alone(tmp_path):
    mine = tmp_path / "mine"
    mine.mkdir()
    (mine / "part-000000.part").write_bytes(b"my own notes")
    out = tmp_path / "t.ctmt"
    Path(str(out) + ".parts").symlink_to(mine)
    line = one_line(ctm("build", "--states", "3", "--max-steps", "21", "-o", out, "-q"))
    assert "no plan.json" in line and "another -o" in line
    assert (mine / "part-000000.part").read_bytes() == b"my own notes" and not out.exists()


def test_a_file_named_like_a_part_in_our_spool_survives_the_build(sample_spool, capsys):
    out, folder = sample_spool
    foreign = folder / "part-000777.part"
    foreign.write_bytes(b"\x93 not ours")
    code, err = build_in_process(capsys, "--sample", 10 * SAMPLE_UNIT, "-o", out)
    assert code == 0, err
    assert foreign.read_bytes() == b"\x93 not ours", "a file the build did not write was deleted"
    assert "1 file(s) it did not write ('part-000777.part')" in err
    assert not list(folder.glob("part-00000*.part"))  # its own parts went


def test_a_read_only_spool_says_what_to_do(sample_spool, monkeypatch, capsys):
    out, folder = sample_spool
    real = os.access
    monkeypatch.setattr(spool_mod.os, "access", lambda p, mode: False if Path(p) == folder else real(p, mode))
    code, err = build_in_process(capsys, "--sample", 10 * SAMPLE_UNIT, "-o", out)
    lines = err.strip().splitlines()
    assert code == 2 and len(lines) == 1 and str(folder) in err and "make it writable" in err, err


def test_a_spool_that_cannot_be_written_names_the_folder(tmp_path, monkeypatch, capsys):
    monkeypatch.setattr(spool_mod, "FLUSH_SECONDS", 0.0)

    def refuse(path, data, durable=True):
        raise PermissionError(13, "Permission denied", str(path) + ".x1y2.tmp")
    monkeypatch.setattr(spool_mod, "write_atomic", refuse)
    out = tmp_path / "t.ctmt"
    code, err = build_in_process(capsys, "--sample", 3 * SAMPLE_UNIT, "-o", out)
    lines = err.strip().splitlines()
    assert code == 2 and len(lines) == 1 and ".tmp" not in err, err
    assert f"{out}.parts: Permission denied" in err and "choose another -o" in err


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes into a read-only folder anyway")
def test_a_really_read_only_spool_is_refused(sample_spool):
    out, folder = sample_spool
    folder.chmod(0o500)
    try:
        line = one_line(ctm("build", *SPACE, "--sample", 10 * SAMPLE_UNIT, "-o", out, "-q"))
        assert str(folder) in line and "writable" in line
    finally:
        folder.chmod(0o700)


# ---- item 7: --scheduler at something that is not a Dask scheduler

class Listener:
    """A TCP server on 127.0.0.1 that accepts and then says nothing, or sends garbage."""

    def __init__(self, reply: bytes = b""):
        self.sock = socket.create_server(("127.0.0.1", 0))
        self.sock.settimeout(0.2)
        self.port = self.sock.getsockname()[1]
        self.reply, self.stop, self.conns = reply, threading.Event(), []
        self.thread = threading.Thread(target=self.run, daemon=True)
        self.thread.start()

    def run(self):
        deadline = time.monotonic() + 120  # bounded, whatever the test does
        while not self.stop.is_set() and time.monotonic() < deadline:
            try:
                conn, _ = self.sock.accept()
            except OSError:
                continue
            self.conns.append(conn)
            if self.reply:
                try:
                    conn.sendall(self.reply)
                except OSError:
                    pass

    def close(self):
        self.stop.set()
        self.thread.join(5)
        for c in self.conns:
            c.close()
        self.sock.close()


@pytest.fixture()
def http_server():
    server = http.server.HTTPServer(("127.0.0.1", 0), http.server.SimpleHTTPRequestHandler)
    thread = threading.Thread(target=server.serve_forever, kwargs={"poll_interval": 0.1}, daemon=True)
    thread.start()
    yield server.server_address[1]
    server.shutdown()
    server.server_close()


def scheduler_run(address: str, tmp_path: Path):
    pytest.importorskip("distributed")
    t0 = time.monotonic()
    r = ctm("build", *SPACE, "--scheduler", address, "-o", tmp_path / "never.ctmt", "-q",
            env={"CTMTAB_SCHEDULER_TIMEOUT": "2"}, timeout=90)
    return r, time.monotonic() - t0


@pytest.mark.parametrize("reply", [b"", b"\x00\xff\x7f garbage that is not Dask\r\n" * 40])
def test_a_listener_that_is_not_dask_fails_in_one_line_within_the_limit(reply, tmp_path):
    server = Listener(reply)
    try:
        address = f"tcp://127.0.0.1:{server.port}"
        r, seconds = scheduler_run(address, tmp_path)
    finally:
        server.close()
    line = one_line(r)
    assert address in line and "Dask" in line and seconds < 30, (line, seconds)


def test_an_http_server_is_not_a_scheduler(http_server, tmp_path):
    address = f"tcp://127.0.0.1:{http_server}"
    r, seconds = scheduler_run(address, tmp_path)
    line = one_line(r)
    assert address in line and "within 2 s" in line and seconds < 30


@pytest.mark.parametrize("address", ["tcp://[::1", "bogus://127.0.0.1:1", "tcp://127.0.0.1:99999",
                                     "tcp://127.0.0.1:abc", "127.0.0.1:1", "tcp://127.0.0.1:1\nforged line"])
def test_a_malformed_or_dead_address_is_one_line(address, tmp_path):
    r, seconds = scheduler_run(address, tmp_path)
    line = one_line(r)
    assert "Dask scheduler" in line and repr(address)[1:-1] in line and seconds < 30


def test_a_bad_timeout_setting_is_one_line():
    pytest.importorskip("distributed")
    r = ctm("build", *SPACE, "--scheduler", "tcp://127.0.0.1:1", "-q", env={"CTMTAB_SCHEDULER_TIMEOUT": "soon"})
    assert "CTMTAB_SCHEDULER_TIMEOUT" in one_line(r)


# ---- item 8: sizes no build can use are refused before any work; the rest start at once

@pytest.mark.parametrize("args, words", [
    (["--sample", 10**15], "at least"),                   # a lower bound alone refuses it
    (["--sample", 10**12], "timed on its first"),         # the first unit's time refuses it
    (["--sample", 1 << 63], "below 2^63"),                # would not fit the header's counts
    (["--sample", 0], "positive"),
    (["--sample", 10**5, "--until", f"5%@{10**20}"], "longer than 7"),  # (2,2) cap 6: at most 7 cells
    (["--sample", 10**5, "--until", "5%@8"], "longer than 7"),
    (["--shard", f"0/{10**30}"], "only 12 work units"),
    (["--shard", "0/13"], "only 12 work units"),
    (["--sample", 10**5, "--workers", 0], "--workers"),
    (["--sample", 10**5, "--workers", -2], "--workers"),
    (["--scheduler", ""], "--scheduler is empty"),
])
def test_sizes_that_can_never_be_used_are_refused_at_once(tmp_path, args, words):
    out = tmp_path / "never.ctmt"
    t0 = time.monotonic()
    line = one_line(ctm("build", *SPACE, *args, "-o", out, "-q"))
    assert words in line and time.monotonic() - t0 < 30, line
    assert not out.exists() and not Path(str(out) + ".parts").exists()


def test_the_largest_shard_count_still_builds(tmp_path):
    assert plan(Space(1, 2, 2), 6).count == 12  # the count the refusals above name
    r = ctm("build", *SPACE, "--shard", "11/12", "-o", tmp_path / "s.ctmt", "-q")
    assert r.returncode == 0 and load(tmp_path / "s.ctmt").header["units"]["shard"] == [11, 12], r.stderr


def test_the_sample_estimate_is_near_the_real_time():
    # the refusal's figure against the wall time of a real 40-unit build, scaled up (one worker)
    with pytest.raises(CtmtabError) as refused:
        sample(Space(1, 2, 2), 6, 10**12, workers=1)
    hours = re.search(r"estimated at ([\d.,]+) CPU-hours", str(refused.value))
    t0 = time.perf_counter()
    sample(Space(1, 2, 2), 6, 40 * SAMPLE_UNIT, workers=1, budget_hours=None)
    real = (time.perf_counter() - t0) / 40 * (10**12 / SAMPLE_UNIT) / 3600
    assert hours and 0.2 < float(hours.group(1).replace(",", "")) / real < 5, (hours, real)


def test_an_endless_count_is_planned_lazily():
    # 4e10 units: a task list would need terabytes; a lazy plan stops at the time limit
    tracemalloc.start()
    t0 = time.perf_counter()
    tally = sample(Space(1, 2, 2), 6, 10**15, until=Target(seconds=1.0), workers=2, budget_hours=None)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert time.perf_counter() - t0 < 30 and tally.until["stopped_by"] == "time" and tally.samples > 0
    assert peak < 200 << 20, f"{peak / 2**20:.0f} MiB traced"


def test_a_pool_never_runs_far_ahead_of_its_consumer():
    drawn = []

    def tasks():
        for k in range(10**9):
            drawn.append(k)
            yield 1, 2, 2, 6, 0, k, k + 1, 100

    with executors.Runner(2) as runner:
        results = runner.stream(tasks(), executors.run_sample_task)
        got = [next(results) for _ in range(5)]
        results.close()
    assert len(got) == 5 and len(drawn) <= 5 + executors.IN_FLIGHT * 2


def spooled_units(folder: Path) -> int:
    try:
        return len(units_on_disk(folder))
    except (OSError, ValueError, msgpack.ExtraData, KeyError):  # a part being renamed into place
        return 0


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="signals to a pool")
def test_sigterm_ends_a_huge_pooled_sample_in_seconds_and_keeps_its_units(tmp_path):
    out = tmp_path / "s.ctmt"
    folder = Path(str(out) + ".parts")
    cmd = [sys.executable, "-m", "ctmtab", "build", "--states", "4", "--max-steps", "107", "--sample",
           str(10**15), "--budget-hours", "1e9", "--workers", "2", "-o", str(out), "-q"]
    proc = subprocess.Popen(cmd, stderr=subprocess.PIPE, text=True, start_new_session=True)
    try:
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline and spooled_units(folder) == 0 and proc.poll() is None:
            time.sleep(0.05)
        seen = spooled_units(folder)
        assert seen > 0, "no unit was spooled within a minute"
        t0 = time.monotonic()
        os.kill(proc.pid, signal.SIGTERM)
        err = proc.communicate(timeout=30)[1]
        assert time.monotonic() - t0 < 5 and proc.returncode == 128 + signal.SIGTERM and "Traceback" not in err
        assert spooled_units(folder) >= seen and not out.exists()
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.communicate()


# ---- item 9: Ctrl-C on a pooled build prints one line

@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="signals to a pool")
@pytest.mark.parametrize("group", [True, False])
def test_ctrl_c_on_a_pooled_build_prints_one_line(tmp_path, group):
    # Ctrl-C in a terminal signals the whole process group; `kill -INT` the build alone
    cmd = [sys.executable, "-m", "ctmtab", "build", "--states", "3", "--symbols", "3", "--max-steps", "20",
           "--workers", "2", "-o", str(tmp_path / "t.ctmt"), "-q"]
    # a child inherits an ignored SIGINT (pytest-xdist's workers ignore it), and Python then never
    # raises KeyboardInterrupt: the build starts with the default, as from a terminal
    proc = subprocess.Popen(cmd, stderr=subprocess.PIPE, text=True, start_new_session=True,
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    try:
        time.sleep(2.5)  # imported, pool started, units running
        assert proc.poll() is None, "the build ended before it could be interrupted; make it longer"
        if group:
            os.killpg(proc.pid, signal.SIGINT)
        else:
            os.kill(proc.pid, signal.SIGINT)
        err = proc.communicate(timeout=30)[1]
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.communicate()
    assert proc.returncode == 130 and err == "ctmtab build: interrupted\n", err


# ---- --extend past the largest seed

def test_extend_at_the_largest_seed_names_the_table_not_the_option(tmp_path):
    top = (1 << 63) - 1
    table = tmp_path / "s.ctmt"
    r = ctm("build", *SPACE, "--sample", SAMPLE_UNIT, "--seed", top, "-o", table, "-q")
    assert r.returncode == 0, r.stderr
    line = one_line(ctm("build", "--extend", table, "--sample", SAMPLE_UNIT, "-q"))
    assert "2^63 - 1" in line and "--seed 0" in line and "got" not in line
    r = ctm("build", "--extend", table, "--sample", SAMPLE_UNIT, "--seed", "0", "-q")
    assert r.returncode == 0 and load(table).header["sample"]["size"] == 2 * SAMPLE_UNIT, r.stderr


def test_an_interrupt_never_hangs_on_a_thread_that_cannot_end():
    # a pool's manager thread blocked on a queue a killed worker held (seen under heavy load)
    # would make the interpreter's exit join it forever: the command must still end, 130
    code = textwrap.dedent("""
        import threading, sys
        from ctmtab.tools import cli
        threading.Thread(target=threading.Event().wait).start()  # never ends, not a daemon
        def interrupted(a):
            raise KeyboardInterrupt
        cli.COMMANDS["info"] = interrupted
        sys.exit(cli.main(["info", "1d-n3-m2-t21"]))
    """)
    t0 = time.monotonic()
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert r.returncode == 130 and r.stderr == "ctmtab info: interrupted\n", r.stderr
    assert time.monotonic() - t0 < 30
