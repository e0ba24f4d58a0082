"""The package's layers: imports go one way, and there is no import cycle.

    errors, _version, caution  <-  section  <-  design  <-  store  <-  report  <-  run  <-  api, demo  <-  cli

A module may import from its own layer and the layers to its left, never from the right; this
holds for imports inside functions too.  Module-level imports form no cycle.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

SRC = Path(__file__).resolve().parents[1] / "src" / "foilmap"

RANK = {"errors": 0, "_version": 0, "caution": 0, "section": 1, "design": 2, "store": 3, "report": 4,
        "run": 5, "api": 6, "demo": 6, "cli": 7, "__init__": 7, "__main__": 7}


def _module(path: Path) -> str:
    rel = path.relative_to(SRC.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__" and len(parts) > 1:
        parts = parts[:-1]
    return ".".join(parts)


def _rank(module: str) -> int:
    parts = module.split(".")
    if len(parts) == 1:  # the package itself
        return RANK["__init__"]
    return RANK[parts[1]]


def _imports(path: Path):
    """(imported foilmap module, line, at module level) for every import in a file."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    top = set(map(id, tree.body))
    for node in ast.walk(tree):
        names = []
        if isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            assert node.level == 0, f"{path}:{node.lineno}: relative import"
            base = node.module or ""
            names = [base] + [f"{base}.{a.name}" for a in node.names]
        for n in names:
            if n == "foilmap" or n.startswith("foilmap."):
                yield n, node.lineno, id(node) in top


def _resolve(name: str, modules: set[str]) -> str | None:
    """The module an imported name lives in (``foilmap.x.y.Name`` → ``foilmap.x.y``)."""
    while name and name not in modules:
        name = name.rpartition(".")[0]
    return name or None


def _graph():
    files = sorted(SRC.rglob("*.py"))
    modules = {_module(p): p for p in files}
    edges = {}
    for mod, path in modules.items():
        for name, line, top in _imports(path):
            target = _resolve(name, set(modules))
            if target is not None and target != mod:
                edges.setdefault(mod, []).append((target, line, top))
    return modules, edges


def test_every_module_has_a_layer():
    modules, _ = _graph()
    for m in modules:
        _rank(m)  # raises KeyError for a module outside the layers


def test_imports_go_one_way():
    modules, edges = _graph()
    wrong = []
    for mod, targets in edges.items():
        for target, line, _ in targets:
            if target == "foilmap":  # the package's version and public names
                if mod != "foilmap":
                    wrong.append(f"{modules[mod].name}:{line} imports the package root")
                continue
            if _rank(target) > _rank(mod):
                wrong.append(f"{mod}:{line} imports {target} (a higher layer)")
    assert not wrong, "\n".join(wrong)


def test_no_import_cycle():
    modules, edges = _graph()
    graph = {m: sorted({t for t, _, top in edges.get(m, []) if top}) for m in modules}
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(m):
        state[m] = 1
        stack.append(m)
        for t in graph.get(m, []):
            if t.startswith(m + "."):  # a package importing its own submodule
                continue
            if state.get(t) == 1:
                pytest.fail("import cycle: " + " -> ".join(stack[stack.index(t):] + [t]))
            if state.get(t) is None:
                visit(t)
        stack.pop()
        state[m] = 2

    for m in sorted(modules):
        if m not in state:
            visit(m)


def test_the_checker_sees_a_wrong_import(tmp_path):
    # the checker itself: a kernel module importing the store is caught
    bad = tmp_path / "bad.py"
    bad.write_text("def f():\n    from foilmap.store.folder import StudyFolder\n")
    found = [(n, top) for n, _, top in _imports(bad)]
    assert ("foilmap.store.folder", False) in found
    assert _rank("foilmap.store.folder") > _rank("foilmap.section.flow")
