"""The floor plan, checked from the code's own imports (read with ast, nothing is imported).

Rules (DEVELOPERS.md, "Layout"): no import loops; ``thermo`` never imports ``gpe``; only
``gpe.cli`` imports ``gpe.figures`` and nothing imports ``gpe.cli``; matplotlib only in
``gpe.figures``; no forwarding shims (a name is imported from the module that defines it, and
no module forwards names through a module-level ``__getattr__``); numerics never print; no private name is imported across modules.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGES = ("gpe", "thermo")


def _modules() -> dict[str, Path]:
    out = {}
    for pkg in PACKAGES:
        for path in sorted((ROOT / pkg).rglob("*.py")):
            parts = path.relative_to(ROOT).with_suffix("").parts
            name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
            out[name] = path
    return out


MODULES = _modules()
TREES = {name: ast.parse(path.read_text(encoding="utf-8")) for name, path in MODULES.items()}


def _resolve(module: str, node: ast.ImportFrom) -> str:
    if not node.level:
        return node.module or ""
    base = module.split(".")
    if MODULES[module].name != "__init__.py":
        base = base[:-1]
    base = base[:len(base) - node.level + 1]
    return ".".join(base + ([node.module] if node.module else []))


def _imports(module: str):
    """(imported module, names or None, line) for every import in ``module``, lazy ones too."""
    for node in ast.walk(TREES[module]):
        if isinstance(node, ast.Import):
            for alias in node.names:
                yield alias.name, None, node.lineno
        elif isinstance(node, ast.ImportFrom):
            target = _resolve(module, node)
            for alias in node.names:
                sub = f"{target}.{alias.name}"
                if sub in MODULES:          # ``from pkg import module``
                    yield sub, None, node.lineno
                else:
                    yield target, alias.name, node.lineno


def _internal_graph() -> dict[str, set[str]]:
    graph = {m: set() for m in MODULES}
    for m in MODULES:
        for target, _, _ in _imports(m):
            if target in MODULES and target != m:
                graph[m].add(target)
    return graph


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan)."""
    index, low, stack, on, out = {}, {}, [], set(), []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on.add(v)
        for w in graph[v]:
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


def _defined_names(module: str) -> set[str]:
    names = set()
    for node in TREES[module].body:
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef)):
            names.add(node.name)
        elif isinstance(node, (ast.Assign, ast.AnnAssign)):
            targets = node.targets if isinstance(node, ast.Assign) else [node.target]
            for t in targets:
                names.update(n.id for n in ast.walk(t) if isinstance(n, ast.Name))
    return names


def test_the_walk_sees_the_packages():
    # a walk that found nothing would pass every rule below
    assert len(MODULES) > 40 and "gpe.run.simulate" in MODULES and "thermo.sampler" in MODULES
    assert sum(len(v) for v in _internal_graph().values()) > 80


def test_no_import_loops():
    assert _cycles(_internal_graph()) == []


def test_the_cycle_finder_finds_a_planted_loop():
    graph = {"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}
    assert _cycles(graph) == [["a", "b", "c"]]


def test_thermo_never_imports_gpe():
    bad = [(m, t, line) for m in MODULES if m.startswith("thermo")
           for t, _, line in _imports(m) if t == "gpe" or t.startswith("gpe.")]
    assert bad == []


def test_only_the_cli_imports_figures_and_nothing_imports_the_cli():
    bad = []
    for m in MODULES:
        for t, _, line in _imports(m):
            if t.startswith("gpe.figures") and not (m.startswith("gpe.cli") or m.startswith("gpe.figures")):
                bad.append((m, t, line))
            if t.startswith("gpe.cli") and not m.startswith("gpe.cli"):
                bad.append((m, t, line))
            if t.split(".")[0] == "matplotlib" and not m.startswith("gpe.figures"):
                bad.append((m, t, line))
    assert bad == []


def test_names_are_imported_from_where_they_are_defined():
    """No re-exports: ``from gpe.x import name`` needs ``name`` defined in gpe.x itself."""
    bad, checked = [], 0
    for m in MODULES:
        for target, name, line in _imports(m):
            if name is None or target not in MODULES or name == "*":
                continue
            checked += 1
            if name not in _defined_names(target):
                bad.append(f"{m}:{line} imports {name} from {target}, which does not define it")
    assert bad == [] and checked > 100


def test_no_private_name_crosses_modules():
    """A name another module needs is public where it is defined (``_x`` stays in its module)."""
    bad = [f"{m}:{line} takes {name} from {target}" for m in MODULES
           for target, name, line in _imports(m)
           if target in MODULES and name is not None and name.startswith("_")
           and not name.startswith("__")]
    assert bad == []


def test_no_module_forwards_names_lazily():
    forwarding = [m for m, tree in TREES.items() for node in tree.body
                  if isinstance(node, ast.FunctionDef) and node.name == "__getattr__"]
    assert forwarding == []


def test_numerics_never_print():
    bad = [f"{m}:{node.lineno}" for m, tree in TREES.items() if not m.startswith("gpe.cli")
           for node in ast.walk(tree)
           if isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and node.func.id == "print"]
    assert bad == []


@pytest.mark.parametrize("package", ["gpe", "thermo"])
def test_package_faces_hold_no_names(package):
    """Subpackage ``__init__`` files are empty, so nothing is reachable by a second path."""
    for m, tree in TREES.items():
        if m.startswith(package + ".") and MODULES[m].name == "__init__.py":
            assert [n for n in tree.body if not isinstance(n, ast.Expr)] == [], m
