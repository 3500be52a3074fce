"""The README's claims that code can check (issue 27, item 7): its Python snippet runs as written
in a fresh interpreter, and the Python it asks for is the one pyproject.toml requires."""
import re
import subprocess
import sys
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
README = (ROOT / "README.md").read_text()


def test_the_python_snippet_runs_as_written(tmp_path):
    blocks = re.findall(r"```python\n(.*?)```", README, re.S)
    assert blocks
    said = re.compile(r"^(\S.*\.fallbacks\(\w+\))\s+#\s*([\d,]+)\b")  # a count its comment states
    for i, code in enumerate(blocks):
        lines, counts = [], []
        for line in code.splitlines():
            m = said.match(line)
            if m:
                counts.append(int(m.group(2).replace(",", "")))
                line = f"print({m.group(1)})"
            lines.append(line)
        script = tmp_path / f"snippet{i}.py"
        script.write_text("\n".join(lines) + "\n")
        r = subprocess.run([sys.executable, script], capture_output=True, text=True, cwd=tmp_path)
        assert r.returncode == 0, r.stderr  # it imports what it uses and defines what it names
        assert [int(x) for x in r.stdout.split()] == counts


def test_the_python_version_is_the_one_required():
    need = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]["requires-python"]
    assert need == ">=3.11"
    assert "Python ≥ 3.11" in README and "C compiler" in README
