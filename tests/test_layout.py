"""The package's imports point one way only: no module imports one that imports it back
(directly or through others, the package's own __init__ included)."""

from __future__ import annotations

import ast
from pathlib import Path

import trendledger

ROOT = Path(trendledger.__file__).parent


def _graph() -> dict[str, set[str]]:
    mods: dict[str, set[str]] = {}
    for path in ROOT.rglob("*.py"):
        name = ".".join(("trendledger", *path.relative_to(ROOT).with_suffix("").parts))
        name = name.removesuffix(".__init__")
        deps: set[str] = set()
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and node.module and node.level == 0 \
                    and node.module.startswith("trendledger"):
                deps.add(node.module)
                deps.update(f"{node.module}.{a.name}" for a in node.names)
            elif isinstance(node, ast.Import):
                deps.update(a.name for a in node.names if a.name.startswith("trendledger"))
        mods[name] = deps
    return {k: {d for d in v if d in mods and d != k} for k, v in mods.items()}


def test_no_import_cycle() -> None:
    graph = _graph()
    assert "trendledger.views.install" in graph and "trendledger.ledger" in graph
    state: dict[str, int] = {}
    cycles: list[list[str]] = []

    def visit(mod: str, path: list[str]) -> None:
        state[mod] = 1
        for dep in sorted(graph[mod]):
            if state.get(dep) == 1:
                cycles.append([*path[path.index(dep):], dep])
            elif dep not in state:
                visit(dep, [*path, dep])
        state[mod] = 2

    for mod in sorted(graph):
        if mod not in state:
            visit(mod, [mod])
    assert cycles == []


def test_subpackages_by_concern() -> None:
    packages = {p.parent.name for p in ROOT.glob("*/__init__.py")}
    assert {"store", "views", "query", "export", "report"} <= packages
