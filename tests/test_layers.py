"""The layers import downwards only: tools -> tables, enumerator -> model -> errors, fsutil.
tables/ reads files without the enumerator (and so without the compiled core), and the
enumerator never reads or writes table files. Checked on the source, import by import."""
import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
# what each folder may import from the package (the root modules: errors, fsutil, _version, extras)
ROOT_MODULES = {"errors", "fsutil", "_version", "extras"}
ALLOWED = {
    "model": {"model"} | ROOT_MODULES,
    "tables": {"tables", "model"} | ROOT_MODULES,
    "enumerator": {"enumerator", "model"} | ROOT_MODULES,
}
# the one use of the enumerator in tables/: rebuilding a shard's plan on verify and merge, which
# only the compiled core can do (a lazy import, a note when the core is missing)
EXCEPTIONS = {("tables/verify.py", "_plan", "enumerator")}


def _targets(path: Path):
    """(enclosing function or '', first package part) of every import of the package."""
    rel = path.relative_to(ROOT)
    tree = ast.parse(path.read_text())
    parents = {child: node for node in ast.walk(tree) for child in ast.iter_child_nodes(node)}
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            if node.level == 0:
                parts = node.module.split(".")
                if parts[0] != "ctmtab":
                    continue
                parts = parts[1:]
            else:  # relative: resolve against the module's folder
                base = list(rel.parent.parts)[: len(rel.parent.parts) - (node.level - 1)]
                parts = base + (node.module.split(".") if node.module else [a.name for a in node.names][:1])
        elif isinstance(node, ast.Import):
            names = [a.name.split(".") for a in node.names if a.name.startswith("ctmtab.")]
            if not names:
                continue
            parts = names[0][1:]
        else:
            continue
        owner, up = "", node
        while up in parents:
            up = parents[up]
            if isinstance(up, (ast.FunctionDef, ast.AsyncFunctionDef)):
                owner = up.name
                break
        yield owner, parts[0] if parts else ""


@pytest.mark.parametrize("layer", sorted(ALLOWED))
def test_each_layer_imports_only_the_layers_below(layer):
    wrong = []
    for path in sorted((ROOT / layer).glob("*.py")):
        rel = str(path.relative_to(ROOT))
        for owner, target in _targets(path):
            if target not in ALLOWED[layer] and (rel, owner, target) not in EXCEPTIONS:
                wrong.append(f"{rel} ({owner or 'module'}) imports {target}")
    assert not wrong, wrong


def test_the_check_sees_imports():
    # the checker itself: it finds the known exception and the model imports of tables/table.py
    found = set(_targets(ROOT / "tables" / "verify.py"))
    assert ("_plan", "enumerator") in found and ("", "model") in found
