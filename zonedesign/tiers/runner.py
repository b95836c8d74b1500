"""The one tier runner: tiers bottom-up, fence by fence, through an executor.

Tier 1 is solved from the areas inside each fence; tier k from the tier-(k-1) zones inside
each fence, so nesting holds by construction. Each (fence, tier) is an independent task
whose inputs are the arrays of that fence only, so tasks can run in local processes or on a
dask cluster and give the same answer for the same seed. What a fence's task does and how
a tier's zones are named is the strategy's: design (`tiers.design`) or redraw
(`tiers.redraw`).
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from zonedesign.locks import Locks
from zonedesign.measures import compact_labels
from zonedesign.records import Areas, Graph
from zonedesign.rules import Rules, TierRules
from zonedesign.tiers.executors import Executor, serial_executor
from zonedesign.tiers.naming import Succession
from zonedesign.tiers.tasks import FenceResult, FenceTask, locked_result
from zonedesign.tiers.units import (
    Units,
    base_units,
    fence_order,
    locked_units,
    next_units,
    refenced,
)


@dataclass
class TierResult:
    name: str
    zone_of_unit: np.ndarray  # global zone index per unit of this tier
    zone_ids: np.ndarray  # readable zone id per global zone index
    zone_fence: np.ndarray
    fences: list[FenceResult]
    seconds: float
    succession: Succession | None = None  # redraw: the old codes carried on and retired
    stability: float | None = None  # redraw: the stability weight used (0: off)

    def labels_of_areas(self, of_area: np.ndarray) -> np.ndarray:
        return self.zone_ids[self.zone_of_unit[of_area]]


@dataclass
class HierarchyResult:
    tiers: list[TierResult]
    units: list[Units]  # units of each tier (units[0] are the areas)
    seconds: dict[str, float]
    new_areas: list[str] = field(default_factory=list)  # redraw: areas with no previous zone
    policy: str = ""  # redraw: the code policy (`[redraw] codes`)

    def lookup(self) -> dict[str, np.ndarray]:
        """Zone id of every base area, per tier (bottom first)."""
        return {tier.name: tier.labels_of_areas(units.of_area) for tier, units in zip(self.tiers, self.units)}

    @property
    def failures(self) -> list[FenceResult]:
        return [f for t in self.tiers for f in t.fences if f.error]


@dataclass(frozen=True)
class TierZones:
    """A tier's zones before they are named: the searched zones of each fence together, in
    fence order, then one zone per locked code (sorted)."""

    zone_of_unit: np.ndarray  # global zone index per unit
    zone_fence: np.ndarray  # fence of each zone
    locked: np.ndarray  # locked zone code per unit ("" where free)
    lock_codes: list[str]  # the locked zones' codes, in zone order after the searched ones


class Strategy:
    """What the runner asks of a design or a redraw, tier by tier.

    fence_fn: the task function run on each fence (module level, so workers can take it);
    begin_tier: per-tier set-up before the tasks; task: one fence's task over the units
    the search sees; name_zones: the zone ids of a tier and any fields of its own for
    `TierResult`.
    """

    fence_fn: Callable[[FenceTask], FenceResult]

    def begin_tier(self, t: int, tier: TierRules, units: Units) -> None:
        """Nothing to set up unless a strategy needs it."""

    def task(self, t: int, tier: TierRules, fence: str, index: np.ndarray, units: Units) -> FenceTask:
        raise NotImplementedError

    def name_zones(self, t: int, tier: TierRules, units: Units, zones: TierZones) -> tuple[np.ndarray, dict]:
        raise NotImplementedError


def run_tiers(
    areas: Areas, graph: Graph, rules: Rules, strategy: Strategy, *, executor: Executor | None = None,
    on_tier: Callable[[str, int, int], None] | None = None, locks: Locks | None = None,
) -> HierarchyResult:
    """Every tier bottom-up, each fence through `strategy`; `graph` holds rook edges plus
    declared links. Locked zones (`locks`) are kept as given; the rest is solved around them."""
    run = executor or serial_executor
    units = base_units(areas.in_tier(rules.tiers[0].name), graph)
    full = graph  # across fences too: an upper tier may join what a lower tier's fence parts
    tiers: list[TierResult] = []
    all_units: list[Units] = []
    seconds: dict[str, float] = {}
    for t, tier in enumerate(rules.tiers):
        t0 = time.perf_counter()
        fences = fence_order(units.fence)
        locked, search_units = locked_units(units, locks, rules.tiers, t, areas.n)
        spans = [np.flatnonzero((units.fence == fence) & (locked == "")) for fence in fences]
        strategy.begin_tier(t, tier, units)
        # a fence whose every unit is in a locked zone has nothing to search
        tasks = [strategy.task(t, tier, fence, index, search_units) for fence, index in zip(fences, spans) if index.size]
        found = iter(run(tasks, strategy.fence_fn))
        results = [next(found) if index.size else locked_result(fence, tier.name) for fence, index in zip(fences, spans)]
        zones = place_zones(units, spans, results, locked)
        zone_ids, extra = strategy.name_zones(t, tier, units, zones)
        seconds[f"tier {tier.name}"] = time.perf_counter() - t0
        tiers.append(
            TierResult(
                name=tier.name, zone_of_unit=zones.zone_of_unit, zone_ids=zone_ids, zone_fence=zones.zone_fence,
                fences=results, seconds=seconds[f"tier {tier.name}"], **extra,
            )
        )
        all_units.append(units)
        if on_tier is not None:
            on_tier(tier.name, t + 1, len(rules.tiers))
        if t + 1 < len(rules.tiers):
            named = np.array([f"{tier.name} zone {z}" for z in zone_ids], dtype=object)
            units = next_units(units, zones.zone_of_unit, zones.zone_fence, named)
            units, full = refenced(units, full, zones.zone_of_unit, areas, rules.tiers[t + 1].name)
    return HierarchyResult(tiers=tiers, units=all_units, seconds=seconds)


def place_zones(units: Units, spans: list[np.ndarray], results: list[FenceResult], locked: np.ndarray) -> TierZones:
    """Global zone indices of one tier from its fences' results (spans: the units each
    fence's result labels), then one zone per locked code."""
    zone_of_unit = np.full(units.counts.shape[0], -1, dtype=np.int64)
    zfence: list[str] = []
    for index, res in zip(spans, results):
        if index.size == 0:
            continue
        labels, k = compact_labels(res.labels)
        zone_of_unit[index] = labels + len(zfence)
        zfence.extend([res.fence] * k)
    lock_codes = sorted(set(locked.tolist()) - {""})
    for code in lock_codes:
        members = np.flatnonzero(locked == code)
        zone_of_unit[members] = len(zfence)
        zfence.append(str(units.fence[members[0]]))
    return TierZones(zone_of_unit, np.array(zfence, dtype=object), locked, lock_codes)
