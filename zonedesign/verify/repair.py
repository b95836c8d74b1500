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
- constraints: one zone per area, bounds on every zone that can change, one fence per
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
from ortools.sat.python import cp_model
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from zonedesign.records import Areas, Bounds, Graph, Problem
from zonedesign.rules import TierRules
from zonedesign.verify.checks import audit, encode_labels, tier_bounds, zone_members
from zonedesign.verify.cpsat import (
    add_bounds,
    add_coverage,
    add_flow_contiguity,
    add_one_fence,
    add_roots,
    add_used,
    holders_of,
    integer_scale,
    scaled_counts,
)
from zonedesign.verify.proofs import arithmetic_proof
from zonedesign.verify.solving import solve_model

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
) -> RepairResult:
    """Relabel the fewest areas so that every bound, contiguity, nesting and fence rule holds.

    time_limit: seconds for all repair models together; workers: CP-SAT num_workers;
    max_candidates: above this many zones in a region, a unit may only move to zones near
    it; max_units: the most movable units per tier in one model (see the module notes);
    deterministic_time: when given, the budget is this much CP-SAT deterministic time (work
    counted by the solver, not the clock) and time_limit is only a safety cap, so the same
    input gives the same repair on a busy machine as on an idle one.

    >>> result = minimal_repair(areas, graph, lookup, rules.tiers, time_limit=30)
    >>> result.status, result.repair_frame()
    """
    start = time.perf_counter()
    budget = _Budget(time_limit, deterministic_time)
    tiers = list(tiers)
    names = [t.name for t in tiers]
    enc = [encode_labels(labels[t.name]) for t in tiers]
    report = audit(areas, graph, {t.name: labels[t.name] for t in tiers}, tiers)
    ctx = _Context(
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
    ctx.broken, ctx.hot = _faults(ctx, report, names)
    ctx.fence_broken = [set() for _ in tiers]
    ctx.nest_broken = [set() for _ in tiers]
    for v in report.violations:
        if v.kind in ("fence", "nesting") and v.tier in names:
            t = names.index(v.tier)
            code = int(np.flatnonzero(enc[t].names == v.zone)[0])
            (ctx.fence_broken if v.kind == "fence" else ctx.nest_broken)[t].add(code)
    ctx.nulls = [e.codes < 0 for e in enc]
    copied = {t.name: np.asarray(labels[t.name], dtype=object).copy() for t in tiers}
    if not any(ctx.broken) and not any(n.any() for n in ctx.nulls):
        return RepairResult([], copied, "optimal", "nothing to repair: every rule holds", [], time.perf_counter() - start)

    ei, ej, _ = graph.edges()
    for t, e in enumerate(enc):
        ci, cj = e.codes[ei], e.codes[ej]
        zone_set = set(ctx.broken[t])
        for a, b in ((ci, cj), (cj, ci)):
            near_broken = np.isin(a, list(ctx.broken[t])) & (b >= 0) & (b != a)
            zone_set.update(np.unique(b[near_broken]).tolist())
            near_null = (a < 0) & (b >= 0)
            zone_set.update(np.unique(b[near_null]).tolist())
        ctx.region.append(zone_set)
        ctx.movable.append(np.isin(e.codes, list(zone_set)) | ctx.nulls[t])

    # clusters: a region zone's areas stay together, and so do a broken zone (or an area
    # without a zone) and the zones it touches
    uf = _UnionFind(areas.n)
    for t, e in enumerate(enc):
        members = zone_members(e.codes, e.k)
        for z in ctx.region[t]:
            uf.union_all(members[z])
        trouble = ctx.nulls[t] | np.isin(e.codes, list(ctx.broken[t]))
        tie = ctx.movable[t][ei] & ctx.movable[t][ej] & (trouble[ei] | trouble[ej])
        for a, b in zip(ei[tie], ej[tie]):
            uf.union_all(np.array([a, b]))
    any_movable = np.logical_or.reduce(ctx.movable)
    roots = np.array([uf.find(int(a)) for a in range(areas.n)])
    cluster_ids = np.unique(roots[any_movable])

    new_codes = [e.codes.copy() for e in enc]
    spare_names: list[list[str]] = [[] for _ in tiers]
    taken = [set(map(str, e.names)) for e in enc]
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
            for t, assign in enumerate(result):
                for area, code in assign.items():
                    if code >= enc[t].k:
                        j = code - enc[t].k
                        while len(spare_names[t]) <= j:
                            spare_names[t].append(_fresh_name(names[t], taken[t]))
                    new_codes[t][area] = code
        cluster_info.append(info)

    new_labels: dict[str, np.ndarray] = {}
    moves: list[Move] = []
    for t, e in enumerate(enc):
        all_names = np.concatenate([e.names.astype(object), np.array(spare_names[t], dtype=object)])
        lab = copied[names[t]]
        changed = np.flatnonzero(new_codes[t] != e.codes)
        for a in changed:
            old = "" if e.codes[a] < 0 else str(e.names[e.codes[a]])
            lab[a] = all_names[new_codes[t][a]]
            moves.append(Move(str(areas.ids[a]), names[t], old, str(lab[a])))
        new_labels[names[t]] = lab

    if "infeasible" in statuses:
        status = "infeasible"
        reason = "; ".join(reasons) or "no relabelling of the broken zones and their neighbours meets every rule"
    elif "undecided" in statuses:
        status = "undecided"
        reason = "; ".join(reasons) or "no repair found within the time limit for some broken zones"
    elif "feasible" in statuses:
        status = "feasible"
        reason = "every rule holds; " + ("; ".join(reasons) or "fewest moves not proven")
    else:
        status, reason = "optimal", "every rule holds with the fewest moves"
    # the checker checks its own repair: whatever still breaks a rule is reported
    after = audit(areas, graph, new_labels, tiers)
    remaining = [v for v in after.violations if v.kind in REPAIRED_KINDS or (v.kind == "coverage" and v.tier)]
    if remaining and status in ("optimal", "feasible"):
        status = "undecided"
        reason = f"{len(remaining)} rule breaks remain after the repair: " + "; ".join(
            v.message for v in remaining[:3]
        )
    return RepairResult(moves, new_labels, status, reason, cluster_info, time.perf_counter() - start, remaining)


class _Budget:
    """Solver time: wall-clock seconds, or CP-SAT deterministic time when `work` is given.

    Deterministic time depends only on the model and the search, so a budget counted in it
    stops every run at the same point; the wall-clock cap still ends a run that goes on far
    longer than expected.
    """

    def __init__(self, seconds: float, work: float | None = None, parent: _Budget | None = None):
        self.seconds = float(seconds)
        self.work = None if work is None else float(work)
        self.parent = parent
        self.start = time.perf_counter()
        self.used = 0.0

    @property
    def deterministic(self) -> bool:
        return self.work is not None

    def wall_left(self) -> float:
        return self.seconds - (time.perf_counter() - self.start)

    def left(self) -> float:
        """What is left, in the budget's own unit."""
        return self.work - self.used if self.deterministic else self.wall_left()

    def spent(self) -> bool:
        return self.left() <= (0.01 if self.deterministic else 0.05) or self.wall_left() <= 0.05

    def share(self, fraction: float) -> _Budget:
        """A child budget of this fraction of what is left (at least a small floor); a
        deterministic child keeps the whole wall-clock cap."""
        if self.deterministic:
            return _Budget(max(self.wall_left(), 0.5), max(self.left() * fraction, 0.1), parent=self)
        return _Budget(max(self.left() * fraction, 0.5), parent=self)

    def limit(self, solver: cp_model.CpSolver, fraction: float = 1.0) -> None:
        """Set the solver's limits to this fraction of what is left."""
        if self.deterministic:
            solver.parameters.max_deterministic_time = max(self.left() * fraction, 0.01)
            solver.parameters.max_time_in_seconds = max(self.wall_left(), 0.05)
        else:
            solver.parameters.max_time_in_seconds = max(self.left() * fraction, 0.05)

    def charge(self, solver: cp_model.CpSolver) -> None:
        budget: _Budget | None = self
        while budget is not None:
            budget.used += float(solver.deterministic_time)
            budget = budget.parent


@dataclass
class _Context:
    """Everything one repair call shares between its clusters and stages."""

    areas: Areas
    graph: Graph
    enc: list
    bounds: list[Bounds]
    fence: np.ndarray
    scale: int
    workers: int
    max_candidates: int
    counts: np.ndarray = field(default_factory=lambda: np.zeros((0, 0), dtype=np.int64))
    broken: list[set[int]] = field(default_factory=list)
    hot: list[np.ndarray] = field(default_factory=list)
    nulls: list[np.ndarray] = field(default_factory=list)
    region: list[set[int]] = field(default_factory=list)
    movable: list[np.ndarray] = field(default_factory=list)
    fence_broken: list[set[int]] = field(default_factory=list)
    nest_broken: list[set[int]] = field(default_factory=list)


def _faults(ctx: _Context, report, names: list[str]) -> tuple[list[set[int]], list[np.ndarray]]:
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
        t = names.index(v.tier)
        z = lookup[t][v.zone]
        broken[t].add(z)
        members = np.flatnonzero(ctx.enc[t].codes == z)
        if v.kind == "contiguity":
            # everything but the largest part
            inside = np.zeros(n, dtype=bool)
            inside[members] = True
            sub = graph.subgraph(members)
            i, j, _ = sub.edges()
            _, comp = connected_components(
                coo_matrix((np.ones(i.size), (i, j)), shape=(sub.n, sub.n)), directed=False
            )
            big = np.argmax(np.bincount(comp))
            hot[t][members[comp != big]] = True
        elif v.kind == "fence":
            codes, cnt = np.unique(ctx.fence[members], return_counts=True)
            hot[t][members[ctx.fence[members] != codes[np.argmax(cnt)]]] = True
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
    ctx: _Context, units: np.ndarray, budget: _Budget, max_units: int
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
        model = _ClusterModel(ctx, units, reach)
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


def _fewest_possible(ctx: _Context, units: np.ndarray) -> int:
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


class _ClusterModel:
    """The CP-SAT model of one cluster at one reach (None: every region unit may move)."""

    def __init__(self, ctx: _Context, units: np.ndarray, reach: int | None):
        self.ctx = ctx
        self.units = units
        self.tier_units = [_tier_units(ctx, t, units, reach) for t in range(len(ctx.enc))]
        self.covers_region = all(tu.all_movable for tu in self.tier_units)

    def too_large(self, max_units: int) -> bool:
        return any(tu.n_movable > max_units for tu in self.tier_units)

    def _own_keeps(self, t: int, z: int, keeps: list[dict]) -> list | None:
        """"Keeps its zone" literals of the free units holding zone z's areas, or None when
        some of z's areas lie in fixed pieces (then the bound would not be valid)."""
        return self._area_keeps(t, np.flatnonzero(self.ctx.enc[t].codes == z), keeps)

    def _area_keeps(self, t: int, areas: np.ndarray, keeps: list[dict]) -> list | None:
        tu = self.tier_units[t]
        out = {}
        for a in areas:
            u = tu.area_unit.get(int(a))
            if u is None or not tu.free[u] or u not in keeps[t]:
                return None
            out[u] = keeps[t][u]
        return list(out.values())

    def solve(self, budget: _Budget, fraction: float = 1.0) -> tuple[str, list[dict[int, int]] | None, int]:
        ctx = self.ctx
        T = len(ctx.enc)
        in_cluster = np.zeros(ctx.areas.n, dtype=bool)
        in_cluster[self.units] = True
        m = cp_model.CpModel()
        cand: list[list[list[int]]] = []
        x: list[dict[tuple[int, int], cp_model.IntVar]] = []
        for t in range(T):
            tu = self.tier_units[t]
            codes = ctx.enc[t].codes
            mov = self.units[ctx.movable[t][self.units]]
            zones = sorted(z for z in ctx.region[t] if in_cluster[codes == z].any())
            spares = _spare_count(ctx.areas, ctx.counts, ctx.bounds[t], ctx.scale, mov, zones, ctx.broken[t],
                                  codes, ctx.nulls[t], ctx.graph)
            spare_codes = list(range(ctx.enc[t].k, ctx.enc[t].k + spares))
            near = None
            if len(zones) + spares > ctx.max_candidates:
                near = _nearby_zones(ctx.graph, codes, mov, set(zones))
            ct = []
            for u, ms in enumerate(tu.members):
                if not tu.free[u]:
                    ct.append([tu.old[u]])
                elif near is None:
                    ct.append(list(zones) + spare_codes)
                else:
                    ct.append(sorted(set().union(*(near[int(a)] for a in ms))) + spare_codes)
            cand.append(ct)
            xt = {(u, z): m.NewBoolVar(f"x{t}_{u}_{z}") for u, zs in enumerate(ct) for z in zs}
            x.append(xt)

            # coverage: every unit lies in exactly one zone of the tier; fixed pieces keep theirs
            add_coverage(m, ct, xt)

            # used zones: a zone is used when it holds a unit; new zones open in order
            holders = holders_of(xt)
            used = add_used(m, xt, holders, tag=str(t))
            for s0, s1 in zip(spare_codes, spare_codes[1:]):
                if s0 in used and s1 in used:
                    m.AddImplication(used[s1], used[s0])

            # bounds: every zone that can change meets the tier's min and max when used
            unit_counts = np.stack([ctx.counts[ms].sum(axis=0) for ms in tu.members]) if tu.members else \
                np.zeros((0, ctx.counts.shape[1]), dtype=np.int64)
            add_bounds(m, unit_counts, ctx.bounds[t], ctx.scale, xt, holders, used)

            # fences: a zone holds units of one fence only
            add_one_fence(m, tu.fences, xt, holders, tag=str(t))

            # contiguity: flow inside each zone from its root reaches every other member
            root = add_roots(m, xt, holders, used, tag=str(t))
            add_flow_contiguity(m, tu.edges, ct, xt, root, tag=str(t))

        # nesting: each zone's areas share one zone of the tier above
        for t in range(T - 1):
            p: dict[tuple[int, int], cp_model.IntVar] = {}
            seen = set()
            for a in self.units:
                a = int(a)
                lower = self.tier_units[t].area_unit.get(a)
                upper = self.tier_units[t + 1].area_unit.get(a)
                key = (lower if lower is not None else ("fixed", int(ctx.enc[t].codes[a])),
                       upper if upper is not None else ("fixed", int(ctx.enc[t + 1].codes[a])))
                if key in seen:
                    continue
                seen.add(key)
                lz_all = [(z, x[t][lower, z]) for z in cand[t][lower]] if lower is not None else \
                    [(int(ctx.enc[t].codes[a]), None)]
                lp_all = [(P, x[t + 1][upper, P]) for P in cand[t + 1][upper]] if upper is not None else \
                    [(int(ctx.enc[t + 1].codes[a]), None)]
                for z, lz in lz_all:
                    for P, lp in lp_all:
                        if (z, P) not in p:
                            p[z, P] = m.NewBoolVar(f"p{t}_{z}_{P}")
                        clause = [p[z, P]] + [v.Not() for v in (lz, lp) if v is not None]
                        m.AddBoolOr(clause)
            by_zone: dict[int, list] = {}
            for (z, _), v in p.items():
                by_zone.setdefault(z, []).append(v)
            for vs in by_zone.values():
                m.AddAtMostOne(vs)

        # objective: keep as many (area, tier) labels as possible
        kept = []
        n_free = 0
        keeps: list[dict[int, cp_model.IntVar]] = []  # per tier: free unit -> "keeps its zone"
        for t in range(T):
            tu = self.tier_units[t]
            keeps.append({})
            for u, old in enumerate(tu.old):
                if not tu.free[u]:
                    continue
                n_free += int(tu.members[u].size)
                if old >= 0 and (u, old) in x[t]:
                    kept.append(int(tu.members[u].size) * x[t][u, old])
                    keeps[t][u] = x[t][u, old]

        # lower bounds: the lookup as it stands breaks a rule, so something moves; a zone
        # across a fence loses one of its own areas; a zone under two parents changes a
        # label of one of its areas on its tier or the tier above
        m.Add(sum(kept) <= n_free - 1)
        for t, zones in enumerate(ctx.fence_broken):
            for z in zones:
                own = self._own_keeps(t, z, keeps)
                if own is not None:
                    m.Add(sum(own) <= len(own) - 1)
        for t, zones in enumerate(ctx.nest_broken):
            for z in zones:
                own = self._own_keeps(t, z, keeps)
                above = self._area_keeps(t + 1, np.flatnonzero(ctx.enc[t].codes == z), keeps)
                if own is not None and above is not None:
                    m.Add(sum(own) + sum(above) <= len(own) + len(above) - 1)
        m.Maximize(sum(kept))
        # hint the labels as they stand: the search starts next to a repair instead of
        # from nothing, which on one worker decides whether it finds one at all
        for t in range(T):
            tu = self.tier_units[t]
            for u, zs in enumerate(cand[t]):
                if tu.free[u]:
                    for z in zs:
                        m.AddHint(x[t][u, z], int(z == tu.old[u]))

        solver = cp_model.CpSolver()
        budget.limit(solver, fraction)
        solver.parameters.num_workers = int(ctx.workers)
        if budget.deterministic:
            # CP-SAT's whole portfolio (local search, neighbourhood search, ...) on a fixed
            # schedule: far better repairs than one plain search, and still repeatable
            solver.parameters.interleave_search = True
        status = solve_model(solver, m)
        budget.charge(solver)
        if status == cp_model.INFEASIBLE:
            return "infeasible", None, 0
        if status not in (cp_model.OPTIMAL, cp_model.FEASIBLE):
            return "undecided", None, 0
        result = []
        for t in range(T):
            assign = {}
            tu = self.tier_units[t]
            for u, zs in enumerate(cand[t]):
                if not tu.free[u]:
                    continue
                z = next(z for z in zs if solver.Value(x[t][u, z]))
                for a in tu.members[u]:
                    assign[int(a)] = z
            result.append(assign)
        moves = n_free - int(round(solver.ObjectiveValue()))
        return ("optimal" if status == cp_model.OPTIMAL else "feasible"), result, moves


@dataclass
class _TierUnits:
    """The units of one tier inside a cluster model.

    A free unit may change zone: an area alone, or the areas of one fixed lower-tier zone
    (nesting makes them move together). A fixed piece is a connected part of a region zone
    that lies beyond the model's reach; it keeps its zone and only carries that zone's
    counts, fence and connections.
    """

    members: list[np.ndarray]
    free: list[bool]
    old: list[int]  # current zone code (-1: none)
    fences: list[set[str]]
    area_unit: dict[int, int]
    edges: list[tuple[int, int]]
    all_movable: bool

    @property
    def n_movable(self) -> int:
        return int(sum(self.free))


def _tier_units(ctx: _Context, t: int, units: np.ndarray, reach: int | None) -> _TierUnits:
    codes = ctx.enc[t].codes
    mov = units[ctx.movable[t][units]]
    groups: dict[tuple, list[int]] = {}
    for a in mov:
        a = int(a)
        if t > 0 and not ctx.movable[t - 1][a] and ctx.enc[t - 1].codes[a] >= 0:
            key = ("zone", int(ctx.enc[t - 1].codes[a]), int(codes[a]))
        else:
            key = ("area", a, int(codes[a]))
        groups.setdefault(key, []).append(a)
    base = [np.array(v, dtype=np.int64) for v in groups.values()]
    base_of = {int(a): u for u, ms in enumerate(base) for a in ms}
    adjacency: list[set[int]] = [set() for _ in base]
    for a, u in base_of.items():
        for b in ctx.graph.neighbours(a):
            v = base_of.get(int(b))
            if v is not None and v != u:
                adjacency[u].add(v)
    # free units: within `reach` steps of a unit holding an offending area
    if reach is None:
        free = np.ones(len(base), dtype=bool)
    else:
        dist = np.full(len(base), -1)
        frontier = [u for u, ms in enumerate(base) if ctx.hot[t][ms].any()]
        for u in frontier:
            dist[u] = 0
        step = 0
        while frontier and step < reach:
            step += 1
            nxt = []
            for u in frontier:
                for v in adjacency[u]:
                    if dist[v] < 0:
                        dist[v] = step
                        nxt.append(v)
            frontier = nxt
        free = dist >= 0
    all_movable = bool(free.all())
    # fixed pieces: connected runs of fixed units of one zone
    piece = np.full(len(base), -1)
    n_piece = 0
    for u in range(len(base)):
        if free[u] or piece[u] >= 0:
            continue
        zone = codes[base[u][0]]
        stack = [u]
        piece[u] = n_piece
        while stack:
            w = stack.pop()
            for v in adjacency[w]:
                if not free[v] and piece[v] < 0 and codes[base[v][0]] == zone:
                    piece[v] = n_piece
                    stack.append(v)
        n_piece += 1
    members, is_free, unit_of_base = [], [], np.full(len(base), -1)
    for u in np.flatnonzero(free):
        unit_of_base[u] = len(members)
        members.append(base[u])
        is_free.append(True)
    offset = len(members)
    pieces: list[list[np.ndarray]] = [[] for _ in range(n_piece)]
    for u in np.flatnonzero(~free):
        pieces[piece[u]].append(base[u])
        unit_of_base[u] = offset + piece[u]
    for parts in pieces:
        members.append(np.concatenate(parts))
        is_free.append(False)
    area_unit = {a: int(unit_of_base[u]) for a, u in base_of.items()}
    edges = set()
    for u, vs in enumerate(adjacency):
        for v in vs:
            a, b = int(unit_of_base[u]), int(unit_of_base[v])
            if a != b:
                edges.add((min(a, b), max(a, b)))
    return _TierUnits(
        members=members,
        free=is_free,
        old=[int(codes[ms[0]]) for ms in members],
        fences=[set(ctx.fence[ms].tolist()) for ms in members],
        area_unit=area_unit,
        edges=sorted(edges),
        all_movable=all_movable,
    )


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
        for t, b in zip(tiers, bounds):
            problem = Problem(
                graph=sub, counts=areas.counts[idx], bounds=b, attrs=np.zeros((idx.size, 0)),
                weight=areas.weight[idx], area=areas.area[idx], perimeter=areas.perimeter[idx],
            )
            proof = arithmetic_proof(problem, f, t.name, unit_ids=[f"area {a}" for a in areas.ids[idx]])
            if proof is not None:
                return f"tier {t.name}: {proof.text}"
    return ""


def _spare_count(
    areas: Areas,
    counts: np.ndarray,
    b: Bounds,
    scale: int,
    mov: np.ndarray,
    zones: list[int],
    broken: set[int],
    codes: np.ndarray,
    null: np.ndarray,
    graph: Graph,
) -> int:
    """New zone ids to offer: as many as the pieces a broken zone may have to split into.

    A zone in k parts, across k fences or k parents, or k ceilings' worth of counts may end
    up as k zones; an area without a zone may need a zone of its own. Never more than the
    floors allow in the movable areas.
    """
    if mov.size == 0:
        return 0
    kmax = mov.size
    for c in range(len(b.count_names)):
        if np.isfinite(b.lo[c]) and b.lo[c] > 0:
            kmax = min(kmax, int(counts[mov, c].sum() // math.ceil(b.lo[c] * scale - 1e-9)))
    need = int(null[mov].sum())
    fence = areas.fence.astype(str)
    for z in broken:
        ms = mov[codes[mov] == z]
        if ms.size == 0:
            continue
        pieces = max(len(set(fence[ms])), _n_parts(graph, ms))
        for c in range(len(b.count_names)):
            if np.isfinite(b.hi[c]) and b.hi[c] > 0:
                pieces = max(pieces, math.ceil(counts[ms, c].sum() / (b.hi[c] * scale)))
        need += pieces
    return int(max(0, min(kmax - len(zones), need)))


def _n_parts(graph: Graph, members: np.ndarray) -> int:
    sub = graph.subgraph(members)
    i, j, _ = sub.edges()
    adj = coo_matrix((np.ones(i.size), (i, j)), shape=(sub.n, sub.n))
    return int(connected_components(adj, directed=False)[0])


def _nearby_zones(graph: Graph, codes: np.ndarray, mov: np.ndarray, zones: set[int]) -> dict[int, set[int]]:
    """Region zones within two steps of each movable area (its own included)."""
    out: dict[int, set[int]] = {}
    for a in mov:
        seen = {int(a)}
        frontier = [int(a)]
        for _ in range(2):
            nxt = []
            for u in frontier:
                for v in graph.neighbours(u):
                    if int(v) not in seen:
                        seen.add(int(v))
                        nxt.append(int(v))
            frontier = nxt
        near = {int(codes[v]) for v in seen if codes[v] >= 0 and int(codes[v]) in zones}
        out[int(a)] = near
    return out
