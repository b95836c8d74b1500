"""Proofs for fences whose bound breaks no zoning could avoid.

The one place that builds a fence's free problem over a tier's units for a proof; design,
redraw, audit and sweep all explain their breaks through `explain_breaks`.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from zonedesign.graph.collapse import collapse
from zonedesign.measures import compact_labels, zone_perimeter, zone_sums
from zonedesign.records import Areas, Bounds, Graph, Problem
from zonedesign.rules import TierRules, tier_in_fence
from zonedesign.verify.proofs import Proof, prove_infeasible

# the proof search found a valid zoning: the fence is feasible and the search missed it
NO_PROOF = "the search did not meet every bound here, yet a valid zoning exists (the proof search found one)"


def units_problem(
    areas: Areas,
    graph: Graph,
    tiers: Sequence[TierRules],
    lookup: Mapping[str, np.ndarray],
    tier_name: str,
    fence: str,
    bounds: Bounds | None = None,
) -> Problem:
    """The free problem of one fence of one tier, over that tier's units.

    Units are the areas on the first tier and the zones of the tier below above it;
    `bounds` defaults to the tier's own in that fence.
    """
    names = [t.name for t in tiers]
    t = names.index(tier_name)
    tier = tier_in_fence(tiers[t], fence)  # an override's bounds and weights in this fence
    if bounds is None:
        bounds = tier.bounds(areas.count_names)
    idx = np.flatnonzero(areas.in_tier(tier_name).fence == fence)
    g = graph.subgraph(idx)
    if t == 0:
        codes, k = np.arange(idx.shape[0]), idx.shape[0]
    else:
        codes, k = compact_labels(np.asarray(lookup[names[t - 1]], dtype=object)[idx])
    return Problem(
        graph=collapse(g, codes, k),
        counts=zone_sums(codes, k, areas.counts[idx]),
        bounds=bounds,
        attrs=np.zeros((k, 0)),
        weight=np.ones(k),
        area=zone_sums(codes, k, areas.area[idx]),
        perimeter=zone_perimeter(g, codes, k, areas.perimeter[idx]),
        term_weights=dict(tier.weights),
    )


def unit_names(
    areas: Areas, tiers: Sequence[TierRules], lookup: Mapping[str, np.ndarray], tier_name: str, fence: str
) -> list[str]:
    """What a proof calls the units of `units_problem`: "area <id>" or "zone <code>" of the tier below."""
    t = [x.name for x in tiers].index(tier_name)
    idx = np.flatnonzero(areas.fence == fence)
    if t == 0:
        return [f"area {a}" for a in areas.ids[idx]]
    lower = np.asarray(lookup[tiers[t - 1].name], dtype=object)[idx]
    codes, _ = compact_labels(lower)
    _, first = np.unique(codes, return_index=True)  # the first member of each unit
    return [f"zone {z}" for z in lower[first]]


def explain_breaks(
    areas: Areas,
    graph: Graph,
    tiers: Sequence[TierRules],
    lookup: Mapping[str, np.ndarray],
    breaks: Sequence[Mapping],
    *,
    time_limit: float = 10.0,
) -> list[Proof | dict]:
    """A proof per (tier, fence) holding a break, or a "feasible" entry where a valid zoning exists.

    `breaks` are dicts with at least "tier" and "fence"; each fence is tried once.
    """
    out: list[Proof | dict] = []
    seen = set()
    for b in breaks:
        key = (b["tier"], b["fence"])
        if key in seen:
            continue
        seen.add(key)
        problem = units_problem(areas, graph, tiers, lookup, b["tier"], b["fence"])
        ids = unit_names(areas, tiers, lookup, b["tier"], b["fence"])
        proof = prove_infeasible(problem, b["fence"], b["tier"], time_limit=time_limit, unit_ids=ids)
        if proof is None:
            out.append({"tier": b["tier"], "fence": b["fence"], "status": "feasible", "text": NO_PROOF})
        else:
            out.append(proof)
    return out
