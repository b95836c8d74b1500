"""Proofs for fences whose bound breaks no zoning could avoid.

The one place that builds a fence's free problem over a tier's units for a proof; design,
redraw, audit and sweep all explain their breaks through `explain_breaks`.

A locked zone is fixed by its lock file: a bound it breaks is forced by the lock, and its
proof says so instead of arguing over free zonings. The fence's other breaks are argued
over the units outside its locked zones, with the graph cut along the rims of upper-tier
locked zones, as the tier runner designs them.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from zonedesign.graph.collapse import collapse
from zonedesign.locks import Locks, cut_graph, upper_key
from zonedesign.measures import compact_labels, zone_perimeter, zone_sums
from zonedesign.records import Areas, Bounds, Graph, Problem
from zonedesign.rules import TierRules, tier_in_fence
from zonedesign.verify.proofs import Proof, prove_infeasible

# the proof search found a valid zoning: the fence is feasible and the search missed it
NO_PROOF = "the search did not meet every bound here, yet a valid zoning exists (the proof search found one)"


def _fence_units(
    areas: Areas, tiers: Sequence[TierRules], lookup: Mapping[str, np.ndarray], tier_name: str, fence: str,
    locks: Locks | None,
) -> tuple[np.ndarray, np.ndarray, int]:
    """The areas of the fence outside the tier's locked zones, each one's unit, and the
    number of units (areas on the first tier, zones of the tier below above it)."""
    names = [t.name for t in tiers]
    t = names.index(tier_name)
    idx = np.flatnonzero(areas.in_tier(tier_name).fence == fence)
    if locks:
        idx = idx[locks.of(tier_name, areas.n)[idx] == ""]
    if t == 0:
        return idx, np.arange(idx.shape[0]), int(idx.shape[0])
    codes, k = compact_labels(np.asarray(lookup[names[t - 1]], dtype=object)[idx])
    return idx, codes, k


def units_problem(
    areas: Areas,
    graph: Graph,
    tiers: Sequence[TierRules],
    lookup: Mapping[str, np.ndarray],
    tier_name: str,
    fence: str,
    bounds: Bounds | None = None,
    locks: Locks | None = None,
) -> Problem:
    """The free problem of one fence of one tier, over that tier's units.

    Units are the areas on the first tier and the zones of the tier below above it;
    `bounds` defaults to the tier's own in that fence. With `locks`, the tier's locked
    zones are left out and the graph is cut along upper-tier locked zones.
    """
    names = [t.name for t in tiers]
    t = names.index(tier_name)
    tier = tier_in_fence(tiers[t], fence)  # an override's bounds and weights in this fence
    if bounds is None:
        bounds = tier.bounds(areas.count_names)
    idx, codes, k = _fence_units(areas, tiers, lookup, tier_name, fence, locks)
    g = graph.subgraph(idx)
    units = collapse(g, codes, k)
    if locks:
        sub = Locks({n: c[idx] for n, c in locks.codes.items()}, locks.source)
        units = cut_graph(units, upper_key(sub, names[t + 1 :], codes, k))
    return Problem(
        graph=units,
        counts=zone_sums(codes, k, areas.counts[idx]),
        bounds=bounds,
        attrs=np.zeros((k, 0)),
        weight=np.ones(k),
        area=zone_sums(codes, k, areas.area[idx]),
        perimeter=zone_perimeter(g, codes, k, areas.perimeter[idx]),
        term_weights=dict(tier.weights),
    )


def unit_names(
    areas: Areas, tiers: Sequence[TierRules], lookup: Mapping[str, np.ndarray], tier_name: str, fence: str,
    locks: Locks | None = None,
) -> list[str]:
    """What a proof calls the units of `units_problem`: "area <id>" or "zone <code>" of the tier below."""
    t = [x.name for x in tiers].index(tier_name)
    idx, codes, _ = _fence_units(areas, tiers, lookup, tier_name, fence, locks)
    if t == 0:
        return [f"area {a}" for a in areas.ids[idx]]
    lower = np.asarray(lookup[tiers[t - 1].name], dtype=object)[idx]
    _, first = np.unique(codes, return_index=True)  # the first member of each unit
    return [f"zone {z}" for z in lower[first]]


def _fmt(x: float) -> str:
    x = float(x)
    return f"{int(round(x)):,}" if x == round(x) else f"{x:,.6g}"


def lock_proof(
    areas: Areas, tier: TierRules, fence: str, zone: str, members: np.ndarray, lock_file: str
) -> Proof:
    """Why a locked zone breaks a bound: the lock file fixes its areas and its code."""
    b = tier_in_fence(tier, fence).bounds(areas.count_names)
    sums = areas.counts[members].sum(axis=0)
    broken = []
    for c, name in enumerate(b.count_names):
        if sums[c] < b.lo[c]:
            broken.append((name, "min", sums[c], b.lo[c], f"{_fmt(sums[c])} {name}, below the floor of {_fmt(b.lo[c])}"))
        elif sums[c] > b.hi[c]:
            broken.append((name, "max", sums[c], b.hi[c], f"{_fmt(sums[c])} {name}, above the ceiling of {_fmt(b.hi[c])}"))
    n = int(members.size)
    says = " and ".join(words for *_, words in broken) or "counts within every bound"
    text = (
        f"zone {zone} of tier {tier.name} is fixed by the lock file {lock_file}: its {n} area"
        f"{'s' if n != 1 else ''} and its code are kept as agreed, and it has {says}; the lock "
        "forces the break, no zoning that keeps the lock can mend it"
    )
    figures = {
        "zone": zone,
        "areas": n,
        "lock_file": lock_file,
        "breaks": [{"count": name, "side": side, "value": float(value), "bound": float(bound)}
                   for name, side, value, bound, _ in broken],
    }
    return Proof(fence, tier.name, "lock", text, figures, "INFEASIBLE")


def explain_breaks(
    areas: Areas,
    graph: Graph,
    tiers: Sequence[TierRules],
    lookup: Mapping[str, np.ndarray],
    breaks: Sequence[Mapping],
    *,
    time_limit: float = 10.0,
    locks: Locks | None = None,
) -> list[Proof | dict]:
    """A proof per (tier, fence) holding a break, or a "feasible" entry where a valid zoning
    exists; a locked zone's break gets a proof of its own, that the lock forces it.

    `breaks` are dicts with at least "tier", "fence" and "zone"; each fence is tried once.
    """
    out: list[Proof | dict] = []
    seen = set()
    by_name = {t.name: t for t in tiers}
    lock_file = locks.source.name if locks and locks.source is not None else "given"
    for b in breaks:
        key = (b["tier"], b["fence"])
        if key in seen:
            continue
        seen.add(key)
        here = [x for x in breaks if (x["tier"], x["fence"]) == key]
        locked = locks.zones(b["tier"]) if locks else {}
        for x in here:
            if str(x.get("zone")) in locked:
                out.append(lock_proof(areas, by_name[b["tier"]], b["fence"], str(x["zone"]),
                                      locked[str(x["zone"])], lock_file))
        if all(str(x.get("zone")) in locked for x in here):
            continue  # every break here is a locked zone's
        # the free zones are designed around the locked ones: argue over the rest
        lock_here = locks if _locks_in_fence(locks, areas, tiers, b["tier"], b["fence"]) else None
        problem = units_problem(areas, graph, tiers, lookup, b["tier"], b["fence"], locks=lock_here)
        ids = unit_names(areas, tiers, lookup, b["tier"], b["fence"], locks=lock_here)
        where = f"fence {b['fence']} outside its locked zones" if lock_here else ""
        proof = prove_infeasible(problem, b["fence"], b["tier"], time_limit=time_limit, unit_ids=ids, where=where,
                                 floor_budget=time_limit)
        if proof is None:
            out.append({"tier": b["tier"], "fence": b["fence"], "status": "feasible", "text": NO_PROOF})
        else:
            out.append(proof)
    return out


def _locks_in_fence(locks: Locks | None, areas: Areas, tiers: Sequence[TierRules], tier_name: str,
                    fence: str) -> bool:
    """Some locked zone of tier `tier_name` or above (whose rims cut the graph below) holds
    an area of this fence of that tier: only then does the proof argue around locks."""
    if not locks:
        return False
    inside = areas.in_tier(tier_name).fence == fence
    names = [t.name for t in tiers]
    return any(bool(inside[members].any()) for n in names[names.index(tier_name):]
               for members in locks.zones(n).values())
