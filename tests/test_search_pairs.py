"""Pair repartition: two neighbouring zones are resplit into their best two connected parts.

A user relies on the search's last improving passes never making a zoning worse, never
breaking a zone's contiguity and never losing track of the objective; and on the pair
step finding the best split of two zones, checked here against every split enumerated
with networkx (connectivity) and priced with `measures.score` (the objective's one full
definition), outside the search's own code.
"""

from __future__ import annotations

import itertools
from dataclasses import replace

import networkx as nx
import numpy as np
import pytest
from search_support import (
    grid_graph,
    make_problem,
    nx_graph,
    regionalization_faults,
    voronoi_problem,
)

from zonedesign import measures
from zonedesign.search.engine import solve
from zonedesign.search.pairs import pair_pass
from zonedesign.search.state import ZoneState


def _key(problem, labels):
    sc = measures.score(problem, measures.compact_labels(labels)[0])
    return sc.breaks, sc.total


def _best_split_by_enumeration(problem, labels, za, zb):
    """The best (breaks, total) over every split of zones za and zb into two connected parts."""
    g = nx_graph(problem.graph)
    units = np.flatnonzero((labels == za) | (labels == zb))
    best = None
    for r in range(1, units.size):
        for part in itertools.combinations(units[1:], r - 1):
            first = {int(units[0]), *map(int, part)}
            second = set(map(int, units)) - first
            if not second or not nx.is_connected(g.subgraph(first)) or not nx.is_connected(g.subgraph(second)):
                continue
            trial = labels.copy()
            trial[list(first)] = za
            trial[list(second)] = zb
            key = _key(problem, trial)
            best = key if best is None or key < best else best
    return best


def test_two_zones_of_a_strip_are_resplit_into_their_best_split() -> None:
    # a 2 x 4 strip in two L-shaped zones of four squares: the best split (by the full
    # objective over every connected split) is found in one pass
    weights = {"size": 1.0, "homogeneity": 0.0, "compactness": 1.0, "stability": 0.0}
    problem = make_problem(grid_graph(np.ones((2, 4), dtype=bool)), np.ones(8), 3, 5, 4.0, weights=weights)
    labels = np.array([0, 0, 0, 1, 0, 1, 1, 1])
    assert regionalization_faults(problem.graph, labels) == []
    state = ZoneState(problem, labels)
    changed = pair_pass(state.st, 1, 12, np.ones(8, dtype=np.int64), np.zeros(2, dtype=np.int64))
    assert changed == 1
    after = _key(problem, state.compact()[0])
    best = _best_split_by_enumeration(problem, labels, 0, 1)
    assert after[0] == best[0] and after[1] == pytest.approx(best[1], rel=1e-12)
    assert after < _key(problem, labels)
    # by shape alone the best split is the two squares
    lab = state.compact()[0]
    assert {tuple(np.flatnonzero(lab == z).tolist()) for z in (0, 1)} == {(0, 1, 4, 5), (2, 3, 6, 7)}
    assert regionalization_faults(problem.graph, state.compact()[0]) == []


@pytest.mark.parametrize(("seed", "stability"), [(3, False), (4, False), (5, True)])
def test_pair_passes_only_improve_keep_zones_whole_and_track_the_objective(seed: int, stability: bool) -> None:
    problem = voronoi_problem(60, seed, lo=25, hi=90, target=45)
    if stability:
        # previous zones from another search, priced by the stability term
        previous = solve(problem, seed=seed + 1, method="descent", time_limit=60.0).labels
        weights = {**problem.term_weights, "stability": 1.0}
        problem = replace(problem, previous=previous, term_weights=weights)
    sol = solve(problem, seed=seed, method="descent", time_limit=60.0)
    state = ZoneState(problem, sol.labels, sol.anchors)
    before = state.key()
    active = np.ones(problem.n, dtype=np.int64)
    for p in range(5):
        pair_pass(state.st, p, 12, active, np.zeros(2, dtype=np.int64))
        labels, anchors = state.compact()
        ref = measures.score(problem, labels, anchors if stability else None)
        # the kept sums agree with the full definition after the pass
        assert state.running_key()[0] == pytest.approx(ref.breaks, abs=1e-9)
        assert state.running_key()[1] == pytest.approx(ref.total, rel=1e-9)
        assert regionalization_faults(problem.graph, labels) == []
        after = state.key()
        assert after[0] < before[0] + 1e-12 and (after[0] < before[0] - 1e-12 or after[1] <= before[1] + 1e-12)
        before = after
    # passes end: one changes nothing and then leaves no zone marked as changed
    for p in range(50):
        still = np.ones(problem.n, dtype=np.int64)
        if pair_pass(state.st, 100 + p, 12, still, np.zeros(2, dtype=np.int64)) == 0:
            break
    assert still.sum() == 0


def test_the_annealing_result_has_no_better_split_of_two_small_zones() -> None:
    # the default search ends on a labelling no pair repartition improves
    problem = voronoi_problem(50, 7, lo=25, hi=90, target=45)
    sol = solve(problem, seed=2, time_limit=60.0)
    state = ZoneState(problem, sol.labels)
    assert pair_pass(state.st, 5, 12, np.ones(problem.n, dtype=np.int64), np.zeros(2, dtype=np.int64)) == 0
