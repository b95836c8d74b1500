"""The CP-SAT certificate: an undecided verdict is never a pass, and it costs little.

The certificate is stated per fence and tier; each verdict must agree with the plain
checks (tests/test_verify_checks.py holds that on NY8 and random grids). Here: a solve
stopped by its budget is reported as undecided, named by fence and tier, and makes the
run's exit code 1, and the progress counter reaches every fence-tier.
"""

from __future__ import annotations

import networkx as nx
import numpy as np
from cli_support import write_inputs

from zonedesign import api
from zonedesign.records import Areas, Graph
from zonedesign.rules import TierRules
from zonedesign.verify import certificate
from zonedesign.verify.certificate import certify


def _grid(rows: int, cols: int, fence_cols: int) -> tuple[Areas, Graph]:
    g = nx.grid_2d_graph(rows, cols)  # networkx: the rook grid, 2*r*c - r - c edges (common practice)
    index = {node: i for i, node in enumerate(sorted(g.nodes))}
    i = np.array([index[a] for a, b in g.edges])
    j = np.array([index[b] for a, b in g.edges])
    n = rows * cols
    graph = Graph.from_edges(n, i, j, np.ones(i.size))
    fence = np.array([f"F{(k % cols) // fence_cols}" for k in range(n)], dtype=object)
    areas = Areas(
        ids=np.array([f"a{k}" for k in range(n)], dtype=object), counts=np.full((n, 1), 10.0),
        count_names=("persons",), attrs=np.zeros((n, 0)), attr_names=(), weight=np.ones(n),
        area=np.ones(n), perimeter=np.full(n, 4.0), fence=fence,
    )
    return areas, graph


def test_a_stopped_solve_is_undecided_and_named_by_fence_and_tier():
    areas, graph = _grid(6, 6, 3)
    col = np.arange(36) % 6
    labels = {"tier1": np.array([f"z{c}" for c in col], dtype=object),
              "tier2": np.array([f"w{c // 3}" for c in col], dtype=object)}
    tiers = [TierRules("tier1", min={"persons": 10}, max={"persons": 100}),
             TierRules("tier2", min={"persons": 10}, max={"persons": 300})]
    done = []
    certs = certify(areas, graph, labels, tiers, on_done=lambda k, total: done.append((k, total)))
    # six columns of six areas are contiguous and within bounds; each lies in one fence and ward
    assert [c.status for c in certs] == ["confirmed"] * 4
    assert done == [(1, 4), (2, 4), (3, 4), (4, 4)]
    stopped = certify(areas, graph, labels, tiers, time_limit=1e-9)
    assert {(c.tier, c.fence) for c in stopped if c.status == "undecided"} == {
        ("tier1", "F0"), ("tier1", "F1"), ("tier2", "F0"), ("tier2", "F1")}
    assert not any(c.ok for c in stopped)


def test_an_undecided_certificate_makes_the_run_exit_1(tmp_path, monkeypatch):
    areas, rules = write_inputs(tmp_path / "in")
    monkeypatch.setattr(certificate, "TIME_LIMIT", 1e-9)
    res = api.design(areas, rules, None, report=False)
    certs = res.summary["certificate"]
    assert certs and all(c["status"] == "undecided" for c in certs)
    assert res.summary["audit"]["ok"] and not res.summary["bound_breaks"]
    # an undecided certificate is never a pass: exit 1, "ran but a rule is undecided" (common practice)
    assert res.exit_code == 1


def test_demo_takes_no_certificate_like_the_other_commands():
    from zonedesign.cli.commands import _parser

    # every command that runs the certificate can skip it with one flag (common practice for a costly check)
    for command in (["demo"], ["design", "a.gpkg", "--rules", "r.toml"], ["audit", "a.gpkg", "--rules", "r.toml", "--lookup", "l.csv"]):
        args = _parser().parse_args([*command, "--out", "out", "--no-certificate"])
        assert args.no_certificate is True
        assert _parser().parse_args([*command, "--out", "out"]).no_certificate is False
