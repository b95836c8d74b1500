"""The multilevel path keeps every promise of the flat search.

Coarsening (Karypis & Kumar 1998: heavy-edge matching) pairs adjacent units only, never
past a ceiling and never across previous zones; a multilevel solve returns a
regionalization (Duque, Ramos & Surinach 2007; contiguity checked with networkx), meets
the bounds an instance can meet, repeats for a seed, and nests in a hierarchy.
"""

from __future__ import annotations

from dataclasses import replace

import networkx as nx
import numpy as np
import pytest
from hierarchy_support import nx_graph as area_nx_graph
from hierarchy_support import two_tier_rules, voronoi_instance, zone_members
from search_support import feasible_voronoi_problem, nx_graph, regionalization_faults

from zonedesign.search import multilevel
from zonedesign.search.engine import solve
from zonedesign.search.multilevel import heavy_edge_matching, pair_caps
from zonedesign.tiers.design import build_hierarchy
from zonedesign.verify.checks import audit

N = 700
LO = 40.0


@pytest.fixture(scope="module")
def problem():
    return feasible_voronoi_problem(N, seed=21, lo=LO)


def test_coarse_units_are_adjacent_pairs_within_the_ceiling_and_keep_the_sums(problem) -> None:
    parent, k = heavy_edge_matching(problem, seed=4)
    g = nx_graph(problem.graph)
    sizes = np.bincount(parent, minlength=k)
    assert sizes.min() >= 1 and sizes.max() <= 2
    for c in np.flatnonzero(sizes == 2):
        u, v = np.flatnonzero(parent == c)
        assert g.has_edge(int(u), int(v))  # a pair shares a boundary (networkx)
    sums = np.bincount(parent, weights=problem.counts[:, 0], minlength=k)
    pairs = sizes == 2
    assert (sums[pairs] <= pair_caps(problem)[0] + 1e-9).all()
    assert sums.sum() == pytest.approx(problem.counts.sum())
    # heavy-edge matching halves a planar graph's units, give or take (Karypis & Kumar 1998)
    assert k < 0.8 * problem.n


def test_coarsening_never_joins_units_of_different_previous_zones(problem) -> None:
    previous = solve(problem, seed=1, method="descent").labels
    p = replace(problem, previous=previous)
    parent, k = heavy_edge_matching(p, seed=2)
    assert k < problem.n  # some pairs form inside the previous zones
    for c in np.unique(parent):
        assert np.unique(previous[parent == c]).size == 1


@pytest.mark.parametrize("method", ["annealing", "tabu"])
def test_a_multilevel_solve_is_a_regionalization_within_bounds_and_repeats(problem, method: str) -> None:
    a = solve(problem, seed=5, method=method, multilevel=True, time_limit=120.0)
    assert a.info["path"] == "multilevel" and len(a.info["levels"]) >= 2
    assert regionalization_faults(problem.graph, a.labels) == []
    # the instance can meet its bounds (fixture), so the multilevel search must
    assert a.score.breaks == 0.0
    sums = np.bincount(a.labels, weights=problem.counts[:, 0])
    assert sums.min() >= LO and sums.max() <= problem.bounds.hi[0]
    b = solve(problem, seed=5, method=method, multilevel=True, time_limit=120.0)
    assert np.array_equal(a.labels, b.labels)


def test_the_flat_path_is_kept_when_asked_and_for_small_fences(problem) -> None:
    assert solve(problem, seed=5, multilevel=False).info["path"] == "flat"
    assert solve(problem, seed=5).info["path"] == ("multilevel" if N >= multilevel.MULTILEVEL_UNITS else "flat")


@pytest.mark.slow
def test_a_hierarchy_on_the_multilevel_path_is_nested_and_passes_the_audit(monkeypatch) -> None:
    monkeypatch.setattr(multilevel, "MULTILEVEL_UNITS", 100)
    monkeypatch.setattr(multilevel, "MIN_COARSE", 30)
    areas, graph = voronoi_instance(500, seed=6, n_fences=2)
    rules = two_tier_rules(method="annealing", seed=4)
    result = build_hierarchy(areas, graph, rules)
    assert {f.info["path"] for f in result.tiers[0].fences} == {"multilevel"}
    lookup = result.lookup()
    g = area_nx_graph(graph)
    lower, upper = (np.asarray(lookup[t.name]) for t in rules.tiers)
    for members in zone_members(lower).values():
        assert nx.is_connected(g.subgraph(members))  # networkx, not engine code
        assert len({upper[i] for i in members}) == 1  # nesting
        assert len({areas.fence[i] for i in members}) == 1
    assert audit(areas, graph, lookup, list(rules.tiers)).ok
    again = build_hierarchy(areas, graph, rules).lookup()
    assert all(np.array_equal(lookup[t], again[t]) for t in lookup)
