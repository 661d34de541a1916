"""The code's own layout rules (the contributor guide, "one rule lives in one place"):
no module reaches into another's private names, and none rebinds another module's names.

Run as a script (``python tests/test_layout.py``) it prints the sizes the contributor guide
tracks: lines under analysis/distributed/, the longest function and the longest class.
"""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
CHECKED = ("analysis", "app")


def _sources(root: Path = ROOT):
    for folder in CHECKED:
        for path in sorted((root / folder).rglob("*.py")):
            yield path, ast.parse(path.read_text(encoding="utf-8"), filename=str(path))


def _module_aliases(tree: ast.AST) -> set[str]:
    """Names bound to project modules (``import analysis.x as y``, ``from analysis import x``)."""
    aliases: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for a in node.names:
                if a.name.split(".")[0] in CHECKED:
                    aliases.add(a.asname or a.name.split(".")[0])
        elif isinstance(node, ast.ImportFrom) and node.module in CHECKED + tuple(
                f"{c}.distributed" for c in CHECKED) + ("analysis.figures",):
            for a in node.names:
                aliases.add(a.asname or a.name)
    return aliases


def private_uses(root: Path = ROOT) -> list[str]:
    found = []
    for path, tree in _sources(root):
        where = path.relative_to(root).as_posix()
        aliases = _module_aliases(tree)
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom) and (node.module or "").split(".")[0] in CHECKED:
                for a in node.names:
                    if a.name.startswith("_"):
                        found.append(f"{where}:{node.lineno} imports {node.module}.{a.name}")
            elif (isinstance(node, ast.Attribute) and node.attr.startswith("_")
                  and not node.attr.startswith("__")
                  and isinstance(node.value, ast.Name) and node.value.id in aliases):
                found.append(f"{where}:{node.lineno} uses {node.value.id}.{node.attr}")
    return found


def rebinds(root: Path = ROOT) -> list[str]:
    found = []
    for path, tree in _sources(root):
        where = path.relative_to(root).as_posix()
        aliases = _module_aliases(tree)
        for node in ast.walk(tree):
            targets = node.targets if isinstance(node, ast.Assign) else (
                [node.target] if isinstance(node, (ast.AugAssign, ast.AnnAssign)) else [])
            for target in targets:
                if (isinstance(target, ast.Attribute) and isinstance(target.value, ast.Name)
                        and target.value.id in aliases):
                    found.append(f"{where}:{node.lineno} sets {target.value.id}.{target.attr}")
    return found


def sizes() -> dict:
    distributed = sum(len(p.read_text(encoding="utf-8").splitlines())
                      for p in (ROOT / "analysis" / "distributed").rglob("*.py"))
    longest = {"function": (0, ""), "class": (0, "")}
    for path, tree in _sources():
        if path.parts[len(ROOT.parts)] != "analysis":
            continue
        for node in ast.walk(tree):
            kind = ("class" if isinstance(node, ast.ClassDef) else "function"
                    if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)) else None)
            if kind:
                length = node.end_lineno - node.lineno + 1
                if length > longest[kind][0]:
                    longest[kind] = (length, f"{path.relative_to(ROOT)}:{node.name}")
    return {"distributed_lines": distributed, **longest}


def test_no_module_uses_another_modules_private_names():
    assert private_uses() == []


def test_no_module_rebinds_another_modules_names():
    assert rebinds() == []


def test_the_checks_see_a_private_use_and_a_rebinding(tmp_path):
    # the checks themselves must be able to fail: a module written to break both rules
    bad = tmp_path / "analysis"
    bad.mkdir()
    (bad / "bad.py").write_text("from analysis import relations as rel\n"
                                "from analysis.outliers import _hidden\n"
                                "rel.MAX_BOUNDS = 1\nx = rel._private\n")
    assert private_uses(tmp_path) == ["analysis/bad.py:2 imports analysis.outliers._hidden",
                                      "analysis/bad.py:4 uses rel._private"]
    assert rebinds(tmp_path) == ["analysis/bad.py:3 sets rel.MAX_BOUNDS"]


if __name__ == "__main__":
    print(sizes())
