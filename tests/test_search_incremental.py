"""The search's incremental zone sums equal the full objective of zonedesign.measures.

Long random sequences of single-unit moves, merges and splits are applied to the
incremental state; after every step its (breaks, total) must equal measures.score of the
same labelling, and each predicted change must equal the change that happened.
"""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
from search_support import grid_graph, make_problem, nx_graph, voronoi_problem

from zonedesign import measures
from zonedesign.search.state import ZoneState

ALL_TERMS = {"size": 1.0, "homogeneity": 1.3, "compactness": 0.7, "stability": 0.9}


def close(a: float, b: float) -> bool:
    return abs(a - b) <= 1e-9 * max(1.0, abs(a), abs(b))


def full(problem, state: ZoneState):
    labels, anchors = state.compact()
    return measures.score(problem, labels, anchors if problem.previous is not None else None)


def assert_agrees(problem, state: ZoneState, step: str) -> None:
    ref = full(problem, state)
    brk, tot = state.key()
    assert close(brk, ref.breaks), f"{step}: breaks {brk} != {ref.breaks}"
    assert close(tot, ref.total), f"{step}: total {tot} != {ref.total}"
    rbrk, rtot = state.running_key()
    assert close(rbrk, ref.breaks) and close(rtot, ref.total), f"{step}: running sums drifted"


def random_walk(problem, state: ZoneState, steps: int, seed: int) -> dict[str, int]:
    """Random moves with an occasional merge or split; checks after every step."""
    rng = np.random.default_rng(seed)
    g = nx_graph(problem.graph)
    done = {"moves": 0, "merges": 0, "splits": 0, "restores": 0}
    saved = (state.labels(), state.zones.anchor.copy(), state.key())
    for step in range(steps):
        roll = rng.random()
        live = state.live()
        if step % 20 == 0:
            saved = (state.labels(), state.zones.anchor.copy(), state.key())
        if roll < 0.03:
            # going back to an earlier labelling touches only the zones that changed
            state.restore(saved[0], saved[1])
            assert close(state.key()[0], saved[2][0]) and close(state.key()[1], saved[2][1])
            done["restores"] += 1
        elif roll < 0.09 and live.size > 1:
            a = int(rng.choice(live))
            members = np.flatnonzero(state.labels() == a)
            nbz = sorted({int(state.labels()[v]) for u in members for v in g.neighbors(int(u))} - {a})
            if not nbz:
                continue
            b = int(rng.choice(nbz))
            before = state.key()
            db, do, _ = state.merge_delta(a, b)
            state.merge(a, b)
            after = state.key()
            assert close(after[0] - before[0], db) and close(after[1] - before[1], do), f"merge {step}"
            done["merges"] += 1
        elif roll < 0.15:
            sizes = np.bincount(state.labels(), minlength=problem.n)
            big = np.flatnonzero(sizes >= 2)
            if big.size == 0:
                continue
            zone = int(rng.choice(big))
            before = state.key()
            new = state.split(zone, seed=int(rng.integers(1 << 30)), force=True)
            assert new >= 0, "a connected zone of two or more units can always be cut"
            done["splits"] += 1
        else:
            units = state.boundary()
            if units.size == 0:
                continue
            i = int(rng.choice(units))
            if not state.can_move(i):
                continue
            zones = state.neighbour_zones(i)
            b = int(rng.choice(zones))
            before = state.key()
            db, do = state.move_delta(i, b)
            state.move(i, b)
            after = state.key()
            assert close(after[0] - before[0], db) and close(after[1] - before[1], do), f"move {step}"
            done["moves"] += 1
        assert_agrees(problem, state, f"step {step}")
    return done


CASES = [
    ("ssd", "polsby"),
    ("pairwise", "polsby"),
    ("ssd", "cut"),
    ("pairwise", "cut"),
]


@pytest.mark.parametrize(("homogeneity", "compactness"), CASES)
def test_grid_walk_matches_measures(homogeneity, compactness):
    rng = np.random.default_rng(11)
    keep = rng.random((7, 8)) > 0.12
    graph = grid_graph(keep)
    n = graph.n
    counts = rng.integers(1, 30, size=n)
    previous = rng.integers(-1, 6, size=n)
    problem = make_problem(
        graph, counts, lo=40, hi=120, target=70, weights=ALL_TERMS,
        homogeneity=homogeneity, compactness=compactness, previous=previous, rng=rng,
    )
    # a patchwork start: units by index mod 4, cut into connected pieces
    comp = np.arange(n) % 4
    labels = _connected_pieces(graph, comp)
    k = int(labels.max()) + 1
    state = ZoneState(problem, labels, anchors=rng.integers(-1, 6, size=k))
    assert_agrees(problem, state, "start")
    done = random_walk(problem, state, steps=300, seed=5)
    # the walk exercised every kind of step
    assert done["moves"] > 80 and done["merges"] > 3 and done["splits"] > 3


@pytest.mark.parametrize(("homogeneity", "compactness"), CASES)
def test_voronoi_walk_matches_measures(homogeneity, compactness):
    rng = np.random.default_rng(3)
    problem = voronoi_problem(
        45, seed=8, lo=30, hi=90, target=50, weights=ALL_TERMS,
        homogeneity=homogeneity, compactness=compactness, previous=rng.integers(0, 5, size=45),
    )
    labels = _connected_pieces(problem.graph, np.arange(problem.n) % 3)
    k = int(labels.max()) + 1
    state = ZoneState(problem, labels, anchors=np.arange(k) % 5)
    assert_agrees(problem, state, "start")
    done = random_walk(problem, state, steps=200, seed=9)
    assert done["moves"] > 80


def test_walk_without_previous_zones_matches_measures():
    """Stability is zero when there are no previous zones, whatever its weight."""
    rng = np.random.default_rng(4)
    graph = grid_graph(np.ones((6, 6), dtype=bool))
    problem = make_problem(graph, rng.integers(0, 25, size=36), lo=30, hi=80, target=55, weights=ALL_TERMS, rng=rng)
    state = ZoneState(problem, _connected_pieces(graph, np.arange(36) % 5))
    random_walk(problem, state, steps=150, seed=2)


def _connected_pieces(graph, labels: np.ndarray) -> np.ndarray:
    g = nx_graph(graph)
    out = np.full(graph.n, -1, dtype=np.int64)
    k = 0
    for z in np.unique(labels):
        for comp in nx.connected_components(g.subgraph(np.flatnonzero(labels == z).tolist())):
            out[list(comp)] = k
            k += 1
    return out


def test_large_pairwise_path_matches_measures(monkeypatch):
    """Above PAIRWISE_DENSE_LIMIT the search sums pairwise distances itself instead of
    building measures' dense matrix; both give the same normaliser and score."""
    from zonedesign.search import state as state_mod

    problem = voronoi_problem(40, seed=2, lo=20, hi=90, target=50, weights=ALL_TERMS, homogeneity="pairwise")
    labels = _connected_pieces(problem.graph, np.arange(problem.n) % 4)
    dense_norm = state_mod.search_normalisers(problem)
    dense = state_mod.full_score(problem, labels)
    monkeypatch.setattr(state_mod, "PAIRWISE_DENSE_LIMIT", 10)
    by_pairs_norm = state_mod.search_normalisers(problem)
    by_pairs = state_mod.full_score(problem, labels)
    assert dense_norm == pytest.approx(by_pairs_norm, rel=1e-12)
    assert close(by_pairs.total, dense.total) and close(by_pairs.breaks, dense.breaks)
    for t in dense.terms:
        assert close(by_pairs.terms[t], dense.terms[t])
