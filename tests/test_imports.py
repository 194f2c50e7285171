"""The house: every import inside the package points downstream, and the programs on top (the
command line, the demo, the watched inbox) reach the library through the Python API only."""

from __future__ import annotations

import ast
from pathlib import Path

import networkx as nx

PACKAGE = Path(__file__).resolve().parent.parent / "layoutcheck"
#: Modules on top of the API: they may import the API, each other and the package's version.
ON_TOP = {"layoutcheck.cli", "layoutcheck.demo", "layoutcheck.watch"}


def module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def import_graph() -> nx.DiGraph:
    """Module -> module it imports (at top level or inside a function), within the package."""
    modules = {module_name(p): p for p in PACKAGE.rglob("*.py")}
    g = nx.DiGraph()
    g.add_nodes_from(modules)
    for name, path in modules.items():
        package = name if path.name == "__init__.py" else name.rsplit(".", 1)[0]
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            targets = []
            if isinstance(node, ast.ImportFrom):
                if node.level:
                    base = package.split(".")
                    base = base[: len(base) - (node.level - 1)]
                    target = ".".join(base + ([node.module] if node.module else []))
                else:
                    target = node.module or ""
                for alias in node.names:  # "from . import build" names a submodule
                    sub = f"{target}.{alias.name}"
                    targets.append(sub if sub in modules else target)
            elif isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            for t in targets:
                if t in modules and t != name:
                    g.add_edge(name, t)
    return g


def test_the_graph_is_read_from_the_source():
    g = import_graph()
    # Facts of this package a wrong parser would miss: the API imports the batch stage, the batch
    # stage the check stage, and the report package its own build module.
    assert g.has_edge("layoutcheck.api", "layoutcheck.batch")
    assert g.has_edge("layoutcheck.batch", "layoutcheck.check")
    assert g.has_edge("layoutcheck.report", "layoutcheck.report.build")


def test_no_module_imports_one_above_it():
    g = import_graph()
    cycles = list(nx.simple_cycles(g))  # networkx, not ours: any cycle is an import pointing upstream
    assert cycles == []


def test_programs_on_top_use_the_api_only():
    g = import_graph()
    allowed = ON_TOP | {"layoutcheck", "layoutcheck.api"}
    for top in ON_TOP:
        assert set(g.successors(top)) <= allowed, (top, set(g.successors(top)) - allowed)
    # And nothing below imports them.
    for top in ON_TOP:
        assert set(g.predecessors(top)) <= ON_TOP, (top, set(g.predecessors(top)))


def test_a_planted_cycle_is_found(tmp_path):
    g = import_graph()
    g.add_edge("layoutcheck.check", "layoutcheck.cli")  # a stage importing the command line
    assert any("layoutcheck.cli" in c and "layoutcheck.check" in c for c in nx.simple_cycles(g))
