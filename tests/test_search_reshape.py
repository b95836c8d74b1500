"""The compiled reshape phase: forced changes kept only when better, undone otherwise.

On random grids and Voronoi tessellations, with every objective term, the reshape
(search.reshape) must leave every zone contiguous (checked with networkx, the reference
library), never end worse by (breaks, objective) than it started (checked with
measures.score, summed afresh), leave the compiled state equal to one rebuilt from its
labels (sums, free slots, boundary), and give the same labelling for the same seed.
"""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
from search_support import grid_graph, make_problem, nx_graph, voronoi_problem

from zonedesign import measures
from zonedesign.search import engine as E
from zonedesign.search import kernels as K
from zonedesign.search.forced import C_NLIVE
from zonedesign.search.reshape import MOVES, reshape, reshape_block, work_for
from zonedesign.search.state import ZoneState

ALL_TERMS = {"size": 1.0, "homogeneity": 1.3, "compactness": 0.7, "stability": 0.9}


def _grid_problem(seed: int, **kw):
    rng = np.random.default_rng(seed)
    keep = rng.random((14, 14)) > 0.08
    graph = grid_graph(keep)
    return make_problem(graph, rng.integers(1, 10, size=graph.n), 18.0, 40.0, 28.0, rng=rng, **kw)


def _problems():
    out = []
    for seed in (1, 2):
        out.append(("grid", _grid_problem(seed)))
    prev = np.random.default_rng(3).integers(0, 8, size=_grid_problem(3).n)
    out.append(("grid stability", _grid_problem(3, previous=prev, weights=ALL_TERMS)))
    out.append(("grid pairwise cut", _grid_problem(4, homogeneity="pairwise", compactness="cut")))
    out.append(("voronoi", voronoi_problem(150, 5, lo=25.0, hi=80.0, target=50.0)))
    return out


PROBLEMS = _problems()


def _started(problem, seed: int = 1) -> tuple[ZoneState, E._Run]:
    """A state at the engine's improved construction, and its run record."""
    E.warm_up()
    state = ZoneState(problem)
    run = E._Run(state, E.SearchRules(), seed, 1e9)
    labels, _ = E._construct(run, 1)
    anchors = None
    if problem.previous is not None:
        anchors = measures.anchors_by_overlap(np.asarray(problem.previous), labels, int(labels.max()) + 1)
    state.load(labels, anchors)
    E._improve(run)
    return state, run


def _score(problem, state: ZoneState):
    labels, anchors = state.compact()
    return measures.score(problem, labels, anchors if problem.previous is not None else None)


def _assert_contiguous(problem, labels: np.ndarray) -> None:
    g = nx_graph(problem.graph)
    for z in np.unique(labels):
        members = np.flatnonzero(labels == z).tolist()
        assert nx.is_connected(g.subgraph(members)), f"zone {z} ({len(members)} units) is not contiguous"


def _assert_state_consistent(problem, state: ZoneState) -> None:
    """The compiled state equals one rebuilt from its labels and anchors."""
    zones = state.zones
    fresh = ZoneState(problem, zones.labels.copy(), zones.anchor.copy())
    live = zones.size > 0
    np.testing.assert_array_equal(zones.size, fresh.zones.size)
    np.testing.assert_allclose(zones.cost[live], fresh.zones.cost[live], rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(zones.brk[live], fresh.zones.brk[live], rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(zones.csum[live], fresh.zones.csum[live], rtol=1e-9, atol=1e-9)
    free = zones.free[: zones.iv[K.IV_NFREE]]
    assert sorted(free.tolist()) == np.flatnonzero(~live).tolist(), "the free stack is not the set of empty slots"
    for z in np.flatnonzero(live):
        members, u = [], zones.head[z]
        while u >= 0:
            members.append(int(u))
            u = zones.nxt[u]
        assert sorted(members) == np.flatnonzero(zones.labels == z).tolist(), f"member list of zone {z}"
    assert sorted(state.boundary().tolist()) == sorted(fresh.boundary().tolist()), "boundary list"
    np.testing.assert_array_equal(zones.nbdiff, fresh.zones.nbdiff)
    rb, rt = state.running_key()
    brk, tot = fresh.key()
    assert abs(rb - brk) <= 1e-9 and abs(rt - tot) <= 1e-9 * max(1.0, abs(tot)), "running totals drifted"


@pytest.mark.parametrize("name,problem", PROBLEMS, ids=[n for n, _ in PROBLEMS])
def test_reshape_keeps_zones_contiguous_and_never_worsens(name, problem):
    state, run = _started(problem)
    before = _score(problem, state)
    reshape(run)
    after = _score(problem, state)
    _assert_contiguous(problem, state.compact()[0])
    _assert_state_consistent(problem, state)
    # breaks first, then the objective (measures.score summed afresh)
    assert after.breaks <= before.breaks + 1e-9
    if after.breaks >= before.breaks - 1e-9:
        assert after.total <= before.total + 1e-9


@pytest.mark.parametrize("kind", range(len(MOVES)), ids=[m.name for m in MOVES])
@pytest.mark.parametrize("name,problem", PROBLEMS[:2] + PROBLEMS[2:4], ids=[n for n, _ in PROBLEMS[:4]])
def test_each_move_alone_keeps_the_state_sound(name, problem, kind):
    """Many tries of one kind: kept ones and undone ones both leave a sound state."""
    state, _ = _started(problem, seed=2)
    before = _score(problem, state)
    w = work_for(state)
    stats = np.zeros(2, dtype=np.int64)
    reshape_block(state.st, w, 7, 150, kind, stats)
    _assert_contiguous(problem, state.compact()[0])
    _assert_state_consistent(problem, state)
    assert sorted(w.live[: w.cnt[C_NLIVE]].tolist()) == state.live().tolist(), "live-zone list"
    after = _score(problem, state)
    assert after.breaks <= before.breaks + 1e-9
    if after.breaks >= before.breaks - 1e-9:
        assert after.total <= before.total + 1e-9


def test_a_rejected_try_puts_the_labelling_back_exactly():
    """One try at a time from the same start: a try that is not kept leaves the labels,
    anchors and (breaks, objective) it began from; a kept one is strictly better."""
    problem = PROBLEMS[2][1]
    rejected = 0
    for kind in range(len(MOVES)):
        for seed in range(12):
            state, _ = _started(problem, seed=3)
            labels0, anchors0 = state.compact()
            key0 = state.key()
            kept = int(reshape_block(state.st, work_for(state), seed, 1, kind, np.zeros(2, dtype=np.int64)))
            labels1, anchors1 = state.compact()
            key1 = state.key()
            if kept:
                assert K.is_less(key1[0], key1[1], key0[0], key0[1])
                continue
            rejected += 1
            np.testing.assert_array_equal(labels1, labels0)
            np.testing.assert_array_equal(anchors1, anchors0)
            assert abs(key1[0] - key0[0]) <= 1e-9 and abs(key1[1] - key0[1]) <= 1e-9
            _assert_state_consistent(problem, state)
    assert rejected > 0


@pytest.mark.parametrize("name,problem", PROBLEMS[:3], ids=[n for n, _ in PROBLEMS[:3]])
def test_same_seed_same_result(name, problem):
    runs = []
    for _ in range(2):
        state, run = _started(problem, seed=4)
        reshape(run)
        runs.append((state.compact(), run.info["reshapes"], run.info["moves_tried"]))
    (l1, a1), k1, m1 = runs[0]
    (l2, a2), k2, m2 = runs[1]
    np.testing.assert_array_equal(l1, l2)
    np.testing.assert_array_equal(a1, a2)
    assert (k1, m1) == (k2, m2)


def test_a_split_try_on_one_unit_zones_regrows_them():
    """Every zone of one unit (far below the floor): split tries cannot cut them, so each
    regrows its zone with neighbours; the tries are kept because breaks fall, and the state
    stays sound."""
    E.warm_up()
    problem = _grid_problem(5)
    state = ZoneState(problem)
    state.load(np.arange(problem.n))
    before = _score(problem, state)
    split = next(i for i, m in enumerate(MOVES) if m.name == "split")
    kept = reshape_block(state.st, work_for(state), 3, 100, split, np.zeros(2, dtype=np.int64))
    after = _score(problem, state)
    assert kept > 0
    assert after.breaks < before.breaks
    _assert_contiguous(problem, state.compact()[0])
    _assert_state_consistent(problem, state)
