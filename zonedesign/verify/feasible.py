"""Feasible zones of one fence: every connected set of units whose counts meet the bounds.

Each connected set is generated once, from its smallest unit, by binary branching on the
frontier (include a frontier unit, or forbid it for the rest of the branch). A set whose
counts already exceed a ceiling is not grown further: with counts that are never negative,
every superset exceeds it too.

`feasible_zones` lists them with what pricing needs (sums, weights, areas, shared
boundary, pairwise distances, previous-zone tallies) and prices each like
`measures.zone_costs`; `count_feasible_zones` walks the same tree keeping only the sets and
their sums, and stops as soon as the count passes a cap or the walk passes a node budget,
so that deciding "too many to solve exactly" costs little on a large fence.

The walk's state is a stack of frames, one per depth: set S, frontier X, forbidden F
(bit sets of 64-unit words) and the running sums; `feasible_zones` adds per frame the
running figures W, Q, area, perimeter, internal boundary, pairwise sum and size.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numba
import numpy as np

from zonedesign import compilelock, measures
from zonedesign.records import Bounds, Graph, Problem

# frames of the walk per kernel call before the driver looks at the clock and the cap
CHUNK_NODES = 200_000


@dataclass(frozen=True)
class FeasibleZones:
    """Every feasible zone as member lists (CSR: ptr, members) with its cost per term."""

    ptr: np.ndarray
    members: np.ndarray
    costs: np.ndarray  # weighted normalised cost per zone (what zone_cost returns)
    complete: bool  # False when the cap or the time limit cut the enumeration short
    reason: str

    @property
    def n(self) -> int:
        return int(self.ptr.shape[0] - 1)

    def zone(self, j: int) -> np.ndarray:
        return self.members[self.ptr[j] : self.ptr[j + 1]]


@dataclass(frozen=True)
class ZoneCount:
    """How many feasible zones a fence has: exact when `complete`, else more than `count`."""

    count: int
    complete: bool
    nodes: int  # frames of the walk visited
    reason: str = ""


# ---------------------------------------------------------------- bit sets

# The kernels copy rows element by element, never by slice assignment (`a[i, :] = b[j]`):
# numba compiles a formatted shape-mismatch error for every array-to-array slice
# assignment, seconds of compile on a first run for no speed at all.


@numba.njit(cache=True)
def _bit_index(word: np.uint64) -> int:
    return int(math.log2(float(word)) + 0.5)


@numba.njit(cache=True)
def _lowest(x: np.ndarray) -> int:
    for w in range(x.shape[0]):
        word = x[w]
        if word != 0:
            return w * 64 + _bit_index(word & (~word + np.uint64(1)))
    return -1


@numba.njit(cache=True)
def _has(x: np.ndarray, i: int) -> bool:
    return (x[i >> 6] >> np.uint64(i & 63)) & np.uint64(1) != 0


@numba.njit(cache=True)
def _set(x: np.ndarray, i: int) -> None:
    x[i >> 6] |= np.uint64(1) << np.uint64(i & 63)


@numba.njit(cache=True)
def _clear(x: np.ndarray, i: int) -> None:
    x[i >> 6] &= ~(np.uint64(1) << np.uint64(i & 63))


# ---------------------------------------------------------------- the walk's steps


@numba.njit(cache=True)
def _open_root(v, sets, sums, graph, counts, prune, hi) -> bool:
    """Frame 0 := {v} with units below v forbidden; False when v alone passes a ceiling."""
    stS, stX, stF = sets
    indptr, indices, _ = graph
    for c in range(counts.shape[1]):
        if prune[c] and counts[v, c] > hi[c]:
            return False
    stS[0, :] = 0
    stX[0, :] = 0
    stF[0, :] = 0
    for u in range(v):
        _set(stF[0], u)
    _set(stS[0], v)
    for p in range(indptr[v], indptr[v + 1]):
        if indices[p] > v:
            _set(stX[0], indices[p])
    for c in range(counts.shape[1]):
        sums[0, c] = counts[v, c]
    return True


@numba.njit(cache=True)
def _branch(top, sets, sums, graph, counts, prune, hi) -> int:
    """Branch frame `top` on its lowest frontier unit u.

    The include child (S + u) goes to frame top + 1; frame top becomes the exclude child
    (u forbidden). Returns u, -1 when the frontier is empty (the frame is done), or
    -2 - u when the include child passes a ceiling (not to be grown or recorded).
    """
    stS, stX, stF = sets
    indptr, indices, _ = graph
    u = _lowest(stX[top])
    if u < 0:
        return -1
    inc = top + 1
    for ww in range(stS.shape[1]):
        stS[inc, ww] = stS[top, ww]
        stF[inc, ww] = stF[top, ww]
        stX[inc, ww] = stX[top, ww]
    _clear(stX[inc], u)
    _set(stS[inc], u)
    over = False
    for c in range(counts.shape[1]):
        sums[inc, c] = sums[top, c] + counts[u, c]
        if prune[c] and sums[inc, c] > hi[c]:
            over = True
    _clear(stX[top], u)
    _set(stF[top], u)
    if over:
        return -2 - u
    for p in range(indptr[u], indptr[u + 1]):
        t = indices[p]
        if not _has(stF[inc], t) and not _has(stS[inc], t):
            _set(stX[inc], t)
    return u


@numba.njit(cache=True)
def _meets(sums_row, lo, hi) -> bool:
    for c in range(sums_row.shape[0]):
        if sums_row[c] < lo[c] or sums_row[c] > hi[c]:
            return False
    return True


@numba.njit(cache=True)
def _root_figures(v, stats, stXS, unit) -> None:
    w, xw, xq, area, perimeter, _, _ = unit
    for a in range(xw.shape[1]):
        stXS[0, a] = xw[v, a]
    stats[0, 0] = w[v]
    stats[0, 1] = xq[v]
    stats[0, 2] = area[v]
    stats[0, 3] = perimeter[v]
    stats[0, 4] = 0.0
    stats[0, 5] = 0.0
    stats[0, 6] = 1.0


@numba.njit(cache=True)
def _grow_figures(top, u, stS, stats, stXS, graph, unit, use_dist) -> None:
    """Frame top + 1's figures: frame top's plus unit u (boundary shared with S counted)."""
    w, xw, xq, area, perimeter, dist, _ = unit
    indptr, indices, length = graph
    inc = top + 1
    internal = stats[top, 4]
    for p in range(indptr[u], indptr[u + 1]):
        if _has(stS[top], indices[p]):
            internal += length[p]
    pairs = stats[top, 5]
    if use_dist:
        for ww in range(stS.shape[1]):
            word = stS[top, ww]
            while word != 0:
                low = word & (~word + np.uint64(1))
                pairs += dist[u, ww * 64 + _bit_index(low)]
                word ^= low
    for a in range(xw.shape[1]):
        stXS[inc, a] = stXS[top, a] + xw[u, a]
    stats[inc, 0] = stats[top, 0] + w[u]
    stats[inc, 1] = stats[top, 1] + xq[u]
    stats[inc, 2] = stats[top, 2] + area[u]
    stats[inc, 3] = stats[top, 3] + perimeter[u]
    stats[inc, 4] = internal
    stats[inc, 5] = pairs
    stats[inc, 6] = stats[top, 6] + 1.0


@numba.njit(cache=True)
def _record(f, sets, sums, stats, stXS, unit, tally, out, n_out, n_mem):
    """Append frame f to the output when it meets every bound; (n_out, n_mem) after."""
    outSums, outStats, outXS, outPtr, outMembers = out
    prev = unit[6]
    S = sets[0][f]
    start = n_mem
    best = 0
    any_prev = False
    for ww in range(S.shape[0]):
        word = S[ww]
        while word != 0:
            low = word & (~word + np.uint64(1))
            t = ww * 64 + _bit_index(low)
            outMembers[n_mem] = t
            n_mem += 1
            if prev[t] >= 0:
                any_prev = True
                tally[prev[t]] += 1
                best = max(best, tally[prev[t]])
            word ^= low
    for p in range(start, n_mem):
        if prev[outMembers[p]] >= 0:
            tally[prev[outMembers[p]]] = 0
    for c in range(sums.shape[1]):
        outSums[n_out, c] = sums[f, c]
    for j in range(7):
        outStats[n_out, j] = stats[f, j]
    # stability: members outside the zone's anchor (the previous zone holding most of them)
    outStats[n_out, 7] = (stats[f, 6] - best) if any_prev else 0.0
    for a in range(stXS.shape[1]):
        outXS[n_out, a] = stXS[f, a]
    outPtr[n_out + 1] = n_mem
    return n_out + 1, n_mem


# ---------------------------------------------------------------- the two walks


@numba.njit(cache=True)
def _enumerate(v, sp, sets, sums, stats, stXS, graph, counts, bounds, unit, use_dist, out, filled, tally, budget):
    """Resumable enumeration from (v, sp); filled = (n_out, n_mem).

    Returns (v, sp, n_out, n_mem, state): state 0 all done, 1 output buffers full,
    2 node budget spent.
    """
    lo, hi, prune = bounds
    n = counts.shape[0]
    n_out, n_mem = filled
    cap_out = out[0].shape[0]
    cap_mem = out[4].shape[0]
    nodes = 0
    while v < n:
        if sp == 0:
            if n_out + 1 > cap_out or n_mem + n > cap_mem:
                return v, sp, n_out, n_mem, 1
            if not _open_root(v, sets, sums, graph, counts, prune, hi):
                v += 1
                continue
            _root_figures(v, stats, stXS, unit)
            sp = 1
            if _meets(sums[0], lo, hi):
                # frame 0 as an int64, not the literal 0: one compile of _record, not two
                n_out, n_mem = _record(np.int64(0), sets, sums, stats, stXS, unit, tally, out, n_out, n_mem)
        while sp > 0:
            if nodes >= budget:
                return v, sp, n_out, n_mem, 2
            if n_out + 1 > cap_out or n_mem + n > cap_mem:
                return v, sp, n_out, n_mem, 1
            nodes += 1
            u = _branch(sp - 1, sets, sums, graph, counts, prune, hi)
            if u == -1:
                sp -= 1
                continue
            if u < -1:
                continue
            _grow_figures(sp - 1, u, sets[0], stats, stXS, graph, unit, use_dist)
            if _meets(sums[sp], lo, hi):
                n_out, n_mem = _record(sp, sets, sums, stats, stXS, unit, tally, out, n_out, n_mem)
            sp += 1
        v += 1
    return v, sp, n_out, n_mem, 0


@numba.njit(cache=True)
def _count(sets, sums, graph, counts, lo, hi, prune, cap, node_cap):
    """(feasible zones found, nodes visited, finished): stops once found > cap or nodes > node_cap."""
    n = counts.shape[0]
    found = 0
    nodes = 0
    for v in range(n):
        if not _open_root(v, sets, sums, graph, counts, prune, hi):
            continue
        if _meets(sums[0], lo, hi):
            found += 1
        sp = 1
        while sp > 0:
            if found > cap or nodes > node_cap:
                return found, nodes, False
            nodes += 1
            u = _branch(sp - 1, sets, sums, graph, counts, prune, hi)
            if u == -1:
                sp -= 1
                continue
            if u < -1:
                continue
            if _meets(sums[sp], lo, hi):
                found += 1
            sp += 1
    return found, nodes, True


# ---------------------------------------------------------------- drivers


def _walk_inputs(problem: Problem):
    """The arrays both walks share: graph, counts, bounds (lo, hi, which ceilings prune)."""
    n = problem.n
    g = problem.graph
    graph = (g.indptr.astype(np.int64), g.indices.astype(np.int64), g.length.astype(np.float64))
    counts = np.ascontiguousarray(np.asarray(problem.counts, dtype=np.float64).reshape(n, -1))
    b = problem.bounds
    lo = np.where(np.isfinite(b.lo), b.lo, -np.inf).astype(np.float64)
    hi = np.where(np.isfinite(b.hi), b.hi, np.inf).astype(np.float64)
    # ceilings prune only where counts never fall: then supersets can only grow
    prune = np.isfinite(hi) & (counts >= 0).all(axis=0)
    return graph, counts, (lo, hi, prune)


def _frames(n: int, nc: int):
    words = max(1, (n + 63) // 64)
    depth = n + 2
    sets = tuple(np.zeros((depth, words), dtype=np.uint64) for _ in range(3))
    return sets, np.zeros((depth, nc))


def count_feasible_zones(problem: Problem, cap: int, *, node_cap: int | None = None) -> ZoneCount:
    """The number of feasible zones of one fence, counted only up to `cap`.

    The walk stops as soon as it has found more than `cap` zones or visited more than
    `node_cap` frames (default 50 per zone of the cap: sets below a floor are walked but
    not counted, and a fence of tiny units has many of them), so a fence far above the cap
    costs about as much as one at it.
    """
    if cap < 0:
        raise ValueError(f"cap must be >= 0, got {cap}")
    warm_walk("count")
    node_cap = 50 * max(cap, 1_000) if node_cap is None else node_cap
    if problem.n == 0:
        return ZoneCount(0, True, 0)
    graph, counts, (lo, hi, prune) = _walk_inputs(problem)
    sets, sums = _frames(problem.n, counts.shape[1])
    found, nodes, done = _count(sets, sums, graph, counts, lo, hi, prune, int(cap), int(node_cap))
    if done:
        return ZoneCount(int(found), True, int(nodes))
    reason = f"more than {cap:,} feasible zones" if found > cap else (
        f"the count passed its budget of {node_cap:,} sets walked ({found:,} feasible zones found by then)"
    )
    return ZoneCount(int(found), False, int(nodes), reason)


def _unit_figures(problem: Problem):
    """Per unit: weight, weighted attributes, weighted squares, area, perimeter, the
    pairwise distances (pairwise homogeneity only) and the dense previous zone (or -1)."""
    n = problem.n
    x = np.ascontiguousarray(np.asarray(problem.attrs, dtype=np.float64).reshape(n, -1))
    w = np.asarray(problem.weight, dtype=np.float64)
    xw = np.ascontiguousarray(w[:, None] * x)
    xq = (w[:, None] * x**2).sum(axis=1) if x.shape[1] else np.zeros(n)
    use_dist = problem.homogeneity == "pairwise" and x.shape[1] > 0
    dist = measures.pairwise_distances(x) if use_dist else np.zeros((1, 1))
    if problem.previous is not None:
        prev_raw = np.asarray(problem.previous, dtype=np.int64)
        # dense codes keep the tally small; the order of ids is kept for tie-breaking
        uniq = np.unique(prev_raw[prev_raw >= 0])
        prev = np.where(prev_raw >= 0, np.searchsorted(uniq, prev_raw), -1).astype(np.int64)
    else:
        prev = np.full(n, -1, dtype=np.int64)
    area = np.asarray(problem.area, dtype=np.float64)
    perimeter = np.asarray(problem.perimeter, dtype=np.float64)
    return (w, xw, xq, area, perimeter, dist, prev), use_dist


def _grown(out: tuple, n_out: int, n_mem: int, n: int, max_zones: int) -> tuple:
    """The output buffers with room for at least one more zone of n members."""
    outSums, outStats, outXS, outPtr, outMembers = out
    if n_out + 1 > outSums.shape[0]:
        grow = max(min(outSums.shape[0] * 2, max_zones + 2) - outSums.shape[0], 1)
        outSums = np.concatenate([outSums, np.zeros((grow, outSums.shape[1]))])
        outStats = np.concatenate([outStats, np.zeros((grow, 8))])
        outXS = np.concatenate([outXS, np.zeros((grow, outXS.shape[1]))])
        outPtr = np.concatenate([outPtr, np.zeros(grow, dtype=np.int64)])
    if n_mem + n > outMembers.shape[0]:
        outMembers = np.concatenate([outMembers, np.zeros(outMembers.shape[0] + n, dtype=np.int64)])
    return outSums, outStats, outXS, outPtr, outMembers


def feasible_zones(
    problem: Problem, *, max_zones: int = 2_000_000, time_limit: float = 60.0
) -> FeasibleZones:
    """Every connected set of units meeting the bounds, priced like `measures.zone_cost`."""
    # compiled (or loaded) before the clock starts: a compile must not eat the time limit
    warm_walk("enumerate")
    start = time.perf_counter()
    n = problem.n
    graph, counts, bounds = _walk_inputs(problem)
    unit, use_dist = _unit_figures(problem)
    na = unit[1].shape[1]
    sets, sums = _frames(n, counts.shape[1])
    stats = np.zeros((n + 2, 7))
    stXS = np.zeros((n + 2, na))
    cap = min(max_zones, 4096) + 1
    out = (np.zeros((cap, counts.shape[1])), np.zeros((cap, 8)), np.zeros((cap, na)),
           np.zeros(cap + 1, dtype=np.int64), np.zeros(cap * 8 + n, dtype=np.int64))  # fmt: skip
    # per previous zone: how many of a zone's members it holds (stability's anchor)
    tally = np.zeros(max(int(unit[6].max(initial=-1)) + 1, 1), dtype=np.int64)
    v, sp, n_out, n_mem = 0, 0, 0, 0
    complete, reason = True, ""
    while True:
        v, sp, n_out, n_mem, state = _enumerate(
            v, sp, sets, sums, stats, stXS, graph, counts, bounds, unit, use_dist, out, (n_out, n_mem), tally,
            CHUNK_NODES,
        )
        if state == 0:
            break
        if n_out > max_zones:
            complete, reason = False, f"more than {max_zones:,} feasible zones"
            break
        if time.perf_counter() - start > time_limit:
            complete, reason = False, f"enumeration not finished within {time_limit:g} s"
            break
        if state == 1:
            out = _grown(out, n_out, n_mem, n, max_zones)
    k = n_out if complete else min(n_out, max_zones)
    outSums, outStats, outXS, outPtr, outMembers = out
    costs = _price(problem, outSums[:k], outStats[:k], outXS[:k])
    ptr = outPtr[: k + 1].copy()
    return FeasibleZones(ptr=ptr, members=outMembers[: ptr[-1]].copy(), costs=costs, complete=complete, reason=reason)


def _price(problem: Problem, sums: np.ndarray, stats: np.ndarray, xs: np.ndarray) -> np.ndarray:
    """Weighted normalised cost per zone, term by term as in measures.zone_costs."""
    b = problem.bounds
    norm = measures.normalisers(problem)
    size = np.zeros(sums.shape[0])
    for c in np.flatnonzero(np.isfinite(b.target)):
        size += np.abs(sums[:, c] - b.target[c]) / b.target[c]
    W, Q = stats[:, 0], stats[:, 1]
    if problem.homogeneity == "pairwise":
        homog = stats[:, 5]
    elif xs.shape[1]:
        with np.errstate(invalid="ignore", divide="ignore"):
            homog = np.where(W > 0, Q - (xs**2).sum(axis=1) / np.where(W > 0, W, 1.0), 0.0)
        homog = np.maximum(homog, 0.0)
    else:
        homog = np.zeros(sums.shape[0])
    per = stats[:, 3] - 2.0 * stats[:, 4]
    if problem.compactness == "cut":
        compact = per / 2.0
    else:
        compact = 1.0 - measures.polsby_popper(stats[:, 2], per)
    stab = stats[:, 7] if problem.previous is not None else np.zeros(sums.shape[0])
    terms = {"size": size, "homogeneity": homog, "compactness": compact, "stability": stab}
    total = np.zeros(sums.shape[0])
    for t in measures.TERMS:
        total += problem.term_weights.get(t, 0.0) * terms[t] / norm[t]
    return total


# ---------------------------------------------------------------- compiling

_WARM: set[str] = set()


def _tiny_problem() -> Problem:
    g = Graph.from_edges(3, np.array([0, 1]), np.array([1, 2]), np.ones(2))
    return Problem(
        graph=g,
        counts=np.ones((3, 1)),
        bounds=Bounds(("c",), np.array([1.0]), np.array([2.0]), np.array([np.nan])),
        attrs=np.zeros((3, 1)),
        weight=np.ones(3),
        area=np.ones(3),
        perimeter=np.full(3, 4.0),
    )


WALKS = {
    "count": lambda: count_feasible_zones(_tiny_problem(), 10),
    "enumerate": lambda: feasible_zones(_tiny_problem()),
}


def walk_folder():
    """numba's cache folder of the walks (None when they are not cached)."""
    return compilelock.cache_folder(_count)


def walk_stamp() -> str:
    return compilelock.sources_stamp([__file__])


def warm_walk(name: str, *, wait: bool = True) -> bool:
    """Compile (or load from cache) one walk's kernels, under its lock in the cache folder
    (`zonedesign.compilelock`: a background process may be compiling it); once per process.
    False when wait=False and another process holds it."""
    if name in _WARM:
        return True
    _WARM.add(name)  # before running: the tiny run calls the walk's own driver
    try:
        done = compilelock.run_group(walk_folder(), f"walk-{name}", walk_stamp(), WALKS[name], wait=wait)
    except BaseException:
        _WARM.discard(name)
        raise
    if not done:
        _WARM.discard(name)
    return done
