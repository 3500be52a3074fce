"""A lean install (no extras) reads tables, looks keys up, runs BDM and verifies; the commands
that draw (matplotlib, the [plot] extra) or correlate (scipy, the [stats] extra) say what is
missing and the pip command that brings it, in one line, before any work."""
import subprocess
import sys
import tomllib
from pathlib import Path

import pytest

ROOT = Path(__file__).parent.parent

# Run in a fresh interpreter: importing any of the named packages fails as on an install without them.
BLOCK = """
import sys
BLOCKED = set(sys.argv[1].split(","))
class NoExtras:
    def find_spec(self, name, path=None, target=None):
        if name.partition(".")[0] in BLOCKED:
            raise ModuleNotFoundError(f"No module named {name!r}", name=name)
sys.meta_path.insert(0, NoExtras())
del sys.argv[1]
"""


def without(blocked: str, code: str, *args, cwd=None):
    return subprocess.run([sys.executable, "-c", BLOCK + code, blocked, *args], capture_output=True, text=True,
                          cwd=cwd, timeout=600)


CLI = "from ctmtab.tools.cli import main; sys.exit(main(sys.argv[1:]))"
EVERY = "matplotlib,scipy,dask,distributed"


def test_the_block_really_removes_them():
    r = without(EVERY, """
for name in ("matplotlib", "scipy.stats", "dask", "distributed"):
    try:
        __import__(name)
    except ModuleNotFoundError as exc:
        print(exc.name)
""")
    assert r.stdout.split() == ["matplotlib", "scipy", "dask", "distributed"], r.stderr


def test_reading_lookups_bdm_and_verify_need_no_extra():
    r = without(EVERY, """
import contextlib, io
import numpy as np
from ctmtab.tables import load, problems
from ctmtab.tools.bdm import BDM
from ctmtab.tools.cli import main
t = load("1d-n4-m2-t107")
assert t.count("0110") > 0 and t.interval("0110")[0] <= t.ctm("0110")
assert t.lookup(np.array([[0, 1, 1, 0]]))["count"][0] == t.count("0110")
assert BDM(load("1d-n5-m2-t500"), 11, mode="shrink")("0110" * 12) > 0
assert problems(t) == [] and problems(load("2d-n3-m2-t2000")) == []
for args in (["info", "1d-n3-m2-t21"], ["lookup", "1d-n4-m2-t107", "0110", "--json"],
             ["verify", "1d-n3-m2-t21"], ["export", "1d-n3-m2-t21"], ["list"]):
    with contextlib.redirect_stdout(io.StringIO()):
        assert main(args) == 0, args
for name in ("matplotlib", "scipy", "dask", "distributed"):
    assert name not in sys.modules, name
print("ok")
""")
    assert r.returncode == 0 and r.stdout.strip() == "ok", r.stderr


PIP = 'python3 -m pip install "ctmtab[{}]"'


@pytest.mark.parametrize("blocked, args, line", [
    ("scipy", ["validate", "1d-n4-m2-t107", "--estimator", "zlib"],
     "scipy is not installed (needed for rank correlations); install with " + PIP.format("stats")),
    ("matplotlib", ["validate", "1d-n4-m2-t107", "--estimator", "zlib", "--plot", "v.png"],
     "matplotlib is not installed (needed for figures); install with " + PIP.format("plot")),
    ("matplotlib,scipy", ["validate", "1d-n4-m2-t107", "--values", "v.csv", "--plot", "v.png"],
     "scipy and matplotlib are not installed (needed for rank correlations and figures); install with "
     + PIP.format("plot,stats")),
    ("matplotlib", ["plot", "1d-n4-m2-t107", "-o", "figs"],
     "matplotlib is not installed (needed for figures); install with " + PIP.format("plot")),
    ("scipy", ["demo", "-o", "demo"],
     "scipy is not installed (needed for rank correlations); install with " + PIP.format("stats")),
    ("matplotlib,scipy", ["demo", "-o", "demo"],
     "matplotlib and scipy are not installed (needed for figures and rank correlations); install with "
     + PIP.format("plot,stats")),
])
def test_a_missing_extra_is_one_line_and_nothing_is_written(blocked, args, line, tmp_path):
    r = without(blocked, CLI, *args, cwd=tmp_path)
    assert r.returncode == 2 and r.stdout == ""
    assert r.stderr.splitlines() == [f"ctmtab {args[0]}: {line}"], r.stderr
    assert list(tmp_path.iterdir()) == []  # refused before any work: no figure, no folder


def test_the_python_api_raises_an_import_error_with_the_same_words(tmp_path):
    r = without("matplotlib,scipy", """
from ctmtab.errors import CtmtabError
from ctmtab.tables import load
from ctmtab.tools import demo, plots, validate
t = load("1d-n4-m2-t107")
for call in (lambda: validate.validate(t, validate.builtin("zlib")), lambda: plots.plot_table(t, "figs"),
             lambda: demo.run("demo", out=lambda text: None)):
    try:
        call()
    except ImportError as exc:
        assert isinstance(exc, CtmtabError)
        print(exc)
""", cwd=tmp_path)
    assert r.stdout.splitlines() == [
        "scipy is not installed (needed for rank correlations); install with " + PIP.format("stats"),
        "matplotlib is not installed (needed for figures); install with " + PIP.format("plot"),
        "matplotlib and scipy are not installed (needed for figures and rank correlations); install with "
        + PIP.format("plot,stats")], r.stderr
    assert list(tmp_path.iterdir()) == []


def _names(requirements) -> set:
    """Distribution names of requirement strings, e.g. 'dask[distributed]>=2023.1' -> 'dask'."""
    out = set()
    for req in requirements:
        name = req
        for stop in "[<>=!~; ":
            name = name.split(stop)[0]
        out.add(name.strip().lower())
    return out


def test_pyproject_extras_hold_what_the_messages_name():
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]
    extras = {k: _names(v) for k, v in project["optional-dependencies"].items()}
    assert _names(project["dependencies"]) == {"numpy", "msgpack", "zstandard"}
    assert extras["plot"] == {"matplotlib"} and extras["stats"] == {"scipy"} and extras["cluster"] == {"dask"}
    assert extras["full"] == {"matplotlib", "scipy", "dask"}
    assert {"pytest", "pytest-xdist", "hypothesis", "matplotlib", "scipy", "dask"} <= extras["test"]
