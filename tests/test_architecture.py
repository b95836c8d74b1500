"""The package's shape: data flows down, the checker stands apart, modules stay small.

These read the source with `ast` (no import runs), so a lazy import inside a function
counts as much as one at the top of a module.
"""

from __future__ import annotations

import ast
from pathlib import Path

import networkx as nx

PACKAGE = Path(__file__).resolve().parents[1] / "zonedesign"
MAX_LINES = 600
# the tier runner and the optimiser: the checker must never share their code path
NOT_FOR_VERIFY = ("zonedesign.search", "zonedesign.tiers.design", "zonedesign.redraw", "zonedesign.tiers")


def _module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _modules() -> dict[str, Path]:
    return {_module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def _imports(name: str, path: Path, known: set[str]) -> set[str]:
    """Package modules that `name` imports anywhere in its body (absolute or relative)."""
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    is_pkg = path.name == "__init__.py"
    base = name.split(".") if is_pkg else name.split(".")[:-1]
    found: set[str] = set()
    for node in ast.walk(tree):
        targets: list[str] = []
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                root = ".".join(base[: len(base) - node.level + 1])
                mod = f"{root}.{node.module}" if node.module else root
            else:
                mod = node.module or ""
            targets = [mod] + [f"{mod}.{a.name}" for a in node.names]
        for t in targets:
            # the longest known module that `t` names or lies inside
            while t and t not in known:
                t = t.rpartition(".")[0]
            if t and t != name:
                found.add(t)
    return found


def _import_graph() -> nx.DiGraph:
    mods = _modules()
    known = set(mods)
    g = nx.DiGraph()
    g.add_nodes_from(known)
    for name, path in mods.items():
        for target in _imports(name, path, known):
            # a package's own __init__ re-exporting its children is not a cycle of logic
            if name.startswith(target + ".") or target.startswith(name + "."):
                continue
            g.add_edge(name, target)
    return g


def test_the_scan_sees_the_package():
    # guards the scans below against reading nothing and passing vacuously
    g = _import_graph()
    assert "zonedesign.verify.checks" in g
    assert g.number_of_edges() > 50
    # and the scans below reach the tier runner, which must lean on the checker only one way
    assert {"zonedesign.tiers.runner", "zonedesign.tiers.design", "zonedesign.tiers.redraw"} <= set(g)
    assert g.has_edge("zonedesign.tiers.redraw", "zonedesign.verify.repair")


def test_no_import_cycle_between_modules():
    # cycles found with networkx.simple_cycles (reference library)
    cycles = list(nx.simple_cycles(_import_graph()))
    assert cycles == [], f"import cycles: {cycles[:5]}"


def test_the_checker_never_imports_the_optimiser_or_the_tier_runner():
    g = _import_graph()
    bad = [
        (m, t)
        for m in g
        if m.startswith("zonedesign.verify")
        for t in g.successors(m)
        if t.startswith(NOT_FOR_VERIFY)
    ]
    assert bad == [], f"verify/ imports the optimiser or tier runner: {bad}"


def test_design_and_redraw_share_one_tier_runner():
    # one tier loop: both strategies go through tiers.runner, and neither imports the other
    g = _import_graph()
    for strategy in ("zonedesign.tiers.design", "zonedesign.tiers.redraw"):
        assert g.has_edge(strategy, "zonedesign.tiers.runner")
    assert not g.has_edge("zonedesign.tiers.redraw", "zonedesign.tiers.design")
    assert not g.has_edge("zonedesign.tiers.design", "zonedesign.tiers.redraw")
    loops = [name for name, path in _modules().items() if "def run_tiers(" in path.read_text(encoding="utf-8")]
    assert loops == ["zonedesign.tiers.runner"]


def test_no_module_is_longer_than_the_house_limit():
    long = {
        _module_name(p): n
        for p in PACKAGE.rglob("*.py")
        if (n := len(p.read_text(encoding="utf-8").splitlines())) > MAX_LINES
    }
    assert long == {}, f"modules over {MAX_LINES} lines: {long}"
