"""What a user relies on from each search method, redraws and the engine's arguments."""

from __future__ import annotations

from dataclasses import replace

import networkx as nx
import numpy as np
import pytest
from search_support import (
    component_of,
    grid_graph,
    make_problem,
    nx_graph,
    regionalization_faults,
    tree_fan_out,
    voronoi_problem,
)

from zonedesign import measures
from zonedesign.errors import InputError
from zonedesign.rules import SearchRules
from zonedesign.search import solve

WEIGHTS = {"size": 1.0, "homogeneity": 1.0, "compactness": 1.0, "stability": 1.0}


def key(score) -> tuple[float, float]:
    return (score.breaks, score.total)


def not_worse(a, b) -> bool:
    """(breaks, total) a is no worse than b, breaks first (1e-9 for float noise)."""
    if a[0] < b[0] - 1e-9:
        return True
    return a[0] <= b[0] + 1e-9 and a[1] <= b[1] + 1e-9


def grid_case(seed: int, previous: bool = False):
    rng = np.random.default_rng(seed)
    graph = grid_graph(np.ones((8, 9), dtype=bool))
    counts = rng.integers(1, 20, size=graph.n)
    prev = rng.integers(0, 8, size=graph.n) if previous else None
    return make_problem(graph, counts, lo=40, hi=150, target=80, weights=WEIGHTS, previous=prev, rng=rng)


def random_start(graph, k: int, seed: int) -> np.ndarray:
    """Connected random zones: k seeds grown breadth-first in random order (networkx)."""
    rng = np.random.default_rng(seed)
    g = nx_graph(graph)
    labels = -np.ones(graph.n, dtype=np.int64)
    frontier = []
    for z, s in enumerate(rng.choice(graph.n, size=k, replace=False)):
        labels[s] = z
        frontier.append(int(s))
    while frontier:
        u = frontier.pop(int(rng.integers(len(frontier))))
        for v in g.neighbors(u):
            if labels[v] < 0:
                labels[v] = labels[u]
                frontier.append(v)
    return measures.compact_labels(labels)[0]


# ---------------------------------------------------------------- the three methods


@pytest.mark.parametrize("method", ["annealing", "tabu"])
@pytest.mark.parametrize("start_kind", ["random", "local optimum"])
def test_annealing_and_tabu_never_end_worse_than_their_start(method, start_kind):
    problem = voronoi_problem(70, seed=4, lo=30, hi=110, target=60, weights=WEIGHTS,
                              previous=np.random.default_rng(1).integers(0, 9, size=70))
    if start_kind == "random":
        start = random_start(problem.graph, 9, seed=2)
    else:
        start = solve(problem, method="descent", seed=3).labels
    k = int(start.max()) + 1
    # a redraw: zone j of the start stands for previous zone j
    before = measures.score(problem, start, np.arange(k))
    sol = solve(problem, start=start, method=method, seed=5)
    assert not_worse(key(sol.score), key(before)), (key(sol.score), key(before))
    assert regionalization_faults(problem.graph, sol.labels) == []


def test_descent_ends_at_a_local_optimum():
    """No single move of a unit to a neighbouring zone that keeps its own zone non-empty
    and connected (networkx) improves (breaks, total) as priced by measures.score."""
    problem = grid_case(7, previous=True)
    sol = solve(problem, method="descent", seed=2)
    labels = sol.labels
    here = key(sol.score)
    g = nx_graph(problem.graph)
    checked = 0
    for i in range(problem.n):
        a = labels[i]
        rest = [int(u) for u in np.flatnonzero(labels == a) if u != i]
        if not rest or not nx.is_connected(g.subgraph(rest)):
            continue
        for b in sorted({int(labels[j]) for j in g.neighbors(i)} - {int(a)}):
            moved = labels.copy()
            moved[i] = b
            there = key(measures.score(problem, moved, sol.anchors))
            assert not (there[0] < here[0] - 1e-9 or (there[0] <= here[0] + 1e-9 and there[1] < here[1] - 1e-9)), (
                f"moving unit {i} from zone {a} to {b} improves {here} to {there}"
            )
            checked += 1
    assert checked > 20


@pytest.mark.parametrize("method", ["descent", "annealing", "tabu"])
def test_same_seed_gives_the_same_labels(method):
    problem = voronoi_problem(60, seed=9, lo=25, hi=100, target=50, weights=WEIGHTS)
    first = solve(problem, method=method, seed=11)
    again = solve(problem, method=method, seed=11)
    assert np.array_equal(first.labels, again.labels)
    assert first.score.total == again.score.total


def test_search_rules_choose_the_method_unless_given():
    problem = grid_case(3)
    assert solve(problem, search_rules=SearchRules(method="tabu"), seed=1).info["method"] == "tabu"
    assert solve(problem, search_rules=SearchRules(method="tabu"), method="descent", seed=1).info["method"] == "descent"


# ---------------------------------------------------------------- merges, splits, infeasible parts


def test_one_zone_above_the_ceiling_is_split_until_bounds_hold():
    rng = np.random.default_rng(5)
    graph = grid_graph(np.ones((6, 7), dtype=bool))
    counts = rng.integers(1, 10, size=graph.n)
    lo = 15.0
    hi = (tree_fan_out(graph) + 1) * lo + counts.max()  # feasible by the tree argument
    problem = make_problem(graph, counts, lo, hi, rng=rng)
    sol = solve(problem, start=np.zeros(graph.n, dtype=np.int64), method="descent", seed=1)
    assert sol.info["splits"] > 0
    assert sol.score.breaks == 0.0
    assert regionalization_faults(graph, sol.labels) == []


def test_zones_below_the_floor_are_merged_until_bounds_hold():
    rng = np.random.default_rng(6)
    graph = grid_graph(np.ones((6, 7), dtype=bool))
    counts = rng.integers(1, 10, size=graph.n)
    problem = make_problem(graph, counts, 20.0, 90.0, rng=rng)
    sol = solve(problem, start=np.arange(graph.n), method="descent", seed=1)
    assert sol.info["merges"] > 0
    assert sol.score.breaks == 0.0
    assert regionalization_faults(graph, sol.labels) == []


def test_a_component_below_the_floor_becomes_one_zone_and_is_reported():
    keep = np.ones((4, 7), dtype=bool)
    keep[:, 4] = False  # two components: columns 0-3 and 5-6
    graph = grid_graph(keep)
    comp = component_of(graph)
    counts = np.where(comp == comp[-1], 1.0, 10.0)
    small = comp == comp[-1]
    lo = 30.0
    assert counts[small].sum() < lo
    problem = make_problem(graph, counts, lo, 200.0)
    sol = solve(problem, seed=1)
    assert len(np.unique(sol.labels[small])) == 1
    assert not sol.info["bounds_met"]
    # the only break left is the small component's shortfall (measures' break formula)
    assert sol.score.breaks == pytest.approx((lo - counts[small].sum()) / lo)
    assert regionalization_faults(graph, sol.labels) == []


# ---------------------------------------------------------------- redraws


def test_redraw_keeps_zones_that_still_meet_the_rules_when_stability_dominates():
    """Keeping zones that still meet the rules is the aim of a redraw (Cockings, Harfoot,
    Martin & Hornby 2011)."""
    problem = grid_case(8)
    old = solve(problem, method="tabu", seed=4)
    assert old.score.breaks == 0.0
    redraw = replace(
        problem,
        previous=old.labels.copy(),
        term_weights={"size": 0.01, "homogeneity": 0.01, "compactness": 0.01, "stability": 100.0},
    )
    sol = solve(redraw, start=old.labels, method="annealing", seed=9)
    assert np.array_equal(sol.labels, old.labels)
    assert np.array_equal(sol.anchors, np.arange(int(old.labels.max()) + 1))
    assert sol.score.terms["stability"] == 0.0


def test_a_start_zone_in_pieces_is_split_into_connected_zones():
    problem = grid_case(2)
    start = np.zeros(problem.n, dtype=np.int64)
    start[: problem.n // 2] = 1
    start[0] = 0  # zone 0 now has a lone unit apart from the rest
    sol = solve(problem, start=start, method="descent", seed=1)
    assert regionalization_faults(problem.graph, sol.labels) == []


# ---------------------------------------------------------------- arguments


def test_bad_arguments_say_what_and_where():
    problem = grid_case(1)
    with pytest.raises(InputError, match="search.method"):
        solve(problem, method="greedy")
    with pytest.raises(InputError, match="start"):
        solve(problem, start=np.zeros(3, dtype=np.int64))
    with pytest.raises(InputError, match="anchors"):
        solve(problem, start=np.zeros(problem.n, dtype=np.int64), anchors=np.zeros(4, dtype=np.int64))
    with pytest.raises(InputError, match="time limit"):
        solve(problem, time_limit=0)
