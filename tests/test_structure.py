"""The package's structure: no module of python/boxwood imports another in a loop.

Every import counts, wherever it is written: at the top of a module, inside a function (a
deferred import is still a dependency), or under ``if TYPE_CHECKING:``. An import of a
submodule is an edge to that submodule; ``from . import name`` is an edge to the submodule
``name`` when there is one, else to the package. Parent packages that Python initialises on
the way are not edges: a package's ``__init__`` re-exporting its submodules is no loop.
"""

from __future__ import annotations

import ast
import inspect
from pathlib import Path

PACKAGE_ROOT = Path(__file__).resolve().parent.parent / "python" / "boxwood"


def module_names(root: Path, package: str) -> dict[str, Path]:
    """Dotted module name -> file, for every .py file under `root`, and for every compiled
    module that has only a stub (.pyi), which imports nothing of ours."""
    modules = {}
    for path in sorted([*root.rglob("*.py"), *root.rglob("*.pyi")]):
        if path.suffix == ".pyi" and path.with_suffix(".py").exists():
            continue
        parts = list(path.relative_to(root).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        modules[".".join([package, *parts])] = path
    return modules


def _base(module: str, path: Path, level: int) -> str:
    """The package a relative import of `level` dots in `module` starts from."""
    package = module if path.name == "__init__.py" else module.rpartition(".")[0]
    for _ in range(level - 1):
        package = package.rpartition(".")[0]
    return package


def imports_of(module: str, path: Path, modules: dict[str, Path]) -> set[str]:
    """The package's modules that `module` imports, anywhere in its source."""
    found: set[str] = set()
    if path.suffix == ".pyi":
        return found
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"), str(path))):
        if isinstance(node, ast.Import):
            targets = [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = _base(module, path, node.level)
                target = f"{base}.{node.module}" if node.module else base
            else:
                target = node.module or ""
            # `from X import name`: the submodule X.name if there is one, else X itself.
            targets = [f"{target}.{a.name}" for a in node.names if f"{target}.{a.name}" in modules]
            if len(targets) < len(node.names):
                targets.append(target)
        else:
            continue
        for target in targets:
            # `import a.b.c` names a.b.c; keep the longest prefix that is one of our modules.
            while target and target not in modules:
                target = target.rpartition(".")[0]
            if target and target != module:
                found.add(target)
    return found


def import_graph(root: Path, package: str) -> dict[str, set[str]]:
    modules = module_names(root, package)
    return {name: imports_of(name, path, modules) for name, path in modules.items()}


def find_cycle(graph: dict[str, set[str]]) -> list[str] | None:
    """One import loop as ``[a, b, ..., a]``, or None (a depth-first search)."""
    state: dict[str, str] = {}  # "open" while on the current path, "done" after
    path: list[str] = []

    def visit(node: str) -> list[str] | None:
        state[node] = "open"
        path.append(node)
        for target in sorted(graph.get(node, ())):
            if state.get(target) == "open":
                return path[path.index(target) :] + [target]
            if target not in state:
                cycle = visit(target)
                if cycle:
                    return cycle
        path.pop()
        state[node] = "done"
        return None

    for node in sorted(graph):
        if node not in state:
            cycle = visit(node)
            if cycle:
                return cycle
    return None


def test_the_package_has_no_import_loop():
    graph = import_graph(PACKAGE_ROOT, "boxwood")
    # The graph is the real one: the modules are there and their known imports are seen.
    assert {"boxwood._tree", "boxwood.cli._main", "boxwood.dask._sharded"} <= set(graph)
    assert "boxwood._persist" in graph["boxwood._tree"]
    assert "boxwood._frame_kinds" in graph["boxwood._tree"]  # a function-local import
    assert "boxwood.cli._exits" in graph["boxwood.cli._main"]
    cycle = find_cycle(graph)
    assert cycle is None, "import loop: " + " -> ".join(cycle or [])


def test_the_loop_finder_sees_loops_through_local_and_type_checking_imports(tmp_path):
    pkg = tmp_path / "pkg"
    (pkg / "sub").mkdir(parents=True)
    (pkg / "__init__.py").write_text("from .a import f\n")
    (pkg / "a.py").write_text("def f():\n    from .sub import b\n    return b\n")
    (pkg / "sub" / "__init__.py").write_text("")
    (pkg / "sub" / "b.py").write_text(
        "from typing import TYPE_CHECKING\nif TYPE_CHECKING:\n    from .. import c\n"
    )
    (pkg / "c.py").write_text("import pkg.a\nfrom ._compiled import g\n")
    (pkg / "_compiled.pyi").write_text("from . import a\n")  # a stub: not a runtime import
    graph = import_graph(pkg, "pkg")
    assert graph["pkg.a"] == {"pkg.sub.b"} and graph["pkg.sub.b"] == {"pkg.c"}
    assert graph["pkg.c"] == {"pkg.a", "pkg._compiled"} and graph["pkg._compiled"] == set()
    assert find_cycle(graph) == ["pkg.a", "pkg.sub.b", "pkg.c", "pkg.a"]
    (pkg / "c.py").write_text("import numpy\n")
    assert find_cycle(import_graph(pkg, "pkg")) is None


def _box_methods() -> list[tuple[str, object]]:
    """Every public function and method of boxwood that takes a box's four bounds."""
    import boxwood
    import boxwood._accessor
    import boxwood.dask

    owners = [
        boxwood,
        boxwood.RangeTree,
        boxwood._accessor.BoxwoodAccessor,
        boxwood.dask.ShardedTree,
        boxwood.dask.BroadcastTree,
    ]
    found = []
    for owner in owners:
        for name in dir(owner):
            member = getattr(owner, name)
            if name.startswith("_") or not callable(member):
                continue
            try:
                parameters = inspect.signature(member).parameters
            except (TypeError, ValueError):
                continue
            if {"x_lo", "x_hi", "y_lo", "y_hi"} <= set(parameters):
                found.append((f"{getattr(owner, '__name__', owner)}.{name}", member))
    return found


def test_every_method_taking_a_box_describes_its_bounds_from_the_one_description():
    from boxwood import _bounds

    methods = _box_methods()
    assert len(methods) >= 19  # RangeTree 7, box_join 2, accessor 3, ShardedTree 4, Broadcast 3
    shared = [inspect.cleandoc(_bounds.ARRAY_BOUNDS), inspect.cleandoc(_bounds.FRAME_BOUNDS)]
    for name, method in methods:
        doc = inspect.getdoc(method) or ""
        assert "{" + "array bounds}" not in doc and "{" + "frame bounds}" not in doc, name
        assert any(text in doc for text in shared), f"{name} does not describe its bounds"
