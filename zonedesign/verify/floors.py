"""The highest floor a fence could meet, when a proof says its floor cannot be met.

With every other bound of the fence held as it is, the floors that some contiguous zoning
meets form a run from nothing up to a highest value F*: a zoning that meets a floor meets
every lower one. F* is the largest, over all valid zonings, of the smallest zone's count.

Arithmetic gives a first upper end (`highest_floor`): an island of total T needs at least
ceil(T / ceiling) zones, so its smallest zone holds at most T / ceil(T / ceiling); and F*
lies below the floor that failed. CP-SAT then searches downwards from that end: each
step asks for the best floor F >= L over zonings of at most T / L zones (any zoning whose
zones all reach L has no more), maximising F. An optimal answer is F* itself; a step
proven infeasible lowers the upper end to L - 1 and the next step halves L. Every figure
said is proven: "at least" by a zoning found, "at most" by arithmetic or an infeasible
step. When the budget (seconds of CP-SAT for one count of one fence) runs out, both ends
are said.
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np

from zonedesign.graph.components import components
from zonedesign.records import Problem
from zonedesign.verify.cpsat import (
    add_bounds,
    bound_limits,
    integer_scale,
    scaled_counts,
    solver,
    verdict,
)
from zonedesign.verify.solving import solve_model
from zonedesign.verify.zoningmodel import free_zoning, model_size, zone_totals

FLOOR_BUDGET = 10.0  # seconds of CP-SAT per count of a fence
MAX_LITERALS = 60_000  # (unit, zone) literals of the largest model a step builds
LISTED = 10  # units of the smallest zone kept in the figures (the text names 3)


@dataclass(frozen=True)
class FloorBound:
    """What is known of the highest floor of one count that a fence could meet.

    status: "optimal" (at_least == at_most: the highest floor itself), "feasible" (a zoning
    meets at_least, none meets more than at_most; the search stopped at `stopped`),
    "infeasible" (the other bounds cannot be met even with no floor on this count) or
    "undecided" (no zoning found: only at_most is known). Both ends are proven.
    """

    count: str
    floor: float
    at_least: float | None
    at_most: float | None
    status: str
    budget: float
    seconds: float
    stopped: str = ""  # "budget" or "size" (the next model was too large to build)
    smallest_zone: tuple[str, ...] = ()  # the units of the smallest zone of the best zoning found
    smallest_size: int = 0  # how many units that zone has


def highest_floor(totals: Sequence[float], hi: float, whole: bool = True) -> float:
    """The highest floor any zoning of these islands could meet, by arithmetic alone.

    An island of total T needs at least ceil(T / ceiling) zones, so its smallest zone holds
    at most T / ceil(T / ceiling); the fence's floor can be no higher than the least of
    these over its islands (rounded down when counts are whole numbers).
    """
    best = math.inf
    for total in totals:
        k = 1 if not np.isfinite(hi) or hi <= 0 else max(1, math.ceil(total / hi - 1e-9))
        best = min(best, total / k)
    return float(math.floor(best + 1e-9)) if whole and np.isfinite(best) else float(best)


def _zone_count_limits(totals: np.ndarray, lo: np.ndarray, hi: np.ndarray, skip: int) -> tuple[int, float]:
    """The fewest zones every ceiling allows and the most every other floor allows."""
    kmin, kmax = 1, math.inf
    for c in range(totals.shape[0]):
        if np.isfinite(hi[c]) and hi[c] > 0:
            kmin = max(kmin, math.ceil(totals[c] / hi[c] - 1e-9))
        if c != skip and np.isfinite(lo[c]) and lo[c] > 0:
            kmax = min(kmax, math.floor(totals[c] / lo[c] + 1e-9))
    return kmin, kmax


def search_highest_floor(
    problem: Problem,
    c: int,
    *,
    budget: float = FLOOR_BUDGET,
    workers: int = 1,
    max_literals: int = MAX_LITERALS,
    unit_ids: Sequence[str] | None = None,
) -> FloorBound:
    """The highest floor of count column c the fence could meet with its other bounds as
    they are; see the module notes for the search and what each figure proves.

    unit_ids: what the result calls the units of the smallest zone of the best zoning
    found (area ids, zone codes); positions otherwise.
    """
    start = time.perf_counter()
    b = problem.bounds
    n = problem.n
    name = b.count_names[c]
    raw = np.asarray(problem.counts, dtype=np.float64).reshape(n, -1)
    scale = integer_scale(raw)
    counts = scaled_counts(raw, scale)
    n_comp, comp = components(problem.graph)
    islands = np.bincount(comp, weights=raw[:, c], minlength=n_comp)
    cap = highest_floor(islands.tolist(), b.hi[c], whole=scale == 1)
    top = math.floor(cap * scale + 1e-9)
    floor_s, _ = bound_limits(b, c, scale)
    if floor_s is not None:
        top = min(top, floor_s - 1)  # the proof stands: the floor itself cannot be met
    free = replace(b, lo=np.where(np.arange(b.lo.shape[0]) == c, -np.inf, b.lo))
    kmin, kmax_other = _zone_count_limits(raw.sum(axis=0), b.lo, b.hi, c)
    total_s = int(counts[:, c].sum())

    found: int | None = None
    smallest: list[int] = []
    stopped = ""
    proven_empty = top < 0  # the proof itself: the other bounds fail with no floor at all
    first = True
    while top >= 0:
        left = budget - (time.perf_counter() - start)
        if left <= 0.01:
            stopped = "budget"
            break
        low = top if first else (top + 1) // 2  # the cap first: it is often met exactly
        first = False
        k = n if low <= 0 else min(n, total_s // low)
        k = int(min(k, kmax_other))
        if k < kmin:
            top = low - 1  # too few zones allowed for the ceilings: arithmetic, no solve
            proven_empty = top < 0
            continue
        if model_size(n, k) > max_literals:
            stopped = "size"
            break
        fz = free_zoning(problem.graph, k, kmin)
        m = fz.model
        add_bounds(m, counts, free, scale, fz.x, fz.holders, fz.used)
        least = m.NewIntVar(max(low, 0), max(top, 0), "least")
        for z, total in zone_totals(fz, counts, c).items():
            m.Add(total >= least).OnlyEnforceIf(fz.used[z])
        m.Maximize(least)
        s = solver(left, workers)
        status = verdict(solve_model(s, m))
        if status == "infeasible":
            top = low - 1
            proven_empty = top < 0
            continue
        if status in ("optimal", "feasible"):
            found = int(s.Value(least))
            smallest = _smallest_zone(s, fz, counts, c)
            if status == "optimal":
                top = found
            else:
                top = min(top, int(math.floor(s.BestObjectiveBound() + 1e-9)))
                stopped = "budget"
        else:
            stopped = "budget"
        break
    seconds = time.perf_counter() - start
    floor = float(b.lo[c])
    if found is not None:
        word = "optimal" if found >= top else "feasible"
        ids = [str(unit_ids[u]) if unit_ids is not None else f"unit {u}" for u in smallest]
        return FloorBound(name, floor, found / scale, top / scale, word, budget, seconds,
                          "" if word == "optimal" else stopped, tuple(ids[:LISTED]), len(ids))
    if proven_empty:
        return FloorBound(name, floor, None, None, "infeasible", budget, seconds)
    return FloorBound(name, floor, None, top / scale, "undecided", budget, seconds, stopped)


def _smallest_zone(s, fz, counts: np.ndarray, c: int) -> list[int]:
    """The units of the used zone with the least count c in the solver's zoning."""
    zones: dict[int, list[int]] = {}
    for (u, z), lit in fz.x.items():
        if s.Value(lit):
            zones.setdefault(z, []).append(u)
    members = min(zones.values(), key=lambda us: (int(counts[us, c].sum()), us))
    return sorted(members)


def _fmt(x: float) -> str:
    x = float(x)
    return f"{int(round(x)):,}" if x == round(x) else f"{x:,.6g}"


def floor_sentence(fb: FloorBound, label: str) -> str:
    """One clause saying what is known of the highest floor, for a proof's text."""
    where = f"the highest floor of {fb.count} that could be met in {label}"
    why = (
        f"the search stopped at its budget of {fb.budget:g} s" if fb.stopped == "budget"
        else "the next search model was too large to build" if fb.stopped == "size" else ""
    )
    if fb.status == "optimal":
        return f"{where} is {_fmt(fb.at_least)} {fb.count} (proven{_held(fb)})"
    if fb.status == "feasible":
        return (
            f"{where} is at least {_fmt(fb.at_least)} {fb.count} (proven{_held(fb)}) and at most "
            f"{_fmt(fb.at_most)} ({why})"
        )
    if fb.status == "infeasible":
        return f"no floor of {fb.count} can be met in {label}: its other bounds fail even without one"
    return f"{where} is at most {_fmt(fb.at_most)} {fb.count} (no zoning meeting the other bounds found: {why})"


def _held(fb: FloorBound) -> str:
    """Where the floor is met at its tightest: the smallest zone of the zoning found."""
    if not fb.smallest_zone:
        return ""
    shown = ", ".join(fb.smallest_zone[:3])
    more = fb.smallest_size - min(3, len(fb.smallest_zone))
    return f"; the smallest zone of a zoning that meets it holds {shown}" + (f" and {more} more" if more > 0 else "")
