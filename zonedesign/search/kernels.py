"""Compiled zone state: per-zone sums kept incrementally over the CSR graph.

Everything here runs under numba over flat arrays. Two named tuples hold the arrays on the
Python side, and the kernels see all of them through one structref (`State`), passed by
reference so that calls between kernels stay cheap and compile quickly:

- `Data`: the problem, fixed during a search (graph, unit counts and attributes, bounds,
  and the weight of each objective term already divided by its normaliser).
- `Zones`: the labelling and what is kept per zone (count sums, weighted attribute sums,
  area, perimeter, pairwise distance sum, stability count, cost, bound break), the member
  lists, the boundary-unit list and scratch space. Zone slots are preallocated for one
  zone per unit; a slot with no member is free and sits on the `free` stack.

The cost of a zone is the weighted, normalised sum of the terms of `zonedesign.measures`
computed from these sums, so the total over zones equals `measures.score(...).total` and
the break sum equals its `breaks` (tests hold them equal after long move sequences).
"""

from __future__ import annotations

from collections import namedtuple

import numpy as np
from numba import njit, types
from numba.experimental import structref

# kernels only ever called from other kernels: no Python entry point to build
inner = njit(cache=True, no_cpython_wrapper=True, no_cfunc_wrapper=True)

# tolerances: a change smaller than these is no change (float noise of incremental sums)
EPS_BRK = 1e-12
EPS_OBJ = 1e-12

# slots of Zones.iv
IV_NFREE = 0  # entries on the free-zone stack
IV_NB = 1  # length of the boundary list
IV_STAMP = 2  # visit stamp for searches over units
IV_ZSTAMP = 3  # visit stamp for zone marks
# slots of Zones.fv
FV_TOTAL = 0
FV_BRK = 1
# Data.par: coef (4), kind (3), then lo, hi, target, tmask (c each) from PAR_BOUNDS on;
# one array instead of six keeps the most frequent call cheap
PAR_KIND = 4
PAR_BOUNDS = 7

Data = namedtuple(
    "Data",
    [
        "indptr",  # (n+1,) int64
        "indices",  # (2m,) int64
        "length",  # (2m,) float64 shared boundary
        "counts",  # (n, c) float64
        "lo",  # (c,) float64, -inf where unbounded
        "hi",  # (c,) float64, +inf where unbounded
        "target",  # (c,) float64 (1.0 where no target; see tmask)
        "tmask",  # (c,) int64, 1 where the count has a target
        "x",  # (n, a) float64 standardised attributes
        "w",  # (n,) float64 homogeneity weight
        "q",  # (n,) float64 w_i * ||x_i||^2
        "area",  # (n,) float64
        "perim",  # (n,) float64
        "prev",  # (n,) int64 previous zone (-1 none)
        "coef",  # (4,) float64 term weight / normaliser: size, homogeneity, compactness, stability
        "kind",  # (3,) int64: pairwise homogeneity?, cut compactness?, stability kept?
        "par",  # coef, kind and bounds packed for zone_value (see PAR_*)
    ],
)

Zones = namedtuple(
    "Zones",
    [
        "labels",  # (n,) int64 zone slot per unit, -1 unassigned
        "nxt",  # (n,) int64 next member in the unit's zone list
        "prv",  # (n,) int64 previous member
        "head",  # (K,) int64 first member of each zone, -1 when empty
        "size",  # (K,) int64 members
        "csum",  # (K, c) count sums
        "W",  # (K,) weight sum
        "npos",  # (K,) int64 members with positive weight
        "S",  # (K, a) weighted attribute sums
        "Q",  # (K,) sum of w ||x||^2
        "H",  # (K,) pairwise distance sum
        "A",  # (K,) area
        "P",  # (K,) perimeter
        "anchor",  # (K,) int64 previous zone id the zone stands for (-1: a new zone)
        "nstab",  # (K,) int64 members whose previous zone differs from the anchor
        "cost",  # (K,) weighted normalised objective of the zone
        "brk",  # (K,) bound break amount of the zone
        "free",  # (K,) int64 stack of free slots
        "nbdiff",  # (n,) int64 neighbours in another zone
        "blist",  # (n,) int64 boundary units (nbdiff > 0)
        "bpos",  # (n,) int64 position in blist, -1 when absent
        "iv",  # (8,) int64 counters (IV_*)
        "fv",  # (4,) float64 running total and breaks (FV_*)
        "mark",  # (n,) int64 unit visit stamps
        "queue",  # (n,) int64 search queue
        "zmark",  # (K,) int64 zone visit stamps
        "zacc",  # (K,) float64 shared length per touched zone
        "ztouch",  # (K,) int64 touched zones
        "tc",  # (c,) float64 scratch count vector
    ],
)


@structref.register
class StateType(types.StructRef):
    """numba type of the compiled state: every array of Data and Zones, by reference."""

    def preprocess_fields(self, fields):
        return tuple((name, types.unliteral(typ)) for name, typ in fields)


class State(structref.StructRefProxy):
    """Python handle of the compiled state (the arrays stay reachable through Data/Zones)."""


structref.define_boxing(StateType, State)

_I1 = types.Array(types.int64, 1, "C")
_F1 = types.Array(types.float64, 1, "C")
_F2 = types.Array(types.float64, 2, "C")
_FIELD_TYPES = {
    "counts": _F2, "x": _F2, "csum": _F2, "S": _F2,
    "length": _F1, "lo": _F1, "hi": _F1, "target": _F1, "w": _F1, "q": _F1, "area": _F1,
    "perim": _F1, "coef": _F1, "par": _F1, "W": _F1, "Q": _F1, "H": _F1, "A": _F1, "P": _F1, "cost": _F1,
    "brk": _F1, "fv": _F1, "zacc": _F1, "tc": _F1,
}  # fmt: skip
STATE_TYPE = StateType([(f, _FIELD_TYPES.get(f, _I1)) for f in Data._fields + Zones._fields])


def make_data(
    indptr, indices, length, counts, lo, hi, target, x, w, area, perim, prev, coef, kind
) -> Data:
    """Data with every array in the dtype the kernels are compiled for."""
    f = np.ascontiguousarray
    x = f(x, dtype=np.float64)
    w = f(w, dtype=np.float64)
    target = np.asarray(target, dtype=np.float64)
    tmask = np.isfinite(target).astype(np.int64)
    return Data(
        indptr=f(indptr, dtype=np.int64),
        indices=f(indices, dtype=np.int64),
        length=f(length, dtype=np.float64),
        counts=f(counts, dtype=np.float64),
        lo=f(lo, dtype=np.float64),
        hi=f(hi, dtype=np.float64),
        target=f(np.where(tmask == 1, target, 1.0), dtype=np.float64),
        tmask=tmask,
        x=x,
        w=w,
        # the same per-unit product measures.zone_costs sums
        q=f((w[:, None] * x**2).sum(axis=1), dtype=np.float64),
        area=f(area, dtype=np.float64),
        perim=f(perim, dtype=np.float64),
        prev=f(prev, dtype=np.int64),
        coef=f(coef, dtype=np.float64),
        kind=f(kind, dtype=np.int64),
        par=f(np.concatenate([coef, kind, lo, hi, np.where(tmask == 1, target, 1.0), tmask]), dtype=np.float64),
    )


def make_zones(n: int, c: int, a: int) -> Zones:
    """Empty zone state with one slot per unit."""
    k = max(n, 1)
    return Zones(
        labels=np.full(n, -1, dtype=np.int64),
        nxt=np.full(n, -1, dtype=np.int64),
        prv=np.full(n, -1, dtype=np.int64),
        head=np.full(k, -1, dtype=np.int64),
        size=np.zeros(k, dtype=np.int64),
        csum=np.zeros((k, c)),
        W=np.zeros(k),
        npos=np.zeros(k, dtype=np.int64),
        S=np.zeros((k, a)),
        Q=np.zeros(k),
        H=np.zeros(k),
        A=np.zeros(k),
        P=np.zeros(k),
        anchor=np.full(k, -1, dtype=np.int64),
        nstab=np.zeros(k, dtype=np.int64),
        cost=np.zeros(k),
        brk=np.zeros(k),
        free=np.zeros(k, dtype=np.int64),
        nbdiff=np.zeros(n, dtype=np.int64),
        blist=np.zeros(n, dtype=np.int64),
        bpos=np.full(n, -1, dtype=np.int64),
        iv=np.zeros(8, dtype=np.int64),
        fv=np.zeros(4),
        mark=np.zeros(n, dtype=np.int64),
        queue=np.zeros(n, dtype=np.int64),
        zmark=np.zeros(k, dtype=np.int64),
        zacc=np.zeros(k),
        ztouch=np.zeros(k, dtype=np.int64),
        tc=np.zeros(c),
    )


@njit(cache=True)
def _new_state(d, z):
    st = structref.new(STATE_TYPE)
    st.indptr = d.indptr
    st.indices = d.indices
    st.length = d.length
    st.counts = d.counts
    st.lo = d.lo
    st.hi = d.hi
    st.target = d.target
    st.tmask = d.tmask
    st.x = d.x
    st.w = d.w
    st.q = d.q
    st.area = d.area
    st.perim = d.perim
    st.prev = d.prev
    st.coef = d.coef
    st.kind = d.kind
    st.par = d.par
    st.labels = z.labels
    st.nxt = z.nxt
    st.prv = z.prv
    st.head = z.head
    st.size = z.size
    st.csum = z.csum
    st.W = z.W
    st.npos = z.npos
    st.S = z.S
    st.Q = z.Q
    st.H = z.H
    st.A = z.A
    st.P = z.P
    st.anchor = z.anchor
    st.nstab = z.nstab
    st.cost = z.cost
    st.brk = z.brk
    st.free = z.free
    st.nbdiff = z.nbdiff
    st.blist = z.blist
    st.bpos = z.bpos
    st.iv = z.iv
    st.fv = z.fv
    st.mark = z.mark
    st.queue = z.queue
    st.zmark = z.zmark
    st.zacc = z.zacc
    st.ztouch = z.ztouch
    st.tc = z.tc
    return st


def new_state(d: Data, z: Zones) -> State:
    """The compiled state over the arrays of d and z (shared, not copied)."""
    return _new_state(d, z)


# ---------------------------------------------------------------- small helpers


@inner
def better(db, do):
    """A change (break change db, objective change do) that is a strict improvement."""
    return db < -EPS_BRK or (db <= EPS_BRK and do < -EPS_OBJ)


@inner
def key_less(b1, t1, b2, t2):
    """(b1, t1) strictly before (b2, t2), breaks first."""
    return b1 < b2 - EPS_BRK or (b1 <= b2 + EPS_BRK and t1 < t2 - EPS_OBJ)


@inner
def dist(x, i, j):
    s = 0.0
    for t in range(x.shape[1]):
        v = x[i, t] - x[j, t]
        s += v * v
    return np.sqrt(s)


@inner
def link(st, i, zone):
    head = st.head
    h = head[zone]
    st.nxt[i] = h
    st.prv[i] = -1
    if h >= 0:
        st.prv[h] = i
    head[zone] = i


@inner
def unlink(st, i, zone):
    nxt = st.nxt
    prv = st.prv
    p = prv[i]
    q = nxt[i]
    if p >= 0:
        nxt[p] = q
    else:
        st.head[zone] = q
    if q >= 0:
        prv[q] = p
    nxt[i] = -1
    prv[i] = -1


@inner
def boundary_status(st, j):
    """Put j on the boundary list when it has a neighbour in another zone, else take it off."""
    bpos = st.bpos
    blist = st.blist
    iv = st.iv
    if st.nbdiff[j] > 0:
        if bpos[j] < 0:
            nb = iv[IV_NB]
            blist[nb] = j
            bpos[j] = nb
            iv[IV_NB] = nb + 1
    elif bpos[j] >= 0:
        nb = iv[IV_NB] - 1
        p = bpos[j]
        last = blist[nb]
        blist[p] = last
        bpos[last] = p
        bpos[j] = -1
        iv[IV_NB] = nb


@inner
def pop_free(st):
    nf = st.iv[IV_NFREE] - 1
    st.iv[IV_NFREE] = nf
    zone = st.free[nf]
    st.anchor[zone] = -1
    return zone


@inner
def push_free(st, zone):
    st.free[st.iv[IV_NFREE]] = zone
    st.iv[IV_NFREE] += 1


@njit(cache=True)
def exact_totals(st):
    """(total, breaks) summed afresh over zones, without the drift of running sums."""
    tot = 0.0
    brk = 0.0
    size = st.size
    for zone in range(size.shape[0]):
        if size[zone] > 0:
            tot += st.cost[zone]
            brk += st.brk[zone]
    return tot, brk


@njit(cache=True)
def pair_total(x):
    """Sum of attribute distances over all unordered pairs of units."""
    n = x.shape[0]
    s = 0.0
    for i in range(n):
        for j in range(i + 1, n):
            s += dist(x, i, j)
    return s


@njit(cache=True)
def seed_rng(seed):
    """Seed the kernels' random generator (numba keeps its own, apart from numpy's)."""
    np.random.seed(seed)


def is_less(b1: float, t1: float, b2: float, t2: float) -> bool:
    """key_less for Python callers."""
    return b1 < b2 - EPS_BRK or (b1 <= b2 + EPS_BRK and t1 < t2 - EPS_OBJ)


def is_better(db: float, do: float) -> bool:
    """better for Python callers."""
    return db < -EPS_BRK or (db <= EPS_BRK and do < -EPS_OBJ)
