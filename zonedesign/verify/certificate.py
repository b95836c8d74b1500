"""CP-SAT certificate: the lookup, fixed, must satisfy a model of every rule.

For each fence and tier one CP-SAT model states the rules as constraints over assignment
variables x[u, z] (unit u in zone z) that are fixed to the lookup. The solver then has to
find roots and flows that prove every zone connected (single-commodity flow from one root
per zone, Shirabe 2005) while coverage, fence, nesting and bound constraints hold.
FEASIBLE (or OPTIMAL) is the certificate; INFEASIBLE means a rule is broken in that fence
and tier. It is a second, independent statement of the rules: the plain checks in
`checks.py` and this model must agree.

A fence's model holds the fence's areas and every area of any zone that reaches into the
fence, so a zone crossing a fence is caught from both sides. Only edges inside the model
carry flow, and only between units of one zone, so the models stay small.
"""

from __future__ import annotations

import math
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from ortools.sat.python import cp_model

from zonedesign.records import Areas, Graph
from zonedesign.rules import TierRules, tier_in_fence
from zonedesign.verify.checks import encode_labels, tier_bounds
from zonedesign.verify.solving import solve_model

STATUS = {
    cp_model.OPTIMAL: "OPTIMAL",
    cp_model.FEASIBLE: "FEASIBLE",
    cp_model.INFEASIBLE: "INFEASIBLE",
    cp_model.MODEL_INVALID: "MODEL_INVALID",
    cp_model.UNKNOWN: "UNKNOWN",
}


@dataclass(frozen=True)
class Certificate:
    """The solver's verdict on one fence and tier."""

    fence: str
    tier: str
    status: str  # OPTIMAL / FEASIBLE (rules hold), INFEASIBLE (a rule is broken), UNKNOWN
    seconds: float
    n_zones: int
    n_units: int
    n_arcs: int

    @property
    def ok(self) -> bool:
        return self.status in ("OPTIMAL", "FEASIBLE")

    def to_dict(self) -> dict:
        return {
            "fence": self.fence,
            "tier": self.tier,
            "status": self.status,
            "seconds": round(self.seconds, 4),
            "zones": self.n_zones,
            "units": self.n_units,
            "arcs": self.n_arcs,
        }


def integer_scale(values: np.ndarray) -> int:
    """1 when every count is a whole number, else 1000 (CP-SAT works on integers)."""
    v = np.asarray(values, dtype=np.float64)
    v = v[np.isfinite(v)]
    return 1 if np.all(v == np.round(v)) else 1000


def certify(
    areas: Areas,
    graph: Graph,
    labels: Mapping[str, Sequence | np.ndarray],
    tiers: Sequence[TierRules],
    *,
    time_limit: float = 10.0,
    workers: int = 1,
) -> list[Certificate]:
    """One certificate per fence and tier, bottom tier first, fences in sorted order.

    time_limit is per model (seconds); workers is CP-SAT's num_workers. Counts that are not
    whole numbers are scaled by 1000 and bounds rounded inwards at that scale.
    """
    tiers = list(tiers)
    scale = integer_scale(areas.counts)
    out: list[Certificate] = []
    for k, t in enumerate(tiers):
        tl = encode_labels(labels[t.name])
        upper = encode_labels(labels[tiers[k + 1].name]).codes if k + 1 < len(tiers) else None
        fence = np.asarray(areas.in_tier(t.name).fence).astype(str)  # the tier's own fence
        for f in sorted(set(fence.tolist())):
            bounds = tier_bounds(tier_in_fence(t, f), areas.count_names)  # an override's bounds in this fence
            out.append(
                _certify_fence(areas, graph, fence, f, t.name, tl.codes, upper, bounds, scale, time_limit, workers)
            )
    return out


def _certify_fence(
    areas: Areas,
    graph: Graph,
    fence: np.ndarray,
    f: str,
    tier: str,
    codes: np.ndarray,
    upper: np.ndarray | None,
    bounds,
    scale: int,
    time_limit: float,
    workers: int,
) -> Certificate:
    start = time.perf_counter()
    in_fence = np.flatnonzero(fence == f)
    zones = np.unique(codes[in_fence][codes[in_fence] >= 0])
    # the model's units: the fence's areas plus every area of a zone reaching into it
    units = np.union1d(in_fence, np.flatnonzero(np.isin(codes, zones)))
    pos = np.full(areas.n, -1, dtype=np.int64)
    pos[units] = np.arange(units.size)
    lab = codes[units]
    size = {int(z): int((lab == z).sum()) for z in zones}

    # candidate zones per unit: its own and those of its neighbours inside the model
    cand: list[list[int]] = []
    edges: list[tuple[int, int]] = []
    for a, u in enumerate(units):
        nb = graph.neighbours(u)
        nb = pos[nb[pos[nb] >= 0]]
        zs = set(lab[nb][lab[nb] >= 0].tolist())
        if lab[a] >= 0:
            zs.add(int(lab[a]))
        cand.append(sorted(zs))
        edges.extend((a, int(b)) for b in nb if b > a)

    m = cp_model.CpModel()
    x = {(a, z): m.NewBoolVar(f"x_{a}_{z}") for a in range(units.size) for z in cand[a]}

    # the assignment is the lookup's: x[u, z] is 1 exactly when the lookup puts u in z
    for (a, z), var in x.items():
        m.Add(var == int(lab[a] == z))

    # coverage: every unit lies in exactly one zone
    for a in range(units.size):
        m.AddExactlyOne([x[a, z] for z in cand[a]])

    # fence: a zone reaching into this fence holds no unit of another fence
    for (a, _z), var in x.items():
        if fence[units[a]] != f:
            m.Add(var == 0)

    # bounds: each zone's counts lie within the tier's min and max
    members: dict[int, list[int]] = {int(z): [] for z in zones}
    for (a, z), _ in x.items():
        members.setdefault(z, []).append(a)
    counts = np.round(areas.counts[units] * scale).astype(np.int64)
    for c in range(len(bounds.count_names)):
        lo, hi = bounds.lo[c], bounds.hi[c]
        for z, ms in members.items():
            total = sum(int(counts[a, c]) * x[a, z] for a in ms)
            if np.isfinite(lo):
                m.Add(total >= math.ceil(lo * scale - 1e-9))
            if np.isfinite(hi):
                m.Add(total <= math.floor(hi * scale + 1e-9))

    # nesting: each zone lies in one zone of the tier above (p[z, P]: z lies in P)
    if upper is not None:
        parent = upper[units]
        p: dict[tuple[int, int], cp_model.IntVar] = {}
        for (a, z), var in x.items():
            if parent[a] < 0:
                continue
            key = (z, int(parent[a]))
            if key not in p:
                p[key] = m.NewBoolVar(f"p_{z}_{parent[a]}")
            m.AddImplication(var, p[key])
        for z in members:
            m.Add(sum(v for (zz, _), v in p.items() if zz == z) <= 1)

    # contiguity, roots: exactly one root per zone, and a root lies in its zone
    r = {(a, z): m.NewBoolVar(f"r_{a}_{z}") for (a, z) in x}
    for (a, z), var in r.items():
        m.AddImplication(var, x[a, z])
    for z, ms in members.items():
        m.AddExactlyOne([r[a, z] for a in ms])

    # contiguity, same-zone indicator per edge: y[e] = 1 only when both ends share a zone
    y = []
    for e, (a, b) in enumerate(edges):
        ye = m.NewBoolVar(f"y_{e}")
        cb = set(cand[b])
        for z in cand[a]:
            if z in cb:
                m.AddBoolOr([ye.Not(), x[a, z].Not(), x[b, z]])
            else:
                m.AddBoolOr([ye.Not(), x[a, z].Not()])
        y.append(ye)

    # contiguity, flow capacity: (zone size - 1) on an arc whose ends share a zone, else 0
    inflow: list[list] = [[] for _ in range(units.size)]
    outflow: list[list] = [[] for _ in range(units.size)]
    flow: dict[tuple[int, int], cp_model.IntVar] = {}
    for e, (a, b) in enumerate(edges):
        cap = max(size.get(int(lab[a]), 1), size.get(int(lab[b]), 1)) - 1
        for s, t in ((a, b), (b, a)):
            fl = m.NewIntVar(0, max(cap, 0), f"f_{s}_{t}")
            m.Add(fl <= cap * y[e])
            outflow[s].append(fl)
            inflow[t].append(fl)
            flow[s, t] = fl
    n_arcs = len(flow)

    # contiguity, conservation: a non-root consumes one unit; a root sends out size - 1
    for a in range(units.size):
        supply = sum(size.get(z, 1) * r[a, z] for z in cand[a])
        m.Add(sum(inflow[a]) - sum(outflow[a]) == 1 - supply)

    _hint_tree(m, lab, edges, r, flow)

    solver = cp_model.CpSolver()
    solver.parameters.max_time_in_seconds = float(time_limit)
    solver.parameters.num_workers = int(workers)
    # the model is a plain flow check once x is fixed: symmetry detection and repeated
    # presolve cost far more than the search (0.6 s of 0.65 s in trial runs)
    solver.parameters.symmetry_level = 0
    solver.parameters.max_presolve_iterations = 1
    status = STATUS.get(solve_model(solver, m), "UNKNOWN")
    return Certificate(
        fence=f,
        tier=tier,
        status=status,
        seconds=time.perf_counter() - start,
        n_zones=int(zones.size),
        n_units=int(units.size),
        n_arcs=n_arcs,
    )


def _hint_tree(m: cp_model.CpModel, lab: np.ndarray, edges: list[tuple[int, int]], r: dict, flow: dict) -> None:
    """Suggest a search start: each zone rooted at its first unit, flow along a
    breadth-first tree of its edges. Only a hint: a zone in pieces leaves units the tree
    never reaches, and the solver still has to prove the model infeasible on its own."""
    nb: dict[int, list[int]] = {}
    for a, b in edges:
        if lab[a] == lab[b] and lab[a] >= 0:
            nb.setdefault(a, []).append(b)
            nb.setdefault(b, []).append(a)
    seen = np.zeros(lab.shape[0], dtype=bool)
    hinted_root = set()
    for a in range(lab.shape[0]):
        if lab[a] < 0 or seen[a] or int(lab[a]) in hinted_root:
            continue
        z = int(lab[a])
        hinted_root.add(z)
        m.AddHint(r[a, z], 1)
        order, parent = [a], {a: -1}
        seen[a] = True
        for u in order:
            for v in nb.get(u, []):
                if not seen[v]:
                    seen[v] = True
                    parent[v] = u
                    order.append(v)
        below = {u: 1 for u in order}
        for u in reversed(order[1:]):
            below[parent[u]] += below[u]
            m.AddHint(flow[parent[u], u], below[u])
