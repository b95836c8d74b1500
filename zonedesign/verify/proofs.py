"""Proofs that a fence cannot be zoned within a tier's bounds at all.

`prove_infeasible` tries plain arithmetic first, because its proofs read as one sentence:

- the fence's total lies below the floor ("no valid zone exists");
- one unit alone lies above the ceiling (no zone can hold it);
- an island (a connected component of the fence's graph, which no zone can leave) has a
  total below the floor, or between k ceilings and k+1 floors (too big for k zones, too
  small for k+1);
- two counts admit no common number of zones (each count allows k zones only when
  k * floor <= total <= k * ceiling).

When arithmetic finds nothing, a CP-SAT model of the fence's free zoning (at most K zones,
K from the total over the floor; flow contiguity rooted at each zone's first unit; bounds)
decides: INFEASIBLE is the proof, a solution means no proof exists, and a time-out is
stated as "too large to prove", never passed over in silence.

A proven proof in which a floor takes part (a total or an island below the floor, a total
between k ceilings and k + 1 floors, counts that allow no common number of zones, or any
CP-SAT proof) also says the highest floor of each such count that the fence could meet,
with the other bounds as they are (`floors`). Texts name units as the caller does
(`unit_ids`: area ids, zone codes), never by position.
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from dataclasses import dataclass, field, replace

import numpy as np

from zonedesign.graph.components import components
from zonedesign.records import Bounds, Problem
from zonedesign.verify.cpsat import add_bounds, integer_scale, scaled_counts, solver, verdict
from zonedesign.verify.floors import (
    FLOOR_BUDGET,
    FloorBound,
    floor_sentence,
    highest_floor,
    search_highest_floor,
)
from zonedesign.verify.solving import solve_model
from zonedesign.verify.zoningmodel import free_zoning


@dataclass(frozen=True)
class Proof:
    """A plain-words reason why no valid zoning exists, or a stated failure to decide.

    kind: "arithmetic" or "cp-sat"; status: "INFEASIBLE" (proven) or "UNKNOWN" (the
    solver ran out of time: the text says the fence is too large to prove).
    """

    fence: str
    tier: str
    kind: str
    text: str
    figures: dict = field(default_factory=dict)
    status: str = "INFEASIBLE"
    seconds: float = 0.0
    floors: tuple[FloorBound, ...] = ()  # the highest floor per count, where floors take part

    @property
    def proven(self) -> bool:
        return self.status == "INFEASIBLE"


def _fmt(x: float) -> str:
    x = float(x)
    return f"{int(round(x)):,}" if x == round(x) else f"{x:,.6g}"


_NUMBER_WORDS = {1: "one", 2: "two", 3: "three", 4: "four", 5: "five", 6: "six", 7: "seven", 8: "eight", 9: "nine"}


def _n(k: int) -> str:
    return _NUMBER_WORDS.get(k, str(k))


def zone_count_range(total: float, lo: float, hi: float) -> tuple[int, float]:
    """The numbers of zones k with k*lo <= total <= k*hi: (smallest, largest), inf when open."""
    lo = max(lo, 0.0) if np.isfinite(lo) else 0.0
    kmin = 1 if not np.isfinite(hi) or hi <= 0 else max(1, math.ceil(total / hi - 1e-9))
    kmax = math.inf if lo <= 0 else math.floor(total / lo + 1e-9)
    return kmin, kmax


def _why_no_count(where: str, total: float, name: str, lo: float, hi: float) -> tuple[str, dict] | None:
    """Plain words for a total that no number of zones can carry, or None."""
    kmin, kmax = zone_count_range(total, lo, hi)
    if kmin <= kmax:
        return None
    figures = {"count": name, "total": float(total), "floor": float(lo), "ceiling": float(hi)}
    if total < lo:
        return (
            f"{where} has {_fmt(total)} {name}; the tier floor is {_fmt(lo)}, so no valid zone exists",
            figures,
        )
    k = kmin - 1  # k*hi < total < (k+1)*lo
    figures["zones_too_few"] = k
    ceiling = f"the ceiling is {_fmt(hi)}" if k == 1 else f"{_n(k)} ceilings of {_fmt(hi)} make {_fmt(k * hi)}"
    return (
        f"{where} has {_fmt(total)} {name}: too many for {_n(k)} zone{'s' if k > 1 else ''} "
        f"({ceiling}) and too few for {_n(k + 1)} ({_n(k + 1)} floors of {_fmt(lo)} make "
        f"{_fmt((k + 1) * lo)}), so no valid zoning exists",
        figures,
    )


def _floor_note(label: str, name: str, value: float) -> str:
    return f"; the highest floor that could be met in {label} is at most {_fmt(value)} {name}"


def arithmetic_proof(
    problem: Problem, fence: str = "", tier: str = "", *, unit_ids: Sequence[str] | None = None, where: str = ""
) -> Proof | None:
    """The first arithmetic reason why the fence cannot be zoned, or None; a floor that
    fails says the highest floor arithmetic allows (see `floors.highest_floor`).

    unit_ids: what the text calls each unit ("area 36007014300", "zone g1"); where: what it
    calls the fence (default "fence <code>").
    """
    proof, floor_counts = _arithmetic(problem, fence, tier, unit_ids, where)
    if proof is None or not floor_counts:
        return proof
    c = floor_counts[0]
    counts = np.asarray(problem.counts, dtype=np.float64).reshape(problem.n, -1)
    n_comp, comp = components(problem.graph)
    island_totals = np.bincount(comp, weights=counts[:, c], minlength=n_comp)
    whole = bool(np.all(counts == np.round(counts)))
    top = highest_floor(island_totals.tolist(), problem.bounds.hi[c], whole)
    label = where or (f"fence {fence}" if fence else "the fence")
    figures = {**proof.figures, "highest_floor": top}
    return replace(proof, text=proof.text + _floor_note(label, problem.bounds.count_names[c], top), figures=figures)


def _arithmetic(
    problem: Problem, fence: str, tier: str, unit_ids: Sequence[str] | None, where: str
) -> tuple[Proof | None, list[int]]:
    """The first arithmetic proof, and the count columns whose floor it says cannot be met."""
    start = time.perf_counter()
    b = problem.bounds
    counts = np.asarray(problem.counts, dtype=np.float64).reshape(problem.n, -1)
    names = b.count_names
    ids = [str(u) for u in unit_ids] if unit_ids is not None else [f"unit {i}" for i in range(problem.n)]
    label = where or (f"fence {fence}" if fence else "the fence")

    def found(text: str, figures: dict, floors: Sequence[int] = ()) -> tuple[Proof, list[int]]:
        proof = Proof(fence, tier, "arithmetic", text, figures, "INFEASIBLE", time.perf_counter() - start)
        return proof, list(floors)

    n_comp, comp = components(problem.graph)
    totals = counts.sum(axis=0)
    for c, name in enumerate(names):
        why = _why_no_count(label, totals[c], name, b.lo[c], b.hi[c])
        if why:
            return found(*why, [c])
    for c, name in enumerate(names):
        if np.isfinite(b.hi[c]):
            big = np.flatnonzero(counts[:, c] > b.hi[c])
            if big.size:
                i = int(big[0])
                text = (
                    f"{ids[i]} alone has {_fmt(counts[i, c])} {name}, above the tier ceiling of "
                    f"{_fmt(b.hi[c])}; no zone can hold it"
                )
                # a ceiling, not a floor: no floor search
                return found(
                    text, {"count": name, "unit": ids[i], "value": float(counts[i, c]), "ceiling": float(b.hi[c])}
                )
    if n_comp > 1:
        for p in range(n_comp):
            members = np.flatnonzero(comp == p)
            island = (
                f"the island of {len(members)} unit{'s' if len(members) > 1 else ''} in {label} "
                f"(first: {', '.join(ids[m] for m in members[:3])})"
            )
            for c, name in enumerate(names):
                why = _why_no_count(island, counts[members, c].sum(), name, b.lo[c], b.hi[c])
                if why:
                    text, figures = why
                    figures.update(island_units=len(members), island=[ids[m] for m in members[:10]])
                    return found(text + "; zones cannot leave the island", figures, [c])
    groups = [np.arange(problem.n)] if n_comp == 1 else [np.flatnonzero(comp == p) for p in range(n_comp)]
    for members in groups:
        ranges = {
            name: zone_count_range(counts[members, c].sum(), b.lo[c], b.hi[c]) for c, name in enumerate(names)
        }
        kmin = max(r[0] for r in ranges.values()) if ranges else 1
        kmax = min(r[1] for r in ranges.values()) if ranges else math.inf
        if kmin > kmax:
            island = label if len(groups) == 1 else f"the island of {len(members)} units in {label}"
            parts = [
                f"{name} allow {r[0]} to {r[1]} zones" if np.isfinite(r[1])
                else f"{name} allow {r[0]} or more zones"
                for name, r in ranges.items()
            ]
            text = f"{island}: {'; '.join(parts)}; no number of zones meets every count's bounds"
            figures = {"zone_ranges": {k: [v[0], v[1] if np.isfinite(v[1]) else None] for k, v in ranges.items()}}
            return found(text, figures, _floored(b))
    return None, []


def _floored(b: Bounds) -> list[int]:
    """The count columns with a floor above nothing."""
    return [c for c in range(len(b.count_names)) if np.isfinite(b.lo[c]) and b.lo[c] > 0]


def prove_infeasible(
    problem: Problem,
    fence: str = "",
    tier: str = "",
    time_limit: float = 10.0,
    *,
    unit_ids: Sequence[str] | None = None,
    where: str = "",
    workers: int = 1,
    floor_budget: float = FLOOR_BUDGET,
) -> Proof | None:
    """A proof that no contiguous zoning of the fence meets the tier's bounds, or None.

    Returns None when a valid zoning exists (the solver found one), a Proof with status
    "INFEASIBLE" when none exists, and a Proof with status "UNKNOWN" stating that the fence
    is too large to prove when the time limit ran out first. A proven proof whose floors
    take part also says the highest floor of each such count that the fence could meet
    (`floors.search_highest_floor`, `floor_budget` seconds per count; 0: arithmetic only).

    >>> proof = prove_infeasible(problem, "D7", "small", time_limit=5)
    >>> proof.text if proof else "a valid zoning exists"
    """
    label = where or (f"fence {fence}" if fence else "the fence")
    proof, floor_counts = _arithmetic(problem, fence, tier, unit_ids, where)
    if proof is None:
        proof = _cp_sat_proof(problem, fence, tier, label, time_limit, workers)
        floor_counts = _floored(problem.bounds) if proof is not None and proof.proven else []
    if proof is None or not floor_counts:
        return proof
    found = tuple(
        search_highest_floor(problem, c, budget=floor_budget, workers=workers, unit_ids=unit_ids)
        for c in floor_counts
    )
    text = proof.text + "".join(f"; {floor_sentence(f, label)}" for f in found)
    return replace(proof, text=text, floors=found, seconds=proof.seconds + sum(f.seconds for f in found))


def _cp_sat_proof(
    problem: Problem, fence: str, tier: str, label: str, time_limit: float, workers: int
) -> Proof | None:
    start = time.perf_counter()
    n = problem.n
    if n == 0:
        return None
    b = problem.bounds
    counts_f = np.asarray(problem.counts, dtype=np.float64).reshape(n, -1)
    scale = integer_scale(counts_f)
    counts = scaled_counts(counts_f, scale)
    totals = counts_f.sum(axis=0)
    kmin, kmax = 1, n
    for c in range(len(b.count_names)):
        lo_k, hi_k = zone_count_range(totals[c], b.lo[c], b.hi[c])
        kmin, kmax = max(kmin, lo_k), min(kmax, hi_k)
    K = int(kmax)

    # zones numbered by their first unit, rooted flow contiguity; bounds on every used zone
    fz = free_zoning(problem.graph, K, kmin)
    add_bounds(fz.model, counts, b, scale, fz.x, fz.holders, fz.used)

    status = verdict(solve_model(solver(time_limit, workers), fz.model))
    seconds = time.perf_counter() - start
    figures = {"units": n, "max_zones": K, "min_zones": kmin, "time_limit": time_limit}
    zones = f"{kmin} zones" if kmin == K else f"{kmin} to {K} zones"
    if status == "infeasible":
        text = (
            f"{label} cannot be divided into contiguous zones that meet the tier's bounds: CP-SAT "
            f"proved that no division of its {n} units into {zones} works"
        )
        return Proof(fence, tier, "cp-sat", text, figures, "INFEASIBLE", seconds)
    if status in ("optimal", "feasible"):
        return None
    text = (
        f"{label} is too large to prove within {time_limit:g} s: CP-SAT neither found a valid "
        f"zoning of its {n} units into {zones} nor proved that none exists"
    )
    return Proof(fence, tier, "cp-sat", text, figures, "UNKNOWN", seconds)
