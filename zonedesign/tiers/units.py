"""The units of a tier and the problem of one fence over them.

Tier 1's units are the areas inside each fence; tier k's are the tier-(k-1) zones, so
nesting holds by construction. Locked zones are left out of the search, and the graph the
search sees is cut along the rims of upper-tier locked zones.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np

from zonedesign.graph.collapse import collapse
from zonedesign.graph.links import fence_graph
from zonedesign.locks import Locks, cut_graph, unit_codes, upper_key
from zonedesign.measures import standardise, zone_perimeter, zone_sums
from zonedesign.records import Areas, Graph, Problem
from zonedesign.rules import TierRules


@dataclass(frozen=True)
class Units:
    """The units of one tier: areas on tier 1, the zones of the tier below above it."""

    graph: Graph  # edges inside fences only (plus declared links inside fences)
    counts: np.ndarray
    attrs: np.ndarray  # standardised, weight-averaged over member areas
    weight: np.ndarray
    area: np.ndarray
    perimeter: np.ndarray
    fence: np.ndarray  # fence code per unit
    of_area: np.ndarray  # unit index of every base area
    names: np.ndarray | None = None  # how messages name each unit: "area X" or "<tier> zone Y"


def base_units(areas: Areas, graph: Graph) -> Units:
    """Tier-1 units: the areas, with attributes standardised over the whole input."""
    weight = areas.weight.astype(np.float64)
    mean_w = weight.mean() if weight.size and weight.mean() > 0 else 1.0
    weight = weight / mean_w  # mean weight 1 keeps the homogeneity scale file-independent
    return Units(
        graph=fence_graph(graph, areas.fence),
        counts=areas.counts.astype(np.float64),
        attrs=standardise(areas.attrs, weight),
        weight=weight,
        area=areas.area.astype(np.float64),
        perimeter=areas.perimeter.astype(np.float64),
        fence=areas.fence,
        of_area=np.arange(areas.n, dtype=np.int64),
        names=np.array([f"area {x}" for x in areas.ids], dtype=object),
    )


def next_units(units: Units, zone_of_unit: np.ndarray, zone_fence: np.ndarray,
               names: np.ndarray | None = None) -> Units:
    """Collapse one tier's zones into the units of the next tier; `names` says how
    messages name each zone ("tier1 zone D01-001")."""
    k = int(zone_fence.shape[0])
    w = zone_sums(zone_of_unit, k, units.weight)
    wx = zone_sums(zone_of_unit, k, units.weight[:, None] * units.attrs)
    plain = zone_sums(zone_of_unit, k, units.attrs) / np.maximum(
        np.bincount(zone_of_unit, minlength=k), 1
    )[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        attrs = np.where(w[:, None] > 0, wx / np.where(w > 0, w, 1.0)[:, None], plain)
    return Units(
        graph=collapse(units.graph, zone_of_unit, k),
        counts=zone_sums(zone_of_unit, k, units.counts),
        attrs=attrs,
        weight=w,
        area=zone_sums(zone_of_unit, k, units.area),
        perimeter=zone_perimeter(units.graph, zone_of_unit, k, units.perimeter),
        fence=zone_fence,
        of_area=zone_of_unit[units.of_area],
        names=names,
    )


def refenced(units: Units, full: Graph, zone_of_unit: np.ndarray, areas: Areas, tier: str) -> tuple[Units, Graph]:
    """The next tier's units inside that tier's own fence ([[tier]] fence).

    `full` is the graph of the tier below without fence cuts; collapsed, then cut along
    the next tier's fence, it joins units that a lower tier's finer fence kept apart. A
    lower fence nests in the upper one (checked on reading), so each unit has one code.
    """
    if not areas.tier_fence:
        return units, full
    k = units.counts.shape[0]
    upper = collapse(full, zone_of_unit, k)
    fence = np.empty(k, dtype=object)
    fence[units.of_area] = areas.in_tier(tier).fence
    return replace(units, graph=fence_graph(upper, fence), fence=fence), upper


def locked_units(
    units: Units, locks: Locks | None, tiers: Sequence[TierRules], t: int, n_areas: int
) -> tuple[np.ndarray, Units]:
    """The locked zone code of each unit of tier t ("" where free), and the units the
    search sees: their graph cut along the rims of upper-tier locked zones, so that no
    free zone straddles one."""
    n = units.counts.shape[0]
    if not locks:
        return np.full(n, "", dtype=object), units
    locked = unit_codes(locks.of(tiers[t].name, n_areas), units.of_area, n)
    key = upper_key(locks, [x.name for x in tiers[t + 1 :]], units.of_area, n)
    return locked, replace(units, graph=cut_graph(units.graph, key))


def fence_problem(
    units: Units,
    index: np.ndarray,
    tier: TierRules,
    count_names: Sequence[str],
    previous: np.ndarray | None = None,
) -> Problem:
    """The problem of one fence: the units `index` with the tier's rules in that fence;
    previous: the fence's previous zone per unit (a redraw's, for stability), in `index` order."""
    return Problem(
        graph=units.graph.subgraph(index),
        counts=units.counts[index],
        bounds=tier.bounds(count_names),
        attrs=units.attrs[index],
        weight=units.weight[index],
        area=units.area[index],
        perimeter=units.perimeter[index],
        term_weights=dict(tier.weights),
        homogeneity=tier.homogeneity,
        compactness=tier.compactness,
        previous=previous,
    )


def fence_order(fence: np.ndarray) -> list[str]:
    """Fence codes in a fixed order (sorted) so zone ids never depend on file order."""
    return sorted({str(f) for f in fence})
