"""The public API list is sorted and honest, and the doctest examples in pure modules hold."""

from __future__ import annotations

import doctest
import importlib

import pytest

import captioner


def test_all_is_sorted_and_every_name_exists() -> None:
    assert captioner.__all__ == sorted(captioner.__all__)
    for name in captioner.__all__:
        assert hasattr(captioner, name), name


@pytest.mark.parametrize(
    "module", ["features", "events", "dialogue", "policy", "cues", "report", "formats", "formats.webvtt"]
)
def test_doctests(module: str) -> None:
    result = doctest.testmod(importlib.import_module(f"captioner.{module}"))
    assert result.attempted > 0 and result.failed == 0


def _imports_between_modules() -> dict[str, set[str]]:
    """Module -> the package modules it imports anywhere in its source (inside functions too)."""
    import ast
    from pathlib import Path

    root = Path(captioner.__file__).parent
    graph: dict[str, set[str]] = {}
    for path in root.rglob("*.py"):
        parts = path.relative_to(root).with_suffix("").parts
        package = ("captioner", *parts[:-1])
        name = ".".join(package if parts[-1] == "__init__" else (*package, parts[-1]))
        targets: set[str] = set()
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and node.level:
                base = package[: len(package) - node.level + 1]
                stem = ".".join(base + ((node.module,) if node.module else ()))
                for alias in node.names:  # `from . import update` names a module
                    candidate = f"{stem}.{alias.name}"
                    is_module = (root.parent / candidate.replace(".", "/")).with_suffix(".py").exists()
                    targets.add(candidate if is_module else stem)
        graph[name] = {t for t in targets if t != name and t != "captioner"}
    return graph


def test_no_import_circles() -> None:
    # One-way arrows between modules (house rule "no import circles"), including imports
    # deferred into functions: a deferred import only hides a circle, it does not remove it.
    graph = _imports_between_modules()
    assert "captioner.pipeline" in graph["captioner.workers"]  # the graph sees real imports
    state: dict[str, int] = {}

    def visit(node: str, trail: tuple[str, ...]) -> None:
        if state.get(node) == 2:
            return
        assert state.get(node) != 1, " -> ".join((*trail, node))
        state[node] = 1
        for target in sorted(graph.get(node, ())):
            visit(target, (*trail, node))
        state[node] = 2

    for module in sorted(graph):
        visit(module, ())
