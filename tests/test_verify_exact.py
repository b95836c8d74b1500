"""The exact solver proves the best zoning of small fences.

Checked against brute force written here: connected subsets found with itertools and
networkx.is_connected (reference library), partitions built from them by exact cover, and
every partition priced with measures.score, the project's one definition of the objective.
"""

from __future__ import annotations

import itertools

import networkx as nx
import numpy as np
import pytest
from verify_support import grid_graph

from zonedesign import measures
from zonedesign.errors import InputError
from zonedesign.records import Bounds, Graph, Problem
from zonedesign.verify.exact import feasible_zones, solve_exact


def random_graph(rng, n: int) -> Graph:
    tree = nx.random_labeled_tree(n, seed=int(rng.integers(1 << 30)))
    edges = set(tree.edges())
    for _ in range(int(rng.integers(0, n))):
        a, b = rng.choice(n, 2, replace=False)
        edges.add((int(min(a, b)), int(max(a, b))))
    i, j = zip(*edges)
    return Graph.from_edges(n, np.array(i), np.array(j), rng.uniform(0.5, 2.0, len(i)))


def random_problem(rng, graph: Graph, *, homogeneity="ssd", compactness="polsby", previous=False,
                   lo=12.0, hi=30.0) -> Problem:
    n = graph.n
    counts = np.c_[rng.integers(1, 12, n), rng.integers(0, 6, n)].astype(float)
    attrs = measures.standardise(rng.normal(size=(n, 2)))
    return Problem(
        graph=graph,
        counts=counts,
        bounds=Bounds(("persons", "households"), np.array([lo, -np.inf]), np.array([hi, 14.0]),
                      np.array([20.0, np.nan])),
        attrs=attrs,
        weight=rng.uniform(0.5, 2.0, n),
        area=rng.uniform(1.0, 3.0, n),
        perimeter=rng.uniform(4.0, 8.0, n),
        term_weights={"size": 1.0, "homogeneity": 0.7, "compactness": 0.5, "stability": 0.3},
        homogeneity=homogeneity,
        compactness=compactness,
        previous=rng.integers(-1, 3, n) if previous else None,
    )


def _nx(graph: Graph) -> nx.Graph:
    g = nx.Graph()
    g.add_nodes_from(range(graph.n))
    i, j, _ = graph.edges()
    g.add_edges_from(zip(i.tolist(), j.tolist()))
    return g


def brute_force_zones(p: Problem) -> set[tuple[int, ...]]:
    """Every connected subset within the bounds (itertools + networkx.is_connected)."""
    g = _nx(p.graph)
    out = set()
    for size in range(1, p.n + 1):
        for subset in itertools.combinations(range(p.n), size):
            sums = p.counts[list(subset)].sum(axis=0)
            if (sums >= p.bounds.lo).all() and (sums <= p.bounds.hi).all() and nx.is_connected(g.subgraph(subset)):
                out.add(subset)
    return out


def brute_force_best(p: Problem) -> float:
    """Least measures.score total over every partition into feasible zones (inf when none)."""
    zones = brute_force_zones(p)
    by_first: dict[int, list[tuple[int, ...]]] = {}
    for z in zones:
        by_first.setdefault(z[0], []).append(z)
    best = np.inf

    def cover(free: frozenset, chosen: list):
        nonlocal best
        if not free:
            labels = np.zeros(p.n, dtype=np.int64)
            for k, z in enumerate(chosen):
                labels[list(z)] = k
            best = min(best, measures.score(p, labels).total)
            return
        first = min(free)
        for z in by_first.get(first, []):
            if free.issuperset(z):
                cover(free - set(z), chosen + [z])

    cover(frozenset(range(p.n)), [])
    return best


@pytest.mark.parametrize("seed", range(4))
def test_feasible_zones_are_exactly_the_connected_subsets_within_bounds(seed):
    rng = np.random.default_rng(seed)
    p = random_problem(rng, random_graph(rng, 9 + seed % 2))
    fz = feasible_zones(p)
    got = [tuple(sorted(fz.zone(j).tolist())) for j in range(fz.n)]
    assert len(got) == len(set(got))  # each zone once
    assert set(got) == brute_force_zones(p)  # networkx.is_connected, reference library
    assert fz.complete


@pytest.mark.parametrize(
    "homogeneity, compactness, previous",
    [("ssd", "polsby", False), ("pairwise", "cut", True), ("ssd", "cut", True), ("pairwise", "polsby", False)],
)
def test_zone_prices_equal_measures_zone_cost(homogeneity, compactness, previous):
    rng = np.random.default_rng(5)
    p = random_problem(rng, grid_graph(3, 3), homogeneity=homogeneity, compactness=compactness,
                       previous=previous)
    fz = feasible_zones(p)
    assert fz.n > 20
    for j in range(fz.n):
        assert fz.costs[j] == pytest.approx(measures.zone_cost(p, fz.zone(j)), abs=1e-12)


@pytest.mark.parametrize("seed", range(6))
def test_exact_optimum_matches_brute_force(seed):
    rng = np.random.default_rng(100 + seed)
    n = 7 + seed % 4  # 7 to 10 units
    graph = grid_graph(2, 5) if seed == 0 else random_graph(rng, n)
    p = random_problem(rng, graph, homogeneity=("ssd", "pairwise")[seed % 2],
                       compactness=("polsby", "cut")[seed // 3], previous=seed % 3 == 0)
    best = brute_force_best(p)
    result = solve_exact(p, time_limit=30)
    if np.isinf(best):
        assert result.labels is None and result.proven and result.status.startswith("infeasible")
        return
    assert result.proven and result.status == "optimal"
    assert result.objective == pytest.approx(best, abs=1e-9)
    assert measures.score(p, result.labels).total == pytest.approx(result.objective)
    assert measures.score(p, result.labels).breaks == 0
    g = _nx(p.graph)
    for z in np.unique(result.labels):
        assert nx.is_connected(g.subgraph(np.flatnonzero(result.labels == z).tolist()))


def test_cp_sat_partitioning_agrees_with_highs():
    rng = np.random.default_rng(21)
    p = random_problem(rng, grid_graph(2, 5))
    highs = solve_exact(p, solver="highs")
    cp = solve_exact(p, solver="cp-sat")
    assert highs.proven and cp.proven
    # CP-SAT prices in millionths: the optima agree to that precision
    assert cp.objective == pytest.approx(highs.objective, abs=1e-5)


def test_infeasible_fence_is_proven_infeasible():
    star = Graph.from_edges(4, [0, 0, 0], [1, 2, 3], np.ones(3))
    p = Problem(graph=star, counts=np.array([[1.0], [4.0], [4.0], [4.0]]),
                bounds=Bounds(("persons",), np.array([5.0]), np.array([9.0]), np.array([np.nan])),
                attrs=np.zeros((4, 0)), weight=np.ones(4), area=np.ones(4), perimeter=np.full(4, 4.0))
    result = solve_exact(p)
    assert result.labels is None and result.proven
    assert result.status.startswith("infeasible")


def test_enumeration_cap_is_stated():
    rng = np.random.default_rng(3)
    p = random_problem(rng, grid_graph(3, 4), lo=0.0, hi=1e9)
    result = solve_exact(p, max_zones_enumerated=50)
    assert result.labels is None and not result.proven
    assert result.status == "too large to prove: more than 50 feasible zones"


def test_solver_name_is_checked():
    rng = np.random.default_rng(3)
    with pytest.raises(InputError, match="solver 'glpk'"):
        solve_exact(random_problem(rng, grid_graph(2, 2)), solver="glpk")


def test_reduced_cost_thinning_keeps_the_optimum():
    # over 1,500 feasible zones: HiGHS first thins them by LP reduced costs; CP-SAT solves
    # the full set partitioning, so both must reach the same proven optimum
    rng = np.random.default_rng(8)
    p = random_problem(rng, grid_graph(4, 5), lo=10.0, hi=40.0)
    assert feasible_zones(p).n > 1_500
    highs = solve_exact(p, solver="highs")
    cp = solve_exact(p, solver="cp-sat")
    assert highs.proven and cp.proven
    assert highs.objective == pytest.approx(cp.objective, abs=1e-5)
