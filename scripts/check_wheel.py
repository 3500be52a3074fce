"""Check a built wheel holds what an install needs and nothing a source build needs.

python3 scripts/check_wheel.py dist/ctmtab-*.whl  -- prints one line; exit 0 if fine, 1 if not.

Needed: the compiled core, every shipped table of this checkout (tables/*.ctmt), every module
of the five packages. Refused: C and Cython sources (the sdist carries them), docs, tests,
scripts and shard artefacts."""
from __future__ import annotations

import sys
import zipfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
PACKAGES = {"": "ctmtab", "enumerator": "ctmtab/enumerator", "model": "ctmtab/model", "tables": "ctmtab/tables",
            "tools": "ctmtab/tools"}
SOURCE_SUFFIXES = (".c", ".h", ".inc", ".pyx", ".pxd")
NOT_SHIPPED = ("csrc", "docs", "tests", "scripts", "shards", ".ci")


def problems(names: list[str], root: Path = ROOT) -> list[str]:
    found = []
    inside = [n for n in names if n.startswith("ctmtab/")]
    cores = [n for n in inside if n.startswith("ctmtab/enumerator/_core.") and n.endswith((".so", ".pyd"))]
    if len(cores) != 1:
        found.append(f"{len(cores)} compiled cores (ctmtab/enumerator/_core.*.so), not 1")
    tables = sorted(p.name for p in (root / "tables").glob("*.ctmt"))
    if not tables:
        found.append(f"no shipped tables in {root / 'tables'} to compare with")
    found += [f"shipped table {t} missing" for t in tables if f"ctmtab/tables/{t}" not in names]
    for folder, prefix in PACKAGES.items():
        for module in sorted((root / folder).glob("*.py")):
            if module.name != "setup.py" and f"{prefix}/{module.name}" not in names:
                found.append(f"module {prefix}/{module.name} missing")
    for name in inside:
        parts = name.split("/")
        if name.endswith(SOURCE_SUFFIXES):
            found.append(f"source file {name} should stay in the sdist")
        elif any(p in NOT_SHIPPED for p in parts[1:-1]):
            found.append(f"{name} is not part of the installed package")
    return found


def main(argv: list[str]) -> int:
    if len(argv) != 1 or not argv[0].endswith(".whl"):
        print("usage: python3 scripts/check_wheel.py WHEEL.whl", file=sys.stderr)
        return 2
    try:
        with zipfile.ZipFile(argv[0]) as whl:
            names = whl.namelist()
    except (OSError, zipfile.BadZipFile) as exc:
        print(f"check_wheel: cannot read {argv[0]}: {exc}", file=sys.stderr)
        return 2
    found = problems(names)
    if found:
        print(f"check_wheel: {argv[0]}: " + "; ".join(found), file=sys.stderr)
        return 1
    print(f"check_wheel: {Path(argv[0]).name} ok ({len(names)} files: the core, "
          f"{sum(n.endswith('.ctmt') for n in names)} tables, no sources, docs or tests)")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
