"""The package's folders are its layers: imports point downward only and never form a cycle.

The map (DEVELOPERS.md, "Map of the package") is held here as ``LAYERS``. Every import in a
module counts — at the top, inside a function, or under ``if TYPE_CHECKING`` — because each is
a dependency a reader has to follow. The one exception is an optional front-end library
(plotly, ipywidgets, ...) imported lazily inside a front-end module.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "circlesim"

#: Layers from the bottom up: (name, module prefixes). A module may import its own layer and
#: the layers below it.
LAYERS: list[tuple[str, tuple[str, ...]]] = [
    ("base", ("base",)),
    ("properties", ("properties",)),
    ("domain objects", ("domain",)),
    ("engine", ("engine",)),
    ("target mode", ("targets",)),
    ("scenario files", ("scenario",)),
    ("outcomes", ("outcomes",)),
    ("analyses", ("oxygen", "population", "advisor")),
    ("measured cases", ("cases",)),
    ("department review", ("department",)),
    ("published checks", ("published",)),
    ("reports", ("reports",)),
    ("front ends", ("app", "cli", "__init__", "__main__")),
]
RANK = {prefix: rank for rank, (_, prefixes) in enumerate(LAYERS) for prefix in prefixes}
FRONT_END_ONLY = ("plotly", "ipywidgets", "anywidget", "voila", "IPython")
FIRST_FRONT_END = RANK["reports"]


def _dotted(path: Path) -> str:
    parts = path.relative_to(PACKAGE).with_suffix("").parts
    if parts[-1] == "__init__" and len(parts) > 1:
        parts = parts[:-1]
    return ".".join(parts)


MODULES = {_dotted(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def _rank(module: str) -> int | None:
    return RANK.get(module.split(".")[0])


def _resolve(importer: str, path: Path, node: ast.ImportFrom) -> list[str]:
    """Package-internal modules that a ``from ... import ...`` statement reaches."""
    if node.level:
        package = importer.split(".") if path.name == "__init__.py" else importer.split(".")[:-1]
        base = package[: len(package) - (node.level - 1)]
    elif node.module and node.module.split(".")[0] == "circlesim":
        base = []
        node = ast.ImportFrom(module=".".join(node.module.split(".")[1:]) or None,
                              names=node.names, level=0)
    else:
        return []
    stem = base + (node.module.split(".") if node.module else [])
    found = []
    for alias in node.names:
        candidate = ".".join([*stem, alias.name])
        if candidate in MODULES:  # "from package import module"
            found.append(candidate)
        elif stem:
            found.append(".".join(stem))
    return [m if m in MODULES else m.split(".")[0] for m in found if m]


def _imports(module: str) -> tuple[set[str], set[str]]:
    """(internal modules, external top-level packages) imported anywhere in ``module``."""
    path = MODULES[module]
    internal, external = set(), set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom):
            if node.level or (node.module or "").split(".")[0] == "circlesim":
                internal.update(_resolve(module, path, node))
            elif node.module:
                external.add(node.module.split(".")[0])
        elif isinstance(node, ast.Import):
            for alias in node.names:
                top, *rest = alias.name.split(".")
                if top == "circlesim":
                    internal.add(".".join(rest) if ".".join(rest) in MODULES else rest[0])
                else:
                    external.add(top)
    internal.discard(module)
    internal.discard("")
    return internal, external


GRAPH = {module: _imports(module)[0] for module in MODULES}


def test_every_module_has_a_layer():
    missing = sorted(m for m in MODULES if _rank(m) is None)
    assert not missing, f"add these modules to a layer in tests/test_architecture.py: {missing}"


@pytest.mark.parametrize("module", sorted(MODULES))
def test_imports_point_down(module):
    own = _rank(module)
    upward = sorted(m for m in GRAPH[module] if (_rank(m) or 0) > own)
    assert not upward, f"{module} (layer {LAYERS[own][0]!r}) imports higher layers: {upward}"
    if own < FIRST_FRONT_END:
        forbidden = sorted(_imports(module)[1] & set(FRONT_END_ONLY))
        assert not forbidden, f"core module {module} imports {forbidden}"


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan's algorithm)."""
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
            if w not in graph:
                continue
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


def test_no_import_cycles():
    assert _cycles(GRAPH) == []


def test_cycle_finder_finds_a_cycle():
    # The finder itself must be able to fail: a three-module loop and a self-contained chain.
    graph = {"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}, "e": set()}
    assert _cycles(graph) == [["a", "b", "c"]]


def test_map_in_developers_guide_matches():
    # Every top-level folder and module of the package appears in the map in DEVELOPERS.md.
    guide = (PACKAGE.parent / "DEVELOPERS.md").read_text(encoding="utf-8")
    tops = {m.split(".")[0] for m in MODULES} - {"__init__", "__main__"}
    for top in sorted(tops):
        name = f"`{top}/`" if (PACKAGE / top).is_dir() else f"`{top}.py`"
        assert name in guide, f"DEVELOPERS.md's map does not mention {name}"
