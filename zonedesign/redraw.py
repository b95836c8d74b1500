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
   (`zonecodes.unit_moves`: areas whose code changes under the code policy) is kept;
4. every other zone is kept whole with its code.
Codes are then given per tier by the code policy (`zonecodes.assign_codes`): a zone holding
exactly an old zone's areas always keeps its code. Nesting holds after every tier because
tier k is redrawn from the tier-(k-1) zones. A stability weight of 0 switches stability off:
broken zones and their neighbours are mended by the other weights alone, and no fewest-move
step runs.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from zonedesign import interrupts
from zonedesign.graph.components import components
from zonedesign.hierarchy import (
    Executor,
    FenceResult,
    FenceTask,
    Units,
    base_units,
    fence_order,
    fence_problem,
    locked_units,
    next_units,
    refenced,
    scored_result,
    serial_executor,
    task_seed,
    with_locked_fences,
)
from zonedesign.locks import Locks
from zonedesign.measures import bound_breaks, compact_labels, zone_sums
from zonedesign.records import Areas, Graph
from zonedesign.rules import STABILITY_DEFAULT, Rules, TierRules, tier_in_fence
from zonedesign.zonecodes import Succession, assign_codes, unit_moves

__all__ = ["STABILITY_DEFAULT", "redraw_hierarchy", "RedrawResult", "RedrawTier"]

STABILITY_FIRST = 1000.0  # the stability weight of the fewest-move search pass
REPAIR_WORK = 3.0  # CP-SAT deterministic time per fence for the fewest-move repair
REPAIR_CAP = 120.0  # seconds: a safety cap that a normal run never reaches


@dataclass
class RedrawTier:
    name: str
    zone_of_unit: np.ndarray
    zone_ids: np.ndarray
    zone_fence: np.ndarray
    succession: Succession
    seconds: float
    stability: float  # the weight the redraw used (0: off)
    fences: list[FenceResult] = field(default_factory=list)


@dataclass
class RedrawResult:
    tiers: list[RedrawTier]
    units: list[Units]
    new_areas: list[str]
    seconds: dict[str, float]
    policy: str = "successor"

    def lookup(self) -> dict[str, np.ndarray]:
        return {t.name: t.zone_ids[t.zone_of_unit[u.of_area]] for t, u in zip(self.tiers, self.units)}


@dataclass(frozen=True)
class RedrawTask(FenceTask):
    """A fence task with what counting moved areas needs: the code policy, and per unit its
    published count (the share that decides a code's successor) and its number of areas."""

    policy: str = "successor"
    unit_weight: np.ndarray | None = None
    unit_size: np.ndarray | None = None


# ---------------------------------------------------------------- start labelling


def _components(graph: Graph, members: np.ndarray) -> np.ndarray:
    """Component label of each unit in `members` on the induced subgraph."""
    return components(graph.subgraph(members))[1]


def start_labels(
    graph: Graph, prev: np.ndarray, counts: np.ndarray, lo: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """A contiguous labelling that keeps previous zones wherever they are still whole.

    prev: previous zone code per unit (-1 for units new since the previous lookup).
    Returns (labels 0..k-1, anchor previous code per zone, -1 for a new zone).
    """
    n = prev.shape[0]
    labels = np.full(n, -1, dtype=np.int64)
    anchors: list[int] = []
    loose: list[np.ndarray] = []
    for code in np.unique(prev[prev >= 0]):
        members = np.flatnonzero(prev == code)
        comp = _components(graph, members)
        sizes = np.bincount(comp)
        # the part with most units keeps the zone; ties go to the part of the smallest unit
        keep = int(np.argmax(sizes))
        labels[members[comp == keep]] = len(anchors)
        anchors.append(int(code))
        for c in range(sizes.shape[0]):
            if c != keep:
                loose.append(members[comp == c])
    new = np.flatnonzero(prev < 0)
    if new.size:
        comp = _components(graph, new)
        for c in range(int(comp.max()) + 1):
            loose.append(new[comp == c])
    # parts that meet every floor alone become zones; the rest join a neighbour
    pending = []
    for part in loose:
        if np.all(counts[part].sum(axis=0) >= np.where(np.isfinite(lo), lo, 0.0)):
            labels[part] = len(anchors)
            anchors.append(-1)
        else:
            pending.append(part)
    while pending:
        progressed = False
        rest = []
        for part in pending:
            best, best_len = -1, -1.0
            for u in part:
                for p in range(graph.indptr[u], graph.indptr[u + 1]):
                    v = graph.indices[p]
                    z = labels[v]
                    if z >= 0 and labels[u] < 0 and graph.length[p] > best_len:
                        best, best_len = int(z), float(graph.length[p])
            if best >= 0:
                labels[part] = best
                progressed = True
            else:
                rest.append(part)
        pending = rest
        if not progressed:
            # no assigned neighbour at all (an island of new units): a zone of its own
            for part in pending:
                labels[part] = len(anchors)
                anchors.append(-1)
            pending = []
    return labels, np.array(anchors, dtype=np.int64)


def zone_neighbours(graph: Graph, labels: np.ndarray, zones: np.ndarray) -> np.ndarray:
    """Zones adjacent to any zone in `zones`."""
    i, j, _ = graph.edges()
    inz = np.isin(labels, zones)
    a = labels[j[inz[i]]]
    b = labels[i[inz[j]]]
    return np.unique(np.concatenate([a, b, zones]))


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
        from zonedesign.measures import score

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


def _matching(before: np.ndarray, after: np.ndarray):
    """The one-to-one matching of new zones to old ones that keeps most units in place:
    (old names, new names, matched rows (old), matched columns (new), overlap counts)."""
    from scipy.optimize import linear_sum_assignment

    bn, b = np.unique(np.asarray(before, dtype=str), return_inverse=True)
    an, a = np.unique(np.asarray(after, dtype=str), return_inverse=True)
    overlap = np.zeros((bn.shape[0], an.shape[0]))
    np.add.at(overlap, (b, a), 1.0)
    rows, cols = linear_sum_assignment(-overlap)
    return bn, an, rows, cols, overlap


def matched_moves(before: np.ndarray, after: np.ndarray) -> int:
    """Units that changed zone under the best one-to-one matching of new zones to old ones
    (so a zone that only changed its number is not counted as moved)."""
    _, _, rows, cols, overlap = _matching(before, after)
    return int(np.asarray(before).shape[0] - overlap[rows, cols].sum())


def fewest_moves_bound(previous: np.ndarray, counts: np.ndarray, bounds, size: np.ndarray | None = None) -> int:
    """A lower bound on the areas any valid redraw moves, under either code policy.

    previous: previous zone code per unit (-1: new); size: areas per unit (1 each when
    None). Any code policy hands each old code to at most one new zone, so the moves are at
    least those of the best one-to-one matching of new zones to old ones. A zone above a
    ceiling keeps at most a ceiling's worth of its units in its matched zone, so it loses
    at least as many units as its largest units take to cover the excess; these losses are
    different units for different zones. A zone below a floor either gains units (at least
    as many as the largest other units take to cover the shortfall) or is taken apart (all
    its units move). A count of units becomes areas by the smallest units of that many.
    """
    prev = np.asarray(previous, dtype=np.int64)
    if not (prev >= 0).any():
        return 0
    size = np.ones(prev.shape[0]) if size is None else np.asarray(size, dtype=np.float64)
    k = int(prev.max()) + 1
    sums = zone_sums(np.where(prev >= 0, prev, 0), k, np.where((prev >= 0)[:, None], counts, 0.0))
    leaving = 0
    shortfall = 0
    for z in range(k):
        members = prev == z
        if not members.any():
            continue
        need_out, need_in = 0, 0
        for c in range(counts.shape[1]):
            excess = sums[z, c] - bounds.hi[c]
            if excess > 1e-9:
                need_out = max(need_out, _units_to_cover(counts[members, c], excess))
            lack = bounds.lo[c] - sums[z, c]
            if lack > 1e-9:
                need_in = max(need_in, _units_to_cover(counts[~members, c], lack))
        leaving += int(np.sort(size[members])[:need_out].sum())
        if need_in:
            smallest_in = np.sort(size[~members])[:need_in].sum()
            shortfall = max(shortfall, int(min(smallest_in, size[members].sum())))
    return max(leaving, shortfall)


def _units_to_cover(values: np.ndarray, amount: float) -> int:
    """The fewest of `values` whose sum reaches `amount` (all of them when none do)."""
    top = np.cumsum(np.sort(values)[::-1])
    return int(min(np.searchsorted(top, amount - 1e-9) + 1, values.shape[0]))


def _fewer_moves(task: FenceTask, searched: np.ndarray, active: np.ndarray, info: dict) -> np.ndarray:
    """The search's labelling, or one that moves fewer units and breaks no bound.

    Only when the search moved more units than `fewest_moves_bound` allows for: first the
    same zones are searched again with stability put first (weight STABILITY_FIRST: the
    rules' lower weight traded moves for shape, and a redraw promises the fewest moves),
    then the CP-SAT fewest-move repair of the previous zones is tried. Its budget is
    deterministic, so a redraw repeats exactly under any load.
    """
    from zonedesign.verify.repair import minimal_repair

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
    tier = TierRules(
        name=task.tier,
        min={c: float(v) for c, v in zip(b.count_names, b.lo) if np.isfinite(v)},
        max={c: float(v) for c, v in zip(b.count_names, b.hi) if np.isfinite(v)},
    )
    n = prev.shape[0]
    fence_areas = Areas(
        ids=np.array([f"u{u}" for u in range(n)], dtype=object),
        count_names=tuple(b.count_names),
        counts=p.counts,
        attr_names=(),
        attrs=np.zeros((n, 0)),
        weight=np.ones(n),
        area=p.area,
        perimeter=p.perimeter,
        fence=np.full(n, task.fence, dtype=object),
    )
    start = np.array([f"z{z}" if z >= 0 else "" for z in prev], dtype=object)
    try:
        rep = minimal_repair(
            fence_areas, p.graph, {task.tier: start}, [tier], time_limit=REPAIR_CAP, deterministic_time=REPAIR_WORK
        )
    except Exception as exc:  # noqa: BLE001 - the search's mend stands when the model cannot be built
        interrupts.raise_if_fatal(exc)
        return searched
    info["repair_status"] = rep.status
    if not rep.ok or rep.remaining or not rep.labels:
        return searched
    codes, _ = compact_labels(np.asarray(rep.labels[task.tier], dtype=object))
    if _breaks(p, codes) > 0:
        return searched
    repair_moves = moves(codes)
    info["moves_repair"] = repair_moves
    if searched_breaks == 0 and repair_moves >= search_moves:
        return searched
    proven = rep.status == "optimal" or repair_moves <= bound
    info["mended_by"] = "cp-sat fewest moves" + (" (proven)" if proven else "")
    return codes


def _mover(task: FenceTask):
    """Areas a labelling of this fence moves: `zonecodes.unit_moves` under the task's code
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
    try:
        return redraw_fence(task)
    except Exception as exc:  # noqa: BLE001 - a failed fence keeps its start labelling
        import traceback

        interrupts.raise_if_fatal(exc)
        return scored_result(
            task, task.start, time.perf_counter(), {"traceback": traceback.format_exc(limit=5)},
            error=f"{type(exc).__name__}: {exc}",
        )


# ---------------------------------------------------------------- hierarchy


def redraw_hierarchy(
    areas: Areas,
    graph: Graph,
    rules: Rules,
    previous: dict[str, np.ndarray],
    *,
    executor: Executor | None = None,
    published: np.ndarray | None = None,
    locks: Locks | None = None,
) -> RedrawResult:
    """Redraw every tier bottom-up; previous[tier] holds each area's previous zone code
    ("" for areas new since the previous lookup). published: each area's published count
    of the first count column (the share that decides a code's successor); the new
    counts when None. Codes follow `rules.redraw.codes`. Locked zones (`locks`) are kept
    exactly, code and areas, whatever the new counts."""
    run = executor or serial_executor
    policy = rules.redraw.codes
    weight_area = areas.counts[:, 0] if published is None else np.asarray(published, dtype=np.float64)
    units = base_units(areas.in_tier(rules.tiers[0].name), graph)
    full = graph  # across fences too: an upper tier may join what a lower tier's fence parts
    new_areas = [str(a) for a, p in zip(areas.ids, previous[rules.tiers[0].name]) if p == ""]
    tiers: list[RedrawTier] = []
    all_units: list[Units] = []
    seconds: dict[str, float] = {}
    for t, tier in enumerate(rules.tiers):
        t0 = time.perf_counter()
        fences = fence_order(units.fence)
        n_units = units.counts.shape[0]
        prev_unit = unit_previous(previous[tier.name], units.of_area, n_units)
        unit_size = np.bincount(units.of_area, minlength=n_units).astype(np.float64)
        unit_weight = np.bincount(units.of_area, weights=weight_area, minlength=n_units)
        stability = float(tier.weights.get("stability", STABILITY_DEFAULT))
        tasks, meta = [], []
        locked, search_units = locked_units(units, locks, rules.tiers, t, areas.n)
        spans = [np.flatnonzero((units.fence == fence) & (locked == "")) for fence in fences]
        for fence, index in zip(fences, spans):
            if index.size == 0:
                continue  # every unit of the fence is in a locked zone
            pid = prev_unit[index]
            codes = previous_codes(pid)
            here = tier_in_fence(tier, fence)  # an override's bounds and weights in this fence
            b = here.bounds(areas.count_names)
            sub_graph = search_units.graph.subgraph(index)
            start, anchors = start_labels(sub_graph, codes, units.counts[index], b.lo)
            # the weight actually used: the default when left out, 0 switches stability off
            used = replace(here, weights={**here.weights, "stability": float(here.weights.get("stability", STABILITY_DEFAULT))})
            problem = fence_problem(search_units, index, used, areas.count_names, previous=None)
            problem = replace(problem, previous=codes)
            tasks.append(
                RedrawTask(
                    fence=fence, tier=tier.name, tier_index=t, units=index, problem=problem,
                    search=rules.search, seed=task_seed(rules.search.seed, fence, t),
                    start=start, anchors=anchors, policy=policy,
                    unit_weight=unit_weight[index], unit_size=unit_size[index],
                )
            )
            meta.append(index)
        searched = run(tasks, run_redraw_task)
        results = with_locked_fences(searched, fences, spans, tier.name)
        zone_of_unit = np.full(n_units, -1, dtype=np.int64)
        zfence: list[str] = []
        for res, index in zip(searched, meta):
            labels, k = compact_labels(res.labels)
            zone_of_unit[index] = labels + len(zfence)
            zfence.extend([res.fence] * k)
        lock_codes = sorted(set(locked.tolist()) - {""})
        for code in lock_codes:
            members = np.flatnonzero(locked == code)
            zone_of_unit[members] = len(zfence)
            zfence.append(str(units.fence[members[0]]))
        zone_fence = np.array(zfence, dtype=object)
        old = np.asarray(previous[tier.name], dtype=object)
        succession = assign_codes(
            locked_old(old, locked[units.of_area], lock_codes), zone_of_unit[units.of_area], zone_fence,
            tier.name, weight_area, policy, known=set(old.tolist()) - {""},
        )
        for z, code in enumerate(lock_codes, start=len(zfence) - len(lock_codes)):
            succession.codes[z] = code  # already so: only the locked areas carry a locked code
        seconds[f"tier {tier.name}"] = time.perf_counter() - t0
        tiers.append(
            RedrawTier(
                name=tier.name, zone_of_unit=zone_of_unit, zone_ids=succession.codes,
                zone_fence=zone_fence, succession=succession,
                seconds=seconds[f"tier {tier.name}"], stability=stability, fences=results,
            )
        )
        all_units.append(units)
        if t + 1 < len(rules.tiers):
            units = next_units(units, zone_of_unit, zone_fence)
            units, full = refenced(units, full, zone_of_unit, areas, rules.tiers[t + 1].name)
    return RedrawResult(
        tiers=tiers, units=all_units, new_areas=new_areas, seconds=seconds, policy=policy
    )


def locked_old(old: np.ndarray, locked_area: np.ndarray, lock_codes: list[str]) -> np.ndarray:
    """Old codes as code assignment sees them with locks: a locked zone's areas carry its
    code, and no free area does, so the locked zone alone carries it on."""
    if not lock_codes:
        return old
    out = old.copy()
    out[(locked_area == "") & np.isin(out, lock_codes)] = ""
    out[locked_area != ""] = locked_area[locked_area != ""]
    return out


def previous_codes(ids: np.ndarray) -> np.ndarray:
    """Previous zone ids as codes 0..k-1 in sorted id order; -1 for "" (no previous zone)."""
    codes, _ = pd.factorize(pd.Series(np.asarray(ids, dtype=object)).replace("", np.nan), sort=True)
    return codes.astype(np.int64)


def unit_previous(prev_area: np.ndarray, of_area: np.ndarray, n_units: int) -> np.ndarray:
    """Previous zone id of each unit: the id most of its areas had ("" for none)."""
    frame = pd.DataFrame({"u": of_area, "p": np.asarray(prev_area, dtype=object)})
    frame = frame[frame["p"] != ""]
    out = np.full(n_units, "", dtype=object)
    if len(frame):
        counts = frame.groupby(["u", "p"], sort=True).size().reset_index(name="c")
        counts = counts.sort_values(["u", "c", "p"], ascending=[True, False, True], kind="stable")
        top = counts.drop_duplicates("u")
        out[top["u"].to_numpy()] = top["p"].to_numpy()
    return out


def unchanged_share(previous: np.ndarray, now: np.ndarray) -> float:
    """Share of previous zones whose id now holds exactly the same areas."""
    prev = pd.Series(np.asarray(previous, dtype=object))
    cur = pd.Series(np.asarray(now, dtype=object))
    have = prev != ""
    if not have.any():
        return 1.0
    same = (prev == cur)[have].groupby(prev[have]).all()
    size_prev = prev[have].value_counts()
    size_now = cur.value_counts().reindex(size_prev.index, fill_value=0)
    kept = same & (size_now == size_prev).reindex(same.index)
    return float(kept.mean())
