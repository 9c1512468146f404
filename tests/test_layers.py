"""The package's import graph: every module imports only from its own layer or the layers
before it (DEVELOPERS.md, "Layers"), and no two modules import each other in a cycle.

The imports are read from the source with :mod:`ast` (module-level and function-level
imports alike), so a late import inside a function counts too.
"""

from __future__ import annotations

import ast
from pathlib import Path

import mpsobs

PACKAGE = Path(mpsobs.__file__).parent
#: The layers in order; a module may import from its own layer and the ones before it.
LAYERS = ("core", "mps", "chain", "estimators", "references", "pipeline", "analysis", "app")


def _module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _layer(module: str) -> str:
    parts = module.split(".")
    if len(parts) == 1:           # mpsobs/__init__.py: the lazy namespace, above all
        return "app"
    return parts[1] if parts[1] in LAYERS else "app"   # workflow.py, cli.py


def _imports(path: Path) -> set[str]:
    """Full names of the mpsobs modules that a file imports (``from a import b`` names the
    module a.b when that is a module of the package, else a)."""
    names = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            names |= {alias.name for alias in node.names if alias.name.startswith("mpsobs")}
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0 \
                and node.module.startswith("mpsobs"):
            for alias in node.names:
                sub = f"{node.module}.{alias.name}"
                names.add(sub if sub in MODULES else node.module)
    return names


MODULES = {_module_name(p): p for p in PACKAGE.rglob("*.py")}
GRAPH = {name: _imports(path) - {name} for name, path in MODULES.items()}


def test_every_module_has_a_known_layer_folder():
    folders = {p.name for p in PACKAGE.iterdir() if p.is_dir() and (p / "__init__.py").exists()}
    assert folders <= set(LAYERS), folders - set(LAYERS)
    top = {name for name, path in MODULES.items()
           if path.parent == PACKAGE and path.name != "__init__.py"}
    assert top == {"mpsobs.cli", "mpsobs.workflow"}, top


def test_imports_go_one_way():
    wrong = [(name, dep) for name, deps in GRAPH.items() for dep in deps
             if LAYERS.index(_layer(dep)) > LAYERS.index(_layer(name))]
    assert not wrong, "imports against the layers: " + ", ".join(f"{a} -> {b}"
                                                                  for a, b in wrong)


def test_no_import_cycles():
    state: dict[str, int] = {}       # 1 on the stack, 2 done

    def visit(name: str, path: list[str]) -> None:
        state[name] = 1
        for dep in sorted(GRAPH.get(name, ())):
            if dep.startswith(name + "."):
                continue   # a package's __init__ importing its own modules is not a cycle
            if state.get(dep) == 1:
                raise AssertionError("import cycle: " + " -> ".join([*path, name, dep]))
            if dep in GRAPH and state.get(dep) is None:
                visit(dep, [*path, name])
        state[name] = 2

    for module in sorted(GRAPH):
        if state.get(module) is None:
            visit(module, [])


def test_the_checker_sees_a_violation():
    """The graph check is not vacuous: the namespace module imports lazily (no edges), but
    the workflow layer's imports of the pipeline are seen."""
    assert any(_layer(dep) == "pipeline" for dep in GRAPH["mpsobs.cli"] | GRAPH.get(
        "mpsobs.workflow", set()))
    assert LAYERS.index(_layer("mpsobs.analysis.plots")) > LAYERS.index(
        _layer("mpsobs.chain.models"))
