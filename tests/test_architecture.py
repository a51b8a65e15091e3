"""The package's import graph: no circles, and no layer imports a layer above it.

Layers, lowest first: common < chem < device < emulate < mitigate < study < report < cli
(DEVELOPERS.md). The graph is read with ``ast`` from every ``import`` statement of
``noiselab/``, wherever it stands (module top, inside functions, under ``TYPE_CHECKING``), so
that an import hidden in a function still counts.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "noiselab"
LAYERS = ("common", "chem", "device", "emulate", "mitigate", "study", "report", "cli")


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _modules() -> dict[str, Path]:
    return {_module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def _targets(node: ast.Import | ast.ImportFrom, module: str, is_package: bool, known: set[str]):
    """The noiselab modules one import statement loads (``from pkg import mod`` counts as mod)."""
    if isinstance(node, ast.Import):
        names = [alias.name for alias in node.names]
    else:
        if node.level:
            base = module.split(".")
            if not is_package:
                base = base[:-1]
            base = base[: len(base) - (node.level - 1)]
            prefix = ".".join([*base, *([node.module] if node.module else [])])
        else:
            prefix = node.module or ""
        names = []
        for alias in node.names:
            candidate = f"{prefix}.{alias.name}"
            names.append(candidate if candidate in known else prefix)
    return [n for n in names if n == "noiselab" or n.startswith("noiselab.")]


def import_graph() -> dict[str, set[str]]:
    """module -> the noiselab modules it imports (anywhere in its source)."""
    modules = _modules()
    known = set(modules)
    graph: dict[str, set[str]] = {m: set() for m in modules}
    for module, path in modules.items():
        tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
        for node in ast.walk(tree):
            if isinstance(node, ast.Import | ast.ImportFrom):
                for target in _targets(node, module, path.name == "__init__.py", known):
                    if target != module:
                        graph[module].add(target)
    return graph


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found: list[list[str]] = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in sorted(graph.get(v, ())):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            component = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                component.append(w)
                if w == v:
                    break
            if len(component) > 1:
                found.append(sorted(component))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return found


def layer_of(module: str) -> int | None:
    """Position of the module's layer in LAYERS; None for the package root and ``__main__``."""
    parts = module.split(".")
    if len(parts) < 2 or parts[1] not in LAYERS:
        return None
    return LAYERS.index(parts[1])


def test_graph_sees_imports_inside_functions() -> None:
    # the reader must not miss what a function imports: the CLI imports its layers there
    graph = import_graph()
    assert "noiselab.study.assess" in graph["noiselab.cli.study_cmds"]
    assert "noiselab.common.errors" in graph["noiselab.emulate.engine"]


def test_every_module_belongs_to_a_layer() -> None:
    roots = {"noiselab", "noiselab.__main__"}
    strays = [m for m in _modules() if layer_of(m) is None and m not in roots]
    assert not strays, f"modules outside the layers {LAYERS}: {strays}"


def test_no_import_circles() -> None:
    cycles = _cycles(import_graph())
    assert not cycles, "import circles: " + "; ".join(" <-> ".join(c) for c in cycles)


def test_lower_layers_never_import_higher_ones() -> None:
    upward = []
    for module, targets in import_graph().items():
        own = layer_of(module)
        if own is None:
            continue
        for target in sorted(targets):
            other = layer_of(target)
            if other is not None and other > own:
                upward.append(f"{module} -> {target}")
    assert not upward, "imports against the layer order: " + ", ".join(upward)


@pytest.mark.parametrize(
    ("graph", "expected"),
    [
        ({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}, [["a", "b", "c"]]),
        ({"a": {"b"}, "b": set(), "c": {"a", "b"}}, []),
    ],
)
def test_cycle_finder_on_small_graphs(graph: dict[str, set[str]], expected: list) -> None:
    # common practice, no source: hand-made graphs with and without a circle
    assert _cycles(graph) == expected
