"""Exact where it is cheap: a fence-tier with few feasible zones is designed by its proven
optimum, and the summary says so (`proof = "optimal"` with its bound); elsewhere the
search's zoning stands with `proof = "none"` and the reason.

The optimum is checked against brute force written here: every subset of a small invented
fence tested for contiguity with networkx.is_connected (reference library) and for the
bounds, partitions built from them by exact cover, each priced with measures.score.
"""

from __future__ import annotations

import itertools
import json
from dataclasses import replace

import networkx as nx
import numpy as np
import pytest
from hierarchy_support import areas_from_frame, nx_graph, two_tier_rules, zone_members

from zonedesign import measures
from zonedesign.demo.synthetic import grid_with_holes
from zonedesign.errors import RulesError
from zonedesign.exactfence import prove_fence
from zonedesign.jobs.summary import fence_figures
from zonedesign.locks import Locks
from zonedesign.records import Bounds, Graph, Problem
from zonedesign.rules import SearchRules, parse_rules
from zonedesign.tiers.design import build_hierarchy
from zonedesign.verify.checks import audit
from zonedesign.verify.feasible import count_feasible_zones


def grid_fence(rows: int = 3, cols: int = 4, seed: int = 2) -> Problem:
    """An invented fence: a rows x cols grid of unit squares with counts 1..9."""
    rng = np.random.default_rng(seed)
    i, j = [], []
    for r in range(rows):
        for c in range(cols):
            a = r * cols + c
            if c + 1 < cols:
                i.append(a), j.append(a + 1)
            if r + 1 < rows:
                i.append(a), j.append(a + cols)
    n = rows * cols
    return Problem(
        graph=Graph.from_edges(n, np.array(i), np.array(j), np.ones(len(i))),
        counts=rng.integers(1, 10, n).astype(float)[:, None],
        bounds=Bounds(("persons",), np.array([10.0]), np.array([20.0]), np.array([15.0])),
        attrs=measures.standardise(rng.normal(size=(n, 2))),
        weight=np.ones(n),
        area=np.ones(n),
        perimeter=np.full(n, 4.0),
        term_weights={"size": 1.0, "homogeneity": 1.0, "compactness": 1.0},
        homogeneity="ssd",
        compactness="polsby",
    )


def brute_zones(p: Problem) -> list[tuple[int, ...]]:
    g = nx.Graph()
    g.add_nodes_from(range(p.n))
    a, b, _ = p.graph.edges()
    g.add_edges_from(zip(a.tolist(), b.tolist()))
    out = []
    for size in range(1, p.n + 1):
        for subset in itertools.combinations(range(p.n), size):
            s = p.counts[list(subset)].sum(axis=0)
            if (s >= p.bounds.lo).all() and (s <= p.bounds.hi).all() and nx.is_connected(g.subgraph(subset)):
                out.append(subset)
    return out


def brute_best(p: Problem) -> float:
    zones = brute_zones(p)
    best = np.inf

    def cover(free: frozenset, chosen: list) -> None:
        nonlocal best
        if not free:
            labels = np.zeros(p.n, dtype=np.int64)
            for k, z in enumerate(chosen):
                labels[list(z)] = k
            best = min(best, measures.score(p, labels).total)
            return
        first = min(free)
        for z in zones:
            if z[0] == first and free.issuperset(z):
                cover(free - set(z), chosen + [z])

    cover(frozenset(range(p.n)), [])
    return best


# ---------------------------------------------------------------- the count


def test_the_count_of_feasible_zones_is_the_number_of_connected_subsets_within_bounds():
    p = grid_fence()
    c = count_feasible_zones(p, 10_000)
    assert c.complete
    assert c.count == len(brute_zones(p))  # networkx.is_connected, reference library


def test_the_count_stops_once_it_passes_its_cap_having_walked_a_fraction_of_the_tree():
    p = grid_fence(5, 6, seed=4)
    full = count_feasible_zones(p, 1_000_000)
    capped = count_feasible_zones(p, 20)
    assert full.complete and full.count > 100
    assert not capped.complete and capped.count == 21
    assert capped.nodes < full.nodes / 5
    assert "more than 20 feasible zones" in capped.reason


def test_a_node_budget_also_stops_the_count_on_fences_of_tiny_units():
    p = grid_fence(5, 6, seed=4)
    budget = count_feasible_zones(p, 1_000_000, node_cap=50)
    assert not budget.complete and budget.nodes <= 51
    assert "budget" in budget.reason


# ---------------------------------------------------------------- one fence


def test_a_small_fence_gets_its_proven_optimum_and_bound():
    p = grid_fence()
    proof = prove_fence(p, SearchRules())
    assert proof.proof == "optimal" and proof.reason == ""
    best = brute_best(p)
    score = measures.score(p, proof.labels)
    assert score.breaks == 0
    assert score.total == pytest.approx(best, abs=1e-9)
    assert proof.bound == pytest.approx(best, abs=1e-6)
    g = nx_graph(p.graph)
    for members in zone_members(proof.labels).values():
        assert nx.is_connected(g.subgraph(members))  # networkx, reference library


def test_a_fence_over_the_threshold_is_not_tried_and_says_why():
    p = grid_fence()
    n_zones = count_feasible_zones(p, 10_000).count
    proof = prove_fence(p, SearchRules(exact_zones=n_zones - 1))
    assert proof.proof == "none" and proof.labels is None
    assert f"more than {n_zones - 1:,} feasible zones" in proof.reason
    at = prove_fence(p, SearchRules(exact_zones=n_zones))
    assert at.proof == "optimal" and at.feasible_zones == n_zones


def test_exact_zones_zero_turns_the_step_off():
    proof = prove_fence(grid_fence(), SearchRules(exact_zones=0))
    assert proof.proof == "none" and "off" in proof.reason


def test_a_fence_with_no_valid_zoning_keeps_the_search_and_says_so():
    p = grid_fence()
    p = replace(p, bounds=Bounds(("persons",), np.array([200.0]), np.array([300.0]), np.array([250.0])))
    proof = prove_fence(p, SearchRules())
    assert proof.proof == "none" and proof.labels is None
    assert "no connected set" in proof.reason or "no valid zoning" in proof.reason


# ---------------------------------------------------------------- design


def small_design(search: SearchRules | None = None, locks: Locks | None = None):
    gdf = grid_with_holes(8, 6, 0.0, 3, n_fences=2)
    areas, graph = areas_from_frame(gdf)
    rules = two_tier_rules(seed=3)
    if search is not None:
        rules = replace(rules, search=search)
    return areas, graph, rules, build_hierarchy(areas, graph, rules, locks=locks)


def test_design_uses_the_proven_optimum_and_keeps_nesting_and_the_audit_clean():
    areas, graph, rules, result = small_design()
    rows = fence_figures(result)
    proven = [r for r in rows if r["proof"] == "optimal"]
    assert proven, rows
    for r in proven:
        assert r["bound"] <= r["objective"] + 1e-6
        assert r["breaks"] == 0
    for r in rows:
        assert r["proof"] in ("optimal", "none")
        assert (r["proof"] == "none") == bool(r["proof_reason"])
    lookup = result.lookup()
    report = audit(areas, graph, lookup, list(rules.tiers))
    assert not report.violations, report.violations
    # nesting: every lower zone inside one upper zone (checked here, not by the audit alone)
    lower, upper = lookup["block"], lookup["ward"]
    for members in zone_members(lower).values():
        assert len({upper[i] for i in members}) == 1


def test_same_seed_same_lookup_with_exact_solving():
    first = small_design()[3].lookup()
    second = small_design()[3].lookup()
    for tier in first:
        assert first[tier].tolist() == second[tier].tolist()


def test_turning_the_step_off_leaves_every_fence_to_the_search():
    rules = two_tier_rules(seed=3)
    _, _, _, result = small_design(replace(rules.search, exact_zones=0))
    rows = fence_figures(result)
    assert all(r["proof"] == "none" and "off" in r["proof_reason"] for r in rows)


def test_a_locked_zone_is_kept_when_its_fence_is_solved_exactly():
    gdf = grid_with_holes(8, 6, 0.0, 3, n_fences=2)
    areas, _ = areas_from_frame(gdf)
    fence0 = np.flatnonzero(areas.fence == sorted(set(areas.fence))[0])
    codes = np.full(areas.n, "", dtype=object)
    codes[fence0[:2]] = "AGREED-1"
    locks = Locks(codes={"block": codes})
    _, _, _, result = small_design(locks=locks)
    lookup = result.lookup()
    assert set(np.flatnonzero(lookup["block"] == "AGREED-1").tolist()) == set(fence0[:2].tolist())
    rows = [r for r in fence_figures(result) if r["tier"] == "block"]
    assert any(r["proof"] == "optimal" for r in rows)


def test_an_area_no_valid_zone_can_hold_is_named_by_its_id_in_the_fence_reason():
    # an area alone above the tier's ceiling (households max 250) lies in no valid zone
    gdf = grid_with_holes(8, 6, 0.0, 3, n_fences=2)
    first = gdf.index[gdf["fence"] == sorted(set(gdf["fence"]))[0]][0]
    gdf.loc[first, "households"] = 1000
    areas, graph = areas_from_frame(gdf)
    result = build_hierarchy(areas, graph, two_tier_rules(seed=3))
    (row,) = [r for r in fence_figures(result) if r["tier"] == "block" and r["fence"] == gdf.loc[first, "fence"]]
    assert row["proof"] == "none"
    assert f"area {gdf.loc[first, 'id']} lies in no connected zone" in row["proof_reason"]
    assert "unit " not in row["proof_reason"]


# ---------------------------------------------------------------- rules


def rules_text(search: str) -> str:
    return ('[areas]\nid = "id"\ncounts = ["persons"]\n\n[[tier]]\nname = "t1"\nmin = { persons = 1 }\n\n'
            f"[search]\n{search}\n")


def test_the_exact_keys_are_read_and_checked_like_the_other_search_keys():
    r = parse_rules(rules_text("exact_zones = 5000\nexact_time_limit = 3.5"), "rules.toml")
    assert r.search.exact_zones == 5000 and r.search.exact_time_limit == 3.5
    for bad, word in [("exact_zones = -1", "at least 0"), ("exact_zones = 2.5", "whole number"),
                      ("exact_time_limit = 0", "above 0"), ("exact_zones = 5000000", "below")]:
        with pytest.raises(RulesError) as err:
            parse_rules(rules_text(bad), "rules.toml")
        assert "exact_" in str(err.value) and word in str(err.value) and str(err.value).startswith("rules.toml:10:")  # the key's own line


def test_the_summary_and_report_show_proof_per_fence(tmp_path):
    from zonedesign import api

    gdf = grid_with_holes(6, 4, 0.0, 3, n_fences=2)
    gdf.to_file(tmp_path / "areas.gpkg", driver="GPKG")
    (tmp_path / "rules.toml").write_text(
        '[areas]\nid = "id"\ncounts = ["households", "persons"]\nattributes = ["attr_a", "attr_b"]\n'
        'fence = "fence"\n\n[[tier]]\nname = "block"\nmin = { households = 40 }\nmax = { households = 250 }\n'
        'target = { households = 125 }\n\n[search]\nmethod = "descent"\nconstructions = 1\n'
    )
    res = api.design(tmp_path / "areas.gpkg", tmp_path / "rules.toml", tmp_path / "out", certify=False)
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    rows = summary["fences"]
    assert rows and all(r["proof"] in ("optimal", "none") and "bound" in r for r in rows)
    assert all(r["proof"] == "optimal" for r in rows)  # 12 units per fence: a few hundred feasible zones
    html = (tmp_path / "out" / "report.html").read_text()
    assert ">proof</th>" in html and "<td>optimal</td>" in html
    assert res.exit_code == 0
    from zonedesign.cli.show import show

    shown = show(tmp_path / "out")
    assert "exact: 2 of 2 fence-tiers proven optimal (per tier: block 2)" in shown
