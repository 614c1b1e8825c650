"""The layers import downward only, and core code never imports plotting or widget libraries.

Layers (DEVELOPERS.md): base → properties → domain objects → engine → analyses → front ends.
The check reads each module's top-level imports; imports inside functions are allowed to reach
down (or, for conveniences such as ``Scenario.simulate``, to the engine) because they do not
tie the module's import to a higher layer.
"""

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "circlesim"

LAYERS = {
    "base": ["units", "validation", "files", "cautions", "compiled_cache", "model"],
    "properties": ["properties"],
    "domain": ["patient", "equipment", "plan", "costs", "scenario"],
    "engine": ["assembly", "solver", "simulate", "result", "alerts", "batch", "runner",
               "control"],
    "analyses": ["outcomes", "mac", "emissions", "comparison", "oxygen", "oxygen_absorbent",
                 "oxygen_balance", "oxygen_course", "oxygen_losses", "oxygen_map",
                 "oxygen_minimum", "oxygen_nitrogen", "advisor", "schedule", "emergence",
                 "population", "virtual_patients", "distributions", "distributed",
                 "published"],
    "front ends": ["plots", "report_html", "comparison_report", "population_report",
                   "oxygen_figures", "oxygen_report", "oxygen_sheet", "advisor_plots", "app",
                   "cli", "__init__", "__main__"],
}
RANK = {module: rank for rank, names in enumerate(LAYERS.values()) for module in names}
FRONT_END_ONLY = ("plotly", "ipywidgets", "anywidget", "voila", "IPython")


def _modules():
    for path in sorted(PACKAGE.rglob("*.py")):
        parts = path.relative_to(PACKAGE).with_suffix("").parts
        yield path, parts


def _top_level(parts: tuple[str, ...]) -> str:
    return parts[0]


def _imports(path: Path, parts: tuple[str, ...]):
    """(package-internal top-level module names, external top-level names) imported at the
    module's top level (including under ``if TYPE_CHECKING`` — those are skipped)."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    internal, external = set(), set()
    package_parts = parts[:-1]  # the package holding the module (or the __init__)
    for node in tree.body:
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = list(package_parts[: len(package_parts) - (node.level - 1)])
                target = base + (node.module.split(".") if node.module else [])
                if not target and node.names:
                    target = [node.names[0].name]
                if target:
                    internal.add(target[0])
            elif node.module and node.module.split(".")[0] == "circlesim":
                rest = node.module.split(".")[1:]
                internal.add(rest[0] if rest else node.names[0].name)
            elif node.module:
                external.add(node.module.split(".")[0])
        elif isinstance(node, ast.Import):
            for alias in node.names:
                top = alias.name.split(".")[0]
                if top == "circlesim":
                    rest = alias.name.split(".")[1:]
                    if rest:
                        internal.add(rest[0])
                else:
                    external.add(top)
    return internal, external


MODULES = list(_modules())


def test_every_module_has_a_layer():
    missing = sorted({_top_level(parts) for _, parts in MODULES} - set(RANK))
    assert not missing, f"add these modules to a layer in tests/test_architecture.py: {missing}"


@pytest.mark.parametrize("path,parts", MODULES, ids=[".".join(p) for _, p in MODULES])
def test_imports_point_down(path, parts):
    own = _top_level(parts)
    internal, external = _imports(path, parts)
    upward = sorted(m for m in internal - {own} if RANK.get(m, -1) > RANK[own])
    assert not upward, f"{'.'.join(parts)} (layer {RANK[own]}) imports higher layers: {upward}"
    if RANK[own] < RANK["plots"]:
        forbidden = sorted(external & set(FRONT_END_ONLY))
        assert not forbidden, f"core module {'.'.join(parts)} imports {forbidden}"
