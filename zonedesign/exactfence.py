"""Exact zoning where it is cheap: a design strategy step for one fence of one tier.

A fence-tier whose feasible zones (connected sets of units meeting the bounds) number at
most `[search] exact_zones` is solved exactly by `verify.exact.solve_exact`; when that
proves an optimum, the optimum is the fence's zoning and its summary row says
`proof = "optimal"` with the bound. Anything else (too many feasible zones, the solve not
finished within `[search] exact_time_limit`, no valid zoning at all) keeps the search's
zoning with `proof = "none"` and the reason.

Counting stops as soon as the count passes the threshold (`verify.feasible.
count_feasible_zones`), so a large fence costs little before the search runs. The exact
solve works on the very Problem the search would get: its units leave out locked zones
and its graph is already cut along upper locked zones, and its bounds and weights are the
fence's own (`rules.tier_in_fence`), so the optimum keeps locks and overrides and nests as
the search's zoning would.

Repeatability: the count and the enumeration are deterministic, and the solvers run on one
thread; only a solve that ends near its time limit may be proven on one run and not on
another, the same caveat as the search's own `time_limit_fence`. The default limit is
many times what the threshold's solves take (benchmarks/results/exact-threshold.md).
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from zonedesign.records import Problem
from zonedesign.rules import SearchRules
from zonedesign.verify.exact import solve_exact
from zonedesign.verify.feasible import count_feasible_zones


@dataclass(frozen=True)
class FenceProof:
    """What the exact step found for one fence-tier."""

    proof: str  # "optimal" or "none"
    reason: str  # why "none" (empty when optimal)
    bound: float | None  # lower bound on the objective where a solver gave one
    feasible_zones: int | None  # the count when it stayed within the threshold
    seconds: float
    labels: np.ndarray | None = None  # the proven optimum (0..k-1 per unit)

    def info(self) -> dict:
        """The fields a fence result carries into the summary (path "exact" where the
        optimum stands in for the search)."""
        return {
            **({"path": "exact"} if self.labels is not None else {}),
            "proof": self.proof,
            "bound": self.bound,
            "proof_reason": self.reason,
            "feasible_zones": self.feasible_zones,
            "exact_seconds": round(self.seconds, 3),
        }


def prove_fence(problem: Problem, search: SearchRules, unit_names: Sequence[str] | None = None) -> FenceProof:
    """The proven optimum of one fence-tier when it has few feasible zones, else why not;
    `unit_names` name the units in its reasons ("area 36007014300")."""
    t0 = time.perf_counter()
    cap = int(search.exact_zones)
    if cap == 0:
        return FenceProof("none", "exact solving is off ([search] exact_zones = 0)", None, None, 0.0)
    if problem.n == 0:
        return FenceProof("none", "no units to zone", None, 0, 0.0)
    count = count_feasible_zones(problem, cap)
    if not count.complete:
        return FenceProof("none", f"not tried: {count.reason} ([search] exact_zones = {cap:,})", None, None,
                          time.perf_counter() - t0)
    if count.count == 0:
        return FenceProof("none", "no connected set of units meets the bounds", None, 0, time.perf_counter() - t0)
    res = solve_exact(problem, time_limit=float(search.exact_time_limit), max_zones_enumerated=cap,
                      unit_names=unit_names)
    seconds = time.perf_counter() - t0
    bound = float(res.bound) if math.isfinite(res.bound) else None
    if res.proven and res.labels is not None:
        return FenceProof("optimal", "", bound, count.count, seconds, np.asarray(res.labels, dtype=np.int64))
    if res.proven:
        return FenceProof("none", f"no valid zoning exists ({res.status})", None, count.count, seconds)
    return FenceProof("none", f"exact solve unfinished, the search's zoning kept: {res.status}", bound,
                      count.count, seconds)


PROOF_KEYS = ("proof", "bound", "proof_reason")


def proof_fields(info: dict) -> dict:
    """proof, bound and proof_reason of a fence result's info, for its summary row; a
    result no exact step looked at (a redraw, a locked or failed fence) says why."""
    if "proof" in info:
        return {k: info.get(k) for k in PROOF_KEYS}
    why = "every unit is in a locked zone" if info.get("locked") else "no exact step for this fence-tier"
    return {"proof": "none", "bound": None, "proof_reason": why}
