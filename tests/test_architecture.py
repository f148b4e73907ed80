"""One-way layers: the import graph of geosim and its command line, read from the source.

The graph is built with :mod:`ast` (no module is imported): every ``import`` and
``from ... import`` anywhere in a module, at the top or inside a function, is an
edge to the geosim module it names.  An import inside a function is still a
dependency, so it counts.  A package's own ``__init__`` being run before its
submodules is not an edge.  The layer table is the one in DEVELOPERS.md,
"Architecture"; keep the two the same.
"""
from __future__ import annotations

import ast
import importlib
import warnings
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGES = {"geosim": ROOT / "geosim", "geosim_cli": ROOT / "cli"}

# lowest first; a module may import modules of its own layer or of lower ones.
# "pkg.*" stands for the package pkg and every module in it; other names are one module.
LAYERS = [
    ("base", ["geosim", "geosim._forward", "geosim.cautions", "geosim.errors", "geosim.retired", "geosim.progress",
              "geosim.resources", "geosim.plugins", "geosim.io", "geosim.io.atomic"]),
    ("data", ["geosim.grid", "geosim.crs", "geosim.tables", "geosim.vector", "geosim.points", "geosim.drillholes",
              "geosim.domain", "geosim.declustering", "geosim.transforms", "geosim.fieldstats", "geosim.moments", "geosim.linalg", "geosim.units",
              "geosim.logged_units", "geosim.gridvalues"]),
    ("models", ["geosim.variogram.*", "geosim.search", "geosim.kriging", "geosim.trend",
                "geosim.simulation.*"]),
    ("statistics", ["geosim.summaries", "geosim.validation", "geosim.inputchecks", "geosim.support"]),
    ("files", ["geosim.demo", "geosim.io.geotiff", "geosim.io.plots", "geosim.io.report", "geosim.io.crossval",
               "geosim.io.csvw", "geosim.io.numbertext", "geosim.io.decision", "geosim.io.lock", "geosim.io.cube",
               "geosim.io.support_tables"]),
    ("assembly", ["geosim.ensemble", "geosim.support_outputs", "geosim.config.*", "geosim.io.runspec.*"]),
    ("job", ["geosim.pipeline", "geosim.inputs", "geosim.outputs", "geosim.runstate", "geosim.results",
             "geosim.units_run", "geosim.secondary"]),
    ("command line", ["geosim_cli.*"]),
]


def _modules(packages: dict[str, Path]) -> dict[str, Path]:
    found = {}
    for package, folder in packages.items():
        for path in sorted(folder.rglob("*.py")):
            parts = [package, *path.relative_to(folder).with_suffix("").parts]
            if parts[-1] == "__init__":
                parts.pop()
            found[".".join(parts)] = path
    return found


def _imported_names(module: str, path: Path, node: ast.AST) -> list[str]:
    if isinstance(node, ast.Import):
        return [alias.name for alias in node.names]
    if node.level:  # relative: resolve against the module's package
        package = module.split(".") if path.name == "__init__.py" else module.split(".")[:-1]
        base = package[:len(package) - (node.level - 1)]
        prefix = ".".join(base + ([node.module] if node.module else []))
    else:
        prefix = node.module
    # "from x import y" imports x, and x.y too when y is a submodule
    return [prefix] + [f"{prefix}.{alias.name}" for alias in node.names]


def import_graph(packages: dict[str, Path] = PACKAGES) -> tuple[dict[str, dict[str, int]], dict[str, Path]]:
    """``{module: {imported module of packages: first line}}``, and each module's file."""
    modules = _modules(packages)
    graph: dict[str, dict[str, int]] = {}
    for module, path in modules.items():
        edges: dict[str, int] = {}
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"), str(path))):
            if not isinstance(node, (ast.Import, ast.ImportFrom)):
                continue
            for name in _imported_names(module, path, node):
                while name and name not in modules:  # an attribute of a module names the module
                    name = name.rpartition(".")[0]
                if name and name != module:
                    edges[name] = min(edges.get(name, node.lineno), node.lineno)
        graph[module] = edges
    return graph, modules


def find_cycle(graph: dict[str, dict[str, int]]) -> list[str] | None:
    """One import cycle ``[a, b, ..., a]``, or None (depth-first search, three colours)."""
    state: dict[str, int] = {}  # 1 on the current path, 2 finished
    path: list[str] = []

    def visit(node: str) -> list[str] | None:
        state[node] = 1
        path.append(node)
        for nxt in sorted(graph.get(node, ())):
            if state.get(nxt) == 1:
                return path[path.index(nxt):] + [nxt]
            if nxt not in state:
                found = visit(nxt)
                if found:
                    return found
        path.pop()
        state[node] = 2
        return None

    for start in sorted(graph):
        if start not in state:
            found = visit(start)
            if found:
                return found
    return None


def describe_cycle(cycle: list[str], graph: dict[str, dict[str, int]], modules: dict[str, Path]) -> str:
    steps = [f"{a} -> {b} ({modules[a]}, line {graph[a][b]})" for a, b in zip(cycle, cycle[1:])]
    return "import cycle: " + " -> ".join(cycle) + "\n  " + "\n  ".join(steps)


def layer_of(module: str) -> int:
    level = None
    for index, (_, names) in enumerate(LAYERS):
        for name in names:
            package = name[:-2] if name.endswith(".*") else None
            if module == name or (package and (module == package or module.startswith(package + "."))):
                level = index
    if level is None:
        raise AssertionError(f"module {module} is in no layer: add it to LAYERS here and to the layer "
                             f"table in DEVELOPERS.md, 'Architecture'")
    return level


def test_no_import_cycle():
    graph, modules = import_graph()
    cycle = find_cycle(graph)
    assert cycle is None, describe_cycle(cycle, graph, modules)


def test_imports_point_down_the_layers():
    graph, modules = import_graph()
    upward = []
    for module, edges in sorted(graph.items()):
        for target, line in sorted(edges.items()):
            if layer_of(target) > layer_of(module):
                upward.append(f"{module} ({LAYERS[layer_of(module)][0]}) imports {target} "
                              f"({LAYERS[layer_of(target)][0]}) at {modules[module].relative_to(ROOT)}:{line}")
    assert not upward, "imports that point up the layers:\n  " + "\n  ".join(upward)


def test_the_guard_sees_cycles_and_upward_imports(tmp_path):
    # the graph builder on a made-up package: a lazy import inside a function still closes a cycle
    (tmp_path / "geosim").mkdir()
    (tmp_path / "geosim" / "__init__.py").write_text("")
    (tmp_path / "geosim" / "summaries.py").write_text("from .io import geotiff\n")
    (tmp_path / "geosim" / "io").mkdir()
    (tmp_path / "geosim" / "io" / "__init__.py").write_text("")
    (tmp_path / "geosim" / "io" / "geotiff.py").write_text("def f():\n    from ..summaries import x\n")
    graph, modules = import_graph({"geosim": tmp_path / "geosim"})
    assert graph["geosim.io.geotiff"] == {"geosim.summaries": 2}
    cycle = find_cycle(graph)
    assert cycle == ["geosim.io.geotiff", "geosim.summaries", "geosim.io.geotiff"]
    message = describe_cycle(cycle, graph, modules)
    assert "geosim.io.geotiff -> geosim.summaries -> geosim.io.geotiff" in message and "line 2" in message
    assert layer_of("geosim.summaries") < layer_of("geosim.io.geotiff")  # so summaries -> geotiff points up


def _documented_layers() -> list[tuple[str, list[str]]]:
    """The layer table of DEVELOPERS.md, "Architecture", with its file names as module names."""
    text = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8")
    section = text[text.index("## Architecture"):]
    rows = [line.split("|")[1:3] for line in section.splitlines()
            if line.startswith("| ") and not line.startswith("| layer")]
    layers = []
    for name, modules in rows[:len(LAYERS)]:
        names = []
        for token in modules.split("`")[1::2]:
            if token == "cli/":
                names.append("geosim_cli.*")
            elif token.endswith("/"):
                names.append("geosim." + token.rstrip("/").replace("/", ".") + ".*")
            elif token.endswith(".py"):
                parts = token.removeprefix("geosim/").removesuffix(".py").split("/")
                names.append(".".join(["geosim", *[p for p in parts if p != "__init__"]]))
        layers.append((name.strip(), sorted(names)))
    return layers


def test_layer_table_here_is_the_one_in_the_contributor_guide():
    assert _documented_layers() == [(name, sorted(names)) for name, names in LAYERS]


def test_every_module_has_a_layer():
    graph, _ = import_graph()
    for module in graph:
        layer_of(module)


# -- old paths of moved names, kept for one release ------------------------------------

MOVED = [
    ("geosim.plugins", "check_structure", "geosim.variogram.checks"),
    ("geosim.plugins", "has_compiled_form", "geosim.variogram.plugin_forms"),
    ("geosim.plugins", "evaluate_compiled", "geosim.variogram.plugin_forms"),
    ("geosim.plugins", "add_covariance", "geosim.variogram.plugin_forms"),
    ("geosim.plugins", "note_numpy_only", "geosim.variogram.plugin_forms"),
    ("geosim.summaries", "summarize_realizations", "geosim.ensemble"),
    ("geosim.summaries", "write_decision_csv", "geosim.io.decision"),
    ("geosim.io.geotiff", "RealizationWriter", "geosim.ensemble"),
]


@pytest.mark.parametrize("old, name, new", MOVED, ids=[f"{o}.{n}" for o, n, _ in MOVED])
def test_moved_names_answer_at_their_old_paths_with_a_warning(old, name, new):
    with pytest.warns(DeprecationWarning, match=f"{new}.{name}"):
        value = getattr(importlib.import_module(old), name)
    assert value is getattr(importlib.import_module(new), name)


def test_old_run_spec_module_is_the_new_one():
    import geosim.config.runspec
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)
        old = importlib.import_module("geosim.io.runspec")
    assert old is geosim.config.runspec
    from geosim.io.runspec import load_spec  # the form other code used
    assert load_spec is geosim.config.runspec.load_spec
