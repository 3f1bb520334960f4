"""The package's layers, checked over every module's imports.

A package may import from the packages below it and from itself, never from above,
and no chain of imports may come back to where it started. The layers are written
once here and drawn in DEVELOPERS.md; moving a module means moving it in both.
"""

from __future__ import annotations

import ast
from collections.abc import Mapping
from pathlib import Path

import pytest

import windvane

PACKAGE_DIR = Path(windvane.__file__).parent

# Bottom first. A module belongs to the first entry that is its name or a parent of it.
LAYERS: tuple[tuple[str, ...], ...] = (
    ("windvane.errors", "windvane.keys", "windvane.durations"),
    ("windvane.inputs",),
    ("windvane.kinds",),
    ("windvane.definitions",),
    ("windvane.state",),
    ("windvane.store",),
    ("windvane.models",),
    ("windvane.engine",),
    ("windvane.ingest",),
    ("windvane.serving",),
    ("windvane.cli", "windvane.__main__"),
    ("windvane",),
)


def module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE_DIR.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def imports_of(path: Path, modules: set[str]) -> set[str]:
    """Modules of the package that ``path`` imports, wherever the import statement stands."""
    name = module_name(path)
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            targets = [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                anchor = package.split(".")[: len(package.split(".")) - node.level + 1]
                base = ".".join([*anchor, base] if base else anchor)
            targets = [f"{base}.{alias.name}" for alias in node.names] + [base]
        else:
            continue
        for target in targets:
            while target and target not in modules:
                target = target.rpartition(".")[0]
            if target and target != name:
                found.add(target)
    return found


def import_graph() -> dict[str, set[str]]:
    paths = sorted(PACKAGE_DIR.rglob("*.py"))
    modules = {module_name(p) for p in paths}
    graph = {module_name(p): imports_of(p, modules) for p in paths}
    # Importing a submodule runs its parent packages' __init__ first; that is not an
    # edge the author wrote, so only the package itself counts as a target of its own.
    return graph


def layer_of(module: str) -> int:
    best = -1, -1
    for index, layer in enumerate(LAYERS):
        for prefix in layer:
            if module == prefix or module.startswith(prefix + "."):
                best = max(best, (len(prefix), index))
    if best[1] < 0:
        raise AssertionError(f"{module} belongs to no layer: add it to LAYERS")
    return best[1]


def upward_imports(graph: Mapping[str, set[str]]) -> list[str]:
    return sorted(
        f"{source} (layer {layer_of(source)}) imports {target} (layer {layer_of(target)})"
        for source, targets in graph.items()
        for target in targets
        if layer_of(target) > layer_of(source)
    )


def cycles(graph: Mapping[str, set[str]]) -> list[list[str]]:
    """Every strongly connected group of more than one module (Tarjan's algorithm)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found: list[list[str]] = []

    def visit(node: str) -> None:
        index[node] = low[node] = len(index)
        stack.append(node)
        on_stack.add(node)
        for target in sorted(graph.get(node, ())):
            if target not in index:
                visit(target)
                low[node] = min(low[node], low[target])
            elif target in on_stack:
                low[node] = min(low[node], index[target])
        if low[node] == index[node]:
            group = []
            while True:
                member = stack.pop()
                on_stack.discard(member)
                group.append(member)
                if member == node:
                    break
            if len(group) > 1 or node in graph.get(node, ()):
                found.append(sorted(group))

    for node in sorted(graph):
        if node not in index:
            visit(node)
    return found


# The only modules that hold a Redis client and so may see its exceptions: the store
# package and the event stream's two modules. Each turns the client's errors into
# windvane's at its edge (``store.redis_errors``), so nothing above ever sees one.
REDIS_CLIENT_USERS = ("windvane.store", "windvane.ingest.event_stream", "windvane.ingest.worker")


def redis_users() -> list[str]:
    users = []
    for path in sorted(PACKAGE_DIR.rglob("*.py")):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            names = []
            if isinstance(node, ast.Import):
                names = [alias.name for alias in node.names]
            elif isinstance(node, ast.ImportFrom) and not node.level:
                names = [node.module or ""]
            if any(n.split(".")[0] in ("redis", "fakeredis", "hiredis") for n in names):
                users.append(module_name(path))
                break
    return users


def test_only_the_store_and_the_stream_hold_a_redis_client() -> None:
    outside = [
        m
        for m in redis_users()
        if not any(m == allowed or m.startswith(allowed + ".") for allowed in REDIS_CLIENT_USERS)
    ]
    assert outside == []
    assert "windvane.store.redis_errors" in redis_users()


def test_no_module_imports_from_a_layer_above_it() -> None:
    assert upward_imports(import_graph()) == []


def test_no_import_cycles() -> None:
    assert cycles(import_graph()) == []


def test_every_module_has_a_layer() -> None:
    for module in import_graph():
        layer_of(module)


@pytest.mark.parametrize(
    ("graph", "upward", "circles"),
    [
        ({"windvane.errors": set(), "windvane.engine": {"windvane.errors"}}, 0, 0),
        ({"windvane.errors": {"windvane.engine"}, "windvane.engine": set()}, 1, 0),
        (
            {
                "windvane.ingest.a": {"windvane.ingest.b"},
                "windvane.ingest.b": {"windvane.ingest.a"},
            },
            0,
            1,
        ),
    ],
)
def test_the_check_itself_sees_upward_imports_and_cycles(
    graph: dict[str, set[str]], upward: int, circles: int
) -> None:
    assert len(upward_imports(graph)) == upward
    assert len(cycles(graph)) == circles
