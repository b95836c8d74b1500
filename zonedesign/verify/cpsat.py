"""The one set of CP-SAT model blocks the certificate, the proofs and the repair share.

Each block adds one family of constraints to a `cp_model.CpModel` and says in one line
what it enforces. The assignment is given as literals x[(u, z)] ("unit u lies in zone z")
over candidate zones per unit; a block never decides which units or zones a model holds.

- `integer_scale`, `scaled_counts`, `bound_limits`: CP-SAT works on integers, so counts
  that are not whole numbers are scaled by 1000 and bounds rounded inwards at that scale;
- `add_coverage`: every unit lies in exactly one of its candidate zones;
- `add_used`: a zone is used exactly when it holds a unit;
- `add_bounds`: a used zone's counts lie within the tier's floor and ceiling;
- `add_one_fence`: a zone holds units of one fence only;
- `add_one_parent`: a zone lies inside one zone of the tier above;
- `add_roots`: one root per used zone, inside that zone;
- `add_flow_contiguity`: single-commodity flow from each zone's root reaches every other
  unit of the zone along edges inside the zone (Shirabe 2005), an arc open only where a
  same-zone indicator holds; `add_flow` is the same statement over a fixed assignment
  (edges inside zones only, no indicators): one small flow model per zone, rooted at a
  given unit. Both share the arcs and the conservation rows.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

import numpy as np
from ortools.sat.python import cp_model

from zonedesign.records import Bounds

Lit = cp_model.IntVar
Assignment = Mapping[tuple[int, int], Lit]


def integer_scale(values: np.ndarray) -> int:
    """1 when every count is a whole number, else 1000 (CP-SAT works on integers)."""
    v = np.asarray(values, dtype=np.float64)
    v = v[np.isfinite(v)]
    return 1 if np.all(v == np.round(v)) else 1000


def scaled_counts(values: np.ndarray, scale: int) -> np.ndarray:
    """Counts as integers at `scale` (see `integer_scale`)."""
    return np.round(np.asarray(values, dtype=np.float64) * scale).astype(np.int64)


def bound_limits(bounds: Bounds, c: int, scale: int) -> tuple[int | None, int | None]:
    """Count c's floor and ceiling at `scale`, rounded inwards; None where unbounded."""
    lo, hi = bounds.lo[c], bounds.hi[c]
    return (
        math.ceil(lo * scale - 1e-9) if np.isfinite(lo) else None,
        math.floor(hi * scale + 1e-9) if np.isfinite(hi) else None,
    )


def holders_of(x: Assignment) -> dict[int, list[int]]:
    """Zone -> the units that may lie in it."""
    holders: dict[int, list[int]] = {}
    for u, z in x:
        holders.setdefault(z, []).append(u)
    return holders


def add_coverage(m: cp_model.CpModel, cand: Sequence[Sequence[int]], x: Assignment) -> None:
    """Coverage: every unit lies in exactly one of its candidate zones (none: infeasible)."""
    for u, zs in enumerate(cand):
        m.AddExactlyOne([x[u, z] for z in zs])


def add_used(m: cp_model.CpModel, x: Assignment, holders: Mapping[int, list[int]], *, tag: str = "") -> dict[int, Lit]:
    """Used zones: used[z] holds exactly when some unit lies in z."""
    used = {}
    for z, us in holders.items():
        used[z] = m.NewBoolVar(f"u{tag}_{z}")
        for u in us:
            m.AddImplication(x[u, z], used[z])
        m.AddBoolOr([x[u, z] for u in us]).OnlyEnforceIf(used[z])
    return used


def add_bounds(
    m: cp_model.CpModel,
    counts: np.ndarray,
    bounds: Bounds,
    scale: int,
    x: Assignment,
    holders: Mapping[int, list[int]],
    used: Mapping[int, Lit] | None = None,
) -> None:
    """Bounds: each (used) zone's scaled counts lie within the tier's floor and ceiling.

    counts: (units, counts) integers at `scale`; used: None when every zone is used.
    """
    for c in range(len(bounds.count_names)):
        lo, hi = bound_limits(bounds, c, scale)
        if lo is None and hi is None:
            continue
        for z, us in holders.items():
            total = sum(int(counts[u, c]) * x[u, z] for u in us)
            if lo is not None:
                m.Add(total >= (lo if used is None else lo * used[z]))
            if hi is not None:
                m.Add(total <= (hi if used is None else hi * used[z]))


def add_one_fence(
    m: cp_model.CpModel, fences: Sequence[set[str]], x: Assignment, holders: Mapping[int, list[int]], *, tag: str = ""
) -> dict[int, dict[str, Lit]]:
    """Fence: a zone holds units of one fence only (fences[u]: the fence codes unit u touches).

    Returns, per zone that could lie in more than one fence, the literal "lies in fence f"."""
    out: dict[int, dict[str, Lit]] = {}
    for z, us in holders.items():
        codes = sorted({f for u in us for f in fences[u]})
        if len(codes) < 2:
            continue
        q = {f: m.NewBoolVar(f"q{tag}_{z}_{f}") for f in codes}
        for u in us:
            for f in fences[u]:
                m.AddImplication(x[u, z], q[f])
        m.AddAtMostOne(list(q.values()))
        out[z] = q
    return out


def add_one_parent(m: cp_model.CpModel, pairs: Mapping[tuple[int, int], Sequence[Sequence]], *, tag: str = "") -> None:
    """Nesting: each zone z lies in at most one zone P of the tier above.

    pairs[(z, P)]: conjunctions of literals (or Python bools) under which some unit lies
    in z and in P; p[z, P] is forced by each, and at most one p[z, .] holds.
    """
    by_zone: dict[int, list[Lit]] = {}
    for (z, parent), conjunctions in pairs.items():
        p = m.NewBoolVar(f"p{tag}_{z}_{parent}")
        for lits in conjunctions:
            m.AddBoolOr([p] + [v.Not() for v in lits])
        by_zone.setdefault(z, []).append(p)
    for ps in by_zone.values():
        if len(ps) > 1:
            m.AddAtMostOne(ps)


def add_roots(
    m: cp_model.CpModel, x: Assignment, holders: Mapping[int, list[int]], used: Mapping[int, Lit] | None, *, tag: str = ""
) -> dict[tuple[int, int], Lit]:
    """Roots: one root per (used) zone, and a root lies in its zone."""
    root = {key: m.NewBoolVar(f"r{tag}_{key[0]}_{key[1]}") for key in x}
    for key, r in root.items():
        m.AddImplication(r, x[key])
    for z, us in holders.items():
        m.Add(sum(root[u, z] for u in us) == (1 if used is None else used[z]))
    return root


def _same_zone(m: cp_model.CpModel, a: int, b: int, cand: Sequence[Sequence[int]], x: Assignment, tag: str) -> Lit:
    """y holds only when units a and b lie in one zone."""
    y = m.NewBoolVar(f"y{tag}_{a}_{b}")
    ca, cb = set(cand[a]), set(cand[b])
    for z in ca | cb:
        if z in ca and z in cb:
            m.AddBoolOr([y.Not(), x[a, z].Not(), x[b, z]])
            m.AddBoolOr([y.Not(), x[b, z].Not(), x[a, z]])
        elif z in ca:
            m.AddBoolOr([y.Not(), x[a, z].Not()])
        else:
            m.AddBoolOr([y.Not(), x[b, z].Not()])
    return y


class _Arcs:
    """Arc variables both ways along edges, with each unit's inflow and outflow."""

    def __init__(self, n: int, tag: str):
        self.inflow: list[list[Lit]] = [[] for _ in range(n)]
        self.outflow: list[list[Lit]] = [[] for _ in range(n)]
        self.arcs: dict[tuple[int, int], Lit] = {}
        self.tag = tag

    def add(self, m: cp_model.CpModel, a: int, b: int, cap: int, enable: Lit | None) -> None:
        cap = max(int(cap), 0)
        for s, d in ((a, b), (b, a)):
            f = m.NewIntVar(0, cap, f"f{self.tag}_{s}_{d}")
            if enable is not None:
                m.Add(f <= cap * enable)
            self.outflow[s].append(f)
            self.inflow[d].append(f)
            self.arcs[s, d] = f

    def conserve(self, m: cp_model.CpModel, is_root: Sequence, big: int) -> None:
        """A non-root unit takes in at least one unit of flow more than it sends on."""
        for u, (into, out) in enumerate(zip(self.inflow, self.outflow)):
            if not into and isinstance(is_root[u], (int, np.integer)):
                if not is_root[u]:
                    m.AddBoolOr([])  # a non-root unit with no arc into it cannot be reached
                continue
            m.Add(sum(into) - sum(out) >= 1 - big * is_root[u])


def add_flow(
    m: cp_model.CpModel,
    n: int,
    edges: Sequence[tuple[int, int]],
    cap: int | Sequence[int],
    is_root: Sequence,
    *,
    tag: str = "",
) -> dict[tuple[int, int], Lit]:
    """Flow contiguity (Shirabe 2005) over a fixed assignment: edges join units of one zone.

    Each edge carries an arc both ways of capacity cap (per edge, or one for all);
    is_root[u] is 0/1 (or a literal). Flow leaves each root and every other unit keeps
    one, so every unit is reached from a root along its zone's edges. Returns the arc
    variables by (tail, head).
    """
    caps = [int(cap)] * len(edges) if np.isscalar(cap) else [int(c) for c in cap]
    arcs = _Arcs(n, tag)
    for (a, b), c in zip(edges, caps):
        arcs.add(m, a, b, c, None)
    arcs.conserve(m, is_root, max(caps, default=0) + 1)
    return arcs.arcs


def add_flow_contiguity(
    m: cp_model.CpModel,
    edges: Sequence[tuple[int, int]],
    cand: Sequence[Sequence[int]],
    x: Assignment,
    root: Mapping[tuple[int, int], Lit],
    *,
    tag: str = "",
) -> dict[tuple[int, int], Lit]:
    """Flow contiguity (Shirabe 2005) over a free assignment: flow from each zone's root
    (root[(u, z)]) reaches every unit of the zone; an arc is open only when a same-zone
    indicator says both its ends lie in one zone."""
    n = len(cand)
    cap = max(n - 1, 0)
    arcs = _Arcs(n, tag)
    for a, b in edges:
        arcs.add(m, a, b, cap, _same_zone(m, a, b, cand, x, tag))
    arcs.conserve(m, [sum(root[u, z] for z in cand[u]) for u in range(n)], cap + 1)
    return arcs.arcs


def solver(time_limit: float, workers: int = 1) -> cp_model.CpSolver:
    """A CP-SAT solver with a wall-clock limit (seconds) and `workers` search workers."""
    s = cp_model.CpSolver()
    s.parameters.max_time_in_seconds = float(time_limit)
    s.parameters.num_workers = int(workers)
    return s


def verdict(status: int) -> str:
    """A solve's status in the project's words: optimal, feasible, infeasible, undecided."""
    return {
        cp_model.OPTIMAL: "optimal",
        cp_model.FEASIBLE: "feasible",
        cp_model.INFEASIBLE: "infeasible",
    }.get(status, "undecided")
