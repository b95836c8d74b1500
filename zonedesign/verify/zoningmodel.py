"""The CP-SAT model of a fence's free zoning, shared by the proofs and the floor search.

At most K zones over n units, numbered by their first unit (unit i can only lie in zones
0..i, and a zone opens only after the one before it: no two numberings of one zoning), a
zone's first unit is its root, and flow from each root reaches every unit of its zone
(`cpsat.add_flow_contiguity`). Bounds and objectives are the caller's: the model only
says which units may form which zones.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from ortools.sat.python import cp_model

from zonedesign.records import Graph
from zonedesign.verify.cpsat import Lit, add_coverage, add_flow_contiguity, holders_of


@dataclass
class FreeZoning:
    """The model and its literals: x[(unit, zone)], used[zone], holders[zone] -> units."""

    model: cp_model.CpModel
    x: dict[tuple[int, int], Lit]
    used: dict[int, Lit]
    holders: dict[int, list[int]]


def model_size(n: int, k: int) -> int:
    """The number of (unit, zone) literals of a free zoning of n units into at most k zones."""
    k = min(k, n)
    return n * k - k * (k - 1) // 2


def free_zoning(graph: Graph, k: int, min_zones: int = 1) -> FreeZoning:
    """A free zoning of the graph's units into min_zones to k contiguous zones."""
    n = graph.n
    k = max(1, min(int(k), n))
    m = cp_model.CpModel()
    x = {(i, z): m.NewBoolVar(f"x_{i}_{z}") for i in range(n) for z in range(min(i, k - 1) + 1)}
    cand = [list(range(min(i, k - 1) + 1)) for i in range(n)]

    # coverage: every unit lies in exactly one zone
    add_coverage(m, cand, x)

    # opened[i, z]: zone z has a unit among 0..i
    opened: dict[tuple[int, int], Lit] = {}
    for z in range(k):
        prev = None
        for i in range(z, n):
            o = m.NewBoolVar(f"o_{i}_{z}")
            if prev is None:
                m.Add(o == x[i, z])
            else:
                m.AddMaxEquality(o, [prev, x[i, z]])
            opened[i, z] = o
            prev = o

    # order: a unit opens zone z only after zone z-1 has been opened by an earlier unit
    for (i, z), var in x.items():
        if z >= 1:
            m.AddImplication(var, opened[i - 1, z - 1])

    # roots: a zone's first unit is its root
    root: dict[tuple[int, int], Lit] = {}
    for (i, z), var in x.items():
        if (i - 1, z) in opened:
            rv = m.NewBoolVar(f"r_{i}_{z}")
            m.AddBoolAnd([var, opened[i - 1, z].Not()]).OnlyEnforceIf(rv)
            m.AddBoolOr([var.Not(), opened[i - 1, z], rv])
            root[i, z] = rv
        else:
            root[i, z] = var
    used = {z: opened[n - 1, z] for z in range(k)}
    if min_zones > 1:
        m.Add(sum(used.values()) >= int(min_zones))

    # contiguity: flow from each zone's root reaches every unit of the zone
    i_e, j_e, _ = graph.edges()
    add_flow_contiguity(m, list(zip(i_e.tolist(), j_e.tolist())), cand, x, root)
    return FreeZoning(m, x, used, holders_of(x))


def zone_totals(fz: FreeZoning, counts: np.ndarray, c: int) -> dict[int, cp_model.LinearExpr]:
    """Each zone's total of count column c (integers) as a linear expression."""
    return {z: sum(int(counts[u, c]) * fz.x[u, z] for u in us) for z, us in fz.holders.items()}
