"""scripts/check_wheel.py, the check .ci/run makes of every built wheel, on made-up wheels."""
import ast
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).parent.parent
SCRIPT = ROOT / "scripts" / "check_wheel.py"

# The packages setup.py installs, read from its source (setup.py runs setup() when imported).
_SETUP = ast.parse((ROOT / "setup.py").read_text())
PACKAGES = next(ast.literal_eval(k.value) for node in ast.walk(_SETUP) if isinstance(node, ast.Call)
                for k in node.keywords if k.arg == "packages")
FOLDERS = [p.removeprefix("ctmtab.") for p in PACKAGES if p != "ctmtab"]

# What an install needs, listed here from the checkout: the core, the tables, the modules.
GOOD = (["ctmtab/enumerator/_core.cpython-311-x86_64-linux-gnu.so", "ctmtab-0.1.0.dist-info/RECORD"]
        + [f"ctmtab/tables/{p.name}" for p in (ROOT / "tables").glob("*.ctmt")]
        + [f"ctmtab/{p.name}" for p in ROOT.glob("*.py") if p.name != "setup.py"]
        + [f"ctmtab/{d}/{p.name}" for d in FOLDERS for p in (ROOT / d).glob("*.py")])


def test_the_check_knows_every_package_setup_installs():
    # a package added to setup.py but not to the check would pass a wheel that lacks it
    text = SCRIPT.read_text()
    assert len(FOLDERS) >= 4 and all(f'"{d}": "ctmtab/{d}"' in text for d in FOLDERS), FOLDERS


def wheel(tmp_path, names) -> Path:
    path = tmp_path / "ctmtab-0.1.0-cp311-cp311-linux_x86_64.whl"
    with zipfile.ZipFile(path, "w") as z:
        for name in names:
            z.writestr(name, b"")
    return path


def run(path):
    return subprocess.run([sys.executable, str(SCRIPT), str(path)], capture_output=True, text=True, timeout=60)


def test_a_good_wheel_passes(tmp_path):
    assert len([n for n in GOOD if n.endswith(".ctmt")]) >= 10
    r = run(wheel(tmp_path, GOOD))
    assert r.returncode == 0 and r.stdout.startswith("check_wheel: ctmtab-0.1.0") and r.stderr == ""


@pytest.mark.parametrize("change, fragment", [
    (lambda n: n + ["ctmtab/enumerator/_core.c"], "source file ctmtab/enumerator/_core.c"),
    (lambda n: n + ["ctmtab/enumerator/csrc/ctm_core.h"], "source file ctmtab/enumerator/csrc/ctm_core.h"),
    (lambda n: n + ["ctmtab/enumerator/_core.pyx"], "source file ctmtab/enumerator/_core.pyx"),
    (lambda n: n + ["ctmtab/docs/DESIGN.md"], "ctmtab/docs/DESIGN.md is not part"),
    (lambda n: n + ["ctmtab/tests/test_cli.py"], "ctmtab/tests/test_cli.py is not part"),
    (lambda n: n + ["ctmtab/scripts/cap_missed.py"], "ctmtab/scripts/cap_missed.py is not part"),
    (lambda n: [x for x in n if not x.endswith("1d-n3-m2-t21.ctmt")], "shipped table 1d-n3-m2-t21.ctmt missing"),
    (lambda n: [x for x in n if not x.endswith(".so")], "0 compiled cores"),
    (lambda n: [x for x in n if x != "ctmtab/tools/bdm.py"], "module ctmtab/tools/bdm.py missing"),
])
def test_a_bad_wheel_fails_in_one_line_naming_why(change, fragment, tmp_path):
    r = run(wheel(tmp_path, change(list(GOOD))))
    assert r.returncode == 1 and r.stdout == ""
    assert len(r.stderr.splitlines()) == 1 and fragment in r.stderr, r.stderr
