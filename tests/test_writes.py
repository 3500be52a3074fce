"""Writes that must not destroy or lose data: special output files, full and read-only disks,
the sealed and batched spool, sampled resume, and pool workers that die with their build.

Special files are made inside tmp_path only (os.mkfifo, os.mknod); no real device is touched."""
import errno
import os
import signal
import stat
import subprocess
import sys
import threading
import time
from pathlib import Path

import msgpack
import pytest

from ctmtab.enumerator import Space, Target, build, sample
from ctmtab.enumerator import spool as spool_mod
from ctmtab.errors import OutputError
from ctmtab.fsutil import write_atomic
from ctmtab.tables import Table, load
from ctmtab.tools import cli as cli_mod

from hostile import sections

SMALL = ["--states", "2", "--max-steps", "6", "-q"]  # (2,2) cap 6: a build of milliseconds


def ctm(*args, **kw):
    return subprocess.run([sys.executable, "-m", "ctmtab", *map(str, args)], capture_output=True, text=True,
                          timeout=kw.pop("timeout", 120), **kw)


def one_line(r):
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in r.stderr, r.stderr
    return lines[0]


def body(data: bytes) -> bytes:
    return data[sections(data)[0]:]


def device(path: Path, minor: int) -> Path:
    """A character device of the mem driver (major 1) inside tmp_path: 3 discards writes, 7 is
    always full (Linux devices.txt, common practice). Skips where mknod is not allowed."""
    try:
        os.mknod(path, stat.S_IFCHR | 0o600, os.makedev(1, minor))
    except (PermissionError, OSError) as exc:
        pytest.skip(f"mknod is not permitted here ({exc})")
    return path


@pytest.fixture(scope="module")
def table(tmp_path_factory):
    path = tmp_path_factory.mktemp("w") / "t.ctmt"
    r = ctm("build", *SMALL, "-o", path)
    assert r.returncode == 0, r.stderr
    return path


# ---- 1. what the output path is decides how it is written

def test_a_symlink_is_written_through_and_stays_a_link(tmp_path, table):
    real = tmp_path / "real.csv"
    real.write_text("old")
    link = tmp_path / "link.csv"
    link.symlink_to(real)
    r = ctm("export", table, "-o", link)
    assert r.returncode == 0, r.stderr
    assert link.is_symlink() and os.readlink(link) == str(real)
    assert real.read_text().startswith("key,")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["link.csv", "real.csv"]  # no temporary left


def test_a_dangling_symlink_creates_its_target(tmp_path):
    link = tmp_path / "t.ctmt"
    link.symlink_to(tmp_path / "target.ctmt")
    write_atomic(link, b"abc")
    assert link.is_symlink() and (tmp_path / "target.ctmt").read_bytes() == b"abc"


def test_build_to_a_character_device_streams_and_keeps_the_device(tmp_path):
    node = device(tmp_path / "null", 3)
    r = ctm("build", *SMALL, "-o", node)
    assert r.returncode == 0, r.stderr
    st = os.lstat(node)
    assert stat.S_ISCHR(st.st_mode) and st.st_rdev == os.makedev(1, 3)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["null"]


def test_a_fifo_with_a_reader_gets_the_stream(tmp_path, table):
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    got = []
    reader = threading.Thread(target=lambda: got.append(open(fifo, "rb").read()))
    reader.start()
    r = ctm("export", table, "-o", fifo)
    reader.join(30)
    assert r.returncode == 0, r.stderr
    assert stat.S_ISFIFO(os.lstat(fifo).st_mode)
    assert got and got[0] == ctm("export", table).stdout.encode()


def test_a_fifo_without_a_reader_is_refused_at_once(tmp_path, table):
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    t0 = time.monotonic()
    r = ctm("export", table, "-o", fifo, timeout=30)
    assert r.returncode == 2 and "no reader" in one_line(r)
    assert time.monotonic() - t0 < 20 and stat.S_ISFIFO(os.lstat(fifo).st_mode)
    with pytest.raises(OutputError, match="no reader"):
        write_atomic(fifo, b"x")


@pytest.mark.parametrize("command", ["build", "export"])
def test_a_folder_is_refused(tmp_path, table, command):
    args = ["build", *SMALL] if command == "build" else ["export", table]
    r = ctm(*args, "-o", tmp_path)
    assert r.returncode == 2 and "folder" in one_line(r)


def test_merge_through_a_symlink(tmp_path):
    shards = []
    for i in range(2):
        shards.append(tmp_path / f"s{i}.ctmt")
        assert ctm("build", *SMALL, "--shard", f"{i}/2", "-o", shards[-1]).returncode == 0
    real = tmp_path / "merged.ctmt"
    link = tmp_path / "link.ctmt"
    link.symlink_to(real)
    r = ctm("merge", "-o", link, *shards, "--builder", "Ostrava lab", "--notes", "cap from the data")
    assert r.returncode == 0, r.stderr
    merged = load(real)
    assert link.is_symlink() and merged.halting == load(shards[0]).halting + load(shards[1]).halting
    # who merged it and why, with the parts listed after the given notes
    assert merged.header["build"]["by"] == "Ostrava lab"
    assert merged.header["notes"].startswith("cap from the data; merged from ")
    assert str(shards[1]) in merged.header["notes"]


@pytest.mark.parametrize("how", ["same", "symlink", "hardlink"])
def test_export_onto_its_own_table_is_refused(tmp_path, table, how):
    copy = tmp_path / "t.ctmt"
    copy.write_bytes(table.read_bytes())
    target = {"same": copy, "symlink": tmp_path / "l", "hardlink": tmp_path / "h"}[how]
    if how == "symlink":
        target.symlink_to(copy)
    elif how == "hardlink":
        os.link(copy, target)
    r = ctm("export", copy, "-o", target)
    assert r.returncode == 2 and "table being exported" in one_line(r)
    assert copy.read_bytes() == table.read_bytes()


@pytest.mark.parametrize("command", ["plot", "demo"])
def test_plot_and_demo_onto_an_existing_file_is_one_line(tmp_path, table, command):
    f = tmp_path / "figures"
    f.write_text("mine")
    r = ctm(*([command, table] if command == "plot" else [command]), "-o", f)
    assert r.returncode == 2 and "not a folder" in one_line(r)
    assert f.read_text() == "mine"


# ---- 2. full and read-only disks, full stdout

def test_a_full_stdout_is_one_line(tmp_path, table):
    full = device(tmp_path / "full", 7)
    with open(full, "w") as out:
        r = subprocess.run([sys.executable, "-m", "ctmtab", "export", str(table)], stdout=out,
                           stderr=subprocess.PIPE, text=True, timeout=60)
    assert r.returncode == 2 and "No space left" in one_line(r) and "standard output" in r.stderr


def test_a_full_output_device_is_one_line(tmp_path, table):
    full = device(tmp_path / "full", 7)
    r = ctm("export", table, "-o", full)
    assert r.returncode == 2 and "No space left" in one_line(r)


@pytest.mark.parametrize("code", [errno.ENOSPC, errno.EROFS, errno.EACCES])
def test_a_failing_disk_is_one_line_and_leaves_the_old_file(tmp_path, table, monkeypatch, capsys, code):
    # Root ignores file modes, so the failing rename is simulated: it is what a full,
    # read-only or forbidden folder does to the last step of an atomic write.
    out = tmp_path / "out.csv"
    out.write_text("before")

    def fail(*a, **k):
        raise OSError(code, os.strerror(code))

    monkeypatch.setattr("ctmtab.fsutil.os.replace", fail)
    assert cli_mod.main(["export", str(table), "-o", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and os.strerror(code) in err[0] and str(out) in err[0]
    assert out.read_text() == "before" and sorted(p.name for p in tmp_path.iterdir()) == ["out.csv"]


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes into a read-only folder anyway")
def test_a_read_only_folder_is_one_line(tmp_path, table):
    folder = tmp_path / "ro"
    folder.mkdir()
    folder.chmod(0o500)
    try:
        r = ctm("export", table, "-o", folder / "x.csv")
        assert r.returncode == 2 and "ermission" in one_line(r)
    finally:
        folder.chmod(0o700)


# ---- 4. sealed spool parts

def spooled_units(parts: Path) -> int:
    """Units on disk in a spool folder, counted from the part files themselves."""
    n = 0
    for p in parts.glob("*.part"):
        try:
            n += len(msgpack.unpackb(p.read_bytes(), raw=False)["units"])
        except Exception:  # a part being renamed into place right now
            pass
    return n


@pytest.fixture()
def spooled(tmp_path, monkeypatch):
    """A (3,2) cap 21 spool with one part per unit (flush at every unit), and the fresh table."""
    monkeypatch.setattr(spool_mod, "FLUSH_SECONDS", 0.0)
    out = tmp_path / "t.ctmt"
    build(Space(1, 3, 2), 21, spool=str(out) + ".parts")
    parts = sorted((tmp_path / "t.ctmt.parts").glob("*.part"))
    assert len(parts) > 10
    fresh = Table.from_tally(build(Space(1, 3, 2), 21)).to_bytes()
    return out, parts, fresh


def edit_payload(part: Path, change) -> None:
    """Change the first unit's payload in a part and pack the part again: a tampered or
    bit-rotten record that still parses, so only the seal can catch it."""
    rec = msgpack.unpackb(part.read_bytes(), raw=False)
    payload = msgpack.unpackb(rec["units"][0][3], raw=False)
    change(payload)
    rec["units"][0][3] = msgpack.packb(payload, use_bin_type=True)
    part.write_bytes(msgpack.packb(rec, use_bin_type=True))


def flip_a_key_bit(payload):
    pairs = payload["raw"]["pairs"]
    key = bytearray(pairs[0][0])
    key[-1] ^= 1
    pairs[0][0] = bytes(key)


def bump_a_weight(payload):
    payload["raw"]["pairs"][0][1] += 1


def resume(out, capsys):
    code = cli_mod.main(["build", "--states", "3", "--max-steps", "21", "--workers", "1", "-o", str(out)])
    return code, capsys.readouterr().err


@pytest.mark.parametrize("attack", ["flipped bit", "changed weight", "copied part", "garbage"])
def test_a_damaged_part_is_recomputed_and_reported(spooled, capsys, attack):
    out, parts, fresh = spooled
    if attack == "flipped bit":
        edit_payload(parts[3], flip_a_key_bit)
    elif attack == "changed weight":
        edit_payload(parts[3], bump_a_weight)
    elif attack == "copied part":
        parts[3].write_bytes(parts[4].read_bytes())
    else:
        parts[3].write_bytes(b"\x93not a part")
    code, err = resume(out, capsys)
    assert code == 0, err
    assert "1 spool part(s)" in err and "recomputed" in err
    assert f"{len(parts) - 1} units resumed" in err
    assert body(out.read_bytes()) == body(fresh)


def test_an_untouched_spool_resumes_silently(spooled, capsys):
    out, parts, fresh = spooled
    code, err = resume(out, capsys)
    assert code == 0 and "spool part" not in err and f"{len(parts)} units resumed" in err
    assert body(out.read_bytes()) == body(fresh) and not Path(str(out) + ".parts").exists()


# ---- 6. small builds pay nothing for the spool

def test_a_short_build_writes_no_spool(tmp_path):
    folder = tmp_path / "t.parts"
    build(Space(1, 3, 2), 21, spool=str(folder))
    sample(Space(1, 3, 2), 21, 50_000, spool=str(folder))
    assert not folder.exists()


# ---- 3. sampled builds resume

def test_sampled_resume_with_an_error_target_is_identical(tmp_path, monkeypatch):
    monkeypatch.setattr(spool_mod, "FLUSH_SECONDS", 0.0)
    space, until = Space(1, 3, 2), Target(error=0.1, size=4)  # stops after a few rounds
    fresh = sample(space, 21, 2_000_000, until=until)
    folder = str(tmp_path / "s.parts")
    sample(space, 21, 2_000_000, until=until, spool=folder)
    again = sample(space, 21, 2_000_000, until=until, spool=folder)
    assert again.resumed == fresh.units > 1
    assert body(Table.from_tally(again).to_bytes()) == body(Table.from_tally(fresh).to_bytes())
    assert again.until["stopped_by"] == fresh.until["stopped_by"] == "target"


@pytest.mark.ci_slow  # 10 to 25 s: a sampled build killed, resumed and built again
def test_killed_sampled_build_resumes_to_an_identical_table(tmp_path):
    """SIGKILL a real sampled build once a part is on disk, run the same command, compare bytes."""
    out, parts = tmp_path / "s.ctmt", tmp_path / "s.ctmt.parts"
    n = 25_000_000  # 1,000 units of (5,2) cap 2000: a few seconds
    cmd = [sys.executable, "-m", "ctmtab", "build", "--states", "5", "--max-steps", "2000", "--sample", str(n),
           "--workers", "1", "-o", str(out), "-q"]
    proc = subprocess.Popen(cmd, start_new_session=True)
    deadline = time.time() + 120
    while time.time() < deadline and spooled_units(parts) == 0 and proc.poll() is None:
        time.sleep(0.02)
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()
    assert not out.exists(), "the build finished before it could be killed; make it longer"
    kept = spooled_units(parts)
    assert 0 < kept < 1000
    r = subprocess.run(cmd[:-1], capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    assert f"{kept} units resumed" in r.stderr
    assert load(out).header["build"]["resumed_units"] == kept and not parts.exists()
    fresh = Table.from_tally(sample(Space(1, 5, 2), 2000, n))
    assert body(out.read_bytes()) == body(fresh.to_bytes())


# ---- 5. pool workers die with their build

def children(pid: int) -> list[int]:
    """Live (not zombie) processes whose parent is pid, from /proc/*/stat."""
    out = []
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            text = Path(f"/proc/{entry}/stat").read_text()
        except OSError:
            continue
        fields = text[text.rindex(")") + 2:].split()  # after "pid (comm) "
        if int(fields[1]) == pid and fields[0] != "Z":
            out.append(int(entry))
    return out


def alive(pid: int) -> bool:
    try:
        text = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return False
    return text[text.rindex(")") + 2] != "Z"


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
@pytest.mark.parametrize("sig", [signal.SIGKILL, signal.SIGTERM])
def test_workers_die_with_a_killed_parallel_build(tmp_path, sig):
    cmd = [sys.executable, "-m", "ctmtab", "build", "--states", "3", "--symbols", "3", "--max-steps", "20",
           "--workers", "2", "-o", str(tmp_path / "t.ctmt"), "-q"]
    proc = subprocess.Popen(cmd, stderr=subprocess.PIPE, text=True)
    workers = []
    try:
        deadline = time.time() + 60
        while time.time() < deadline and len(workers) < 2 and proc.poll() is None:
            workers = children(proc.pid)
            time.sleep(0.05)
        assert len(workers) >= 2, "the pool never started"
        time.sleep(0.3)  # let the workers take their first units
        os.kill(proc.pid, sig)  # the build alone, not its process group
        proc.wait(60)
        deadline = time.time() + 15
        while time.time() < deadline and any(alive(w) for w in workers):
            time.sleep(0.05)
        assert not [w for w in workers if alive(w)], "workers outlived their build"
        if sig == signal.SIGTERM:
            assert proc.returncode == 128 + signal.SIGTERM and "Traceback" not in proc.stderr.read()
    finally:
        for w in workers:  # never leave our own strays behind, even when the check fails
            if alive(w):
                os.kill(w, signal.SIGKILL)
        if proc.poll() is None:
            proc.kill()
        proc.stderr.close()
