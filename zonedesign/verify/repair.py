"""Minimal repair: the fewest area reassignments that make a broken hierarchy valid.

`minimal_repair` finds every zone that breaks a rule (bounds, contiguity, nesting, fence
crossing, areas without a zone) with the plain checks, then lets CP-SAT relabel only the
areas of those zones and of the zones next to them, minimising the number of (area, tier)
labels that change.

All tiers are repaired in one joint model rather than tier by tier: a stray area put under
the wrong upper zone is then fixed by changing that one label, where a bottom-up pass
would first move it at tier 1 and then move its new tier-1 zone again. Per tier t:

- broken zones B_t (a nesting break marks the child zone and every parent it spans), the
  region N_t = B_t plus every zone touching a zone of B_t or an area without a zone;
- areas of N_t zones (and areas without a zone) may change their tier-t label, to a zone
  of N_t or to a new zone; every other area keeps its tier-t zone;
- locked zones (`locks`) are no part of any region: their areas keep their label, no
  other area takes it, and a bound one breaks is reported as the lock's, never mended;
- constraints: one zone per area, bounds on every zone that can change (those of the fence
  it lies in: `[[tier.override]]`; each tier keeps to its own fence), one fence per
  zone, flow contiguity rooted at one unit per used zone (Shirabe 2005), and nesting:
  each tier-t zone's areas share one tier-(t+1) zone.

Areas linked through overlapping regions form one cluster; clusters are independent
models. Each cluster is solved in stages: first only areas within 1, 2, 4, 8 steps of the
offending areas (the detached part of a zone, the areas across a fence or under the wrong
parent, a zone outside its bounds, areas without a zone) may move, the rest of each
region zone held as fixed pieces; then the whole region. The fewest moves found is kept.
A lower bound ends the stages early: faults that share no (area, tier) label each need a
move of their own (an area without a zone takes a label, a zone across a fence loses one
of its areas, a zone under two parents relabels one of its areas), so a repair with that
many moves is proven fewest. "optimal" means proven fewest over the whole region; when
the region is too large to prove (more than `max_units` movable units on a tier, or out
of time), the result is "feasible" and the reason says within how many steps the count
is proven fewest. On
regions with many zones a unit may only move to zones near it (its own, those within two
steps, and the new ones).
"""

from __future__ import annotations

import math
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from zonedesign.graph.components import components
from zonedesign.records import Areas, Bounds, Graph, Problem
from zonedesign.rules import TierRules, overridden_fences, tier_in_fence
from zonedesign.verify.checks import audit, encode_labels, tier_bounds, zone_members
from zonedesign.verify.cpsat import (
    integer_scale,
    scaled_counts,
)
from zonedesign.verify.proofs import arithmetic_proof
from zonedesign.verify.repairmodel import Budget, ClusterModel, RepairContext

REPAIRED_KINDS = ("bounds", "contiguity", "fence", "nesting")


@dataclass(frozen=True)
class Move:
    """One area relabelled on one tier (old is "" where the area had no zone)."""

    area: str
    tier: str
    old: str
    new: str


@dataclass
class RepairResult:
    """Moves, the repaired labels per tier, and how sure the repair is.

    status: "optimal" (fewest moves proven; no move when nothing breaks a rule), "feasible" (valid, not
    proven fewest), "infeasible" (no relabelling of the region meets the rules; reason says
    why) or "undecided" (no repair found within the time limit, none proven impossible).
    """

    moves: list[Move]
    labels: dict[str, np.ndarray]
    status: str
    reason: str = ""
    clusters: list[dict] = field(default_factory=list)
    seconds: float = 0.0
    remaining: list = field(default_factory=list)  # violations the audit still finds afterwards

    @property
    def ok(self) -> bool:
        return self.status in ("optimal", "feasible")

    def repair_frame(self) -> pd.DataFrame:
        """One row per move: area, tier, old_zone, new_zone (repair.csv)."""
        return repair_frame(self)


def repair_frame(result: RepairResult) -> pd.DataFrame:
    """The moves of a repair as a table for repair.csv."""
    return pd.DataFrame(
        [(m.area, m.tier, m.old, m.new) for m in result.moves],
        columns=["area", "tier", "old_zone", "new_zone"],
    )


class _UnionFind:
    def __init__(self, n: int):
        self.parent = np.arange(n)

    def find(self, a: int) -> int:
        root = a
        while self.parent[root] != root:
            root = self.parent[root]
        while self.parent[a] != root:
            self.parent[a], a = root, self.parent[a]
        return int(root)

    def union_all(self, items: np.ndarray) -> None:
        if items.size < 2:
            return
        first = self.find(int(items[0]))
        for b in items[1:]:
            rb = self.find(int(b))
            if rb != first:
                self.parent[rb] = first


def minimal_repair(
    areas: Areas,
    graph: Graph,
    labels: Mapping[str, Sequence | np.ndarray],
    tiers: Sequence[TierRules],
    *,
    time_limit: float = 60.0,
    workers: int = 1,
    max_candidates: int = 12,
    max_units: int = 150,
    deterministic_time: float | None = None,
    locks: Mapping[str, np.ndarray] | None = None,
) -> RepairResult:
    """Relabel the fewest areas so that every bound, contiguity, nesting and fence rule holds.

    time_limit: seconds for all repair models together; workers: CP-SAT num_workers;
    max_candidates: above this many zones in a region, a unit may only move to zones near
    it; max_units: the most movable units per tier in one model (see the module notes);
    deterministic_time: when given, the budget is this much CP-SAT deterministic time (work
    counted by the solver, not the clock) and time_limit is only a safety cap, so the same
    input gives the same repair on a busy machine as on an idle one; locks: the locked zone
    code per area for each locked tier ("" where free): those areas keep their zone, no
    other area joins it, and a bound it breaks is left as the lock forces it.

    >>> result = minimal_repair(areas, graph, lookup, rules.tiers, time_limit=30)
    >>> result.status, result.repair_frame()
    """
    start = time.perf_counter()
    budget = Budget(time_limit, deterministic_time)
    tiers = list(tiers)
    names = [t.name for t in tiers]
    report = audit(areas, graph, {t.name: labels[t.name] for t in tiers}, tiers)
    ctx = _context(areas, graph, labels, tiers, report, workers, max_candidates, locks or {})
    copied = {t.name: np.asarray(labels[t.name], dtype=object).copy() for t in tiers}
    if not any(ctx.broken) and not any(n.any() for n in ctx.nulls):
        why = "nothing to repair: every rule holds" + (
            ", but for bounds the locked zones break (the lock forces them)" if not report.ok else "")
        return RepairResult([], copied, "optimal", why, [], time.perf_counter() - start)
    _regions(ctx)
    roots, cluster_ids = _clusters(ctx)

    new_codes = [e.codes.copy() for e in ctx.enc]
    spare_names: list[list[str]] = [[] for _ in tiers]
    taken = [set(map(str, e.names)) for e in ctx.enc]
    cluster_info: list[dict] = []
    statuses: list[str] = []
    reasons: list[str] = []
    for n_done, cid in enumerate(cluster_ids):
        units = np.flatnonzero(roots == cid)
        share = budget.share(1.0 / (len(cluster_ids) - n_done))
        t0 = time.perf_counter()
        status, result, note = _repair_cluster(ctx, units, share, max_units)
        info = {"areas": int(units.size), "status": status, "seconds": round(time.perf_counter() - t0, 3)}
        statuses.append(status)
        if note:
            reasons.append(note)
            info["reason"] = note
        if result is None:
            reason = (
                _infeasible_reason(areas, graph, tiers, ctx.bounds, units) if status == "infeasible" else ""
            )
            if reason:
                reasons.append(reason)
                info["reason"] = reason
        else:
            _apply(ctx, result, new_codes, spare_names, taken, names)
        cluster_info.append(info)

    moves, new_labels = _relabel(ctx, areas, names, copied, new_codes, spare_names)
    status, reason = _overall(statuses, reasons)
    # the checker checks its own repair: whatever still breaks a rule is reported
    after = audit(areas, graph, new_labels, tiers)
    remaining = [v for v in after.violations if v.kind in REPAIRED_KINDS or (v.kind == "coverage" and v.tier)]
    forced = [v for v in remaining if v.kind == "bounds" and v.zone in ctx.locked_zones.get(v.tier, set())]
    remaining = [v for v in remaining if v not in forced]
    if forced:
        reason += "; " + "; ".join(f"locked zone {v.zone} of tier {v.tier} keeps its break: the lock forces it"
                                   for v in forced[:3])
    if remaining and status in ("optimal", "feasible"):
        status = "undecided"
        reason = f"{len(remaining)} rule breaks remain after the repair: " + "; ".join(
            v.message for v in remaining[:3]
        )
    return RepairResult(moves, new_labels, status, reason, cluster_info, time.perf_counter() - start, remaining)


@dataclass(frozen=True)
class LabelRepair:
    """The fewest-move repair of one labelling: labels[u] is unit u's zone (kept zones keep
    their number; new zones are numbered after the largest previous one), moves the units
    whose zone changed, status as in `RepairResult`."""

    labels: np.ndarray
    moves: int
    status: str
    reason: str = ""


def repair_labelling(
    graph: Graph,
    counts: np.ndarray,
    bounds: Bounds,
    previous: np.ndarray,
    *,
    time_limit: float = 60.0,
    deterministic_time: float | None = None,
    workers: int = 1,
) -> LabelRepair:
    """Relabel the fewest units of one fence so that every zone is connected and within
    bounds: the same CP-SAT repair as `minimal_repair`, over plain arrays.

    graph: the units' CSR graph; counts: (n, c) per unit, aligned to bounds.count_names;
    previous: zone number per unit (-1: none); the budget as in `minimal_repair`.

    >>> fixed = repair_labelling(graph, counts, bounds, previous, deterministic_time=5.0)
    >>> fixed.labels, fixed.moves, fixed.status
    """
    previous = np.asarray(previous, dtype=np.int64)
    n = previous.shape[0]
    counts = np.asarray(counts, dtype=np.float64).reshape(n, -1)
    names = tuple(bounds.count_names)
    units = Areas(
        ids=np.array([str(u) for u in range(n)], dtype=object), count_names=names, counts=counts,
        attr_names=(), attrs=np.zeros((n, 0)), weight=np.ones(n), area=np.ones(n), perimeter=np.ones(n),
        fence=np.full(n, "", dtype=object),
    )
    tier = TierRules(
        name="labels",
        min={c: float(v) for c, v in zip(names, bounds.lo) if np.isfinite(v)},
        max={c: float(v) for c, v in zip(names, bounds.hi) if np.isfinite(v)},
    )
    start = np.array([str(z) if z >= 0 else "" for z in previous], dtype=object)
    rep = minimal_repair(units, graph, {"labels": start}, [tier], time_limit=time_limit, workers=workers,
                         deterministic_time=deterministic_time)
    out = previous.copy()
    fresh: dict[str, int] = {}
    top = int(previous.max(initial=-1))
    for u, z in enumerate(rep.labels["labels"]):
        z = str(z)
        if z.lstrip("-").isdigit():
            out[u] = int(z)
        elif z:
            out[u] = fresh.setdefault(z, top + 1 + len(fresh))
    return LabelRepair(out, int((out != previous).sum()), rep.status, rep.reason)


def _context(
    areas: Areas, graph: Graph, labels: Mapping, tiers: list[TierRules], report, workers: int, max_candidates: int,
    locks: Mapping[str, np.ndarray],
) -> RepairContext:
    """What every cluster shares: codes, bounds per fence, scaled counts, locked areas and
    the faults per tier."""
    names = [t.name for t in tiers]
    enc = [encode_labels(labels[t.name]) for t in tiers]
    ctx = RepairContext(
        areas=areas,
        graph=graph,
        enc=enc,
        bounds=[tier_bounds(t, areas.count_names) for t in tiers],
        fence=areas.fence.astype(str),
        scale=integer_scale(areas.counts),
        workers=workers,
        max_candidates=max_candidates,
    )
    ctx.counts = scaled_counts(areas.counts, ctx.scale)
    ctx.tier_fence = [areas.in_tier(t.name).fence.astype(str) for t in tiers]
    ctx.fence_bounds = [
        {f: tier_bounds(tier_in_fence(t, f), areas.count_names) for f in overridden_fences(t)} for t in tiers
    ]
    ctx.locked = [np.asarray(locks.get(t.name, np.full(areas.n, "", dtype=object)), dtype=object) != ""
                  for t in tiers]
    ctx.locked_zones = {
        t.name: {str(z) for z in np.asarray(labels[t.name], dtype=object)[ctx.locked[k]]} for k, t in enumerate(tiers)
    }
    ctx.broken, ctx.hot = _faults(ctx, report, names)
    ctx.fence_broken = [set() for _ in tiers]
    ctx.nest_broken = [set() for _ in tiers]
    for v in report.violations:
        if v.kind in ("fence", "nesting") and v.tier in names:
            t = names.index(v.tier)
            code = int(np.flatnonzero(enc[t].names == v.zone)[0])
            (ctx.fence_broken if v.kind == "fence" else ctx.nest_broken)[t].add(code)
    ctx.nulls = [e.codes < 0 for e in enc]
    return ctx


def _regions(ctx: RepairContext) -> None:
    """Per tier: the broken zones plus every zone touching one (or an area without a zone),
    and the areas that may change their label on that tier."""
    ei, ej, _ = ctx.graph.edges()
    for t, e in enumerate(ctx.enc):
        ci, cj = e.codes[ei], e.codes[ej]
        zone_set = set(ctx.broken[t])
        for a, b in ((ci, cj), (cj, ci)):
            near_broken = np.isin(a, list(ctx.broken[t])) & (b >= 0) & (b != a)
            zone_set.update(np.unique(b[near_broken]).tolist())
            near_null = (a < 0) & (b >= 0)
            zone_set.update(np.unique(b[near_null]).tolist())
        # a locked zone neither gives nor takes areas
        zone_set -= set(np.unique(e.codes[ctx.locked[t] & (e.codes >= 0)]).tolist()) if ctx.locked else set()
        ctx.region.append(zone_set)
        ctx.movable.append((np.isin(e.codes, list(zone_set)) | ctx.nulls[t]) & ~ctx.locked[t])


def _clusters(ctx: RepairContext) -> tuple[np.ndarray, np.ndarray]:
    """Cluster root per area and the clusters holding movable areas: a region zone's areas
    stay together, and so do a broken zone (or an area without a zone) and the zones it
    touches."""
    ei, ej, _ = ctx.graph.edges()
    uf = _UnionFind(ctx.areas.n)
    for t, e in enumerate(ctx.enc):
        members = zone_members(e.codes, e.k)
        for z in ctx.region[t]:
            uf.union_all(members[z])
        trouble = ctx.nulls[t] | np.isin(e.codes, list(ctx.broken[t]))
        tie = ctx.movable[t][ei] & ctx.movable[t][ej] & (trouble[ei] | trouble[ej])
        for a, b in zip(ei[tie], ej[tie]):
            uf.union_all(np.array([a, b]))
    any_movable = np.logical_or.reduce(ctx.movable)
    roots = np.array([uf.find(int(a)) for a in range(ctx.areas.n)])
    return roots, np.unique(roots[any_movable])


def _apply(
    ctx: RepairContext, result: list[dict[int, int]], new_codes: list[np.ndarray], spare_names: list[list[str]],
    taken: list[set[str]], names: list[str],
) -> None:
    """Write one cluster's assignment into new_codes, naming the new zones it opens.

    Every cluster's model numbers its new zones from k (the tier's zone count); clusters are
    apart, so each cluster's new zones are numbered after those earlier clusters opened,
    never shared with them."""
    for t, assign in enumerate(result):
        k = ctx.enc[t].k
        offset = len(spare_names[t])
        for area, code in assign.items():
            if code >= k:
                code += offset
                while len(spare_names[t]) <= code - k:
                    spare_names[t].append(_fresh_name(names[t], taken[t]))
            new_codes[t][area] = code


def _relabel(
    ctx: RepairContext, areas: Areas, names: list[str], copied: dict[str, np.ndarray], new_codes: list[np.ndarray],
    spare_names: list[list[str]],
) -> tuple[list[Move], dict[str, np.ndarray]]:
    """The repaired labels per tier and one Move per changed (area, tier) label."""
    new_labels: dict[str, np.ndarray] = {}
    moves: list[Move] = []
    for t, e in enumerate(ctx.enc):
        all_names = np.concatenate([e.names.astype(object), np.array(spare_names[t], dtype=object)])
        lab = copied[names[t]]
        for a in np.flatnonzero(new_codes[t] != e.codes):
            old = "" if e.codes[a] < 0 else str(e.names[e.codes[a]])
            lab[a] = all_names[new_codes[t][a]]
            moves.append(Move(str(areas.ids[a]), names[t], old, str(lab[a])))
        new_labels[names[t]] = lab
    return moves, new_labels


def _overall(statuses: list[str], reasons: list[str]) -> tuple[str, str]:
    """The repair's status and reason from its clusters': the weakest one counts."""
    if "infeasible" in statuses:
        return "infeasible", "; ".join(reasons) or "no relabelling of the broken zones and their neighbours meets every rule"
    if "undecided" in statuses:
        return "undecided", "; ".join(reasons) or "no repair found within the time limit for some broken zones"
    if "feasible" in statuses:
        return "feasible", "every rule holds; " + ("; ".join(reasons) or "fewest moves not proven")
    return "optimal", "every rule holds with the fewest moves"


def _faults(ctx: RepairContext, report, names: list[str]) -> tuple[list[set[int]], list[np.ndarray]]:
    """Broken zones per tier, and the offending areas (where a repair starts looking)."""
    n = ctx.areas.n
    T = len(names)
    broken: list[set[int]] = [set() for _ in range(T)]
    hot = [ctx.enc[t].codes < 0 for t in range(T)]
    lookup = [{str(z): c for c, z in enumerate(e.names)} for e in ctx.enc]
    graph = ctx.graph
    for v in report.violations:
        if v.kind not in REPAIRED_KINDS or v.tier not in names:
            continue
        if v.kind == "bounds" and v.zone in ctx.locked_zones.get(v.tier, set()):
            continue  # a locked zone keeps its areas and its code: its break is the lock's
        t = names.index(v.tier)
        z = lookup[t][v.zone]
        broken[t].add(z)
        members = np.flatnonzero(ctx.enc[t].codes == z)
        if v.kind == "contiguity":
            # everything but the largest part
            inside = np.zeros(n, dtype=bool)
            inside[members] = True
            _, comp = components(graph.subgraph(members))
            big = np.argmax(np.bincount(comp))
            hot[t][members[comp != big]] = True
        elif v.kind == "fence":
            fence = ctx.fence_of(t)
            codes, cnt = np.unique(fence[members], return_counts=True)
            hot[t][members[fence[members] != codes[np.argmax(cnt)]]] = True
        elif v.kind == "nesting":
            upper = ctx.enc[t + 1].codes[members]
            vals, cnt = np.unique(upper[upper >= 0], return_counts=True)
            stray = members[upper != vals[np.argmax(cnt)]]
            hot[t][stray] = True
            hot[t + 1][stray] = True
            broken[t + 1].update(lookup[t + 1][p] for p in v.figures["parents"])
        elif v.figures.get("side") == "min":
            hot[t][members] = True
        else:
            # a zone above a ceiling sheds areas along its edge
            codes = ctx.enc[t].codes
            edge = [a for a in members if np.any(codes[graph.neighbours(a)] != z)]
            hot[t][edge if edge else members] = True
    return broken, hot


def _repair_cluster(
    ctx: RepairContext, units: np.ndarray, budget: Budget, max_units: int
) -> tuple[str, list[dict[int, int]] | None, str]:
    """Stages of growing reach; returns (status, assignment or None, note)."""
    best: list[dict[int, int]] | None = None
    best_moves = math.inf
    proven_reach = None
    last = "undecided"
    floor = _fewest_possible(ctx, units)
    # the search grows from the faults outwards; a repair with as few moves as the faults
    # demand is proven fewest at once
    for reach in (1, 2, 4, 8, None):
        if budget.spent():
            break
        model = ClusterModel(ctx, units, reach)
        if model.too_large(max_units):
            break
        final = model.covers_region
        status, result, moves = model.solve(budget, 1.0 if final else 0.4)
        if result is not None and moves < best_moves:
            best, best_moves = result, moves
            proven_reach = None
        if result is not None and best_moves <= floor:
            return "optimal", best, ""
        if status == "optimal" and moves == best_moves:
            proven_reach = reach
        if final:
            last = status
            if status == "optimal":
                return "optimal", result, ""
            if status == "infeasible" and best is None:
                return "infeasible", None, ""
            break
    if best is None:
        return ("undecided" if last == "infeasible" else last), None, ""
    if proven_reach is not None:
        steps = f"{proven_reach} step{'s' if proven_reach != 1 else ''}"
        return "feasible", best, f"fewest moves proven only among moves within {steps} of the faults"
    return "feasible", best, "fewest moves not proven within the time limit"


def _fewest_possible(ctx: RepairContext, units: np.ndarray) -> int:
    """A lower bound on the moves a cluster needs: faults that share no (area, tier) label.

    Every area without a zone takes a label; a zone across a fence must lose one of its own
    areas; a zone under two parents must relabel one of its areas on its tier or the one
    above; and a cluster holds at least one fault.
    """
    in_cluster = np.zeros(ctx.areas.n, dtype=bool)
    in_cluster[units] = True
    used: set[tuple[int, int]] = set()
    count = 0
    for t, null in enumerate(ctx.nulls):
        for a in np.flatnonzero(null & in_cluster):
            used.add((int(a), t))
            count += 1
    groups = []
    for t, zones in enumerate(ctx.fence_broken):
        for z in zones:
            members = np.flatnonzero((ctx.enc[t].codes == z) & in_cluster)
            groups.append({(int(a), t) for a in members})
    for t, zones in enumerate(ctx.nest_broken):
        for z in zones:
            members = np.flatnonzero((ctx.enc[t].codes == z) & in_cluster)
            groups.append({(int(a), tt) for a in members for tt in (t, t + 1)})
    for g in sorted(groups, key=len):
        if g and not (g & used):
            used |= g
            count += 1
    return max(count, 1)


def _fresh_name(tier: str, taken: set[str]) -> str:
    j = len(taken)
    while f"{tier}-new-{j}" in taken:
        j += 1
    name = f"{tier}-new-{j}"
    taken.add(name)
    return name


def _infeasible_reason(
    areas: Areas, graph: Graph, tiers: list[TierRules], bounds: list[Bounds], units: np.ndarray
) -> str:
    """An arithmetic reason for an infeasible cluster, fence by fence, when there is one."""
    fence = areas.fence.astype(str)
    for f in sorted(set(fence[units])):
        idx = np.flatnonzero(fence == f)
        sub = graph.subgraph(idx)
        for t in tiers:
            b = tier_bounds(tier_in_fence(t, f), areas.count_names)  # the fence's own bounds
            problem = Problem(
                graph=sub, counts=areas.counts[idx], bounds=b, attrs=np.zeros((idx.size, 0)),
                weight=areas.weight[idx], area=areas.area[idx], perimeter=areas.perimeter[idx],
            )
            proof = arithmetic_proof(problem, f, t.name, unit_ids=[f"area {a}" for a in areas.ids[idx]])
            if proof is not None:
                return f"tier {t.name}: {proof.text}"
    return ""


