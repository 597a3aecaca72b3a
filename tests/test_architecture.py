"""The shape of the code: the import graph of models/ and service/, read with ``ast``.

The graph has one node per module (a package is its ``__init__``). ``import a.b`` is an
edge to ``a.b``; ``from a.b import c`` is an edge to ``a.b.c`` when that is a module and
to ``a.b`` otherwise; relative imports are resolved against the importing package, and
imports anywhere in a file count (inside functions and ``if TYPE_CHECKING:`` too). Only
edges between modules of models/ and service/ are kept.

Rules: no import cycle; the library (models) never imports the service; the service uses
the library only through its public names (``from models import Name`` or
``import models``, with names in ``models.__all__``); the service's code lives in
feature packages (directly in service/ only ``__init__.py`` and ``cli.py``); no module
is over 500 lines; and the optimisers of the library are called from one service module.
"""

from __future__ import annotations

import ast
from collections.abc import Iterator
from dataclasses import dataclass, field
from functools import cache
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGES = ("models", "service")
MAX_LINES = 500
SERVICE_TOP_LEVEL = {"__init__.py", "cli.py"}
OPTIMISERS = ("optimal_price", "optimal_family_prices", "move_evidence")
PRICING_MODULE = "service.pricing.recommendations"


@dataclass
class Module:
    name: str
    path: Path
    is_package: bool
    tree: ast.Module
    imports: list[tuple[str, int]] = field(default_factory=list)  # (target, line)


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _python_files(package: str) -> Iterator[Path]:
    for path in sorted((ROOT / package).rglob("*.py")):
        if "__pycache__" not in path.parts:
            yield path


@cache
def modules() -> dict[str, Module]:
    found: dict[str, Module] = {}
    for package in PACKAGES:
        for path in _python_files(package):
            name = _module_name(path)
            tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
            found[name] = Module(name, path, path.name == "__init__.py", tree)
    for module in found.values():
        module.imports = list(_imports(module, found))
    return found


def _resolve_from(module: Module, node: ast.ImportFrom) -> str:
    """The module named by a ``from ... import`` (relative levels resolved)."""
    if node.level == 0:
        return node.module or ""
    package = module.name if module.is_package else module.name.rpartition(".")[0]
    parts = package.split(".")
    base = ".".join(parts[: len(parts) - (node.level - 1)])
    return f"{base}.{node.module}" if node.module else base


def _internal(name: str, known: dict[str, Module]) -> str | None:
    """``name`` or its longest prefix that is a module of ours; None when outside."""
    parts = name.split(".")
    while parts:
        candidate = ".".join(parts)
        if candidate in known:
            return candidate
        parts.pop()
    return None


def _imports(module: Module, known: dict[str, Module]) -> Iterator[tuple[str, int]]:
    for node in ast.walk(module.tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                target = _internal(alias.name, known)
                if target:
                    yield target, node.lineno
        elif isinstance(node, ast.ImportFrom):
            source = _resolve_from(module, node)
            for alias in node.names:
                submodule = f"{source}.{alias.name}"
                target = submodule if submodule in known else _internal(source, known)
                if target:
                    yield target, node.lineno


def graph() -> dict[str, set[str]]:
    return {name: {t for t, _ in m.imports} for name, m in modules().items()}


def _strongly_connected(edges: dict[str, set[str]]) -> list[list[str]]:
    """Tarjan's strongly connected components (iterative)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    components: list[list[str]] = []
    counter = 0
    for start in sorted(edges):
        if start in index:
            continue
        work = [(start, iter(sorted(edges[start])))]
        index[start] = low[start] = counter
        counter += 1
        stack.append(start)
        on_stack.add(start)
        while work:
            node, children = work[-1]
            for child in children:
                if child not in index:
                    index[child] = low[child] = counter
                    counter += 1
                    stack.append(child)
                    on_stack.add(child)
                    work.append((child, iter(sorted(edges.get(child, ())))))
                    break
                if child in on_stack:
                    low[node] = min(low[node], index[child])
            else:
                work.pop()
                if work:
                    parent = work[-1][0]
                    low[parent] = min(low[parent], low[node])
                if low[node] == index[node]:
                    component = []
                    while True:
                        member = stack.pop()
                        on_stack.discard(member)
                        component.append(member)
                        if member == node:
                            break
                    components.append(sorted(component))
    return components


def _cycle_in(component: list[str], edges: dict[str, set[str]]) -> list[str]:
    """One cycle through the first module of a strongly connected component."""
    members = set(component)
    start = component[0]
    # Breadth-first from start's successors back to start, inside the component.
    previous: dict[str, str] = {}
    frontier = [start]
    while frontier:
        following = []
        for node in frontier:
            for child in sorted(edges[node] & members):
                if child == start:
                    path = [node]
                    while path[-1] != start:
                        path.append(previous[path[-1]])
                    return [start, *reversed(path[:-1]), start]
                if child not in previous:
                    previous[child] = node
                    following.append(child)
        frontier = following
    return [start]


def import_cycles() -> list[str]:
    """One cycle per tangle of mutually importing modules, and the tangle's other members."""
    edges = graph()
    cycles = []
    for component in _strongly_connected(edges):
        if len(component) > 1 or component[0] in edges[component[0]]:
            cycle = _cycle_in(component, edges)
            others = sorted(set(component) - set(cycle))
            also = f" (the same tangle also holds {', '.join(others)})" if others else ""
            cycles.append(" -> ".join(cycle) + also)
    return cycles


def _where(module: Module, line: int) -> str:
    return f"{module.path.relative_to(ROOT)}:{line}"


def models_public_names() -> set[str]:
    tree = modules()["models"].tree
    for node in tree.body:
        if isinstance(node, ast.Assign) and any(
            isinstance(t, ast.Name) and t.id == "__all__" for t in node.targets
        ):
            return set(ast.literal_eval(node.value))
    raise AssertionError("models/__init__.py has no __all__")


def _bound_library_names(module: Module) -> tuple[dict[str, str], set[str]]:
    """Names bound to library objects ({local: library name}) and to the library itself."""
    names: dict[str, str] = {}
    library: set[str] = set()
    for node in ast.walk(module.tree):
        if isinstance(node, ast.ImportFrom) and _resolve_from(module, node).split(".")[0] == (
            "models"
        ):
            for alias in node.names:
                names[alias.asname or alias.name] = alias.name
        elif isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name == "models":
                    library.add(alias.asname or "models")
    return names, library


# -- the rules ----------------------------------------------------------------------------


def test_the_graph_is_read() -> None:
    found = modules()
    assert {"models", "service", "service.cli", PRICING_MODULE} <= set(found)
    assert "models" in graph()[PRICING_MODULE]


def test_edges_follow_the_stated_rules() -> None:
    def package(name: str) -> Module:
        return Module(name, ROOT / "x.py", True, ast.parse(""))

    known = {n: package(n) for n in ("a", "a.b")}
    known |= {n: Module(n, ROOT / "x.py", False, ast.parse("")) for n in ("a.b.c", "a.e")}
    source = (
        "import a.b\n"  # a.b
        "from a.b import c\n"  # a.b.c: a module
        "from a.b import name\n"  # a.b: not a module
        "from . import c as c2\n"  # a.b.c, relative to the package a.b
        "from .c import thing\n"  # a.b.c
        "from ..e import x\n"  # a.e
        "import numpy\n"  # outside: no edge
        "def f():\n"
        "    from a import e\n"  # a.e, inside a function
    )
    module = Module("a.b.d", ROOT / "x.py", False, ast.parse(source))
    assert [t for t, _ in _imports(module, known)] == [
        "a.b", "a.b.c", "a.b", "a.b.c", "a.b.c", "a.e", "a.e"
    ]  # fmt: skip
    # In a package's __init__, "." is the package itself.
    init = Module("a.b", ROOT / "x.py", True, ast.parse("from . import c"))
    assert [t for t, _ in _imports(init, known)] == ["a.b.c"]


def test_no_import_cycle() -> None:
    cycles = import_cycles()
    assert not cycles, "import cycles:\n" + "\n".join(cycles)


def test_the_library_never_imports_the_service() -> None:
    wrong = [
        f"{_where(m, line)}: {m.name} imports {target}"
        for m in modules().values()
        if m.name.split(".")[0] == "models"
        for target, line in m.imports
        if target.split(".")[0] == "service"
    ]
    assert not wrong, "\n".join(wrong)


def test_the_service_uses_only_the_public_names_of_the_library() -> None:
    public = models_public_names()
    wrong = []
    for m in modules().values():
        if m.name.split(".")[0] != "service":
            continue
        _, library = _bound_library_names(m)
        for node in ast.walk(m.tree):
            if isinstance(node, ast.ImportFrom):
                source = _resolve_from(m, node)
                if source.startswith("models."):
                    wrong.append(f"{_where(m, node.lineno)}: from {source} import ...")
                elif source == "models":
                    for alias in node.names:
                        if alias.name not in public:
                            where = _where(m, node.lineno)
                            wrong.append(f"{where}: models.{alias.name} is private")
            elif isinstance(node, ast.Import):
                for alias in node.names:
                    if alias.name.startswith("models."):
                        wrong.append(f"{_where(m, node.lineno)}: import {alias.name}")
            elif (
                isinstance(node, ast.Attribute)
                and isinstance(node.value, ast.Name)
                and node.value.id in library
                and node.attr not in public
            ):
                wrong.append(f"{_where(m, node.lineno)}: models.{node.attr} is private")
    assert not wrong, "\n".join(wrong)


def test_service_code_lives_in_feature_packages() -> None:
    loose = sorted(
        p.name for p in (ROOT / "service").glob("*.py") if p.name not in SERVICE_TOP_LEVEL
    )
    assert not loose, f"modules directly in service/: {loose}"


def test_no_module_is_over_500_lines() -> None:
    long = {
        str(m.path.relative_to(ROOT)): n
        for m in modules().values()
        if (n := len(m.path.read_text(encoding="utf-8").splitlines())) > MAX_LINES
    }
    assert not long, f"over {MAX_LINES} lines: {long}"


@pytest.mark.parametrize("function", OPTIMISERS)
def test_one_service_module_calls_the_optimiser(function: str) -> None:
    referring: dict[str, int] = {}  # module -> number of calls
    for m in modules().values():
        if m.name.split(".")[0] != "service":
            continue
        names, library = _bound_library_names(m)
        local = {alias for alias, original in names.items() if original == function}
        refers, calls = False, 0
        for node in ast.walk(m.tree):
            if isinstance(node, ast.ImportFrom) and any(a.name == function for a in node.names):
                refers = refers or _resolve_from(m, node).split(".")[0] == "models"
            is_name = isinstance(node, ast.Name) and node.id in local
            is_attribute = (
                isinstance(node, ast.Attribute)
                and node.attr == function
                and isinstance(node.value, ast.Name)
                and node.value.id in library
            )
            if is_name or is_attribute:
                refers = True
            if isinstance(node, ast.Call):
                func = node.func
                if (isinstance(func, ast.Name) and func.id in local) or (
                    isinstance(func, ast.Attribute)
                    and func.attr == function
                    and isinstance(func.value, ast.Name)
                    and func.value.id in library
                ):
                    calls += 1
        if refers:
            referring[m.name] = calls
    assert list(referring) == [PRICING_MODULE], referring
    assert referring[PRICING_MODULE] >= 1, f"{PRICING_MODULE} imports {function} but never calls it"
