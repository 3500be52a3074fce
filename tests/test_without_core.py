"""A collaborator who only reads tables needs no compiler: with the compiled core
made unimportable, the reader, format, BDM, baselines, validation and the reading
commands work, and the commands that need the core say so in one line."""
import json
import subprocess
import sys
from pathlib import Path

import pytest

TESTS = Path(__file__).parent

# Run in a fresh interpreter: any import of the compiled core fails, as on an install without it.
BLOCK = """
import sys
class NoCore:
    def find_spec(self, name, path=None, target=None):
        if name == "ctmtab.enumerator._core":
            raise ImportError("No module named 'ctmtab.enumerator._core'")
sys.meta_path.insert(0, NoCore())
"""


def without_core(code: str, *args, cwd=None):
    return subprocess.run([sys.executable, "-c", BLOCK + code, *args], capture_output=True, text=True,
                          cwd=cwd, timeout=600)


def test_the_block_really_removes_the_core():
    r = without_core("from ctmtab.enumerator import _core")
    assert r.returncode != 0 and "ctmtab.enumerator._core" in r.stderr


def test_reader_bdm_baselines_and_validation_need_no_core():
    r = without_core("""
import numpy as np
from ctmtab.tables import load, loads, merge, problems
from ctmtab.tools.baselines import compressed_bits
from ctmtab.tools.bdm import BDM
from ctmtab.tools.validate import builtin, validate
t = load("1d-n4-m2-t107")
assert t.count("0110") > 0 and t.interval("0110")[0] <= t.ctm("0110")
assert t.lookup(np.array([[0, 1, 1, 0]]))["count"][0] == t.count("0110")
assert t.dense(8).shape == (256,)
assert problems(t) == [] and problems(load("2d-n3-m2-t2000")) == []
assert loads(t.to_bytes()).count("0110") == t.count("0110")
assert BDM(load("1d-n3-m2-t21"), 4)("01101001" * 4) > 0
assert compressed_bits("0110") > 0
validate(t, builtin("zlib"), sizes=[(5,), (6,)])
assert "ctmtab.enumerator._core" not in sys.modules
print("ok")
""")
    assert r.returncode == 0 and r.stdout.strip() == "ok", r.stderr


CLI = "from ctmtab.tools.cli import main; sys.exit(main(sys.argv[1:]))"


@pytest.mark.parametrize("args", [
    ["info", "1d-n3-m2-t21", "--json"],
    ["lookup", "1d-n4-m2-t107", "0110", "--json"],
    ["list", "--json"],
    ["verify", "1d-n3-m2-t21", "2d-n2-m2-t2000"],
])
def test_reading_commands_need_no_core(args):
    r = without_core(CLI, *args)
    assert r.returncode == 0, r.stderr
    if "--json" in args:
        json.loads(r.stdout)


@pytest.mark.parametrize("args", [
    ["build", "--states", "2", "-q"],
    ["run", "1RB1LB_1LA1RZ"],
])
def test_commands_that_need_the_core_say_so_in_one_line(args, tmp_path):
    r = without_core(CLI, *args, cwd=tmp_path)
    assert r.returncode == 2
    assert len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.stderr
    assert "compiled core is missing" in r.stderr and "pip install" in r.stderr
    assert list(tmp_path.iterdir()) == []  # refused before writing anything


@pytest.mark.ci_slow  # a second pytest run in a subprocess: the slow lane of .ci/run
@pytest.mark.parametrize("files", [
    ["test_format.py", "test_reader.py", "test_hostile_reads.py"],
    pytest.param(["test_fuzz.py"], marks=pytest.mark.ci_slow),  # about 20 s of mutations
])
def test_reader_format_and_fuzz_tests_pass_without_core(files):
    # tests that build a table are marked `core` and left out; every other one must pass
    r = without_core("import pytest; sys.exit(pytest.main(sys.argv[1:]))",
                     "-q", "-p", "no:cacheprovider", "-n", "0", "-m", "not slow and not ci_slow and not core",
                     *[str(TESTS / f) for f in files], cwd=TESTS.parent)
    tail = r.stdout.strip().splitlines()[-1] if r.stdout.strip() else r.stderr
    assert r.returncode == 0, r.stdout[-3000:] + r.stderr[-2000:]
    assert " passed" in tail and "failed" not in tail and "error" not in tail and "skipped" not in tail, tail


def test_a_core_of_another_api_version_is_refused_in_one_line():
    # a module built from older sources: the version 9 of the core before its modes were explicit
    old = """
import sys, types
sys.modules["ctmtab.enumerator._core"] = types.SimpleNamespace(API_VERSION=9)
from ctmtab.enumerator.native import load
load()
"""
    r = subprocess.run([sys.executable, "-c", old], capture_output=True, text=True, timeout=600)
    last = r.stderr.strip().splitlines()[-1]
    assert r.returncode != 0 and "API version 9" in last and "rebuild" in last, r.stderr
