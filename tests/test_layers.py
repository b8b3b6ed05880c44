"""The import structure: every module sits in a layer of the table in DEVELOPERS.md ("Layers"),
imports only from its own layer or below, and no two modules import each other in a circle."""

import ast
import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "torsionscan"


def _layers():
    """{top-level module name: layer number} from the DEVELOPERS.md table."""
    text = (ROOT / "DEVELOPERS.md").read_text()
    section = text.split("## Layers", 1)[1].split("\n## ", 1)[0]
    layers = {}
    for number, cells in re.findall(r"^\|\s*(\d+)\s*\|([^|]*)\|", section, flags=re.M):
        for name in re.findall(r"`([\w/]+)`", cells):
            layers[name.strip("/")] = int(number)
    return layers


def _unit(path):
    """The top-level unit of a file: 'driver' for driver.py, 'engines' for engines/model.py."""
    parts = path.relative_to(PACKAGE).with_suffix("").parts
    return "__init__" if parts == ("__init__",) else parts[0]


def _imports(path):
    """Top-level units imported by one file (module level and inside functions)."""
    package = path.relative_to(PACKAGE).parent.parts
    found = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[:len(package) - node.level + 1]
                target = list(base) + (node.module.split(".") if node.module else [])
            elif node.module and node.module.split(".")[0] == "torsionscan":
                target = node.module.split(".")[1:]
            else:
                continue
            if target:
                found.add(target[0])
            else:  # "from . import x" at the package root: a submodule or a name of __init__
                found |= {a.name if (PACKAGE / f"{a.name}.py").exists() or (PACKAGE / a.name).is_dir()
                          else "__init__" for a in node.names}
        elif isinstance(node, ast.Import):
            for alias in node.names:
                parts = alias.name.split(".")
                if parts[0] == "torsionscan":
                    found.add(parts[1] if len(parts) > 1 else "__init__")
    return found


def _graph():
    graph = {}
    for path in PACKAGE.rglob("*.py"):
        unit = _unit(path)
        graph.setdefault(unit, set()).update(u for u in _imports(path) if u != unit)
    return graph


def test_every_module_is_in_the_layer_table():
    layers, graph = _layers(), _graph()
    assert set(graph) - set(layers) == set(), "modules missing from the DEVELOPERS.md layer table"
    assert set(layers) - set(graph) == set(), "the DEVELOPERS.md layer table names modules that do not exist"


def test_imports_point_down_the_layers():
    layers = _layers()
    upward = sorted(f"{unit} (layer {layers[unit]}) imports {target} (layer {layers[target]})"
                    for unit, targets in _graph().items() for target in targets
                    if layers.get(target, 0) > layers.get(unit, 0))
    assert upward == []


def test_there_is_no_import_cycle():
    graph = _graph()
    state, cycles = {}, []

    def visit(node, path):
        state[node] = "open"
        for target in sorted(graph.get(node, ())):
            if state.get(target) == "open":
                cycles.append(" -> ".join(path[path.index(target):] + [target]))
            elif target not in state:
                visit(target, path + [target])
        state[node] = "done"

    for node in sorted(graph):
        if node not in state:
            visit(node, [node])
    assert cycles == []


def test_a_scan_loads_no_scipy():
    # SciPy is a test reference only: importing it costs a single scan about 0.4 s of a 1.1 s run
    # (a small enone, 2 cores), so the command line and everything a scan writes leave it out
    import subprocess
    import sys

    code = ("import sys, torsionscan, torsionscan.cli, torsionscan.output, torsionscan.batch; "
            "print(sorted(m for m in sys.modules if m.split('.')[0] == 'scipy'))")
    loaded = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert loaded.strip() == "[]"
