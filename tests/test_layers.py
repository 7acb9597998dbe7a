"""The package's layers, read from its import statements (ast; nothing is imported).

DEVELOPERS.md, "DESIGN": data flows one way. Physics is pure and imports nothing of lakeloss
but itself, the glossary and the errors; the zonal engine knows polygons and grids, nothing
above it; io/ never reaches up into the run (the pipeline, the result tables, the command
line); nothing imports the command line; and no two modules import each other, however
indirectly. Imports inside functions count: they are dependencies too.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "lakeloss"

# Modules of the run itself, above io/: the stages and what was split from them.
RUN_MODULES = {
    "lakeloss.pipeline",
    "lakeloss.results",
    "lakeloss.cli",
    "lakeloss.plan",
    "lakeloss.checks",
    "lakeloss.sizing",
    "lakeloss.series_stream",
    "lakeloss.run_warnings",
    "lakeloss.body_facts",
    "lakeloss.report",
    "lakeloss.inputs",
    "lakeloss.blocks",
    "lakeloss.grouping",
    "lakeloss.execution",
    "lakeloss.starter",
}

# Import cycles known today, each to be removed from here once it is broken.
KNOWN_CYCLES: list[set[str]] = []  # none: keep it so


def module_name(path: Path, root: Path) -> str:
    parts = list(path.relative_to(root.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def imports_of(root: Path) -> dict[str, set[str]]:
    """Every module of the package at ``root`` -> the package modules it imports."""
    files = {module_name(p, root): p for p in sorted(root.rglob("*.py"))}
    graph: dict[str, set[str]] = {}
    for name, path in files.items():
        is_package = path.name == "__init__.py"
        targets: set[str] = set()
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Import):
                targets.update(_nearest(alias.name, files) for alias in node.names)
            elif isinstance(node, ast.ImportFrom):
                base = _absolute(node, name, is_package)
                for alias in node.names:
                    # `from lakeloss.io import climate` imports the module climate;
                    # `from lakeloss.zonal import GridSpec` the package lakeloss.zonal.
                    full = f"{base}.{alias.name}"
                    targets.add(full if full in files else _nearest(base, files))
        graph[name] = {t for t in targets if t and t != name}
    return graph


def _absolute(node: ast.ImportFrom, name: str, is_package: bool) -> str:
    if not node.level:
        return node.module or ""
    parts = name.split(".") if is_package else name.split(".")[:-1]
    parts = parts[: len(parts) - (node.level - 1)]
    return ".".join(parts + ([node.module] if node.module else []))


def _nearest(dotted: str, files: dict[str, Path]) -> str:
    """The package module ``dotted`` names, or its nearest package; "" outside the package."""
    parts = dotted.split(".")
    while parts:
        if ".".join(parts) in files:
            return ".".join(parts)
        parts.pop()
    return ""


def layer_violations(graph: dict[str, set[str]]) -> list[str]:
    """Every import that breaks the layering, as ``importer -> imported: rule``."""

    def inside(module: str, *places: str) -> bool:
        return any(module == f"lakeloss.{p}" or module.startswith(f"lakeloss.{p}.") for p in places)

    found = []
    for importer, targets in sorted(graph.items()):
        for target in sorted(targets):
            edge = f"{importer} -> {target}"
            if inside(importer, "physics") and not inside(target, "physics", "glossary", "errors"):
                found.append(f"{edge}: physics imports only physics, glossary and errors")
            if inside(importer, "zonal") and not inside(target, "zonal", "errors", "glossary"):
                found.append(f"{edge}: zonal imports nothing above it")
            if inside(importer, "io") and target in RUN_MODULES:
                found.append(f"{edge}: io never imports the run")
            if target == "lakeloss.cli":
                found.append(f"{edge}: nothing imports the command line")
    return found


def cycles(graph: dict[str, set[str]]) -> list[set[str]]:
    """The groups of modules that import each other, directly or through others (Tarjan).

    The package itself (``lakeloss/__init__.py``, the front door) is left out: it imports
    the run inside its functions, and the modules read only ``__version__`` from it
    (:func:`test_the_package_itself_gives_only_its_version`).
    """
    nodes = {m: {t for t in ts if t != "lakeloss"} for m, ts in graph.items() if m != "lakeloss"}
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found: list[set[str]] = []

    def visit(node: str) -> None:
        index[node] = low[node] = len(index)
        stack.append(node)
        on_stack.add(node)
        for target in nodes.get(node, ()):
            if target not in index:
                visit(target)
                low[node] = min(low[node], low[target])
            elif target in on_stack:
                low[node] = min(low[node], index[target])
        if low[node] == index[node]:
            group = set()
            while True:
                member = stack.pop()
                on_stack.discard(member)
                group.add(member)
                if member == node:
                    break
            if len(group) > 1:
                found.append(group)

    for node in sorted(nodes):
        if node not in index:
            visit(node)
    return found


def _version_only_from_root(root: Path) -> list[str]:
    """Imports of names from the package itself other than ``__version__``."""
    found = []
    files = {module_name(p, root): p for p in root.rglob("*.py")}
    for name, path in files.items():
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and node.module == root.name and not node.level:
                for alias in node.names:
                    if f"{root.name}.{alias.name}" not in files and alias.name != "__version__":
                        found.append(f"{name} imports {alias.name} from {root.name}")
    return found


def test_the_layers_hold():
    assert layer_violations(imports_of(PACKAGE)) == []


def test_the_package_itself_gives_only_its_version():
    assert _version_only_from_root(PACKAGE) == []


def test_no_import_cycles_but_the_known_ones():
    unknown = [sorted(c) for c in cycles(imports_of(PACKAGE)) if c not in KNOWN_CYCLES]
    assert unknown == []


@pytest.fixture
def bad_package(tmp_path):
    """A tiny package laid out as lakeloss is, breaking each rule once."""
    root = tmp_path / "lakeloss"
    files = {
        "__init__.py": "",
        "cli.py": "",
        "pipeline.py": "from lakeloss.io import writer\n",
        "errors.py": "",
        "physics/__init__.py": "",
        "physics/methods.py": "def f():\n    from lakeloss.io.writer import write\n",
        "zonal/__init__.py": "from .weights import ZonalWeights\n",
        "zonal/weights.py": "from lakeloss.pipeline import run\nZonalWeights = 1\n",
        "io/__init__.py": "",
        "io/writer.py": "import lakeloss.cli\nfrom lakeloss import pipeline\n",
    }
    for name, text in files.items():
        (root / name).parent.mkdir(parents=True, exist_ok=True)
        (root / name).write_text(text)
    return root


def test_the_checks_find_each_broken_rule(bad_package):
    graph = imports_of(bad_package)
    found = layer_violations(graph)
    assert found == [
        "lakeloss.io.writer -> lakeloss.cli: io never imports the run",
        "lakeloss.io.writer -> lakeloss.cli: nothing imports the command line",
        "lakeloss.io.writer -> lakeloss.pipeline: io never imports the run",
        "lakeloss.physics.methods -> lakeloss.io.writer: "
        "physics imports only physics, glossary and errors",
        "lakeloss.zonal.weights -> lakeloss.pipeline: zonal imports nothing above it",
    ]
    assert cycles(graph) == [{"lakeloss.io.writer", "lakeloss.pipeline"}]
