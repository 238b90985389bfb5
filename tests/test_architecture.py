"""The layers of DESIGN.md as a test: every import (also those inside functions) points to the
same layer or a lower one, no import cycle exists, no private name crosses a module boundary,
and no module or function grows past its size limit.

The rules are common practice for layered code, no source; the limits are the project's own.
The checker is run on the package and, to show that it can fail, on small planted trees.
"""

from __future__ import annotations

import ast
from dataclasses import dataclass
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "sensiv"

# Lowest first.  A module may import from its own layer or a lower one.  The invented demo data
# sit beside the layers and may use only the core.  The package root (``sensiv/__init__.py``,
# the lazy public face, and ``__main__``) sits on top.
LAYERS = ("core", "data", "estimation", "partial_id", "sensitivity", "present", "analyses",
          "api", "recipes", "cli")
BESIDE = {"demo": 1}
MAX_MODULE_LINES = 400
MAX_FUNCTION_LINES = 80
# The only modules that may import by name at run time: the lazy public face and the one
# hook by which results' ``__str__`` reaches the presentation layer through the registry.
DYNAMIC_IMPORTERS = {"sensiv", "sensiv.core.results"}


@dataclass(frozen=True)
class Import:
    source: str      # importing module
    target: str      # imported module (a module of the tree)
    names: tuple     # names taken from it (``from target import names``)
    line: int


def module_name(path: Path, root: Path) -> str:
    parts = list(path.relative_to(root.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def modules_of(root: Path) -> dict[str, Path]:
    return {module_name(p, root): p for p in sorted(root.rglob("*.py"))}


def _resolve(node: ast.ImportFrom, source: str, is_package: bool) -> str:
    if not node.level:
        return node.module or ""
    base = source.split(".") if is_package else source.split(".")[:-1]
    base = base[:len(base) - (node.level - 1)]
    return ".".join(base + ([node.module] if node.module else []))


def imports_of(name: str, path: Path, known: set[str]) -> list[Import]:
    """Every import of a tree module in ``path``, wherever it stands (top level or inside a
    function); ``from package import module`` counts as an import of the module."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    found = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name in known:
                    found.append(Import(name, alias.name, (), node.lineno))
        elif isinstance(node, ast.ImportFrom):
            base = _resolve(node, name, path.name == "__init__.py")
            if base not in known:
                continue
            plain = []
            for alias in node.names:
                sub = f"{base}.{alias.name}"
                if sub in known:
                    found.append(Import(name, sub, (), node.lineno))
                else:
                    plain.append(alias.name)
            if plain:
                found.append(Import(name, base, tuple(plain), node.lineno))
    return found


def layer_of(module: str) -> int:
    parts = module.split(".")
    if len(parts) == 1:
        return len(LAYERS)            # the package root: the public face
    top = parts[1]
    if top in BESIDE:
        return BESIDE[top]
    if top in LAYERS:
        return LAYERS.index(top)
    return len(LAYERS)                # sensiv.__main__


def upward_imports(modules: dict[str, Path]) -> list[str]:
    known = set(modules)
    out = []
    for name, path in modules.items():
        for imp in imports_of(name, path, known):
            if layer_of(imp.target) > layer_of(name):
                out.append(f"{path.name}:{imp.line}: {name} (layer {layer_of(name)}) imports "
                           f"{imp.target} (layer {layer_of(imp.target)})")
    return out


def import_cycles(modules: dict[str, Path]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan), or a module that
    imports itself."""
    known = set(modules)
    graph = {name: sorted({i.target for i in imports_of(name, path, known)})
             for name, path in modules.items()}
    index, low, stack, on_stack, cycles = {}, {}, [], set(), []
    counter = [0]

    def visit(v: str) -> None:
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on_stack.add(v)
        for w in graph[v]:
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
            if len(component) > 1 or v in graph[v]:
                cycles.append(sorted(component))

    for v in graph:
        if v not in index:
            visit(v)
    return cycles


def _private(name: str) -> bool:
    return name.startswith("_") and not (name.startswith("__") and name.endswith("__"))


def private_crossings(modules: dict[str, Path]) -> list[str]:
    """``from module import _name`` and ``module._name`` where ``module`` is another module
    of the tree."""
    known = set(modules)
    out = []
    for name, path in modules.items():
        tree = ast.parse(path.read_text(encoding="utf-8"))
        bound = {}
        for imp in imports_of(name, path, known):
            for taken in imp.names:
                if _private(taken):
                    out.append(f"{path.name}:{imp.line}: {name} takes {imp.target}.{taken}")
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom):
                base = _resolve(node, name, path.name == "__init__.py")
                for alias in node.names:
                    if f"{base}.{alias.name}" in known:
                        bound[alias.asname or alias.name] = f"{base}.{alias.name}"
            elif isinstance(node, ast.Import):
                for alias in node.names:
                    if alias.name in known and alias.asname:
                        bound[alias.asname] = alias.name
        for node in ast.walk(tree):
            if (isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name)
                    and node.value.id in bound and _private(node.attr)):
                out.append(f"{path.name}:{node.lineno}: {name} uses "
                           f"{bound[node.value.id]}.{node.attr}")
    return out


def dynamic_imports(modules: dict[str, Path]) -> list[str]:
    """Calls of ``import_module`` / ``__import__`` outside the allowed modules."""
    out = []
    for name, path in modules.items():
        if name in DYNAMIC_IMPORTERS:
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Call):
                f = node.func
                called = f.attr if isinstance(f, ast.Attribute) else getattr(f, "id", "")
                if called in ("import_module", "__import__"):
                    out.append(f"{path.name}:{node.lineno}: {name} imports at run time")
    return out


def oversized(modules: dict[str, Path]) -> list[str]:
    out = []
    for name, path in modules.items():
        text = path.read_text(encoding="utf-8")
        lines = len(text.splitlines())
        if lines > MAX_MODULE_LINES:
            out.append(f"module {name}: {lines} lines (limit {MAX_MODULE_LINES})")
        for node in ast.walk(ast.parse(text)):
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                length = node.end_lineno - node.lineno + 1
                if length > MAX_FUNCTION_LINES:
                    out.append(f"function {name}.{node.name}: {length} lines "
                               f"(limit {MAX_FUNCTION_LINES})")
    return out


# ----------------------------------------------------------------------------- the package
MODULES = modules_of(PACKAGE)


def test_every_module_belongs_to_a_layer():
    tops = {m.split(".")[1] for m in MODULES if m.count(".") >= 1}
    assert tops <= {*LAYERS, *BESIDE, "__main__"}, tops - {*LAYERS, *BESIDE, "__main__"}


def test_no_module_imports_from_a_higher_layer():
    assert upward_imports(MODULES) == []


def test_no_import_cycle():
    assert import_cycles(MODULES) == []


def test_no_private_name_crosses_a_module_boundary():
    assert private_crossings(MODULES) == []


def test_run_time_imports_only_in_the_public_face_and_the_text_hook():
    assert dynamic_imports(MODULES) == []


def test_modules_and_functions_stay_small():
    assert oversized(MODULES) == []


# ----------------------------------------------------------------------------- it can fail
def _tree(tmp_path: Path, files: dict[str, str]) -> dict[str, Path]:
    root = tmp_path / "sensiv"
    for rel, text in {"__init__.py": "", "core/__init__.py": "", "core/results.py": "",
                      "estimation/__init__.py": "", "estimation/iv.py": "",
                      "present/__init__.py": "", "present/text.py": "", **files}.items():
        path = root / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text, encoding="utf-8")
    return modules_of(root)


def test_a_planted_upward_import_is_caught(tmp_path):
    # estimation (layer 2) reaching into present (layer 5), hidden inside a function
    tree = _tree(tmp_path, {"estimation/iv.py":
                            "def summary(fit):\n    from sensiv.present.text import show\n"})
    found = upward_imports(tree)
    assert len(found) == 1 and "sensiv.estimation.iv (layer 2) imports sensiv.present.text" \
        in found[0]


def test_a_planted_cycle_and_a_private_import_are_caught(tmp_path):
    tree = _tree(tmp_path, {
        "present/text.py": "from sensiv.present import table\n",
        "present/table.py": "def f():\n    from sensiv.present.text import _cells\n",
        "present/bundle.py": "from sensiv.present import table\nx = table._kind\n"})
    assert import_cycles(tree) == [["sensiv.present.table", "sensiv.present.text"]]
    crossings = private_crossings(tree)
    assert any("takes sensiv.present.text._cells" in c for c in crossings)
    assert any("uses sensiv.present.table._kind" in c for c in crossings)


def test_a_long_function_and_a_run_time_import_are_caught(tmp_path):
    body = "def long():\n" + "    x = 1\n" * MAX_FUNCTION_LINES
    tree = _tree(tmp_path, {"core/results.py": "", "estimation/iv.py": body
                            + "import importlib\nm = importlib.import_module('sensiv.present')\n"})
    assert any("function sensiv.estimation.iv.long" in o for o in oversized(tree))
    assert dynamic_imports(tree) == ["iv.py:83: sensiv.estimation.iv imports at run time"]


@pytest.mark.parametrize("module, layer", [("sensiv.core.errors", 0), ("sensiv.demo", 1),
                                           ("sensiv.api.functions", 7),
                                           ("sensiv.cli.app", 9), ("sensiv", 10)])
def test_layer_numbers(module, layer):
    assert layer_of(module) == layer
