"""Exact zoning of small fences: every feasible zone enumerated, then set partitioning.

`solve_exact(problem)` proves the best zoning of one fence of one tier:

1. Enumerate every connected set of units whose counts meet the tier's bounds (a feasible
   zone). Each connected set is generated once, from its smallest unit, by binary branching
   on the frontier (include a frontier unit, or forbid it for the rest of the branch). A set
   whose counts already exceed a ceiling is not grown further: with counts that are never
   negative, every superset exceeds it too.
2. Price each zone with the objective of `measures` (the same formulas as
   `measures.zone_cost`, accumulated while the set grows).
3. Choose zones covering every unit exactly once at least total cost: a set-partitioning
   model solved with scipy's `milp` (HiGHS) or, on request, CP-SAT; both with presolve
   off, which stalls on these models (it found nothing in 60 s on a 6x6 grid that solves
   in 2 s without it). Beyond 1,500 zones the LP relaxation comes first: a partition
   among the 1,500 zones of least reduced cost sets an upper bound, and every zone whose
   reduced cost shows it cannot take part in a cheaper partition is dropped (reduced-cost
   fixing). HiGHS sees at most 5,000 zones (on more it overran its time limit threefold
   in trial runs); a larger remainder goes to CP-SAT.

No partition: the fence is proven infeasible. The enumeration is capped
(`max_zones_enumerated`) and timed; past either limit the result says "too large to prove"
and returns no labels rather than a guess.

Reach, measured with this code on a shared 2-core machine (grids of unit squares, counts
drawn uniformly from 1..20, size, homogeneity (two attributes) and compactness terms,
time_limit 60 s; seconds include enumeration and pricing):

- zones of about 3 units (bounds [20, 40]): 16x16 (256 units) in 2 s, 20x20 (400) in
  1 s, 24x24 (576) in 3 s, 28x28 (784) in 17 s, 32x32 (1,024 units, 86,017 feasible zones)
  in 48 s;
- zones of 5 to 6 units (bounds [40, 80]): 6x6 in 3 s, 8x8 (64 units, 516,510 feasible
  zones) in 10 s, 9x9 in 1 s, 10x10 (100 units, 100,000 to 350,000 feasible zones) in 10
  to 11 s for three count draws of four; the fourth draw (1.8 million feasible zones) and
  a 12x12 grid (1.2 million) are too large to prove: the LP relaxation does not finish.

The number of feasible zones, not the number of units, decides what can be proven.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numba
import numpy as np
from scipy.optimize import Bounds as LPBounds
from scipy.optimize import LinearConstraint, linprog, milp
from scipy.sparse import csc_matrix

from zonedesign import measures
from zonedesign.errors import InputError
from zonedesign.records import Problem
from zonedesign.verify.solving import solve_model

SOLVERS = ("highs", "cp-sat")
COST_SCALE = 1_000_000  # CP-SAT works on integers: costs in millionths


@dataclass(frozen=True)
class ExactResult:
    """labels 0..k-1 per unit (None when no zoning was found or proven), objective =
    measures.score(problem, labels).total, proven = optimality (or infeasibility) proven."""

    labels: np.ndarray | None
    objective: float
    proven: bool
    status: str
    n_feasible_zones: int
    seconds: float


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


# ---------------------------------------------------------------- enumeration kernel


@numba.njit(cache=True)
def _lowest(x: np.ndarray) -> int:
    for w in range(x.shape[0]):
        word = x[w]
        if word != 0:
            low = word & (~word + np.uint64(1))
            return w * 64 + int(math.log2(float(low)) + 0.5)
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


@numba.njit(cache=True)
def _enumerate(
    v,
    sp,
    stS,
    stX,
    stF,
    stSums,
    stStats,
    stXS,
    indptr,
    indices,
    length,
    counts,
    lo,
    hi,
    prune,
    w,
    xw,
    xq,
    area,
    perimeter,
    dist,
    use_dist,
    prev,
    n_prev,
    outSums,
    outStats,
    outXS,
    outPtr,
    outMembers,
    n_out,
    n_mem,
    budget,
):
    """Resumable enumeration; stats per frame: W, Q, area, perimeter, internal, pairs, size.

    Returns (v, sp, n_out, n_mem, state): state 0 all done, 1 output buffers full,
    2 node budget spent.
    """
    n = counts.shape[0]
    nc = counts.shape[1]
    na = xw.shape[1]
    cap_out = outSums.shape[0]
    cap_mem = outMembers.shape[0]
    tally = np.zeros(max(n_prev, 1), dtype=np.int64)
    nodes = 0
    while v < n:
        if sp == 0:
            # a new smallest unit v: start from {v}, units below v are forbidden
            if n_out + 1 > cap_out or n_mem + n > cap_mem:
                return v, sp, n_out, n_mem, 1
            over = False
            for c in range(nc):
                if prune[c] and counts[v, c] > hi[c]:
                    over = True
            if over:
                v += 1
                continue
            stS[0, :] = 0
            stX[0, :] = 0
            stF[0, :] = 0
            for u in range(v):
                _set(stF[0], u)
            _set(stS[0], v)
            for p in range(indptr[v], indptr[v + 1]):
                u = indices[p]
                if u > v:
                    _set(stX[0], u)
            stSums[0, :] = counts[v, :]
            stXS[0, :] = xw[v, :]
            stStats[0, 0] = w[v]
            stStats[0, 1] = xq[v]
            stStats[0, 2] = area[v]
            stStats[0, 3] = perimeter[v]
            stStats[0, 4] = 0.0
            stStats[0, 5] = 0.0
            stStats[0, 6] = 1.0
            sp = 1
            n_out, n_mem = _record(
                stS[0], stSums[0], stStats[0], stXS[0], lo, hi, prev, tally,
                outSums, outStats, outXS, outPtr, outMembers, n_out, n_mem, n,
            )
        while sp > 0:
            if nodes >= budget:
                return v, sp, n_out, n_mem, 2
            if n_out + 1 > cap_out or n_mem + n > cap_mem:
                return v, sp, n_out, n_mem, 1
            nodes += 1
            top = sp - 1
            u = _lowest(stX[top])
            if u < 0:
                sp -= 1
                continue
            # the include child goes to slot top + 1, built from the parent at slot top
            inc = top + 1
            stS[inc, :] = stS[top, :]
            stF[inc, :] = stF[top, :]
            stX[inc, :] = stX[top, :]
            _clear(stX[inc], u)
            _set(stS[inc], u)
            over = False
            for c in range(nc):
                stSums[inc, c] = stSums[top, c] + counts[u, c]
                if prune[c] and stSums[inc, c] > hi[c]:
                    over = True
            # the parent slot becomes the exclude child: u forbidden for the rest
            _clear(stX[top], u)
            _set(stF[top], u)
            if over:
                continue
            internal = stStats[top, 4]
            for p in range(indptr[u], indptr[u + 1]):
                t = indices[p]
                if _has(stS[top], t):
                    internal += length[p]
                elif not _has(stF[inc], t) and not _has(stS[inc], t):
                    _set(stX[inc], t)
            pairs = stStats[top, 5]
            if use_dist:
                for ww in range(stS.shape[1]):
                    word = stS[top, ww]
                    while word != 0:
                        low = word & (~word + np.uint64(1))
                        t = ww * 64 + int(math.log2(float(low)) + 0.5)
                        pairs += dist[u, t]
                        word ^= low
            for a in range(na):
                stXS[inc, a] = stXS[top, a] + xw[u, a]
            stStats[inc, 0] = stStats[top, 0] + w[u]
            stStats[inc, 1] = stStats[top, 1] + xq[u]
            stStats[inc, 2] = stStats[top, 2] + area[u]
            stStats[inc, 3] = stStats[top, 3] + perimeter[u]
            stStats[inc, 4] = internal
            stStats[inc, 5] = pairs
            stStats[inc, 6] = stStats[top, 6] + 1.0
            n_out, n_mem = _record(
                stS[inc], stSums[inc], stStats[inc], stXS[inc], lo, hi, prev, tally,
                outSums, outStats, outXS, outPtr, outMembers, n_out, n_mem, n,
            )
            sp += 1
        v += 1
    return v, sp, n_out, n_mem, 0


@numba.njit(cache=True)
def _record(S, sums, stats, xs, lo, hi, prev, tally, outSums, outStats, outXS, outPtr, outMembers, n_out, n_mem, n):
    for c in range(sums.shape[0]):
        if sums[c] < lo[c] or sums[c] > hi[c]:
            return n_out, n_mem
    start = n_mem
    best = 0
    any_prev = False
    for ww in range(S.shape[0]):
        word = S[ww]
        while word != 0:
            low = word & (~word + np.uint64(1))
            t = ww * 64 + int(math.log2(float(low)) + 0.5)
            outMembers[n_mem] = t
            n_mem += 1
            if prev[t] >= 0:
                any_prev = True
                tally[prev[t]] += 1
                if tally[prev[t]] > best:
                    best = tally[prev[t]]
            word ^= low
    for p in range(start, n_mem):
        t = outMembers[p]
        if prev[t] >= 0:
            tally[prev[t]] = 0
    outSums[n_out, :] = sums
    outStats[n_out, :7] = stats[:7]
    # stability: members outside the zone's anchor (the previous zone holding most of them)
    outStats[n_out, 7] = (stats[6] - best) if any_prev else 0.0
    outXS[n_out, :] = xs
    outPtr[n_out + 1] = n_mem
    return n_out + 1, n_mem


# ---------------------------------------------------------------- enumeration driver


def feasible_zones(
    problem: Problem, *, max_zones: int = 2_000_000, time_limit: float = 60.0
) -> FeasibleZones:
    """Every connected set of units meeting the bounds, priced like `measures.zone_cost`."""
    start = time.perf_counter()
    n = problem.n
    g = problem.graph
    counts = np.ascontiguousarray(np.asarray(problem.counts, dtype=np.float64).reshape(n, -1))
    b = problem.bounds
    lo = np.where(np.isfinite(b.lo), b.lo, -np.inf).astype(np.float64)
    hi = np.where(np.isfinite(b.hi), b.hi, np.inf).astype(np.float64)
    # ceilings prune only where counts never fall: then supersets can only grow
    prune = np.isfinite(hi) & (counts >= 0).all(axis=0)
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
        n_prev = int(uniq.size)
    else:
        prev = np.full(n, -1, dtype=np.int64)
        n_prev = 0
    words = max(1, (n + 63) // 64)
    depth = n + 2
    stS = np.zeros((depth, words), dtype=np.uint64)
    stX = np.zeros((depth, words), dtype=np.uint64)
    stF = np.zeros((depth, words), dtype=np.uint64)
    stSums = np.zeros((depth, counts.shape[1]))
    stStats = np.zeros((depth, 7))
    stXS = np.zeros((depth, x.shape[1]))
    cap = min(max_zones, 4096) + 1
    outSums = np.zeros((cap, counts.shape[1]))
    outStats = np.zeros((cap, 8))
    outXS = np.zeros((cap, x.shape[1]))
    outPtr = np.zeros(cap + 1, dtype=np.int64)
    outMembers = np.zeros(cap * 8 + n, dtype=np.int64)
    v, sp, n_out, n_mem = 0, 0, 0, 0
    complete, reason = True, ""
    while True:
        v, sp, n_out, n_mem, state = _enumerate(
            v, sp, stS, stX, stF, stSums, stStats, stXS,
            g.indptr.astype(np.int64), g.indices.astype(np.int64), g.length.astype(np.float64),
            counts, lo, hi, prune, w, xw, xq,
            np.asarray(problem.area, dtype=np.float64), np.asarray(problem.perimeter, dtype=np.float64),
            dist, use_dist, prev, n_prev,
            outSums, outStats, outXS, outPtr, outMembers, n_out, n_mem, 200_000,
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
            if n_out + 1 > outSums.shape[0]:
                grow = min(outSums.shape[0] * 2, max_zones + 2) - outSums.shape[0]
                grow = max(grow, 1)
                outSums = np.concatenate([outSums, np.zeros((grow, outSums.shape[1]))])
                outStats = np.concatenate([outStats, np.zeros((grow, 8))])
                outXS = np.concatenate([outXS, np.zeros((grow, outXS.shape[1]))])
                outPtr = np.concatenate([outPtr, np.zeros(grow, dtype=np.int64)])
            if n_mem + n > outMembers.shape[0]:
                outMembers = np.concatenate([outMembers, np.zeros(outMembers.shape[0] + n, dtype=np.int64)])
    k = n_out if complete else min(n_out, max_zones)
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


# ---------------------------------------------------------------- set partitioning


def solve_exact(
    problem: Problem,
    *,
    time_limit: float = 60.0,
    max_zones_enumerated: int = 2_000_000,
    solver: str = "highs",
) -> ExactResult:
    """The least-cost valid zoning of one fence, proven, or a stated reason why not.

    solver: "highs" (scipy.optimize.milp) or "cp-sat" (integer costs in millionths, so a
    CP-SAT proof is exact for those rounded costs).

    >>> result = solve_exact(problem, time_limit=30)
    >>> result.status, result.labels
    """
    if solver not in SOLVERS:
        raise InputError(f"solver {solver!r} is not one of {', '.join(SOLVERS)}", where="solve_exact")
    if time_limit <= 0 or max_zones_enumerated < 1:
        raise InputError("time_limit must be > 0 and max_zones_enumerated >= 1", where="solve_exact")
    start = time.perf_counter()
    n = problem.n
    if n == 0:
        return ExactResult(np.zeros(0, dtype=np.int64), 0.0, True, "optimal: nothing to zone", 0, 0.0)
    zones = feasible_zones(problem, max_zones=max_zones_enumerated, time_limit=time_limit)
    if not zones.complete:
        return ExactResult(
            None, math.nan, False, f"too large to prove: {zones.reason}", zones.n, time.perf_counter() - start
        )
    covered = np.bincount(zones.members, minlength=n)
    if (covered == 0).any():
        i = int(np.flatnonzero(covered == 0)[0])
        return ExactResult(
            None, math.nan, True,
            f"infeasible: unit {i} lies in no connected zone that meets the bounds",
            zones.n, time.perf_counter() - start,
        )
    remaining = max(time_limit - (time.perf_counter() - start), 0.1)
    if solver == "highs":
        chosen, proven, status = _partition_highs(n, zones, remaining)
    elif zones.n > CP_SAT_COLUMNS:
        chosen, proven = None, False
        status = f"too large to prove: {zones.n:,} feasible zones are more than CP-SAT takes ({CP_SAT_COLUMNS:,})"
    else:
        chosen, proven, status = _partition_cp_sat(n, zones, remaining)
    seconds = time.perf_counter() - start
    if chosen is None:
        return ExactResult(None, math.nan, proven, status, zones.n, seconds)
    labels = np.full(n, -1, dtype=np.int64)
    for z, j in enumerate(chosen):
        labels[zones.zone(j)] = z
    labels, _ = measures.compact_labels(labels)
    objective = measures.score(problem, labels).total
    return ExactResult(labels, objective, proven, status, zones.n, seconds)


def _milp(costs: np.ndarray, a: csc_matrix, time_limit: float) -> tuple[int, np.ndarray | None]:
    """(scipy milp status, x or None) for set partitioning over the columns of `a`."""
    res = milp(
        costs,
        constraints=LinearConstraint(a, 1.0, 1.0),
        integrality=np.ones(costs.shape[0]),
        bounds=LPBounds(0.0, 1.0),
        # HiGHS presolve stalls on set partitioning (a 6x6 grid: no answer in 60 s with it,
        # proven in 2 s without)
        options={"time_limit": max(float(time_limit), 0.05), "disp": False, "presolve": False},
    )
    return int(res.status), res.x


# HiGHS overruns its time limit on large set-partitioning models while it separates cuts
# at the root (trial runs: 43 s on a 14 s limit with 20,000 zones), so it only ever sees
# this many zones; larger models are thinned by reduced costs first, and what remains
# beyond this size goes to CP-SAT, which keeps to its limit
HIGHS_COLUMNS = 5_000
# zones of least reduced cost that the first MIP (the one that sets UB) may choose from
TRIAL_COLUMNS = 1_500
# building a CP-SAT model takes about 50 us per zone in Python, outside its time limit
CP_SAT_COLUMNS = 100_000


def _partition_highs(n: int, zones: FeasibleZones, time_limit: float):
    """Set partitioning with HiGHS; large models are thinned by reduced-cost fixing.

    With the LP optimum LB and duals y, a zone j in any partition costing at most UB needs
    LB + (c_j - a_j.y) <= UB, so zones with larger reduced cost are dropped; UB comes from
    a MIP over the zones of least reduced cost.
    """
    start = time.perf_counter()
    cols = np.repeat(np.arange(zones.n), np.diff(zones.ptr))
    a = csc_matrix((np.ones(zones.members.size), (zones.members, cols)), shape=(n, zones.n))
    costs = zones.costs
    keep = np.arange(zones.n)
    incumbent = None
    if zones.n > TRIAL_COLUMNS:
        lp = linprog(costs, A_eq=a, b_eq=np.ones(n), bounds=(0, None), method="highs",
                     options={"time_limit": max(time_limit * 0.5, 0.05), "presolve": False})
        if lp.status == 2:
            return None, True, "infeasible: no set of feasible zones covers every unit exactly once"
        if lp.status == 0:
            reduced = costs - a.T @ lp.eqlin.marginals
            trial = np.sort(np.argsort(reduced, kind="stable")[:TRIAL_COLUMNS])
            left = time_limit - (time.perf_counter() - start)
            status, x = _milp(costs[trial], a[:, trial], left * 0.3)
            if x is not None:
                incumbent = trial[x > 0.5]
                upper = float(costs[incumbent].sum())
                keep = np.flatnonzero(reduced <= upper - lp.fun + 1e-9)
        else:
            return None, False, (
                f"too large to prove: the LP relaxation over {zones.n:,} zones was not solved "
                f"within {time_limit:.3g} s"
            )
    left = time_limit - (time.perf_counter() - start)
    if keep.size > CP_SAT_COLUMNS or left <= 0.1:
        why = (
            f"{keep.size:,} zones remain after reduced-cost thinning"
            if keep.size > CP_SAT_COLUMNS
            else f"no time left within {time_limit:.3g} s"
        )
        if incumbent is not None:
            return incumbent, False, f"feasible, optimality not proven: {why}"
        return None, False, f"too large to prove: {why}"
    if keep.size <= HIGHS_COLUMNS:
        status, x = _milp(costs[keep], a[:, keep], left)
        proven = status == 0
        chosen = keep[x > 0.5] if x is not None else None
        if status == 2 and incumbent is None:
            return None, True, "infeasible: no set of feasible zones covers every unit exactly once"
    else:
        sub = FeasibleZones(
            ptr=np.concatenate([[0], np.cumsum(np.diff(zones.ptr)[keep])]),
            members=np.concatenate([zones.zone(j) for j in keep]),
            costs=costs[keep], complete=True, reason="",
        )
        hint = np.searchsorted(keep, incumbent) if incumbent is not None else None
        picked, proven, text = _partition_cp_sat(n, sub, left, hint=hint)
        if picked is None and proven and incumbent is None:
            return None, True, text
        chosen = keep[picked] if picked is not None else None
    if chosen is not None:
        if proven:
            return chosen, True, "optimal"
        if incumbent is None or costs[chosen].sum() < costs[incumbent].sum():
            incumbent = chosen
    if incumbent is None:
        return None, False, f"too large to prove: no partition found within {time_limit:.3g} s"
    return incumbent, False, f"feasible, optimality not proven within {time_limit:.3g} s"


def _partition_cp_sat(n: int, zones: FeasibleZones, time_limit: float, hint: np.ndarray | None = None):
    from ortools.sat.python import cp_model

    m = cp_model.CpModel()
    z = [m.NewBoolVar(f"z{j}") for j in range(zones.n)]
    cover: list[list] = [[] for _ in range(n)]
    for j in range(zones.n):
        for i in zones.zone(j):
            cover[int(i)].append(z[j])
    # partition: every unit in exactly one chosen zone
    for i in range(n):
        m.AddExactlyOne(cover[i])
    # objective: least total cost (in millionths)
    m.Minimize(sum(int(round(c * COST_SCALE)) * v for c, v in zip(zones.costs, z)))
    if hint is not None:
        chosen = set(int(j) for j in hint)
        for j, v in enumerate(z):
            m.AddHint(v, int(j in chosen))
    solver = cp_model.CpSolver()
    solver.parameters.max_time_in_seconds = max(float(time_limit), 0.05)
    solver.parameters.num_workers = 1
    solver.parameters.cp_model_presolve = False
    status = solve_model(solver, m)
    if status == cp_model.INFEASIBLE:
        return None, True, "infeasible: no set of feasible zones covers every unit exactly once"
    if status not in (cp_model.OPTIMAL, cp_model.FEASIBLE):
        return None, False, f"too large to prove: CP-SAT found no partition within {time_limit:.3g} s"
    chosen = np.array([j for j in range(zones.n) if solver.Value(z[j])], dtype=np.int64)
    if status == cp_model.OPTIMAL:
        return chosen, True, "optimal"
    return chosen, False, f"feasible, optimality not proven within {time_limit:.3g} s"
