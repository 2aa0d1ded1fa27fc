"""The package's layers: imports flow one way (bottom to top) and no modules import each other in a loop.

Every import is read from the source with ``ast`` (module level and inside
functions alike), so a lazy import that runs upward is caught too.
"""

from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parents[1] / "popdens"

#: Bottom to top.  A module may import from its own layer or from layers listed before it.
LAYERS = (
    ("popdens._version", "popdens._lazy", "popdens._display", "popdens.exceptions", "popdens._validation",
     "popdens._files", "popdens.progress",
     "popdens.plotting", "popdens._spectral", "popdens.result"),
    ("popdens.model",),
    ("popdens.theory",),
    ("popdens.solvers",),
    ("popdens.twins",),
    ("popdens.fitting",),
    ("popdens.network",),
    ("popdens.sweeps",),
    ("popdens.scenario",),
    # the documentation sources (Sphinx conf.py, gallery scripts) use only the public API
    ("popdens.cli", "popdens.benchmarks", "popdens.docs", "popdens"),
)


def module_files(root: Path, package: str) -> dict[str, Path]:
    """Dotted module name -> file, for every ``.py`` file below ``root`` (a package named ``package``)."""
    out = {}
    for path in sorted(root.rglob("*.py")):
        parts = (package, *path.relative_to(root).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = path
    return out


def imports_of(name: str, path: Path, modules: dict[str, Path]) -> set[str]:
    """The package's modules that ``name`` imports anywhere in its source."""
    is_pkg = path.name == "__init__.py"
    base = name.split(".") if is_pkg else name.split(".")[:-1]
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                stem = base[: len(base) - node.level + 1]
                origin = ".".join(stem + ([node.module] if node.module else []))
            else:
                origin = node.module or ""
            # ``from P import m`` imports the module P.m where one exists, else names from P
            targets = [f"{origin}.{a.name}" if f"{origin}.{a.name}" in modules else origin for a in node.names]
        else:
            continue
        for t in targets:
            while t and t not in modules:  # ``import a.b.c`` of a name inside a module
                t = t.rpartition(".")[0]
            if t:
                found.add(t)
    return found


def layer_of(module: str) -> int:
    best, level = -1, None
    for i, names in enumerate(LAYERS):
        for n in names:
            if (module == n or module.startswith(n + ".")) and len(n) > best:
                best, level = len(n), i
    if level is None:
        raise AssertionError(f"module {module} belongs to no layer: add it to LAYERS")
    return level


def import_graph(root: Path, package: str) -> dict[str, set[str]]:
    modules = module_files(root, package)
    return {m: imports_of(m, p, modules) - {m} for m, p in modules.items()}


def upward_imports(graph: dict[str, set[str]]) -> list[str]:
    return sorted(f"{m} -> {t}" for m, ts in graph.items() for t in ts if layer_of(t) > layer_of(m))


def import_cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan's algorithm)."""
    index, low, stack, on, out = {}, {}, [], set(), []

    def visit(v):
        index[v] = low[v] = len(index)
        stack.append(v)
        on.add(v)
        for w in sorted(graph.get(v, ())):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return out


def test_every_module_belongs_to_a_layer():
    for m in import_graph(PACKAGE, "popdens"):
        layer_of(m)


def test_no_module_imports_from_a_layer_above_it():
    assert upward_imports(import_graph(PACKAGE, "popdens")) == []


def test_no_modules_import_each_other():
    assert import_cycles(import_graph(PACKAGE, "popdens")) == []


def test_the_check_sees_an_upward_import_and_a_cycle(tmp_path):
    """The checks themselves can fail: a made-up package with one upward import and one loop."""
    pkg = tmp_path / "popdens"
    for rel, text in {
        "__init__.py": "",
        "model/__init__.py": "",
        "model/neurons.py": "def f():\n    from ..network.circuit import Circuit  # upward, lazy\n",
        "network/__init__.py": "",
        "network/circuit.py": "from . import states\n",
        "network/states.py": "from .circuit import x\n",
    }.items():
        (pkg / rel).parent.mkdir(parents=True, exist_ok=True)
        (pkg / rel).write_text(text)
    graph = import_graph(pkg, "popdens")
    assert upward_imports(graph) == ["popdens.model.neurons -> popdens.network.circuit"]
    assert import_cycles(graph) == [["popdens.network.circuit", "popdens.network.states"]]

