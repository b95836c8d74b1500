"""Exact zoning of small fences: every feasible zone enumerated, then set partitioning.

`solve_exact(problem)` proves the best zoning of one fence of one tier:

1. Enumerate every connected set of units whose counts meet the tier's bounds (a feasible
   zone; `verify.feasible`, which also counts them cheaply up to a cap).
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
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.optimize import Bounds as LPBounds
from scipy.optimize import LinearConstraint, linprog, milp
from scipy.sparse import csc_matrix

from zonedesign import measures
from zonedesign.errors import InputError
from zonedesign.records import Problem
from zonedesign.verify.feasible import FeasibleZones, feasible_zones
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
    # a lower bound on the objective of every valid zoning, where a solver gave one (nan
    # where none): the LP relaxation's optimum, the MIP's dual bound, or the optimum itself
    bound: float = math.nan


# ---------------------------------------------------------------- set partitioning


def solve_exact(
    problem: Problem,
    *,
    time_limit: float = 60.0,
    max_zones_enumerated: int = 2_000_000,
    solver: str = "highs",
    unit_names: Sequence[str] | None = None,
) -> ExactResult:
    """The least-cost valid zoning of one fence, proven, or a stated reason why not.

    solver: "highs" (scipy.optimize.milp) or "cp-sat" (integer costs in millionths, so a
    CP-SAT proof is exact for those rounded costs). unit_names: how a reason names each
    unit ("area 36007014300"); "unit i" when None.

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
        return ExactResult(np.zeros(0, dtype=np.int64), 0.0, True, "optimal: nothing to zone", 0, 0.0, 0.0)
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
            f"infeasible: {unit_names[i] if unit_names is not None else f'unit {i}'} lies in no "
            "connected zone that meets the bounds",
            zones.n, time.perf_counter() - start,
        )
    remaining = max(time_limit - (time.perf_counter() - start), 0.1)
    lower = [-math.inf]  # raised by the partition solvers as they find bounds
    if solver == "highs":
        chosen, proven, status = _partition_highs(n, zones, remaining, lower)
    elif zones.n > CP_SAT_COLUMNS:
        chosen, proven = None, False
        status = f"too large to prove: {zones.n:,} feasible zones are more than CP-SAT takes ({CP_SAT_COLUMNS:,})"
    else:
        chosen, proven, status = _partition_cp_sat(n, zones, remaining, lower=lower)
    seconds = time.perf_counter() - start
    bound = lower[0] if math.isfinite(lower[0]) else math.nan
    if chosen is None:
        return ExactResult(None, math.nan, proven, status, zones.n, seconds, bound)
    labels = np.full(n, -1, dtype=np.int64)
    for z, j in enumerate(chosen):
        labels[zones.zone(j)] = z
    labels, _ = measures.compact_labels(labels)
    objective = measures.score(problem, labels).total
    if proven:
        # the solver's own dual bound may sit a tolerance below its optimum
        bound = objective
    return ExactResult(labels, objective, proven, status, zones.n, seconds, bound)


def _milp(costs: np.ndarray, a: csc_matrix, time_limit: float, lower: list[float] | None = None) -> tuple[int, np.ndarray | None]:
    """(scipy milp status, x or None) for set partitioning over the columns of `a`; its
    dual bound raises `lower[0]` when the columns are all that any cheaper partition uses."""
    res = milp(
        costs,
        constraints=LinearConstraint(a, 1.0, 1.0),
        integrality=np.ones(costs.shape[0]),
        bounds=LPBounds(0.0, 1.0),
        # HiGHS presolve stalls on set partitioning (a 6x6 grid: no answer in 60 s with it,
        # proven in 2 s without)
        options={"time_limit": max(float(time_limit), 0.05), "disp": False, "presolve": False},
    )
    dual = getattr(res, "mip_dual_bound", None)
    if lower is not None and dual is not None and math.isfinite(dual):
        lower[0] = max(lower[0], float(dual))
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


def _partition_highs(n: int, zones: FeasibleZones, time_limit: float, lower: list[float]):
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
            lower[0] = max(lower[0], float(lp.fun))
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
        # over the thinned columns a dual bound holds only for partitions cheaper than the
        # incumbent: it counts when it is the whole model
        status, x = _milp(costs[keep], a[:, keep], left, lower if keep.size == zones.n else None)
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


def _partition_cp_sat(
    n: int, zones: FeasibleZones, time_limit: float, hint: np.ndarray | None = None, lower: list[float] | None = None
):
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
    if lower is not None:
        lower[0] = max(lower[0], solver.BestObjectiveBound() / COST_SCALE)
    if status == cp_model.OPTIMAL:
        return chosen, True, "optimal"
    return chosen, False, f"feasible, optimality not proven within {time_limit:.3g} s"
