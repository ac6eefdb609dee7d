"""Imports point only down the layers, and no module takes part in an import cycle.

The layers, lowest first, are the sub-packages of ``bayeszi`` (docs/architecture.md). Every
import statement counts: module level, inside functions and under ``TYPE_CHECKING`` alike,
because a function-local import is still a dependency. Inside one layer the module graph
must be acyclic. The package's own ``__init__`` (the public surface) sits on top.
"""

from __future__ import annotations

import ast
import pathlib

import pytest

ROOT = pathlib.Path(__file__).resolve().parents[1] / "bayeszi"

#: lowest first; a module may import from its own layer (acyclically) or from any lower one
LAYERS = ("base", "data", "families", "model", "engine", "answers", "plots", "fitting", "app")


def _module_name(path: pathlib.Path) -> str:
    rel = path.relative_to(ROOT.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _modules() -> dict[str, pathlib.Path]:
    return {_module_name(p): p for p in sorted(ROOT.rglob("*.py"))}


def _imports(path: pathlib.Path, name: str, known: set[str]) -> set[str]:
    """The bayeszi modules that ``path`` imports (resolved to modules that exist)."""
    tree = ast.parse(path.read_text(), filename=str(path))
    is_pkg = path.name == "__init__.py"
    out: set[str] = set()
    for node in ast.walk(tree):
        targets: list[str] = []
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                pkg = name.split(".") if is_pkg else name.split(".")[:-1]
                pkg = pkg[: len(pkg) - (node.level - 1)]
                base = ".".join(pkg + ([base] if base else []))
            # "from pkg import mod" names the module; "from mod import name" names mod
            targets = [f"{base}.{a.name}" if f"{base}.{a.name}" in known else base
                       for a in node.names]
        for t in targets:
            while t and t not in known:
                t = t.rpartition(".")[0]
            if t and t != name and t.startswith("bayeszi"):
                out.add(t)
    return out


def _layer(name: str) -> int | None:
    parts = name.split(".")
    if len(parts) < 2:
        return None  # the package itself: the public surface on top
    if parts[1] not in LAYERS:
        return -1
    return LAYERS.index(parts[1])


def _graph() -> dict[str, set[str]]:
    mods = _modules()
    known = set(mods)
    return {n: _imports(p, n, known) for n, p in mods.items()}


def test_every_module_sits_in_a_layer():
    stray = [n for n in _modules() if _layer(n) == -1]
    assert not stray, f"modules outside the layer folders {LAYERS}: {stray}"


def test_imports_point_down():
    upward = []
    for name, deps in _graph().items():
        mine = _layer(name)
        for d in deps:
            theirs = _layer(d)
            if mine is not None and (theirs is None or theirs > mine):
                upward.append(f"{name} -> {d}")
    assert not upward, "upward imports:\n" + "\n".join(sorted(upward))


def test_no_import_cycles():
    graph = _graph()
    state: dict[str, int] = {}
    cycles: list[list[str]] = []

    def visit(n: str, stack: list[str]) -> None:
        state[n] = 1
        for d in sorted(graph.get(n, ())):
            if state.get(d) == 1:
                cycles.append(stack[stack.index(d):] + [d])
            elif d not in state:
                visit(d, stack + [d])
        state[n] = 2

    for n in sorted(graph):
        if n not in state:
            visit(n, [n])
    assert not cycles, "import cycles:\n" + "\n".join(" -> ".join(c) for c in cycles)


def test_the_checker_sees_an_upward_and_a_circular_import(tmp_path, monkeypatch):
    """The checks above fail on a planted upward import and a planted cycle."""
    pkg = tmp_path / "bayeszi"
    for layer in ("base", "answers"):
        (pkg / layer).mkdir(parents=True)
        (pkg / layer / "__init__.py").write_text("")
    (pkg / "__init__.py").write_text("")
    (pkg / "base" / "low.py").write_text("def f():\n    from bayeszi.answers.high import g\n")
    (pkg / "answers" / "high.py").write_text("from bayeszi.answers import other\n")
    (pkg / "answers" / "other.py").write_text("from bayeszi.answers.high import x\n")
    monkeypatch.setattr(__import__(__name__), "ROOT", pkg)
    with pytest.raises(AssertionError, match="bayeszi.base.low -> bayeszi.answers.high"):
        test_imports_point_down()
    with pytest.raises(AssertionError, match="import cycles"):
        test_no_import_cycles()
