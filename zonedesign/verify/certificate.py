"""CP-SAT certificate: the lookup, fixed, must satisfy a model of every rule.

For each fence and tier one CP-SAT model states the rules over the lookup's assignment,
which is fixed: coverage (every unit has a zone), bounds (each zone's total is a variable
within the tier's floor and ceiling), fence (each zone's fence is one variable equal to the
fence of every member), nesting (each zone's parent is one variable equal to the upper
zone of every member) and contiguity (single-commodity flow from a fixed root per zone
reaches every member along the zone's own edges, Shirabe 2005). With the assignment fixed
a zone's contiguity does not depend on any other zone, so the flow part is one small flow
model per zone, all built in bulk into the fence's model.

The solver's answer is the certificate: a solution `confirmed`s that every rule holds in
that fence and tier, infeasibility `refuted`s it, and a solve stopped by its time limit
is `undecided` (never shown as a pass). It is a second, independent statement of the
rules: the plain checks in `checks.py` and this model must agree.

A fence's model holds every unit of any zone that reaches into the fence, so a zone
crossing a fence is refuted from both sides. The units of tier 1 are the areas; the units
of a higher tier are the lower tier's zones, each cut where the tier's own zone, the tier
above or the fence changes inside it (connected pieces), so an upper tier's model is as
small as its lower tier's zone count and still equivalent to one over the areas: a piece
is connected by construction, and a zone is connected over the areas exactly when it is
connected over its pieces.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from ortools.sat.python import cp_model
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import breadth_first_order

from zonedesign.graph.components import components
from zonedesign.records import Areas, Graph
from zonedesign.rules import TierRules, tier_in_fence
from zonedesign.verify.checks import encode_labels, tier_bounds
from zonedesign.verify.cpsat import (
    add_flow,
    bound_limits,
    integer_scale,
    scaled_counts,
    solver,
    verdict,
)
from zonedesign.verify.solving import solve_model

__all__ = ["Certificate", "certify", "integer_scale"]

# seconds per fence-tier model; the audit and design runs use this default
TIME_LIMIT = 10.0

_WORDS = {"optimal": "confirmed", "feasible": "confirmed", "infeasible": "refuted"}


@dataclass(frozen=True)
class Certificate:
    """The solver's verdict on one fence and tier: confirmed, refuted or undecided."""

    fence: str
    tier: str
    status: str
    seconds: float
    n_zones: int
    n_units: int
    n_arcs: int
    n_areas: int = 0  # areas the model's units hold

    @property
    def ok(self) -> bool:
        return self.status == "confirmed"

    @property
    def undecided(self) -> bool:
        return self.status == "undecided"

    def to_dict(self) -> dict:
        return {
            "fence": self.fence,
            "tier": self.tier,
            "status": self.status,
            "seconds": round(self.seconds, 4),
            "zones": self.n_zones,
            "units": self.n_units,
            "arcs": self.n_arcs,
            "areas": self.n_areas,
        }


@dataclass
class _TierUnits:
    """The units one tier's models are stated over (see the module notes)."""

    members: list[np.ndarray] | None  # areas per unit; None: the units are the areas
    zone: np.ndarray  # zone code per unit (-1: none)
    parent: np.ndarray | None  # zone code of the tier above per unit
    fence: np.ndarray  # fence index per unit
    counts: np.ndarray  # (units, counts) integers at the run's scale
    indptr: np.ndarray  # CSR over units, edges between units of one zone only
    indices: np.ndarray


def certify(
    areas: Areas,
    graph: Graph,
    labels: Mapping[str, Sequence | np.ndarray],
    tiers: Sequence[TierRules],
    *,
    time_limit: float | None = None,
    workers: int = 1,
    on_done: Callable[[int, int], None] | None = None,
) -> list[Certificate]:
    """One certificate per fence and tier, bottom tier first, fences in sorted order.

    time_limit is per model (seconds, default TIME_LIMIT); workers is CP-SAT's num_workers; on_done(done,
    total) is called after each fence and tier (a progress counter).
    """
    time_limit = TIME_LIMIT if time_limit is None else float(time_limit)
    tiers = list(tiers)
    scale = integer_scale(areas.counts)
    counts = scaled_counts(areas.counts, scale)
    codes = [encode_labels(labels[t.name]).codes for t in tiers]
    ei, ej, _ = graph.edges()
    fences = [_tier_fence(areas, t) for t in tiers]
    total = sum(len(names) for names, _ in fences)
    out: list[Certificate] = []
    for k, t in enumerate(tiers):
        start = time.perf_counter()
        fence_names, fence_idx = fences[k]
        tu = _tier_units(areas.n, ei, ej, codes, k, fence_idx, counts)
        prepared = time.perf_counter() - start
        for fi, f in enumerate(fence_names):
            bounds = tier_bounds(tier_in_fence(t, str(f)), areas.count_names)  # an override's bounds in this fence
            cert = _certify_fence(tu, fi, str(f), t.name, bounds, scale, time_limit, workers)
            # the shared preparation of the tier is charged to its fences in equal parts
            out.append(_with_seconds(cert, cert.seconds + prepared / len(fence_names)))
            if on_done is not None:
                on_done(len(out), total)
    return out


def _tier_fence(areas: Areas, tier: TierRules) -> tuple[np.ndarray, np.ndarray]:
    """The fence codes tier `tier` keeps to (sorted) and each area's index among them."""
    names, idx = np.unique(np.asarray(areas.in_tier(tier.name).fence).astype(str), return_inverse=True)
    return names, idx.reshape(-1)


def fence_tiers(areas: Areas, tiers: Sequence[TierRules]) -> int:
    """How many fence-tier models `certify` states (the progress counter's total)."""
    return sum(len(_tier_fence(areas, t)[0]) for t in tiers)


def _with_seconds(c: Certificate, seconds: float) -> Certificate:
    return Certificate(c.fence, c.tier, c.status, seconds, c.n_zones, c.n_units, c.n_arcs, c.n_areas)


def _tier_units(
    n: int, ei: np.ndarray, ej: np.ndarray, codes: list[np.ndarray], k: int, fence: np.ndarray, counts: np.ndarray
) -> _TierUnits:
    """Tier k's units: the areas (k = 0), else connected pieces of the lower tier's zones."""
    zone = codes[k]
    parent = codes[k + 1] if k + 1 < len(codes) else None
    if k == 0:
        members, unit_of = None, np.arange(n)
        u_zone, u_parent, u_fence, u_counts = zone, parent, fence, counts
    else:
        keep = (codes[k - 1][ei] == codes[k - 1][ej]) & (zone[ei] == zone[ej]) & (fence[ei] == fence[ej])
        if parent is not None:
            keep &= parent[ei] == parent[ej]
        n_units, unit_of = components(Graph.from_edges(n, ei[keep], ej[keep]))
        order = np.argsort(unit_of, kind="stable")
        members = np.split(order, np.cumsum(np.bincount(unit_of, minlength=n_units))[:-1])
        first = order[np.searchsorted(unit_of[order], np.arange(n_units))]
        u_zone, u_fence = zone[first], fence[first]
        u_parent = parent[first] if parent is not None else None
        u_counts = np.zeros((n_units, counts.shape[1]), dtype=np.int64)
        np.add.at(u_counts, unit_of, counts)
    # edges between distinct units of one zone: the only ones flow may use
    a, b = unit_of[ei], unit_of[ej]
    inside = (a != b) & (u_zone[a] == u_zone[b]) & (u_zone[a] >= 0)
    m = u_zone.shape[0]
    pairs = np.unique(np.stack([np.minimum(a[inside], b[inside]), np.maximum(a[inside], b[inside])], axis=1), axis=0)
    both = np.concatenate([pairs, pairs[:, ::-1]]) if pairs.size else np.zeros((0, 2), dtype=np.int64)
    order = np.lexsort((both[:, 1], both[:, 0]))
    both = both[order]
    indptr = np.concatenate([[0], np.cumsum(np.bincount(both[:, 0], minlength=m))]).astype(np.int64)
    return _TierUnits(members, u_zone, u_parent, u_fence, u_counts, indptr, both[:, 1].astype(np.int64))


def _certify_fence(
    tu: _TierUnits, fi: int, f: str, tier: str, bounds, scale: int, time_limit: float, workers: int
) -> Certificate:
    start = time.perf_counter()
    zone = tu.zone
    in_fence = tu.fence == fi
    zones = np.unique(zone[in_fence & (zone >= 0)])
    # the model's units: the fence's units plus every unit of a zone reaching into it
    units = np.flatnonzero(in_fence | np.isin(zone, zones))
    pos = np.full(zone.shape[0], -1, dtype=np.int64)
    pos[units] = np.arange(units.size)
    lab = zone[units]
    zpos = np.searchsorted(zones, lab)  # zone position per model unit (valid where lab >= 0)
    size = np.bincount(zpos[lab >= 0], minlength=zones.size)

    m = cp_model.CpModel()
    # coverage: a unit without a zone lies in none of them
    for _ in range(int((lab < 0).sum())):
        m.AddExactlyOne([])

    # bounds: each zone's total is a variable within the tier's floor and ceiling
    totals = np.zeros((zones.size, tu.counts.shape[1]), dtype=np.int64)
    np.add.at(totals, zpos[lab >= 0], tu.counts[units[lab >= 0]])
    for c in range(len(bounds.count_names)):
        lo, hi = bound_limits(bounds, c, scale)
        if lo is None and hi is None:
            continue
        for z, value in enumerate(totals[:, c].tolist()):
            low, high = (value if lo is None else lo), (value if hi is None else hi)
            if low > high:
                m.AddBoolOr([])  # a floor above the ceiling: no total fits
                continue
            m.Add(m.NewIntVar(low, high, f"t{c}_{z}") == value)

    # fence and nesting: one fence and one parent per zone, equal to every member's
    for values, name in ((tu.fence, "fence"), (tu.parent, "parent")):
        if values is None:
            continue
        v = values[units]
        ok = lab >= 0
        if name == "parent":
            ok &= v >= 0  # a unit without a parent is the tier above's coverage break
        distinct = np.unique(np.stack([zpos[ok], v[ok]], axis=1), axis=0)
        var = [m.NewIntVar(0, max(int(values.max()), 0), f"{name}_{z}") for z in range(zones.size)]
        for z, value in distinct.tolist():
            m.Add(var[z] == value)

    # contiguity: flow from each zone's first unit reaches every member along its edges
    edges, cap = _zone_edges(tu, units, pos, zpos, size)
    roots = _first_of_zone(zpos, lab, zones.size)
    is_root = np.zeros(units.size, dtype=np.int64)
    is_root[roots] = 1
    arcs = add_flow(m, units.size, edges, cap, is_root.tolist())
    for key, value in _tree_hint(units.size, edges, roots).items():
        m.AddHint(arcs[key], value)

    s = solver(time_limit, workers)
    # the model is a plain flow check once the assignment is fixed: symmetry detection
    # and repeated presolve cost far more than the search
    s.parameters.symmetry_level = 0
    s.parameters.max_presolve_iterations = 1
    status = _WORDS.get(verdict(solve_model(s, m)), "undecided")
    return Certificate(
        fence=f, tier=tier, status=status, seconds=time.perf_counter() - start,
        n_zones=int(zones.size), n_units=int(units.size), n_arcs=len(arcs),
        n_areas=int(units.size if tu.members is None else sum(tu.members[u].size for u in units)),
    )


def _zone_edges(
    tu: _TierUnits, units: np.ndarray, pos: np.ndarray, zpos: np.ndarray, size: np.ndarray
) -> tuple[list[tuple[int, int]], list[int]]:
    """Edges between model units of one zone (each once) and their capacity: zone size - 1."""
    deg = np.diff(tu.indptr)[units]
    rows = np.repeat(np.arange(units.size), deg)
    at = np.arange(rows.size) - np.repeat(np.cumsum(deg) - deg, deg) + np.repeat(tu.indptr[units], deg)
    cols = pos[tu.indices[at]]
    keep = cols > rows
    a, b = rows[keep], cols[keep]
    cap = size[zpos[a]] - 1
    return list(zip(a.tolist(), b.tolist())), cap.tolist()


def _first_of_zone(zpos: np.ndarray, lab: np.ndarray, n_zones: int) -> np.ndarray:
    """The first model unit of every zone: its fixed root."""
    idx = np.flatnonzero(lab >= 0)
    _, first = np.unique(zpos[idx], return_index=True)
    return idx[first]


def _tree_hint(n: int, edges: list[tuple[int, int]], roots: np.ndarray) -> dict[tuple[int, int], int]:
    """A search start: flow along a breadth-first tree of each zone from its root.

    Only a hint: a zone in pieces leaves units the tree never reaches, and the solver
    still has to prove the model infeasible on its own. One search over all zones at
    once, from a virtual node joined to every root.
    """
    if not edges:
        return {}
    e = np.asarray(edges, dtype=np.int64)
    hub = n
    i = np.concatenate([e[:, 0], np.full(roots.size, hub)])
    j = np.concatenate([e[:, 1], roots])
    adj = coo_matrix((np.ones(i.size), (i, j)), shape=(n + 1, n + 1)).tocsr()
    order, pred = breadth_first_order(adj, hub, directed=False, return_predecessors=True)
    below = np.ones(n + 1, dtype=np.int64)
    for u in order[:0:-1].tolist():
        p = pred[u]
        if p != hub:
            below[p] += below[u]
    hint = {(a, b): 0 for a, b in edges}
    hint.update({(b, a): 0 for a, b in edges})
    for u in order[1:].tolist():
        p = int(pred[u])
        if p != hub:
            hint[p, u] = int(below[u])
    return hint
