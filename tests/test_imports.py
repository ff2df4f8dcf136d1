"""The import graph, built from the source with ``ast``: no cycles; sim imports analysis only
in its command line.

Every import counts, at module level or inside a function, so a cycle cannot
hide in a lazy import. Importing ``a.b.c`` also imports the packages ``a`` and
``a.b`` (their ``__init__`` runs first), so an edge to a module is an edge to
each package on its path as well.
"""

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
PACKAGES = ("sim", "analysis")


def _module_name(path: Path, root: Path) -> str:
    parts = list(path.relative_to(root).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def import_graph(root: Path = ROOT) -> dict[str, set[str]]:
    """Module -> the project modules it imports (anywhere in its body)."""
    files = {_module_name(p, root): p for pkg in PACKAGES for p in (root / pkg).rglob("*.py")}
    graph = {}
    for name, path in files.items():
        is_package = path.name == "__init__.py"
        targets = set()
        for node in ast.walk(ast.parse(path.read_text(), str(path))):
            if isinstance(node, ast.Import):
                targets |= {alias.name for alias in node.names}
            elif isinstance(node, ast.ImportFrom):
                if node.level:
                    base = name.split(".") if is_package else name.split(".")[:-1]
                    base = base[: len(base) - (node.level - 1)]
                    module = ".".join(base + ([node.module] if node.module else []))
                else:
                    module = node.module
                targets.add(module)
                targets |= {f"{module}.{alias.name}" for alias in node.names}
        edges = set()
        for target in targets:
            parts = target.split(".")
            for i in range(1, len(parts) + 1):  # the packages on the way run first
                prefix = ".".join(parts[:i])
                if prefix in files and prefix != name:
                    edges.add(prefix)
        graph[name] = edges
    return graph


def _is_ancestor(package: str, module: str) -> bool:
    return module.startswith(package + ".")


def cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components of more than one module (Tarjan 1972).

    An edge from a module to a package it belongs to is left out: Python runs
    the package's ``__init__`` before the module, so it is not a cycle unless
    the ``__init__`` imports the module back and the module needs a name the
    ``__init__`` has not defined yet, which the tests' imports would show.
    """
    edges = {m: {t for t in ts if not _is_ancestor(t, m)} for m, ts in graph.items()}
    index, low, stack, on_stack, out = {}, {}, [], set(), []

    def visit(v):
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in edges[v]:
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
            if len(component) > 1:
                out.append(sorted(component))

    for v in sorted(edges):
        if v not in index:
            visit(v)
    return out


def test_no_import_cycles():
    assert cycles(import_graph()) == []


def test_sim_imports_analysis_only_in_the_command_line():
    offenders = {m: sorted(t for t in ts if t.split(".")[0] == "analysis")
                 for m, ts in import_graph().items()
                 if m.split(".")[0] == "sim" and not (m == "sim.cli" or m.startswith("sim.cli."))}
    assert {m: ts for m, ts in offenders.items() if ts} == {}


def test_the_graph_sees_imports_inside_functions(tmp_path):
    # the checker itself: a cycle made only by an import inside a function is found
    for pkg in PACKAGES:
        (tmp_path / pkg).mkdir()
        (tmp_path / pkg / "__init__.py").write_text("")
    (tmp_path / "sim" / "a.py").write_text("from .b import x\n")
    (tmp_path / "sim" / "b.py").write_text("def f():\n    from sim.a import y\n")
    (tmp_path / "analysis" / "c.py").write_text("import sim.a\n")
    graph = import_graph(tmp_path)
    assert graph["sim.a"] == {"sim", "sim.b"} and "sim.a" in graph["sim.b"]
    assert cycles(graph) == [["sim.a", "sim.b"]]
