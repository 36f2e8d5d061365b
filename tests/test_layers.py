"""The package's layers, read from its imports: nothing imports upward, no cycle, no hidden import.

A module may import modules of its own layer or of a lower one. ``LazyModule("emucompile...")``
at module level counts as an import. An import inside a function is allowed only where
ALLOWED_IN_FUNCTIONS says why. DEVELOPERS.md's layout section lists these layers in this order
(checked below).
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
LAYERS = ["errors _version _lazy", "models", "profile", "bundle", "apply", "compile", "verify",
          "report", "diff", "loop", "campaign", "cli __main__", "__init__"]
RANK = {name: rank for rank, names in enumerate(LAYERS) for name in names.split()}
# (importing module, imported module): why the import waits until the function runs
ALLOWED_IN_FUNCTIONS: dict[tuple[str, str], str] = {}


def _imports():
    """(importer, imported, inside a function?) for every internal import of the package."""
    for path in sorted((ROOT / "emucompile").rglob("*.py")):
        parts = path.relative_to(ROOT).with_suffix("").parts
        module = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        package = module if path.name == "__init__.py" else module.rpartition(".")[0]
        tree = ast.parse(path.read_text("utf-8"))
        functions = [n for n in ast.walk(tree) if isinstance(n, (ast.FunctionDef, ast.AsyncFunctionDef))]
        inner = {id(n) for f in functions for n in ast.walk(f) if n is not f}
        for node in ast.walk(tree):
            names = []
            if isinstance(node, ast.ImportFrom):
                base = node.module or ""
                if node.level:
                    base = ".".join(package.split(".")[: len(package.split(".")) - node.level + 1] + [base]).strip(".")
                names = [f"{base}.{a.name}" if _is_module(f"{base}.{a.name}") else base for a in node.names]
            elif isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.Call) and getattr(node.func, "id", None) == "LazyModule":
                names = [node.args[0].value]
            for name in names:
                if name == "emucompile" or name.startswith("emucompile."):
                    yield module, name, id(node) in inner


def _is_module(name):
    path = ROOT.joinpath(*name.split("."))
    return path.with_suffix(".py").exists() or (path / "__init__.py").exists()


def _layer(module):
    parts = module.split(".")
    return RANK["__init__"] if len(parts) == 1 else RANK[parts[1]]


def violations():
    found, graph = [], {}
    for importer, imported, in_function in _imports():
        if in_function and (importer, imported) not in ALLOWED_IN_FUNCTIONS:
            found.append(f"{importer} imports {imported} inside a function")
        if _layer(imported) > _layer(importer):
            found.append(f"{importer} imports {imported}, a higher layer")
        if importer != imported and not imported.startswith(importer + "."):
            graph.setdefault(importer, set()).add(imported)
    return sorted(set(found)) + [f"import cycle: {' -> '.join(c)}" for c in _cycles(graph)]


def _cycles(graph):
    """One cycle per strongly connected group of modules (Tarjan's algorithm, iteratively short)."""
    index, low, stack, on, groups = {}, {}, [], set(), []

    def visit(v):
        index[v] = low[v] = len(index)
        stack.append(v)
        on.add(v)
        for w in graph.get(v, ()):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            group = []
            while True:
                w = stack.pop()
                on.discard(w)
                group.append(w)
                if w == v:
                    break
            if len(group) > 1:
                groups.append(sorted(group))

    for v in list(graph):
        if v not in index:
            visit(v)
    return groups


def test_no_upward_import_no_cycle_no_hidden_import():
    assert violations() == []


def test_every_allowed_function_level_import_is_used_and_says_why():
    used = {(a, b) for a, b, inside in _imports() if inside}
    assert set(ALLOWED_IN_FUNCTIONS) <= used
    assert all(len(why) > 20 for why in ALLOWED_IN_FUNCTIONS.values())


def test_the_guide_lists_the_layers_in_this_order():
    guide = (ROOT / "DEVELOPERS.md").read_text("utf-8")
    listed = re.findall(r"^\| `(\w+)/?` \|", guide, re.M)
    order = [name for names in LAYERS for name in names.split() if name in listed]
    assert listed and listed == order
