"""The package's layout keeps data flowing one way: no import circles (imports inside functions
count too) and no module importing another module's underscore names."""

import ast
from pathlib import Path

import topology

PACKAGE = Path(topology.__file__).parent


def _modules() -> dict:
    out = {}
    for path in PACKAGE.rglob("*.py"):
        parts = ("topology",) + path.relative_to(PACKAGE).with_suffix("").parts
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = path
    return out


def _target(node: ast.ImportFrom, module: str, is_package: bool) -> str:
    if node.level == 0:
        return node.module or ""
    base = module.split(".") if is_package else module.split(".")[:-1]
    base = base[: len(base) - (node.level - 1)]
    return ".".join(base + ([node.module] if node.module else []))


def _graph():
    mods = _modules()
    graph = {m: set() for m in mods}
    private = []
    for m, path in mods.items():
        is_package = path.name == "__init__.py"
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.ImportFrom):
                target = _target(node, m, is_package)
                if not target.startswith("topology"):
                    continue
                for alias in node.names:
                    sub = f"{target}.{alias.name}"
                    if sub in mods:
                        graph[m].add(sub)
                    elif target in mods:
                        graph[m].add(target)
                        if alias.name.startswith("_") and not alias.name.endswith("__") and target != m:
                            private.append(f"{m} imports {target}.{alias.name}")
            elif isinstance(node, ast.Import):
                graph[m].update(a.name for a in node.names if a.name in mods)
    # a package's own members importing the package (its __init__ re-exports) is not a circle
    graph = {m: {t for t in ts if not m.startswith(t + ".")} for m, ts in graph.items()}
    return graph, private


def _circles(graph: dict) -> list:
    """Strongly connected components of more than one module (Tarjan 1972)."""
    index, low, stack, on, found = {}, {}, [], set(), []

    def visit(v):
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
                found.append(sorted(comp))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return found


def test_the_walk_sees_the_package():
    graph, _ = _graph()
    assert {"topology.run", "topology.run.plan", "topology.search.engine", "topology.config"} <= set(graph)
    assert "topology.run.tasks" in graph["topology.run.scan"]  # relative imports resolved
    assert _circles({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}) == [["a", "b", "c"]]


def test_no_import_circles():
    graph, _ = _graph()
    assert _circles(graph) == []


def test_no_module_imports_another_modules_private_names():
    _, private = _graph()
    assert private == []
