"""The package's shape: no import cycle between its modules (imports inside functions
count too), no family branches or DataFrame.attrs outside their places, and the store and
the read side never import scikit-learn."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path


PACKAGE = Path(__file__).resolve().parent.parent / "runner"


def _module_name(path: Path) -> str:
    rel = path.relative_to(PACKAGE.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _imports(path: Path) -> set[str]:
    """Every runner module this file imports, at any depth of the code."""
    name = _module_name(path)
    package = name if path.name == "__init__.py" else name.rsplit(".", 1)[0]
    found = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[:len(base) - node.level + 1]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target.startswith("runner"):
                folder = PACKAGE.parent / target.replace(".", "/")
                modules = {a.name for a in node.names if (folder / f"{a.name}.py").exists()
                           or (folder / a.name / "__init__.py").exists()}
                found |= {f"{target}.{m}" for m in modules}  # `from . import x`: module x
                if len(modules) < len(node.names):
                    found.add(target)
        elif isinstance(node, ast.Import):
            found |= {a.name for a in node.names if a.name.startswith("runner")}
    return found - {name}


def _graph() -> dict[str, set[str]]:
    modules = {_module_name(p): p for p in PACKAGE.rglob("*.py")}
    graph = {}
    for name, path in modules.items():
        deps = set()
        for target in _imports(path):
            while target and target not in modules:
                target = target.rsplit(".", 1)[0] if "." in target else ""
            if target and target != name and target != "runner":
                deps.add(target)
        graph[name] = deps
    return graph


def _cycle(graph: dict[str, set[str]]) -> list[str] | None:
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(node):
        state[node] = 1
        stack.append(node)
        for dep in sorted(graph.get(node, ())):
            if state.get(dep) == 1:
                return stack[stack.index(dep):] + [dep]
            if dep not in state:
                found = visit(dep)
                if found:
                    return found
        stack.pop()
        state[node] = 2
        return None

    for node in sorted(graph):
        if node not in state:
            found = visit(node)
            if found:
                return found
    return None


def test_no_import_cycle():
    graph = _graph()
    assert "runner.write.engine" in graph and len(graph) > 20
    assert _cycle(graph) is None, " -> ".join(_cycle(graph))


def test_the_cycle_finder_finds_a_cycle():
    assert _cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]
    assert _cycle({"a": {"b"}, "b": set()}) is None


READ_SIDE = ["runner.store", "runner.read.queries", "runner.read.explained",
             "runner.read.past_queries", "runner.read.results", "runner.read.views",
             "runner.read.model_views", "runner.read.past_views",
             "runner.read.plots", "runner.read.tree_figures", "runner.read.placing",
             "runner.read.report"]


def test_store_and_read_side_do_not_import_scikit_learn():
    code = ("import sys\n" + "".join(f"import {m}\n" for m in READ_SIDE) +
            "print('sklearn' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "False"


def test_no_family_branches_outside_the_families():
    offenders = [f"{p.relative_to(PACKAGE)}:{i}" for p in PACKAGE.rglob("*.py")
                 if "families" not in p.parts
                 for i, line in enumerate(p.read_text().splitlines(), 1)
                 if "family ==" in line or "family !=" in line]
    assert offenders == []
    assert all(".attrs" not in p.read_text() for p in PACKAGE.rglob("*.py"))


SQL_MODULES = {"queries.py", "explained.py", "past_queries.py"}
"""The read side's SQL lives in these modules (DEVELOPERS.md, Conventions)."""


def test_read_side_sql_lives_in_its_query_modules():
    def sql_text(node) -> bool:
        return isinstance(node, ast.JoinedStr) or (
            isinstance(node, ast.Constant) and isinstance(node.value, str)) or (
            isinstance(node, ast.BinOp) and (sql_text(node.left) or sql_text(node.right)))

    offenders = [f"{p.name}:{node.lineno}" for p in (PACKAGE / "read").glob("*.py")
                 if p.name not in SQL_MODULES
                 for node in ast.walk(ast.parse(p.read_text()))
                 if isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute)
                 and node.func.attr in ("query", "rows") and node.args
                 and sql_text(node.args[0])]
    assert offenders == []
