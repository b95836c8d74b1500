"""Focused annealing trials on fences searched by one run.

A fence the schedule leaves to one run draws most of its annealing trials from the
costliest zones and their neighbours. The focus changes where trials go, never what a
result must be: a regionalization (Duque, Ramos & Surinach 2007; contiguity checked with
networkx) within the bounds, the same labels for the same seed.
"""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
from search_support import feasible_voronoi_problem, nx_graph, regionalization_faults

from zonedesign.rules import SearchRules
from zonedesign.search import engine as E
from zonedesign.search.anneal import hot_units, hot_zones
from zonedesign.search.schedule import fence_schedule
from zonedesign.search.state import ZoneState

N = 1200
LO = 40.0


@pytest.fixture(scope="module")
def problem():
    return feasible_voronoi_problem(N, seed=5, lo=LO)


@pytest.fixture(scope="module")
def focused_solution(problem):
    return E.solve(problem, seed=3, time_limit=600.0)


def test_a_fence_left_to_one_run_is_searched_with_focused_trials(problem, focused_solution) -> None:
    assert fence_schedule(SearchRules(), N).focused
    assert focused_solution.info["focused"] and focused_solution.info["runs_done"] == 1


def test_a_focused_search_returns_contiguous_zones_within_bounds(problem, focused_solution) -> None:
    assert regionalization_faults(problem.graph, focused_solution.labels) == []
    assert focused_solution.score.breaks == 0.0
    sums = np.bincount(focused_solution.labels, weights=problem.counts[:, 0])
    assert sums.min() >= LO - 1e-9 and sums.max() <= float(problem.bounds.hi[0]) + 1e-9


def test_a_focused_search_repeats_for_a_seed(problem, focused_solution) -> None:
    again = E.solve(problem, seed=3, time_limit=600.0)
    assert np.array_equal(again.labels, focused_solution.labels)


def test_hot_units_are_the_boundary_units_in_or_beside_a_hot_zone(problem) -> None:
    labels = E.solve(problem, seed=1, method="descent").labels
    state = ZoneState(problem, labels)
    k = int(labels.max()) + 1
    rng = np.random.default_rng(0)
    hot = np.zeros(state.zones.size.size, dtype=np.bool_)
    hot[rng.choice(k, size=k // 4, replace=False)] = True
    cand = np.empty(N, dtype=np.int64)
    got = set(cand[: hot_units(state.st, hot, cand)].tolist())
    g = nx_graph(problem.graph)
    want = set()
    for u in g.nodes:
        nbr = [labels[v] for v in g.neighbors(u)]
        on_boundary = any(z != labels[u] for z in nbr)
        if on_boundary and (hot[labels[u]] or any(hot[z] for z in nbr)):
            want.add(u)
    assert got == want
    assert nx.is_connected(g)


def test_the_hot_zones_are_the_costliest_share(problem) -> None:
    labels = E.solve(problem, seed=1, method="descent").labels
    state = ZoneState(problem, labels)
    hot = hot_zones(state.zones.size, state.zones.cost, E.FOCUS_SHARE)
    live = state.zones.size > 0
    cost = state.zones.cost
    assert not hot[~live].any()
    assert hot.sum() >= int(E.FOCUS_SHARE * live.sum())
    assert cost[hot].min() >= cost[live & ~hot].max()
