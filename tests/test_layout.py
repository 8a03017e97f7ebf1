"""The package's layout: stages in the order data flows, imports downstream only, no import
circle, no module past one reading.

Common practice for a layered library (nothing outside the project to compare with): each
stage may import the stages before it and never one after it, so a reader can take the
stages in order.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "amploop"

#: The stages, upstream first. A module may import its own stage and those before it.
STAGES = ("errors", "spice", "spec", "analysis", "bench", "sim", "corners", "strategy",
          "report", "cli")
#: The top-level package's entry points: they may import any stage (lazily, for users).
ENTRY_POINTS = ("__init__", "__main__")
#: About one reading.
MOST_LINES = 420


def _modules() -> dict[str, Path]:
    return {".".join(("amploop", *path.relative_to(PACKAGE).with_suffix("").parts)): path
            for path in PACKAGE.rglob("*.py")}


def _stage(module: str) -> str:
    return module.split(".")[1]


def _imports(module: str, path: Path, known: set[str]) -> set[str]:
    """The amploop modules that ``module`` imports, at any depth in its code."""
    found = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.ImportFrom) and node.module and node.module.startswith("amploop"):
            for alias in node.names:
                candidate = f"{node.module}.{alias.name}"
                found.add(candidate if candidate in known else node.module)
        elif isinstance(node, ast.Import):
            found |= {a.name for a in node.names if a.name.startswith("amploop")}
    return {name.removesuffix(".__init__") for name in found} - {module}


def _graph() -> dict[str, set[str]]:
    modules = _modules()
    known = set(modules) | {m.removesuffix(".__init__") for m in modules}
    return {m.removesuffix(".__init__"): _imports(m.removesuffix(".__init__"), p, known)
            for m, p in modules.items()}


def test_every_module_belongs_to_a_stage():
    strays = [m for m in _graph() if m != "amploop" and _stage(m) not in STAGES + ENTRY_POINTS]
    assert not strays, strays


def test_imports_run_downstream_only():
    upward = []
    for module, imported in _graph().items():
        if module == "amploop" or _stage(module) in ENTRY_POINTS:
            continue
        rank = STAGES.index(_stage(module))
        for target in imported:
            if target == "amploop":
                upward.append(f"{module} -> amploop (the package's entry point)")
            elif STAGES.index(_stage(target)) > rank:
                upward.append(f"{module} -> {target}")
    assert not upward, "\n".join(sorted(upward))


def test_no_import_circle():
    graph = _graph()
    circles = []

    def visit(node: str, path: list[str]) -> None:
        for target in sorted(graph.get(node, ())):
            if target in path:
                circles.append(" -> ".join(path[path.index(target):] + [target]))
            elif target not in done:
                visit(target, path + [target])
        done.add(node)

    done: set[str] = set()
    for module in sorted(graph):
        if module not in done:
            visit(module, [module])
    assert not circles, "\n".join(sorted(set(circles)))


@pytest.mark.parametrize("path", sorted(PACKAGE.rglob("*.py")), ids=lambda p: p.name)
def test_no_module_is_past_one_reading(path):
    lines = len(path.read_text().splitlines())
    assert lines <= MOST_LINES, f"{path.relative_to(PACKAGE.parent)}: {lines} lines"


def test_the_checks_see_an_upward_import():
    """The walk finds an import inside a function, where the cycles used to hide."""
    source = PACKAGE / "bench" / "oppoint.py"
    assert _imports("amploop.bench.oppoint", source, set(_modules())), source
