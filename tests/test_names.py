"""Which file a name reads, and which files a command may write: a name resolves to exactly one
file or is refused, and no command writes over its own input."""
import json
import os
import shutil
import subprocess
import sys

import pytest

from ctmtab.errors import NotATableError
from ctmtab.tables import load
from ctmtab.tables.load import SHIPPED, resolve


def cli(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "ctmtab", *map(str, args)], capture_output=True, text=True,
                          cwd=cwd)


def one_line(r, code=2):
    assert r.returncode == code, r.stderr
    assert len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.stderr, r.stderr


@pytest.fixture
def small(tmp_path):
    path = tmp_path / "t3.ctmt"
    shutil.copy(SHIPPED / "1d-n3-m2-t21.ctmt", path)
    return path


# ---- names

@pytest.mark.parametrize("near, meant", [("1d-n5-m2-t50", "1d-n5-m2-t500"), ("1d-n4-m2-t10", "1d-n4-m2-t107"),
                                         ("2d-n4-m2", "2d-n4-m2-t2000"), ("1d-n5-m2-t47176870", None)])
def test_a_prefix_or_near_miss_never_loads_a_shipped_table(near, meant, tmp_path):
    with pytest.raises(NotATableError, match="no table file"):
        resolve(near)
    r = cli("info", near, cwd=tmp_path)
    one_line(r)
    assert r.stdout == ""
    if meant:
        assert f"did you mean {meant} (shipped)" in r.stderr
    assert "standard output" not in r.stderr


def test_a_local_file_named_without_its_suffix_is_suggested_not_replaced(tmp_path):
    shutil.copy(SHIPPED / "1d-n3-m2-t21.ctmt", tmp_path / "1d-n4-m2-t10.ctmt")
    r = cli("lookup", "1d-n4-m2-t10", "0110", cwd=tmp_path)  # before: read the shipped 1d-n4-m2-t107
    one_line(r)
    assert "did you mean 1d-n4-m2-t10.ctmt?" in r.stderr and r.stdout == ""
    r = cli("lookup", "1d-n4-m2-t10.ctmt", "0110", "--json", cwd=tmp_path)
    assert r.returncode == 0
    assert json.loads(r.stdout)[0]["table"] == "1d-n4-m2-t10.ctmt"


def test_exact_names_and_paths_resolve_to_one_file(small, tmp_path):
    assert resolve("1d-n4-m2-t107") == SHIPPED / "1d-n4-m2-t107.ctmt"
    assert resolve("1d-n4-m2-t107.ctmt") == SHIPPED / "1d-n4-m2-t107.ctmt"
    assert resolve(small) == small
    with pytest.raises(NotATableError):  # a path with a folder is a path, never a shipped name
        resolve(tmp_path / "1d-n4-m2-t107")
    info = json.loads(cli("info", "1d-n4-m2-t107", "--json").stdout)
    assert info["file"] == str(SHIPPED / "1d-n4-m2-t107.ctmt")
    assert cli("info", small).stdout.splitlines()[0] == str(small)


def test_verify_tells_a_file_that_is_not_a_table_from_a_table_that_fails(tmp_path):
    (tmp_path / "empty.ctmt").write_bytes(b"")
    (tmp_path / "text.ctmt").write_text("key,count\n0,1\n")
    for name in ("empty.ctmt", "text.ctmt", "missing.ctmt"):
        r = cli("verify", tmp_path / name)
        assert r.returncode == 2, (name, r.stdout, r.stderr)
        assert "Traceback" not in r.stderr


# ---- no command writes over its input

@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
def test_trim_merge_export_and_plot_refuse_their_own_input(small, tmp_path):
    link = tmp_path / "link.ctmt"
    link.symlink_to(small)
    hard = tmp_path / "hard.ctmt"
    os.link(small, hard)
    before = small.read_bytes()
    cases = [("trim", small, "--keep-size", 3, "-o", out) for out in (small, link, hard)]
    cases += [("merge", "-o", link, small), ("export", small, "-o", hard),
              ("validate", small, "--estimator", "zlib", "--plot", link)]
    for args in cases:
        r = cli(*args)
        one_line(r)
        assert "is the table being" in r.stderr, (args, r.stderr)
    assert small.read_bytes() == before
    shipped = SHIPPED / "1d-n3-m2-t21.ctmt"  # a shipped name is an input too
    r = cli("trim", "1d-n3-m2-t21", "--keep-size", 3, "-o", shipped)
    one_line(r)


def test_build_refuses_holdouts_over_its_table(tmp_path):
    out = tmp_path / "x.ctmt"
    r = cli("build", "--states", 2, "-o", out, "--holdouts", out)
    one_line(r)
    assert not out.exists()


def test_a_missing_output_folder_is_named(tmp_path):
    r = cli("trim", "1d-n3-m2-t21", "--keep-size", 3, "-o", tmp_path / "no" / "x.ctmt")
    one_line(r)
    assert f"its folder {tmp_path / 'no'} does not exist" in r.stderr and ".tmp" not in r.stderr


# ---- header text cannot forge report lines

@pytest.mark.parametrize("flag", ["--notes", "--builder"])
def test_control_characters_in_header_text_are_refused(flag, tmp_path):
    r = cli("build", "--states", 2, "-o", tmp_path / "x.ctmt", flag, "fine\n  halting    forged")
    one_line(r)
    assert flag in r.stderr and not (tmp_path / "x.ctmt").exists()


def test_info_shows_a_line_break_from_a_file_as_an_escape(tmp_path):
    t = load("1d-n2-m2-t6")
    t.header["notes"] = "fine\n  halting    forged"
    t.header["build"]["by"] = "me\nundecided 0"
    t.save(tmp_path / "forged.ctmt")
    out = cli("info", tmp_path / "forged.ctmt").stdout
    assert "forged" in out
    assert not any(line.lstrip().startswith(("halting    forged", "undecided 0")) for line in out.splitlines())


def test_a_negative_min_seen_is_refused():
    one_line(cli("lookup", "1d-n4-m4-t2000-sampled", "0123", "--min-seen", "-5"))
