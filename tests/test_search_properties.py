"""Every labelling the search returns is a regionalization that keeps the bounds it can.

Random planar instances (grids with holes, Voronoi tessellations) with random counts and
bounds. Each result must meet the formal conditions of a regionalization (Duque, Ramos &
Surinach 2007), checked with networkx; and every bound must hold unless the instance cannot
meet it, which the test decides by its own simple argument, never by asking the engine:

- floors only: a component can be zoned iff its total reaches the floor (one zone for the
  whole component does it);
- ceilings only: possible iff no single unit is above the ceiling (one zone per unit);
- floors and ceilings with hi >= (f + 1) * lo + max unit, f the largest number of children
  of a node in a depth-first spanning tree of the component: possible iff the component's
  total reaches the floor. Cut the tree bottom-up: a node whose remnant (itself plus its
  children's remnants, each below lo) reaches lo becomes a zone of less than f * lo + max;
  the root's remnant, if any and below lo, joins the adjacent zone above it, staying below
  (f + 1) * lo + max.

Where an instance cannot meet a floor, the fewest breaks come from one zone per component
below the floor, and a unit above the ceiling is best left in a zone of its own (units that
count nothing may join it).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from search_support import (
    INF,
    component_of,
    grid_graph,
    make_problem,
    regionalization_faults,
    tree_fan_out,
    voronoi_problem,
)

from zonedesign.search import solve

KINDS = ("floors", "ceilings", "both")


def bounds_for(kind: str, graph, counts: np.ndarray, lo: float, hi: float) -> tuple[float, float]:
    if kind == "floors":
        return lo, INF
    if kind == "ceilings":
        return -INF, hi
    fan = tree_fan_out(graph)
    return lo, (fan + 1) * lo + float(counts.max()) + hi


def target_for(lo: float, hi: float) -> float:
    if np.isfinite(lo) and np.isfinite(hi):
        return 0.5 * (lo + hi)
    return 2.0 * lo if np.isfinite(lo) else 0.5 * hi


def check_result(problem, labels: np.ndarray, lo: float, hi: float) -> None:
    faults = regionalization_faults(problem.graph, labels)
    assert faults == [], faults  # Duque, Ramos & Surinach 2007, checked with networkx
    counts = problem.counts[:, 0]
    k = int(labels.max()) + 1
    sums = np.bincount(labels, weights=counts, minlength=k)
    comp = component_of(problem.graph)  # networkx connected components
    comp_total = np.bincount(comp, weights=counts)
    for z in range(k):
        members = np.flatnonzero(labels == z)
        c = comp[members[0]]
        if comp_total[c] < lo:
            # below the floor as a whole: one zone for the component has the fewest breaks
            assert np.all(labels[comp == c] == z), f"component {c} below the floor is split"
            continue
        above = counts[members] > hi
        if above.any():
            # a unit above the ceiling: anything counted that joins it only adds to the break
            assert above.sum() == 1 and sums[z] == counts[members][above][0], f"zone {z} adds to a break"
            continue
        assert lo <= sums[z] <= hi, f"zone {z}: {sums[z]} outside [{lo}, {hi}] though it can be met"


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    rows=st.integers(2, 9),
    cols=st.integers(2, 9),
    holes=st.floats(0.0, 0.35),
    kind=st.sampled_from(KINDS),
    method=st.sampled_from(["descent", "annealing", "tabu"]),
    seed=st.integers(0, 2**31 - 1),
    lo=st.integers(5, 60),
    hi=st.integers(10, 80),
    with_target=st.booleans(),
)
@pytest.mark.slow
def test_grids_with_holes(rows, cols, holes, kind, method, seed, lo, hi, with_target):
    rng = np.random.default_rng(seed)
    keep = rng.random((rows, cols)) >= holes
    keep[0, 0] = True
    graph = grid_graph(keep)
    counts = rng.integers(0, 21, size=graph.n).astype(float)
    lo_, hi_ = bounds_for(kind, graph, counts, float(lo), float(hi))
    target = target_for(lo_, hi_) if with_target else float("nan")
    problem = make_problem(graph, counts, lo_, hi_, target, rng=rng)
    sol = solve(problem, seed=seed % 1000, method=method)
    check_result(problem, sol.labels, lo_, hi_)
    assert sol.info["bounds_met"] == (sol.score.breaks == 0.0)


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    n=st.integers(6, 60),
    kind=st.sampled_from(KINDS),
    method=st.sampled_from(["descent", "annealing", "tabu"]),
    seed=st.integers(0, 10_000),
    lo=st.integers(10, 60),
    hi=st.integers(20, 90),
)
def test_voronoi_tessellations(n, kind, method, seed, lo, hi):
    rng = np.random.default_rng(seed)
    counts = rng.integers(1, 25, size=n).astype(float)
    base = voronoi_problem(n, seed=seed, counts=counts, lo=0, hi=0)
    lo_, hi_ = bounds_for(kind, base.graph, counts, float(lo), float(hi))
    problem = voronoi_problem(n, seed=seed, counts=counts, lo=lo_, hi=hi_, target=float("nan"), compactness="polsby")
    sol = solve(problem, seed=seed, method=method)
    check_result(problem, sol.labels, lo_, hi_)
