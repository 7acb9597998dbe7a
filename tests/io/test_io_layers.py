"""The modules of lakeloss/io are layered: no import cycle, no use of another's private names.

The source of each module is parsed (nothing is imported), so an import inside a function
counts as much as one at the top of the file.
"""

from __future__ import annotations

import ast
import graphlib
from pathlib import Path

import pytest

import lakeloss.io

IO_DIR = Path(lakeloss.io.__file__).parent
PACKAGE = "lakeloss.io"


def _modules() -> dict[str, ast.Module]:
    return {
        path.stem: ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
        for path in sorted(IO_DIR.glob("*.py"))
        if path.stem != "__init__"
    }


def _io_module(dotted: str, names: set[str]) -> str | None:
    """The io module a dotted name refers to (``lakeloss.io.gridfile`` -> ``gridfile``)."""
    prefix = PACKAGE + "."
    if dotted.startswith(prefix):
        stem = dotted[len(prefix) :].split(".")[0]
        return stem if stem in names else None
    return None


def _imported(node: ast.Import | ast.ImportFrom, names: set[str]):
    """(io module, name taken, local name bound to the module or None) for one import."""
    if isinstance(node, ast.Import):
        for alias in node.names:
            module = _io_module(alias.name, names)
            if module is not None:
                yield module, "", alias.asname
        return
    if node.level == 0 and node.module is not None:
        base = node.module
    elif node.level == 1:  # from . import x, from .x import y
        base = PACKAGE + ("." + node.module if node.module else "")
    else:
        return
    if base == PACKAGE:
        for alias in node.names:
            if alias.name in names:
                yield alias.name, "", alias.asname or alias.name
        return
    module = _io_module(base, names)
    if module is not None:
        for alias in node.names:
            yield module, alias.name, None


def _uses(tree: ast.Module, names: set[str]) -> list[tuple[str, str]]:
    """(io module, name taken from it) for every use of another io module in ``tree``.

    The name is ``""`` for a plain ``import``; attribute access through a name bound to a
    module (``gridfile.open_dataset``) counts as taking that attribute.
    """
    uses: list[tuple[str, str]] = []
    bound: dict[str, str] = {}  # local name -> io module it refers to
    for node in ast.walk(tree):
        if isinstance(node, ast.Import | ast.ImportFrom):
            for module, name, local in _imported(node, names):
                uses.append((module, name))
                if local is not None:
                    bound[local] = module
    for node in ast.walk(tree):
        if (
            isinstance(node, ast.Attribute)
            and isinstance(node.value, ast.Name)
            and node.value.id in bound
        ):
            uses.append((bound[node.value.id], node.attr))
    return uses


def _graph() -> dict[str, dict[str, set[str]]]:
    """module -> {io module it uses -> names it takes from it}."""
    trees = _modules()
    names = set(trees)
    graph: dict[str, dict[str, set[str]]] = {}
    for stem, tree in trees.items():
        graph[stem] = {}
        for module, name in _uses(tree, names):
            if module != stem:
                graph[stem].setdefault(module, set()).add(name)
    return graph


def test_io_modules_import_one_another_without_a_cycle():
    graph = _graph()
    assert "multifile" in graph["climate"], "the reader found no import at all"
    sorter = graphlib.TopologicalSorter({stem: set(uses) for stem, uses in graph.items()})
    try:
        sorter.prepare()
    except graphlib.CycleError as err:
        pytest.fail(f"import cycle among lakeloss/io modules: {' -> '.join(err.args[1])}")


def test_io_modules_use_only_public_names_of_one_another():
    taken = [
        f"{stem} takes {module}.{name}"
        for stem, uses in sorted(_graph().items())
        for module, names in sorted(uses.items())
        for name in sorted(names)
        if name.startswith("_") and not name.startswith("__")
    ]
    assert taken == []


def test_the_reader_sees_imports_inside_functions_and_private_names():
    # The reader itself, on a made-up pair of modules written the way the old climate and
    # multifile were: a lazy import inside a function, and a private helper used across.
    lower = ast.parse("from lakeloss.io import upper as up\nx = up._helper(1)\n")
    upper = ast.parse("def f():\n    from lakeloss.io import lower\n    return lower.g()\n")
    names = {"lower", "upper"}
    assert ("upper", "_helper") in _uses(lower, names)
    assert ("lower", "g") in _uses(upper, names)
    relative = ast.parse("from .upper import _helper\nfrom . import lower as low\nlow._g()\n")
    assert _uses(relative, names) == [("upper", "_helper"), ("lower", ""), ("lower", "_g")]


def test_climate_keeps_the_names_the_pipeline_uses():
    from lakeloss.io import climate, gridfile

    for name in ("open_netcdf", "open_geotiff_stack", "check_values", "crs_label"):
        assert callable(getattr(climate, name)), name
    assert climate.ClimateField is gridfile.ClimateField
    assert climate.DIMS == ("time", "y", "x")
