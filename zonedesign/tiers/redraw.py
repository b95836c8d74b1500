"""Redraw a published hierarchy after new counts with the fewest changes.

Census maintenance practice (Cockings, Harfoot, Martin & Hornby 2011): keep every zone that
still meets the rules, merge zones that fell below a floor, split zones that grew above a
ceiling, mend zones that are not contiguous, and change as little as possible.

Per tier (bottom-up) and fence:
1. start from the previous zones; a previous zone split by a fence or no longer contiguous
   keeps its largest part, and the other parts (and areas new since the previous lookup) join
   the neighbouring zone they share most boundary with, or stand alone when they meet the
   floors on their own;
2. zones that now break a bound are the broken zones; only they and their neighbouring zones
   are handed to the search, which starts from the current labelling with a heavy stability
   weight (every unit leaving its previous zone costs), and may merge, split and move units;
   the ring widens when the breaks cannot be mended inside it;
3. when the search moved more areas than `fewest_moves_bound` (a counting lower bound)
   allows, the same zones are searched again with stability first, then the CP-SAT
   fewest-move repair of the previous zones is tried; the labelling moving fewest areas
   (`naming.unit_moves`: areas whose code changes under the code policy) is kept;
4. every other zone is kept whole with its code.
Codes are then given per tier by the code policy (`naming.assign_codes`): a zone holding
exactly an old zone's areas always keeps its code. Nesting holds after every tier because
tier k is redrawn from the tier-(k-1) zones. A stability weight of 0 switches stability off:
broken zones and their neighbours are mended by the other weights alone, and no fewest-move
step runs.
"""

from __future__ import annotations

import time
import traceback
from dataclasses import dataclass, replace

import numpy as np

from zonedesign import interrupts
from zonedesign.locks import Locks
from zonedesign.measures import bound_breaks, compact_labels, score, zone_sums
from zonedesign.records import Areas, Graph, Problem
from zonedesign.rules import STABILITY_DEFAULT, Rules, TierRules, tier_in_fence
from zonedesign.tiers.executors import Executor
from zonedesign.tiers.fewest import fewest_moves_bound, matched_moves
from zonedesign.tiers.naming import assign_codes, unit_moves
from zonedesign.tiers.previous import (
    locked_old,
    previous_codes,
    start_labels,
    unit_previous,
    zone_neighbours,
)
from zonedesign.tiers.runner import HierarchyResult, Strategy, TierZones, run_tiers
from zonedesign.tiers.tasks import FenceResult, FenceTask, scored_result, task_seed
from zonedesign.tiers.units import Units, fence_problem
from zonedesign.verify.repair import LabelRepair, repair_labelling

__all__ = ["STABILITY_DEFAULT", "redraw_hierarchy"]

STABILITY_FIRST = 1000.0  # the stability weight of the fewest-move search pass
REPAIR_WORK = 3.0  # CP-SAT deterministic time per fence for the fewest-move repair
REPAIR_CAP = 120.0  # seconds: a safety cap that a normal run never reaches


@dataclass(frozen=True)
class RedrawTask(FenceTask):
    """A fence task with what counting moved areas needs: the code policy, and per unit its
    published count (the share that decides a code's successor) and its number of areas."""

    policy: str = "successor"
    unit_weight: np.ndarray | None = None
    unit_size: np.ndarray | None = None


# ---------------------------------------------------------------- one fence


def redraw_fence(task: FenceTask, rings: int = 3) -> FenceResult:
    """Mend one fence: only broken zones and their neighbours are searched."""
    from zonedesign.search.engine import solve

    t0 = time.perf_counter()
    p = task.problem
    labels, anchors = task.start, task.anchors
    k = anchors.shape[0]
    sums = zone_sums(labels, k, p.counts)
    broken = np.flatnonzero(bound_breaks(sums, p.bounds) > 0)
    info: dict = {"broken_zones": int(broken.size), "rings": 0}
    if broken.size == 0:
        return scored_result(task, labels, t0, info)
    active = broken
    best = labels
    for ring in range(1, rings + 1):
        active = zone_neighbours(p.graph, labels, active)
        best, breaks = _search_ring(task, active, task.seed + ring)
        info["rings"] = ring
        if breaks == 0:
            break
    else:
        # the rings could not mend every break: redesign the whole fence (still weighing
        # stability) and take it only when it breaks fewer bounds
        fresh = solve(p, search_rules=task.search, seed=task.seed, time_limit=task.search.time_limit_fence)
        if fresh.score.breaks < score(p, compact_labels(best)[0]).breaks:
            best = np.asarray(fresh.labels, dtype=np.int64)
            info["redesigned"] = True
    if p.previous is not None and p.term_weights.get("stability", 0.0) > 0:
        best = _fewer_moves(task, best, active, info)
    return scored_result(task, best, t0, info)


def _search_ring(task: FenceTask, active: np.ndarray, seed: int) -> tuple[np.ndarray, float]:
    """Search the units of the `active` zones from the start labelling; every other zone
    is kept. Returns the fence's labels (searched zones numbered after the kept ones) and
    the search's bound breaks."""
    from zonedesign.search.engine import solve

    p = task.problem
    labels, anchors = task.start, task.anchors
    k = anchors.shape[0]
    units = np.flatnonzero(np.isin(labels, active))
    local, kk = compact_labels(labels[units])
    local_anchor = np.full(kk, -1, dtype=np.int64)
    local_anchor[local] = anchors[labels[units]]
    sol = solve(
        _sub_problem(p, units),
        search_rules=task.search,
        seed=seed,
        time_limit=task.search.time_limit_fence,
        start=local,
        anchors=local_anchor,
    )
    out = labels.copy()
    untouched = np.setdiff1d(np.arange(k), active)
    renum = np.full(k, -1, dtype=np.int64)
    renum[untouched] = np.arange(untouched.shape[0])
    kept = ~np.isin(labels, active)
    out[kept] = renum[labels[kept]]
    out[units] = untouched.shape[0] + np.asarray(sol.labels, dtype=np.int64)
    return out, sol.score.breaks


def _fewer_moves(task: FenceTask, searched: np.ndarray, active: np.ndarray, info: dict) -> np.ndarray:
    """The search's labelling, or one that moves fewer units and breaks no bound.

    Only when the search moved more units than `fewest_moves_bound` allows for: first the
    same zones are searched again with stability put first (weight STABILITY_FIRST: the
    rules' lower weight traded moves for shape, and a redraw promises the fewest moves),
    then the CP-SAT fewest-move repair of the previous zones is tried. Its budget is
    deterministic, so a redraw repeats exactly under any load.
    """
    p = task.problem
    prev = np.asarray(p.previous, dtype=np.int64)
    b = p.bounds
    moves = _mover(task)
    search_moves = moves(searched)
    bound = fewest_moves_bound(prev, p.counts, b, getattr(task, "unit_size", None))
    searched_breaks = _breaks(p, searched)
    info["moves_search"] = search_moves
    info["moves_bound"] = bound
    if searched_breaks == 0 and search_moves <= bound:
        return searched
    if p.term_weights.get("stability", 0.0) < STABILITY_FIRST:
        first = replace(task, problem=replace(p, term_weights={**p.term_weights, "stability": STABILITY_FIRST}))
        again, breaks = _search_ring(first, active, task.seed + 100)
        again_moves = moves(again)
        info["moves_stability_first"] = again_moves
        if breaks == 0 and (searched_breaks > 0 or again_moves < search_moves):
            searched, search_moves, searched_breaks = again, again_moves, 0
            info["mended_by"] = "search, stability first"
            if search_moves <= bound:
                return searched
    try:
        rep = repair_problem(p)
    except Exception as exc:  # noqa: BLE001 - the search's mend stands when the model cannot be built
        interrupts.raise_if_fatal(exc)
        return searched
    info["repair_status"] = rep.status
    if rep.status not in ("optimal", "feasible"):
        return searched
    codes, _ = compact_labels(rep.labels)
    if _breaks(p, codes) > 0:
        return searched
    repair_moves = moves(codes)
    info["moves_repair"] = repair_moves
    if searched_breaks == 0 and repair_moves >= search_moves:
        return searched
    proven = rep.status == "optimal" or repair_moves <= bound
    info["mended_by"] = "cp-sat fewest moves" + (" (proven)" if proven else "")
    return codes


def repair_problem(problem: Problem) -> LabelRepair:
    """The CP-SAT fewest-move repair of a fence's previous zones (`problem.previous`), on
    a deterministic budget (REPAIR_WORK) so that a redraw repeats exactly under any load.
    Kept zones keep their previous numbers and new ones come after; only the partition
    counts here, as the fence's labels are numbered afresh in the order units meet them."""
    return repair_labelling(
        problem.graph, problem.counts, problem.bounds, problem.previous,
        time_limit=REPAIR_CAP, deterministic_time=REPAIR_WORK,
    )


def _mover(task: FenceTask):
    """Areas a labelling of this fence moves: `naming.unit_moves` under the task's code
    policy (units counted once each, by the best matching, for a plain fence task)."""
    prev = np.asarray(task.problem.previous, dtype=np.int64)
    if not isinstance(task, RedrawTask) or task.unit_size is None:
        return lambda labels: matched_moves(prev, labels)
    weight = task.unit_weight if task.unit_weight is not None else task.problem.counts[:, 0]

    def moves(labels: np.ndarray) -> int:
        return unit_moves(prev, compact_labels(labels)[0], weight, task.unit_size, task.policy)

    return moves


def _breaks(p, labels: np.ndarray) -> float:
    """The summed bound breaks of a labelling (0 when every bound holds)."""
    codes, k = compact_labels(labels)
    return float(bound_breaks(zone_sums(codes, k, p.counts), p.bounds).sum())


def _sub_problem(p, units: np.ndarray):
    return replace(
        p,
        graph=p.graph.subgraph(units),
        counts=p.counts[units],
        attrs=p.attrs[units],
        weight=p.weight[units],
        area=p.area[units],
        perimeter=p.perimeter[units],
        previous=None if p.previous is None else p.previous[units],
    )


def run_redraw_task(task: FenceTask) -> FenceResult:
    """Redraw one fence; an exception becomes a failed result keeping the start labelling."""
    try:
        return redraw_fence(task)
    except Exception as exc:  # noqa: BLE001 - a failed fence keeps its start labelling
        interrupts.raise_if_fatal(exc)
        return scored_result(
            task, task.start, time.perf_counter(), {"traceback": traceback.format_exc(limit=5)},
            error=f"{type(exc).__name__}: {exc}",
        )


# ---------------------------------------------------------------- the strategy


class RedrawStrategy(Strategy):
    """Each fence mended from its previous zones; codes carried on by the code policy."""

    fence_fn = staticmethod(run_redraw_task)

    def __init__(self, areas: Areas, rules: Rules, previous: dict[str, np.ndarray], weight_area: np.ndarray):
        self.count_names = areas.count_names
        self.rules = rules
        self.previous = previous
        self.weight_area = weight_area
        self.policy = rules.redraw.codes

    def begin_tier(self, t: int, tier: TierRules, units: Units) -> None:
        n_units = units.counts.shape[0]
        self.prev_unit = unit_previous(self.previous[tier.name], units.of_area, n_units)
        self.unit_size = np.bincount(units.of_area, minlength=n_units).astype(np.float64)
        self.unit_weight = np.bincount(units.of_area, weights=self.weight_area, minlength=n_units)

    def task(self, t: int, tier: TierRules, fence: str, index: np.ndarray, units: Units) -> FenceTask:
        codes = previous_codes(self.prev_unit[index])
        here = tier_in_fence(tier, fence)  # an override's bounds and weights in this fence
        b = here.bounds(self.count_names)
        start, anchors = start_labels(units.graph.subgraph(index), codes, units.counts[index], b.lo)
        # the weight actually used: the default when left out, 0 switches stability off
        used = replace(here, weights={**here.weights, "stability": float(here.weights.get("stability", STABILITY_DEFAULT))})
        problem = fence_problem(units, index, used, self.count_names, previous=codes)
        return RedrawTask(
            fence=fence, tier=tier.name, tier_index=t, units=index, problem=problem,
            search=self.rules.search, seed=task_seed(self.rules.search.seed, fence, t),
            start=start, anchors=anchors, policy=self.policy,
            unit_weight=self.unit_weight[index], unit_size=self.unit_size[index],
        )

    def name_zones(self, t: int, tier: TierRules, units: Units, zones: TierZones) -> tuple[np.ndarray, dict]:
        old = np.asarray(self.previous[tier.name], dtype=object)
        succession = assign_codes(
            locked_old(old, zones.locked[units.of_area], zones.lock_codes), zones.zone_of_unit[units.of_area],
            zones.zone_fence, tier.name, self.weight_area, self.policy, known=set(old.tolist()) - {""},
        )
        first = len(zones.zone_fence) - len(zones.lock_codes)
        for z, code in enumerate(zones.lock_codes, start=first):
            succession.codes[z] = code  # already so: only the locked areas carry a locked code
        stability = float(tier.weights.get("stability", STABILITY_DEFAULT))
        return succession.codes, {"succession": succession, "stability": stability}


def redraw_hierarchy(
    areas: Areas,
    graph: Graph,
    rules: Rules,
    previous: dict[str, np.ndarray],
    *,
    executor: Executor | None = None,
    published: np.ndarray | None = None,
    locks: Locks | None = None,
) -> HierarchyResult:
    """Redraw every tier bottom-up; previous[tier] holds each area's previous zone code
    ("" for areas new since the previous lookup). published: each area's published count
    of the first count column (the share that decides a code's successor); the new
    counts when None. Codes follow `rules.redraw.codes`. Locked zones (`locks`) are kept
    exactly, code and areas, whatever the new counts."""
    weight_area = areas.counts[:, 0] if published is None else np.asarray(published, dtype=np.float64)
    strategy = RedrawStrategy(areas, rules, previous, weight_area)
    result = run_tiers(areas, graph, rules, strategy, executor=executor, locks=locks)
    result.new_areas = [str(a) for a, p in zip(areas.ids, previous[rules.tiers[0].name]) if p == ""]
    result.policy = strategy.policy
    return result
