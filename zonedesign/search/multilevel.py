"""Multilevel search for large fences (Karypis & Kumar 1998, multilevel graph partitioning).

1. Coarsen: units are paired by heavy-edge matching (visited in random order, each joins
   the unmatched neighbour it shares the longest boundary with), never past a ceiling
   (a pair's counts stay within `CAP_SHARE` of every upper bound, or of twice a target
   where no upper bound is set), never across a fence (a fence's problem holds no edge to
   another) and never between units with different previous zones. A coarse unit's
   counts, weight, area and perimeter are sums (perimeter less twice the boundary inside),
   its attributes the weighted means; levels repeat until one shrinks the fence by less
   than `STALL`, or `MAX_LEVELS` are made.
2. Solve the coarsest level with the fence's method (construction, annealing or tabu,
   merges and splits), priced with the fine problem's normalisers: every term but the
   pairwise homogeneity then differs from the fine objective by a constant only (the
   within-unit part of the weighted sum of squares), so both levels rank zonings alike.
3. Project to the next finer level and refine there: a short annealing that starts cold
   (`REFINE_START_ACCEPT`) over boundary-unit moves, merges and splits, then descent;
   level by level down to the units.

Each level's labels are contiguous because coarse units are connected pairs and a
zone of connected units that is connected at the coarse level is connected below it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from zonedesign.graph.collapse import collapse
from zonedesign.measures import zone_perimeter, zone_sums
from zonedesign.records import Problem

# fences with at least this many units take the multilevel path by default; on 2,000-unit
# fences (zones of 3 to 20 units) it measured no better than the flat search at equal
# moves (benchmarks/results/quality-scale.md), so only far larger fences take it unasked
MULTILEVEL_UNITS = 20_000
CAP_SHARE = 0.5  # a coarse unit holds at most this share of an upper bound
STALL = 0.9  # a level that keeps more than this share of the units is not worth making
MAX_LEVELS = 3
MIN_COARSE = 200  # no level coarser than this many units


@dataclass(frozen=True)
class Level:
    """One coarsening step: `problem` over coarse units, `parent[u]` the coarse unit of u."""

    problem: Problem
    parent: np.ndarray


def pair_caps(problem: Problem) -> np.ndarray:
    """Per count, the most a coarse unit may hold (inf where nothing bounds it above)."""
    b = problem.bounds
    caps = np.full(len(b.count_names), np.inf)
    for c in range(len(b.count_names)):
        if np.isfinite(b.hi[c]):
            caps[c] = CAP_SHARE * b.hi[c]
        elif np.isfinite(b.target[c]) and b.target[c] > 0:
            caps[c] = 2.0 * CAP_SHARE * b.target[c]
    return caps


def heavy_edge_matching(problem: Problem, seed: int) -> tuple[np.ndarray, int]:
    """(coarse unit of every unit, number of coarse units) by heavy-edge matching."""
    g = problem.graph
    n = g.n
    counts = np.asarray(problem.counts, dtype=np.float64).reshape(n, -1)
    caps = pair_caps(problem)
    bounded = np.isfinite(caps)
    prev = None if problem.previous is None else np.asarray(problem.previous)
    rng = np.random.default_rng(seed)
    parent = np.full(n, -1, dtype=np.int64)
    k = 0
    indptr, indices, length = g.indptr, g.indices, g.length
    for u in rng.permutation(n):
        if parent[u] >= 0:
            continue
        best, best_len = -1, -1.0
        for p in range(indptr[u], indptr[u + 1]):
            v = indices[p]
            if parent[v] >= 0 or length[p] <= best_len:
                continue
            if prev is not None and prev[v] != prev[u]:
                continue
            if bounded.any() and (counts[u, bounded] + counts[v, bounded] > caps[bounded]).any():
                continue
            best, best_len = int(v), float(length[p])
        parent[u] = k
        if best >= 0:
            parent[best] = k
        k += 1
    return parent, k


def coarse_problem(problem: Problem, parent: np.ndarray, k: int) -> Problem:
    """The problem over coarse units: sums of counts, weighted means of attributes."""
    n = problem.n
    counts = np.asarray(problem.counts, dtype=np.float64).reshape(n, -1)
    w = np.asarray(problem.weight, dtype=np.float64)
    x = np.asarray(problem.attrs, dtype=np.float64).reshape(n, -1)
    ws = zone_sums(parent, k, w)
    sizes = np.maximum(np.bincount(parent, minlength=k), 1)
    plain = zone_sums(parent, k, x) / sizes[:, None] if x.shape[1] else np.zeros((k, 0))
    with np.errstate(invalid="ignore", divide="ignore"):
        weighted = zone_sums(parent, k, w[:, None] * x) / np.where(ws > 0, ws, 1.0)[:, None] if x.shape[1] else plain
    attrs = np.where(ws[:, None] > 0, weighted, plain)
    previous = None
    if problem.previous is not None:
        previous = np.full(k, -1, dtype=np.int64)
        previous[parent] = np.asarray(problem.previous, dtype=np.int64)
    return Problem(
        graph=collapse(problem.graph, parent, k),
        counts=zone_sums(parent, k, counts),
        bounds=problem.bounds,
        attrs=attrs,
        weight=ws,
        area=zone_sums(parent, k, np.asarray(problem.area, dtype=np.float64)),
        perimeter=zone_perimeter(problem.graph, parent, k, np.asarray(problem.perimeter, dtype=np.float64)),
        term_weights=dict(problem.term_weights),
        homogeneity=problem.homogeneity,
        compactness=problem.compactness,
        previous=previous,
    )


def coarsen(problem: Problem, seed: int) -> list[Level]:
    """The coarsening levels of a problem, finest first (empty when none is worth making)."""
    levels: list[Level] = []
    current = problem
    for depth in range(MAX_LEVELS):
        parent, k = heavy_edge_matching(current, seed + 7919 * depth)
        if k > STALL * current.n or k < MIN_COARSE:
            break
        current = coarse_problem(current, parent, k)
        levels.append(Level(problem=current, parent=parent))
    return levels


def uses_multilevel(n: int, method: str, wanted: bool | None = None) -> bool:
    """The path choice: large fences (or `wanted` True), with a method that searches past a
    local optimum; `wanted` False keeps the flat path."""
    if method not in ("annealing", "tabu") or wanted is False:
        return False
    return bool(wanted) or n >= MULTILEVEL_UNITS
