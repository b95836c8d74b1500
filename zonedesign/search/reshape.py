"""The reshape phase and its named move registry.

A single move never changes the number of zones, and a merge, split or exchange of
units that only pays once a few units have moved is never taken by the improving
passes. The reshape phase makes such changes by force around a random zone, repairs
the neighbourhood with a local descent and keeps the result only when it beats the
labelling before the change (breaks first); otherwise that labelling is restored.

Each kind of change is one `Move` in `MOVES`: its name, the function that makes it
(returning the zone slots to repair, or None when it does not apply) and the function
that compiles its kernels on a tiny state (`engine.warm_up` runs every one). A new move
type is one entry here; the reshape phase draws among the entries evenly.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from zonedesign.search import moves as KM
from zonedesign.search.azp import local_descent
from zonedesign.search.construct import absorb_enclaves, grow_zones
from zonedesign.search.kernels import is_less, seed_rng
from zonedesign.search.mergesplit import N_TREES, best_merge, merge_zones, try_split
from zonedesign.search.state import ZoneState

RESHAPE_TRIES = 0.2  # x n forced changes with repair (at least MIN_TRIES)
MIN_TRIES = 200
REGROW_NEIGHBOURS = 3  # zones dissolved with the chosen one in a regrowth
REGROW_AIM = (0.6, 1.4)  # regrown zones aim at a random share of the target in this range


@dataclass(frozen=True)
class Move:
    """One kind of forced change: make(run, zone, labels, anchors) -> slots to repair or
    None; warm(state) compiles what make calls."""

    name: str
    make: Callable[..., np.ndarray | None]
    warm: Callable[[ZoneState], None]


def _split(run, a: int, labels: np.ndarray, anchors: np.ndarray) -> np.ndarray | None:
    """Cut zone a at its best random-tree cut; a one-unit zone is regrown instead."""
    state = run.state
    if state.zones.size[a] < 2:
        return _regrow(run, a, labels, anchors)
    seed_rng(run.seed())
    loc = np.empty(state.problem.n, dtype=np.int64)
    new = int(try_split(state.st, a, N_TREES, loc, 1))
    return np.array([a, new], dtype=np.int64)


def _merge(run, a: int, labels: np.ndarray, anchors: np.ndarray) -> np.ndarray | None:
    """Merge zone a with its best partner whatever the price."""
    st = run.state.st
    b, _, _, anc = best_merge(st, a, 0, 0)
    if b < 0:
        return None
    merge_zones(st, a, int(b), int(anc))
    return np.array([a], dtype=np.int64)


def _regrow(run, a: int, labels: np.ndarray, anchors: np.ndarray) -> np.ndarray | None:
    """Dissolve zone a and up to REGROW_NEIGHBOURS neighbours and grow them again towards
    random aims around the target; the grown zones are new zones for stability."""
    state = run.state
    g = state.problem.graph
    n = labels.shape[0]
    members = np.flatnonzero(labels == a)
    rows = np.concatenate([g.indices[g.indptr[u] : g.indptr[u + 1]] for u in members])
    near = np.unique(labels[rows])
    near = near[near != a]
    if near.size > REGROW_NEIGHBOURS:
        near = run.rng.choice(near, REGROW_NEIGHBOURS, replace=False)
    old = np.concatenate([[a], near]).astype(np.int64)
    region = np.flatnonzero(np.isin(labels, old))
    work = labels.copy()
    work[region] = -1
    alpha, beta = growth_weights(state)
    made = int(grow_zones(state.st, run.seed(), alpha, beta, work, region, n, REGROW_AIM[0], REGROW_AIM[1]))
    if made == 0:
        return None
    # new zones take the dissolved zones' slots, then free ones (anchor -1)
    slots = np.concatenate([old, np.flatnonzero(state.zones.size == 0)])[:made]
    grown = work >= n
    work[grown] = slots[work[grown] - n]
    new_anchors = anchors.copy()
    new_anchors[slots] = -1
    KM.relabel(state.st, region, work, new_anchors, slots)
    absorb_enclaves(state.st, run.seed())
    return slots


def _shift(run, a: int, labels: np.ndarray, anchors: np.ndarray) -> np.ndarray | None:
    """Move one edge unit of zone a to a neighbouring zone even if a bound breaks; the
    repair may turn it into a swap."""
    state = run.state
    st, zones = state.st, state.zones
    edge = np.flatnonzero((labels == a) & (zones.bpos >= 0))
    if edge.size == 0:
        return None
    u = int(edge[run.rng.integers(edge.size)])
    if not KM.donor_ok(st, u):
        return None
    others = state.neighbour_zones(u)
    b = int(others[run.rng.integers(others.size)])
    KM.move_unit(st, u, b)
    return np.array([a, b], dtype=np.int64)


def _warm_split(state: ZoneState) -> None:
    try_split(state.st, int(state.zones.labels[0]), 1, np.empty(state.problem.n, dtype=np.int64), 1)


def _warm_merge(state: ZoneState) -> None:
    b, _, _, anc = best_merge(state.st, 0, 0, 0)
    if b >= 0:
        merge_zones(state.st, 0, int(b), int(anc))


def _warm_regrow(state: ZoneState) -> None:
    n = state.problem.n
    labels = np.full(n, -1, dtype=np.int64)
    grow_zones(state.st, 1, 1.0, 1.0, labels, np.arange(n, dtype=np.int64), 0, 1.0, 1.0)
    KM.relabel(state.st, np.arange(n, dtype=np.int64), np.zeros(n, dtype=np.int64), state.zones.anchor.copy(), np.zeros(0, dtype=np.int64))
    absorb_enclaves(state.st, 1)


def _warm_shift(state: ZoneState) -> None:
    KM.donor_ok(state.st, 1)
    KM.move_unit(state.st, 1, int(state.zones.labels[0]))


# the order is part of a seed's meaning: the reshape draws an index into this tuple
MOVES: tuple[Move, ...] = (
    Move("split", _split, _warm_split),
    Move("merge", _merge, _warm_merge),
    Move("regrow", _regrow, _warm_regrow),
    Move("shift", _shift, _warm_shift),
)


def growth_weights(state: ZoneState) -> tuple[float, float]:
    """(alpha, beta) of region growing: homogeneity when it is weighed, else compactness."""
    tw = state.problem.term_weights
    alpha = 1.0 if tw.get("homogeneity", 0.0) > 0 else 0.0
    beta = 1.0 if tw.get("compactness", 0.0) > 0 or alpha == 0.0 else 0.0
    return alpha, beta


def reshape(run) -> None:
    """Forced changes around random zones, each repaired by a local descent, kept if better.

    run: the engine's per-solve record (state, rng, seed(), out_of_time(), info).
    """
    state = run.state
    st, zones = state.st, state.zones
    n = state.problem.n
    tries = max(MIN_TRIES, int(RESHAPE_TRIES * n))
    stats = np.zeros(2, dtype=np.int64)
    kept = 0
    for _ in range(tries):
        if run.out_of_time():
            break
        live = np.flatnonzero(zones.size > 0)
        a = int(live[run.rng.integers(live.size)])
        before = state.running_key()
        labels, anchors = zones.labels.copy(), zones.anchor.copy()
        move = MOVES[run.rng.integers(len(MOVES))]
        touched = move.make(run, a, labels, anchors)
        if touched is None:
            continue
        local_descent(st, run.seed(), touched, stats)
        after = state.running_key()
        if is_less(after[0], after[1], before[0], before[1]):
            kept += 1
        else:
            state.restore(labels, anchors)
    run.info["moves_tried"] += int(stats[0])
    run.info["moves_accepted"] += int(stats[1])
    run.info["reshapes"] = kept
