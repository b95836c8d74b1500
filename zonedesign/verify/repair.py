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
models. Minimality holds within these regions and, on regions with many zones, within
each area's nearby zones (its own, those within two steps, and the new ones).
"""

from __future__ import annotations

import math
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from ortools.sat.python import cp_model

from zonedesign.records import Areas, Bounds, Graph, Problem
from zonedesign.rules import TierRules
from zonedesign.verify.certificate import integer_scale
from zonedesign.verify.checks import audit, encode_labels, tier_bounds, zone_members
from zonedesign.verify.proofs import arithmetic_proof

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

    status: "nothing to repair", "optimal" (fewest moves proven), "feasible" (valid, not
    proven fewest), "infeasible" (no relabelling of the region meets the rules; reason says
    why) or "unknown" (no repair found within the time limit).
    """

    moves: list[Move]
    labels: dict[str, np.ndarray]
    status: str
    reason: str = ""
    clusters: list[dict] = field(default_factory=list)
    seconds: float = 0.0

    @property
    def ok(self) -> bool:
        return self.status in ("nothing to repair", "optimal", "feasible")

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
) -> RepairResult:
    """Relabel the fewest areas so that every bound, contiguity, nesting and fence rule holds.

    time_limit: seconds for all repair models together; workers: CP-SAT num_workers;
    max_candidates: above this many zones in a region, an area may only move to zones
    near it (see the module notes).

    >>> result = minimal_repair(areas, graph, lookup, rules.tiers, time_limit=30)
    >>> result.status, result.repair_frame()
    """
    start = time.perf_counter()
    tiers = list(tiers)
    names = [t.name for t in tiers]
    enc = [encode_labels(labels[t.name]) for t in tiers]
    bounds = [tier_bounds(t, areas.count_names) for t in tiers]
    report = audit(areas, graph, {t.name: labels[t.name] for t in tiers}, tiers)

    broken: list[set[int]] = [set() for _ in tiers]
    lookup = [{str(z): c for c, z in enumerate(e.names)} for e in enc]
    for v in report.violations:
        if v.kind not in REPAIRED_KINDS or v.tier not in names:
            continue
        t = names.index(v.tier)
        broken[t].add(lookup[t][v.zone])
        if v.kind == "nesting":
            broken[t + 1].update(lookup[t + 1][p] for p in v.figures["parents"])
    nulls = [e.codes < 0 for e in enc]
    copied = {t.name: np.asarray(labels[t.name], dtype=object).copy() for t in tiers}
    if not any(broken) and not any(n.any() for n in nulls):
        return RepairResult([], copied, "nothing to repair", "every rule holds", [], time.perf_counter() - start)

    ei, ej, _ = graph.edges()
    region: list[set[int]] = []
    movable: list[np.ndarray] = []
    for t, e in enumerate(enc):
        ci, cj = e.codes[ei], e.codes[ej]
        zone_set = set(broken[t])
        for a, b in ((ci, cj), (cj, ci)):
            near_broken = np.isin(a, list(broken[t])) & (b >= 0) & (b != a)
            zone_set.update(np.unique(b[near_broken]).tolist())
            near_null = (a < 0) & (b >= 0)
            zone_set.update(np.unique(b[near_null]).tolist())
        region.append(zone_set)
        movable.append(np.isin(e.codes, list(zone_set)) | nulls[t])

    # clusters: areas tied together by a region zone or by an area without a zone
    uf = _UnionFind(areas.n)
    for t, e in enumerate(enc):
        members = zone_members(e.codes, e.k)
        for z in region[t]:
            uf.union_all(members[z])
        both = movable[t][ei] & movable[t][ej] & (nulls[t][ei] | nulls[t][ej])
        for a, b in zip(ei[both], ej[both]):
            uf.union_all(np.array([a, b]))
    any_movable = np.logical_or.reduce(movable)
    roots = np.array([uf.find(int(a)) for a in range(areas.n)])
    cluster_ids = np.unique(roots[any_movable])

    new_codes = [e.codes.copy() for e in enc]
    spare_names: list[list[str]] = [[] for _ in tiers]
    taken = [set(map(str, e.names)) for e in enc]
    cluster_info: list[dict] = []
    statuses: list[str] = []
    reasons: list[str] = []
    scale = integer_scale(areas.counts)
    for n_done, cid in enumerate(cluster_ids):
        units = np.flatnonzero(roots == cid)
        left = time_limit - (time.perf_counter() - start)
        budget = max(left / (len(cluster_ids) - n_done), 0.5)
        t0 = time.perf_counter()
        status, result = _repair_cluster(
            areas, graph, tiers, enc, bounds, region, movable, broken, nulls, units, scale,
            budget, workers, max_candidates,
        )
        info = {"areas": int(units.size), "status": status, "seconds": round(time.perf_counter() - t0, 3)}
        statuses.append(status)
        if result is None:
            reason = _infeasible_reason(areas, graph, tiers, bounds, units) if status == "infeasible" else ""
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
        reason = "; ".join(reasons) or (
            "no relabelling of the broken zones and their neighbours meets every rule"
        )
    elif "unknown" in statuses:
        status, reason = "unknown", "no repair found within the time limit for some broken zones"
    elif "feasible" in statuses:
        status, reason = "feasible", "every rule holds; fewest moves not proven within the time limit"
    else:
        status, reason = "optimal", "every rule holds with the fewest moves"
    return RepairResult(moves, new_labels, status, reason, cluster_info, time.perf_counter() - start)


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


def _repair_cluster(
    areas: Areas,
    graph: Graph,
    tiers: list[TierRules],
    enc: list,
    bounds: list[Bounds],
    region: list[set[int]],
    movable: list[np.ndarray],
    broken: list[set[int]],
    nulls: list[np.ndarray],
    units: np.ndarray,
    scale: int,
    time_limit: float,
    workers: int,
    max_candidates: int,
) -> tuple[str, list[dict[int, int]] | None]:
    """Solve one cluster; returns (status, new code per movable area per tier or None)."""
    T = len(tiers)
    in_unit = np.zeros(areas.n, dtype=bool)
    in_unit[units] = True
    fence = areas.fence.astype(str)
    counts = np.round(areas.counts * scale).astype(np.int64)
    m = cp_model.CpModel()

    cand: list[dict[int, list[int]]] = []
    x: list[dict[tuple[int, int], cp_model.IntVar]] = []
    used: list[dict[int, cp_model.IntVar]] = []
    for t in range(T):
        codes = enc[t].codes
        mov = units[movable[t][units]]
        zones = sorted(z for z in region[t] if in_unit[np.flatnonzero(codes == z)].any())
        spares = _spare_count(areas, counts, bounds[t], scale, mov, zones, broken[t], codes, nulls[t])
        spare_codes = list(range(enc[t].k, enc[t].k + spares))
        near = _nearby_zones(graph, codes, mov, set(zones)) if len(zones) + spares > max_candidates else None
        ct: dict[int, list[int]] = {}
        for a in mov:
            base = zones if near is None else sorted(near[a])
            ct[int(a)] = list(base) + spare_codes
        cand.append(ct)
        xt = {(a, z): m.NewBoolVar(f"x{t}_{a}_{z}") for a, zs in ct.items() for z in zs}
        x.append(xt)

        # coverage: every movable area lies in exactly one zone of the tier
        for a, zs in ct.items():
            m.AddExactlyOne([xt[a, z] for z in zs])

        # used zones: a zone is used when it holds an area; new zones open in order
        members: dict[int, list[int]] = {}
        for (a, z) in xt:
            members.setdefault(z, []).append(a)
        ut = {}
        for z, ms in members.items():
            u = m.NewBoolVar(f"u{t}_{z}")
            for a in ms:
                m.AddImplication(xt[a, z], u)
            m.AddBoolOr([xt[a, z] for a in ms]).OnlyEnforceIf(u)
            ut[z] = u
        used.append(ut)
        for s0, s1 in zip(spare_codes, spare_codes[1:]):
            if s0 in ut and s1 in ut:
                m.AddImplication(ut[s1], ut[s0])

        # bounds: every zone that can change meets the tier's min and max when used
        b = bounds[t]
        for c in range(len(b.count_names)):
            lo = math.ceil(b.lo[c] * scale - 1e-9) if np.isfinite(b.lo[c]) else None
            hi = math.floor(b.hi[c] * scale + 1e-9) if np.isfinite(b.hi[c]) else None
            for z, ms in members.items():
                total = sum(int(counts[a, c]) * xt[a, z] for a in ms)
                if lo is not None:
                    m.Add(total >= lo * ut[z])
                if hi is not None:
                    m.Add(total <= hi * ut[z])

        # fences: a zone holds areas of one fence only
        for z, ms in members.items():
            codes_f = sorted({fence[a] for a in ms})
            if len(codes_f) < 2:
                continue
            q = {f: m.NewBoolVar(f"q{t}_{z}_{f}") for f in codes_f}
            for a in ms:
                m.AddImplication(xt[a, z], q[fence[a]])
            m.AddAtMostOne(list(q.values()))

        # contiguity: flow inside each zone from its root reaches every other member
        _add_flow_contiguity(m, graph, t, mov, ct, xt, ut, members)

    # nesting: each zone's areas share one zone of the tier above
    for t in range(T - 1):
        p: dict[tuple[int, int], cp_model.IntVar] = {}

        def lits(tt: int, a: int) -> list[tuple[int, object]]:
            if movable[tt][a]:
                return [(z, x[tt][a, z]) for z in cand[tt][a]]
            return [(int(enc[tt].codes[a]), True)]

        for a in units:
            for z, lz in lits(t, int(a)):
                for P, lp in lits(t + 1, int(a)):
                    if (z, P) not in p:
                        p[z, P] = m.NewBoolVar(f"p{t}_{z}_{P}")
                    clause = [p[z, P]]
                    if lz is not True:
                        clause.append(lz.Not())
                    if lp is not True:
                        clause.append(lp.Not())
                    m.AddBoolOr(clause)
        by_zone: dict[int, list] = {}
        for (z, _), v in p.items():
            by_zone.setdefault(z, []).append(v)
        for vs in by_zone.values():
            m.AddAtMostOne(vs)

    # objective: keep as many (area, tier) labels as possible
    kept = []
    for t in range(T):
        for a in cand[t]:
            old = int(enc[t].codes[a])
            if old >= 0 and (a, old) in x[t]:
                kept.append(x[t][a, old])
    m.Maximize(sum(kept))

    solver = cp_model.CpSolver()
    solver.parameters.max_time_in_seconds = float(time_limit)
    solver.parameters.num_workers = int(workers)
    status = solver.Solve(m)
    if status == cp_model.INFEASIBLE:
        return "infeasible", None
    if status not in (cp_model.OPTIMAL, cp_model.FEASIBLE):
        return "unknown", None
    result = []
    for t in range(T):
        assign = {}
        for a, zs in cand[t].items():
            for z in zs:
                if solver.Value(x[t][a, z]):
                    assign[a] = z
                    break
        result.append(assign)
    return ("optimal" if status == cp_model.OPTIMAL else "feasible"), result


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
) -> int:
    """New zone ids to offer: enough to split every broken zone, never past the floors' limit."""
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
        parts = len(set(fence[ms]))
        for c in range(len(b.count_names)):
            if np.isfinite(b.hi[c]) and b.hi[c] > 0:
                parts = max(parts, math.ceil(counts[ms, c].sum() / (b.hi[c] * scale)))
        need += 2 * max(parts, 2)
    return int(max(0, min(kmax - len(zones), need)))


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


def _add_flow_contiguity(
    m: cp_model.CpModel,
    graph: Graph,
    t: int,
    mov: np.ndarray,
    cand: dict[int, list[int]],
    x: dict[tuple[int, int], cp_model.IntVar],
    used: dict[int, cp_model.IntVar],
    members: dict[int, list[int]],
) -> None:
    """Single-commodity flow contiguity over the movable areas of one tier (Shirabe 2005)."""
    is_mov = set(int(a) for a in mov)
    cap = max(len(is_mov) - 1, 0)
    # roots: one per used zone, inside the zone
    root = {(a, z): m.NewBoolVar(f"r{t}_{a}_{z}") for (a, z) in x}
    for key, r in root.items():
        m.AddImplication(r, x[key])
    for z, ms in members.items():
        m.Add(sum(root[a, z] for a in ms) == used[z])
    inflow: dict[int, list] = {a: [] for a in is_mov}
    outflow: dict[int, list] = {a: [] for a in is_mov}
    for a in sorted(is_mov):
        for b in graph.neighbours(a):
            b = int(b)
            if b <= a or b not in is_mov:
                continue
            # same-zone indicator: flow may cross this edge only inside one zone
            y = m.NewBoolVar(f"y{t}_{a}_{b}")
            ca, cb = set(cand[a]), set(cand[b])
            for z in ca | cb:
                if z in ca and z in cb:
                    m.AddBoolOr([y.Not(), x[a, z].Not(), x[b, z]])
                    m.AddBoolOr([y.Not(), x[b, z].Not(), x[a, z]])
                elif z in ca:
                    m.AddBoolOr([y.Not(), x[a, z].Not()])
                else:
                    m.AddBoolOr([y.Not(), x[b, z].Not()])
            for s, d in ((a, b), (b, a)):
                f = m.NewIntVar(0, cap, f"f{t}_{s}_{d}")
                m.Add(f <= cap * y)
                outflow[s].append(f)
                inflow[d].append(f)
    # conservation: every non-root area takes in at least one unit of flow
    for a in is_mov:
        is_root = sum(root[a, z] for z in cand[a])
        m.Add(sum(inflow[a]) - sum(outflow[a]) >= 1 - (cap + 1) * is_root)
