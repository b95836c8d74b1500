"""Tiers bottom-up, fence by fence, through an executor.

Tier 1 is designed from areas inside each fence; tier k from the tier-(k-1) zones inside
each fence, so nesting holds by construction. Each (fence, tier) is an independent task
whose inputs are the arrays of that fence only, so tasks can run in local processes or on a
dask cluster and give the same answer for the same seed.
"""

from __future__ import annotations

import time
import traceback
import zlib
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np

from zonedesign import interrupts
from zonedesign.graph.collapse import collapse
from zonedesign.graph.components import components
from zonedesign.graph.links import fence_graph
from zonedesign.locks import Locks, cut_graph, unit_codes, upper_key
from zonedesign.measures import (
    compact_labels,
    score,
    standardise,
    zone_perimeter,
    zone_sums,
)
from zonedesign.plain import plain
from zonedesign.records import Areas, Graph, Problem
from zonedesign.rules import Rules, SearchRules, TierRules, tier_in_fence


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
    previous: np.ndarray | None = None  # previous zone index per unit (redraw)


@dataclass(frozen=True)
class FenceTask:
    fence: str
    tier: str
    tier_index: int
    units: np.ndarray  # unit indices of this fence, ascending
    problem: Problem
    search: SearchRules
    seed: int
    start: np.ndarray | None = None
    anchors: np.ndarray | None = None


@dataclass
class FenceResult:
    fence: str
    tier: str
    labels: np.ndarray  # 0..k-1 per unit of the fence
    breaks: float
    total: float
    terms: dict[str, float]
    seconds: float
    info: dict = field(default_factory=dict)
    error: str = ""


@dataclass
class TierResult:
    name: str
    zone_of_unit: np.ndarray  # global zone index per unit of this tier
    zone_ids: np.ndarray  # readable zone id per global zone index
    zone_fence: np.ndarray
    fences: list[FenceResult]
    seconds: float

    def labels_of_areas(self, of_area: np.ndarray) -> np.ndarray:
        return self.zone_ids[self.zone_of_unit[of_area]]


@dataclass
class HierarchyResult:
    tiers: list[TierResult]
    units: list[Units]  # units of each tier (units[0] are the areas)
    seconds: dict[str, float]

    def lookup(self) -> dict[str, np.ndarray]:
        """Zone id of every base area, per tier (bottom first)."""
        out = {}
        for tier, units in zip(self.tiers, self.units):
            out[tier.name] = tier.labels_of_areas(units.of_area)
        return out

    @property
    def failures(self) -> list[FenceResult]:
        return [f for t in self.tiers for f in t.fences if f.error]


# ---------------------------------------------------------------- units


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
    )


def next_units(units: Units, zone_of_unit: np.ndarray, zone_fence: np.ndarray) -> Units:
    """Collapse one tier's zones into the units of the next tier."""
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
    )


def task_seed(seed: int, fence: str, tier_index: int) -> int:
    """A seed per task that does not depend on task order or on Python's hash salt."""
    return int(zlib.crc32(f"{seed}|{fence}|{tier_index}".encode()) & 0x7FFFFFFF)


def fence_problem(
    units: Units,
    index: np.ndarray,
    tier: TierRules,
    count_names: Sequence[str],
    previous: np.ndarray | None = None,
) -> Problem:
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
        previous=None if previous is None else previous[index],
    )


def fence_order(fence: np.ndarray) -> list[str]:
    """Fence codes in a fixed order (sorted) so zone ids never depend on file order."""
    return sorted({str(f) for f in fence})


# ---------------------------------------------------------------- tasks


def run_task(task: FenceTask) -> FenceResult:
    """Solve one fence of one tier; an exception becomes a failed result, never a lost run."""
    from zonedesign.search.engine import solve

    t0 = time.perf_counter()
    try:
        sol = solve(
            task.problem,
            search_rules=task.search,
            seed=task.seed,
            time_limit=task.search.time_limit_fence,
            start=task.start,
            anchors=task.anchors,
        )
        return FenceResult(
            fence=task.fence,
            tier=task.tier,
            labels=np.asarray(sol.labels, dtype=np.int64),
            breaks=float(sol.score.breaks),
            total=float(sol.score.total),
            terms=dict(sol.score.terms),
            seconds=time.perf_counter() - t0,
            info=plain(sol.info),
        )
    except Exception as exc:  # noqa: BLE001 - one fence's failure must not lose the others
        interrupts.raise_if_fatal(exc)
        return scored_result(
            task, fallback_labels(task.problem), t0, {"traceback": traceback.format_exc(limit=5)},
            error=f"{type(exc).__name__}: {exc}",
        )


def scored_result(task: FenceTask, labels: np.ndarray, t0: float, info: dict, error: str = "") -> FenceResult:
    """A fence's result for a labelling the search did not score itself."""
    labels, _ = compact_labels(labels)
    s = score(task.problem, labels)
    return FenceResult(
        fence=task.fence,
        tier=task.tier,
        labels=labels,
        breaks=s.breaks,
        total=s.total,
        terms=s.terms,
        seconds=time.perf_counter() - t0,
        info=info,
        error=error,
    )


def fallback_labels(problem: Problem) -> np.ndarray:
    """One zone per connected component: keeps nesting valid when a fence fails."""
    return compact_labels(components(problem.graph)[1])[0]


Executor = Callable[..., list[FenceResult]]


def serial_executor(tasks: list[FenceTask], fn: Callable[[FenceTask], FenceResult] | None = None) -> list[FenceResult]:
    """Run tasks one after another in this process (fn defaults to `run_task`)."""
    fn = fn or run_task
    out = []
    for t in tasks:
        interrupts.check()
        out.append(fn(t))
    return out


# ---------------------------------------------------------------- tiers


def zone_id(fence: str, tier: str, number: int) -> str:
    return f"{fence}-{tier}-{number:04d}"


def assemble_tier(
    tier: TierRules,
    units: Units,
    fences: list[str],
    results: list[FenceResult],
    seconds: float,
    spans: list[np.ndarray] | None = None,
    locked: np.ndarray | None = None,
) -> TierResult:
    """Global zone indices and ids of one tier from its fences' results.

    spans: the units each fence's result labels (default: all of the fence); locked: the
    locked zone code per unit ("" where free), each locked zone keeping its code.
    """
    zone_of_unit = np.full(units.counts.shape[0], -1, dtype=np.int64)
    ids: list[str] = []
    zfence: list[str] = []
    taken = set() if locked is None else set(locked.tolist()) - {""}
    for f, (fence, res) in enumerate(zip(fences, results)):
        index = np.flatnonzero(units.fence == fence) if spans is None else spans[f]
        if index.size == 0:
            continue
        labels, k = compact_labels(res.labels)
        zone_of_unit[index] = labels + len(ids)
        number = 0
        for _ in range(k):
            number += 1
            while zone_id(fence, tier.name, number) in taken:  # a locked zone holds that code
                number += 1
            ids.append(zone_id(fence, tier.name, number))
        zfence.extend([fence] * k)
    for code in sorted(taken):
        members = np.flatnonzero(locked == code)
        zone_of_unit[members] = len(ids)
        ids.append(code)
        zfence.append(str(units.fence[members[0]]))
    return TierResult(
        name=tier.name,
        zone_of_unit=zone_of_unit,
        zone_ids=np.array(ids, dtype=object),
        zone_fence=np.array(zfence, dtype=object),
        fences=results,
        seconds=seconds,
    )


def build_hierarchy(
    areas: Areas,
    graph: Graph,
    rules: Rules,
    *,
    executor: Executor | None = None,
    on_tier: Callable[[str, int, int], None] | None = None,
    locks: Locks | None = None,
) -> HierarchyResult:
    """Design every tier bottom-up; `graph` holds rook edges plus declared links.

    Locked zones (`locks`) are kept as given; the rest is designed around them."""
    run = executor or serial_executor
    units = base_units(areas.in_tier(rules.tiers[0].name), graph)
    full = graph  # across fences too: an upper tier may join what a lower tier's fence parts
    tiers: list[TierResult] = []
    all_units: list[Units] = []
    seconds: dict[str, float] = {}
    for t, tier in enumerate(rules.tiers):
        t0 = time.perf_counter()
        fences = fence_order(units.fence)
        tasks = []
        locked, search_units = locked_units(units, locks, rules.tiers, t, areas.n)
        spans = [np.flatnonzero((units.fence == fence) & (locked == "")) for fence in fences]
        for fence, index in zip(fences, spans):
            if index.size == 0:
                continue  # every unit of the fence is in a locked zone
            tasks.append(
                FenceTask(
                    fence=fence,
                    tier=tier.name,
                    tier_index=t,
                    units=index,
                    problem=fence_problem(search_units, index, tier_in_fence(tier, fence), areas.count_names),
                    search=rules.search,
                    seed=task_seed(rules.search.seed, fence, t),
                )
            )
        results = with_locked_fences(run(tasks, run_task), fences, spans, tier.name)
        result = assemble_tier(tier, units, fences, results, time.perf_counter() - t0, spans, locked)
        seconds[f"tier {tier.name}"] = result.seconds
        tiers.append(result)
        all_units.append(units)
        if on_tier is not None:
            on_tier(tier.name, t + 1, len(rules.tiers))
        if t + 1 < len(rules.tiers):
            units = next_units(units, result.zone_of_unit, result.zone_fence)
            units, full = refenced(units, full, result.zone_of_unit, areas, rules.tiers[t + 1].name)
    return HierarchyResult(tiers=tiers, units=all_units, seconds=seconds)


def refenced(units: Units, full: Graph, zone_of_unit: np.ndarray, areas: Areas, tier: str) -> tuple[Units, Graph]:
    """The next tier's units inside that tier's own fence ([[tier]] fence).

    `full` is the graph of the tier below without fence cuts; collapsed, then cut along
    the next tier's fence, it joins units that a lower tier's finer fence kept apart. A
    lower fence nests in the upper one (checked on reading), so each unit has one code.
    """
    if not areas.tier_fence:
        return units, full
    from dataclasses import replace

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
    from dataclasses import replace

    locked = unit_codes(locks.of(tiers[t].name, n_areas), units.of_area, n)
    key = upper_key(locks, [x.name for x in tiers[t + 1 :]], units.of_area, n)
    return locked, replace(units, graph=cut_graph(units.graph, key))


def with_locked_fences(
    results: list[FenceResult], fences: list[str], spans: list[np.ndarray], tier: str
) -> list[FenceResult]:
    """One result per fence: an empty one where every unit is locked (nothing to search)."""
    found = iter(results)
    return [
        next(found) if index.size else FenceResult(
            fence=fence, tier=tier, labels=np.zeros(0, dtype=np.int64), breaks=0.0, total=0.0,
            terms={}, seconds=0.0, info={"locked": True},
        )
        for fence, index in zip(fences, spans)
    ]
