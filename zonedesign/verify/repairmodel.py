"""The CP-SAT model of one repair cluster, and the solver budget repairs share.

`ClusterModel` states one cluster of a repair (see `repair` for the method) over the
units of each tier at one reach: free units that may change zone and fixed pieces that
keep theirs; its blocks come from `cpsat` (coverage, used zones, bounds, fence, roots
and flow contiguity), with nesting, the objective and the lower bounds stated here.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np
from ortools.sat.python import cp_model

from zonedesign.graph.components import components
from zonedesign.records import Areas, Bounds, Graph
from zonedesign.verify.cpsat import (
    add_bounds,
    add_coverage,
    add_flow_contiguity,
    add_one_fence,
    add_roots,
    add_used,
    bound_limits,
    holders_of,
    verdict,
)
from zonedesign.verify.solving import solve_model


class Budget:
    """Solver time: wall-clock seconds, or CP-SAT deterministic time when `work` is given.

    Deterministic time depends only on the model and the search, so a budget counted in it
    stops every run at the same point; the wall-clock cap still ends a run that goes on far
    longer than expected.
    """

    def __init__(self, seconds: float, work: float | None = None, parent: Budget | None = None):
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

    def share(self, fraction: float) -> Budget:
        """A child budget of this fraction of what is left (at least a small floor); a
        deterministic child keeps the whole wall-clock cap."""
        if self.deterministic:
            return Budget(max(self.wall_left(), 0.5), max(self.left() * fraction, 0.1), parent=self)
        return Budget(max(self.left() * fraction, 0.5), parent=self)

    def limit(self, solver: cp_model.CpSolver, fraction: float = 1.0) -> None:
        """Set the solver's limits to this fraction of what is left."""
        if self.deterministic:
            solver.parameters.max_deterministic_time = max(self.left() * fraction, 0.01)
            solver.parameters.max_time_in_seconds = max(self.wall_left(), 0.05)
        else:
            solver.parameters.max_time_in_seconds = max(self.left() * fraction, 0.05)

    def charge(self, solver: cp_model.CpSolver) -> None:
        budget: Budget | None = self
        while budget is not None:
            budget.used += float(solver.deterministic_time)
            budget = budget.parent


@dataclass
class RepairContext:
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
    # per tier: its own fence code per area, and the bounds of fences an override names
    tier_fence: list[np.ndarray] = field(default_factory=list)
    fence_bounds: list[dict[str, Bounds]] = field(default_factory=list)
    locked: list[np.ndarray] = field(default_factory=list)  # per tier: the area is in a locked zone
    locked_zones: dict[str, set[str]] = field(default_factory=dict)

    def fence_of(self, t: int) -> np.ndarray:
        return self.tier_fence[t] if self.tier_fence else self.fence

    def loosest(self, t: int) -> Bounds:
        """The lowest floor and highest ceiling of tier t over its fences (for counting spares)."""
        if not (self.fence_bounds and self.fence_bounds[t]):
            return self.bounds[t]
        all_b = [self.bounds[t], *self.fence_bounds[t].values()]
        return Bounds(self.bounds[t].count_names, np.min([b.lo for b in all_b], axis=0),
                      np.max([b.hi for b in all_b], axis=0), self.bounds[t].target)

    def bounds_in(self, t: int, fence: str) -> Bounds:
        """Tier t's bounds in one fence ([[tier.override]]), its own elsewhere."""
        return self.fence_bounds[t].get(fence, self.bounds[t]) if self.fence_bounds else self.bounds[t]


class ClusterModel:
    """The CP-SAT model of one cluster at one reach (None: every region unit may move)."""

    def __init__(self, ctx: RepairContext, units: np.ndarray, reach: int | None):
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

    def solve(self, budget: Budget, fraction: float = 1.0) -> tuple[str, list[dict[int, int]] | None, int]:
        """Build the model block by block, solve it within `fraction` of the budget, and
        return (status, new zone per free area per tier or None, moves)."""
        ctx = self.ctx
        in_cluster = np.zeros(ctx.areas.n, dtype=bool)
        in_cluster[self.units] = True
        m = cp_model.CpModel()
        cand: list[list[list[int]]] = []
        x: list[dict[tuple[int, int], cp_model.IntVar]] = []
        for t in range(len(ctx.enc)):
            ct, xt = self._tier_block(m, t, in_cluster)
            cand.append(ct)
            x.append(xt)
        self._nesting_block(m, x, cand)
        n_free = self._objective(m, x)
        self._hint(m, x, cand)
        return self._run(m, x, cand, n_free, budget, fraction)

    def _candidates(self, t: int, in_cluster: np.ndarray) -> tuple[list[list[int]], list[int]]:
        """Candidate zones per unit of tier t (fixed pieces: their own), and the new zones."""
        ctx, tu = self.ctx, self.tier_units[t]
        codes = ctx.enc[t].codes
        mov = self.units[ctx.movable[t][self.units]]
        zones = sorted(z for z in ctx.region[t] if in_cluster[codes == z].any())
        spares = _spare_count(ctx.areas, ctx.counts, ctx.loosest(t), ctx.scale, mov, zones, ctx.broken[t],
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
        return ct, spare_codes

    def _tier_block(
        self, m: cp_model.CpModel, t: int, in_cluster: np.ndarray
    ) -> tuple[list[list[int]], dict[tuple[int, int], cp_model.IntVar]]:
        """Tier t's assignment with its coverage, used-zone, bound, fence and contiguity rows."""
        ctx, tu = self.ctx, self.tier_units[t]
        ct, spare_codes = self._candidates(t, in_cluster)
        xt = {(u, z): m.NewBoolVar(f"x{t}_{u}_{z}") for u, zs in enumerate(ct) for z in zs}

        # coverage: every unit lies in exactly one zone of the tier; fixed pieces keep theirs
        add_coverage(m, ct, xt)

        # used zones: a zone is used when it holds a unit; new zones open in order
        holders = holders_of(xt)
        used = add_used(m, xt, holders, tag=str(t))
        for s0, s1 in zip(spare_codes, spare_codes[1:]):
            if s0 in used and s1 in used:
                m.AddImplication(used[s1], used[s0])

        # fences: a zone holds units of one fence only
        in_fence = add_one_fence(m, tu.fences, xt, holders, tag=str(t))

        # bounds: every zone that can change meets the min and max of its fence when used
        unit_counts = np.stack([ctx.counts[ms].sum(axis=0) for ms in tu.members]) if tu.members else \
            np.zeros((0, ctx.counts.shape[1]), dtype=np.int64)
        if not (ctx.fence_bounds and ctx.fence_bounds[t]):
            add_bounds(m, unit_counts, ctx.bounds[t], ctx.scale, xt, holders, used)
        else:
            _fence_bounds(m, ctx, t, unit_counts, tu.fences, xt, holders, used, in_fence)

        # contiguity: flow inside each zone from its root reaches every other member
        root = add_roots(m, xt, holders, used, tag=str(t))
        add_flow_contiguity(m, tu.edges, ct, xt, root, tag=str(t))
        return ct, xt

    def _nesting_block(self, m: cp_model.CpModel, x: list[dict], cand: list[list[list[int]]]) -> None:
        """Nesting: each zone's areas share one zone of the tier above."""
        ctx = self.ctx
        for t in range(len(ctx.enc) - 1):
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

    def _objective(self, m: cp_model.CpModel, x: list[dict]) -> int:
        """Keep as many (area, tier) labels as possible, above the faults' lower bounds;
        returns the number of free (area, tier) labels."""
        ctx = self.ctx
        kept = []
        n_free = 0
        keeps: list[dict[int, cp_model.IntVar]] = []  # per tier: free unit -> "keeps its zone"
        for t in range(len(ctx.enc)):
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
        return n_free

    def _hint(self, m: cp_model.CpModel, x: list[dict], cand: list[list[list[int]]]) -> None:
        """Hint the labels as they stand: the search starts next to a repair instead of
        from nothing, which on one worker decides whether it finds one at all."""
        for t in range(len(self.ctx.enc)):
            tu = self.tier_units[t]
            for u, zs in enumerate(cand[t]):
                if tu.free[u]:
                    for z in zs:
                        m.AddHint(x[t][u, z], int(z == tu.old[u]))

    def _run(
        self, m: cp_model.CpModel, x: list[dict], cand: list[list[list[int]]], n_free: int, budget: Budget,
        fraction: float,
    ) -> tuple[str, list[dict[int, int]] | None, int]:
        ctx = self.ctx
        solver = cp_model.CpSolver()
        budget.limit(solver, fraction)
        solver.parameters.num_workers = int(ctx.workers)
        if budget.deterministic:
            # CP-SAT's whole portfolio (local search, neighbourhood search, ...) on a fixed
            # schedule: far better repairs than one plain search, and still repeatable
            solver.parameters.interleave_search = True
        status = verdict(solve_model(solver, m))
        budget.charge(solver)
        if status == "infeasible":
            return "infeasible", None, 0
        if status == "undecided":
            return "undecided", None, 0
        result = []
        for t in range(len(ctx.enc)):
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
        return status, result, moves


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


def _tier_units(ctx: RepairContext, t: int, units: np.ndarray, reach: int | None) -> _TierUnits:
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
        fences=[set(ctx.fence_of(t)[ms].tolist()) for ms in members],
        area_unit=area_unit,
        edges=sorted(edges),
        all_movable=all_movable,
    )


def _fence_bounds(
    m: cp_model.CpModel, ctx: RepairContext, t: int, unit_counts: np.ndarray, fences: list[set[str]],
    xt: dict, holders: dict[int, list[int]], used: dict, in_fence: dict[int, dict],
) -> None:
    """Bounds per fence: a zone in one fence meets that fence's bounds; a zone that could lie
    in several meets the bounds of the one it ends in."""
    for z, us in holders.items():
        codes = sorted({f for u in us for f in fences[u]})
        for f in codes:
            b = ctx.bounds_in(t, f)
            lit = in_fence.get(z, {}).get(f) if len(codes) > 1 else None
            for c in range(len(b.count_names)):
                lo, hi = bound_limits(b, c, ctx.scale)
                total = sum(int(unit_counts[u, c]) * xt[u, z] for u in us)
                for row in ([total >= lo * used[z]] if lo is not None else []) + \
                        ([total <= hi * used[z]] if hi is not None else []):
                    ct = m.Add(row)
                    if lit is not None:
                        ct.OnlyEnforceIf(lit)


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
    return components(graph.subgraph(members))[0]


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
