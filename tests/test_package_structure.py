"""The package's import structure (read from the code with ``ast``, nothing run):
imports point only down the layers, module-level imports make no circle, and no module
imports another module's underscore names (fact of the trade: a leading underscore
marks a name private to its module)."""

from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parents[1] / "mkforest"
# report -> jobs -> engine -> data -> base; the entry points on top
LAYER = {"errors": 0, "seeds": 0, "data": 1, "engine": 2, "jobs": 3, "report": 4}
TOP = 5  # cli.py, demo.py, starter.py, __main__.py


def modules() -> dict:
    """{dotted name: path} of every module of the package."""
    out = {}
    for path in sorted(PACKAGE.rglob("*.py")):
        parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
        name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        out[name] = path
    return out


def layer(module: str) -> int:
    parts = module.split(".")
    return TOP if len(parts) < 2 else LAYER.get(parts[1], TOP if parts[1] != "__init__" else 0)


def resolve(module: str, path: Path, node: ast.ImportFrom) -> str:
    """The absolute module an ``ImportFrom`` names."""
    if not node.level:
        return node.module or ""
    package = module.split(".") if path.name == "__init__.py" else module.split(".")[:-1]
    base = package[: len(package) - node.level + 1]
    return ".".join(base + ([node.module] if node.module else []))


def imports(source: str, module: str, path: Path):
    """(imported module, [names taken from it], line, at module level) of every import
    of the package in ``source``, and (alias, attribute, line) of every ``alias._name``."""
    tree = ast.parse(source)
    top = set(map(id, tree.body))
    found, aliases = [], {}
    known = modules()
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            target = resolve(module, path, node)
            if not target.startswith("mkforest"):
                continue
            names = [a.name for a in node.names]
            for a in node.names:  # `from . import x`: x is a module
                if f"{target}.{a.name}" in known:
                    aliases[a.asname or a.name] = f"{target}.{a.name}"
                    found.append((f"{target}.{a.name}", [], node.lineno, id(node) in top))
            found.append((target, names, node.lineno, id(node) in top))
        elif isinstance(node, ast.Import):
            for a in node.names:
                if a.name.startswith("mkforest"):
                    found.append((a.name, [], node.lineno, id(node) in top))
                    if a.asname:
                        aliases[a.asname] = a.name
    private = [
        (node.value.id, node.attr, node.lineno)
        for node in ast.walk(tree)
        if isinstance(node, ast.Attribute)
        and isinstance(node.value, ast.Name)
        and node.value.id in aliases
        and node.attr.startswith("_")
        and not node.attr.startswith("__")
    ]
    return found, private


def underscore_imports(source: str, module: str, path: Path) -> list:
    found, private = imports(source, module, path)
    out = [
        f"{module}:{line} imports {name} from {target}"
        for target, names, line, _ in found
        for name in names
        if name.startswith("_") and not name.startswith("__") and target != module
    ]
    return out + [f"{module}:{line} uses {alias}.{attr}" for alias, attr, line in private]


def test_no_module_imports_another_modules_underscore_names():
    found = []
    for module, path in modules().items():
        found += underscore_imports(path.read_text(), module, path)
    assert found == []


def test_the_underscore_check_can_fail():
    path = PACKAGE / "engine" / "fitting.py"
    assert underscore_imports(
        "from .likelihood import _p, log_likelihood\n", "mkforest.engine.fitting", path
    ) == ["mkforest.engine.fitting:1 imports _p from mkforest.engine.likelihood"]
    assert underscore_imports(
        "from . import summarise\nx = summarise._q\n", "mkforest.engine.fitting", path
    ) == ["mkforest.engine.fitting:2 uses summarise._q"]
    assert underscore_imports(
        "from ..engine import likelihood as lk\ndef f():\n    return lk._x\n",
        "mkforest.jobs.fit",
        PACKAGE / "jobs" / "fit.py",
    ) == ["mkforest.jobs.fit:3 uses lk._x"]


def upward_imports(source: str, module: str, path: Path) -> list:
    found, _ = imports(source, module, path)
    return [
        f"{module}:{line} imports {target}"
        for target, _, line, _ in found
        if layer(target) > layer(module)
    ]


def test_imports_point_only_down_the_layers():
    found = []
    for module, path in modules().items():
        found += upward_imports(path.read_text(), module, path)
    assert found == []
    # the check can fail: an engine module reaching up into the jobs
    assert upward_imports(
        "from ..jobs.fit import run\n", "mkforest.engine.x", PACKAGE / "engine" / "x.py"
    ) == ["mkforest.engine.x:1 imports mkforest.jobs.fit"]


def circle(graph: dict) -> list:
    """One import circle of ``graph`` ({module: {modules it imports}}), or []."""
    state = {}

    def visit(m, trail):
        if state.get(m) == 1:
            return trail[trail.index(m) :] + [m]
        if state.get(m) == 2:
            return []
        state[m] = 1
        for t in sorted(graph.get(m, ())):
            found = visit(t, trail + [m])
            if found:
                return found
        state[m] = 2
        return []

    for m in sorted(graph):
        found = visit(m, [])
        if found:
            return found
    return []


def test_module_level_imports_make_no_circle():
    known = modules()
    graph = {}
    for module, path in known.items():
        found, _ = imports(path.read_text(), module, path)
        graph[module] = {
            t
            for t, _, _, top in found
            if top and t in known and t != module and known[t].name != "__init__.py"
        }
    assert circle(graph) == []
    assert circle({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]  # it can fail
