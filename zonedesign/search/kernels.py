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


# ---------------------------------------------------------------- zone value


@inner
def zone_value(par, s, npos, W, Ssq, Q, H, A, P, nstab):
    """(weighted normalised cost, bound break) of a zone from its sums (measures' formulas).

    par: Data.par; s: count sums (c,); npos: members with positive weight; W, Ssq, Q:
    weight sum, squared norm of the weighted attribute sum, sum of w ||x||^2; H: pairwise
    distance sum; A, P: area and perimeter; nstab: members whose previous zone differs
    from the anchor.
    """
    nc = s.shape[0]
    size = 0.0
    brk = 0.0
    for c in range(nc):
        v = s[c]
        lo = par[PAR_BOUNDS + c]
        hi = par[PAR_BOUNDS + nc + c]
        target = par[PAR_BOUNDS + 2 * nc + c]
        if par[PAR_BOUNDS + 3 * nc + c] == 1.0:
            size += abs(v - target) / target
        under = 0.0
        over = 0.0
        if np.isfinite(lo) and v < lo:
            under = (lo - v) / max(abs(lo), 1.0)
        if np.isfinite(hi) and v > hi:
            over = (v - hi) / max(abs(hi), 1.0)
        brk += under + over
    if par[PAR_KIND] == 1.0:
        hom = H
    elif npos > 0:
        hom = Q - Ssq / W
        if hom < 0.0:
            hom = 0.0
    else:
        hom = 0.0
    if par[PAR_KIND + 1] == 1.0:
        comp = P / 2.0
    elif P > 0.0:
        comp = 1.0 - 4.0 * np.pi * A / (P * P)
    else:
        comp = 1.0
    cost = par[0] * size + par[1] * hom + par[2] * comp + par[3] * nstab
    return cost, brk


@inner
def dist_to_zone(st, i, zone):
    """Sum of attribute distances from unit i to the members of zone (i itself excluded)."""
    s = 0.0
    if zone < 0:
        return s
    x = st.x
    nxt = st.nxt
    j = st.head[zone]
    while j >= 0:
        if j != i:
            s += dist(x, i, j)
        j = nxt[j]
    return s


@inner
def value_with(st, zone, i, sign, lz, hz):
    """(cost, break) of `zone` after adding (sign=+1) or removing (sign=-1) unit i.

    lz: i's shared boundary with the other members of zone; hz: i's distance sum to them.
    """
    isign = 1 if sign > 0.0 else -1
    if st.size[zone] + isign == 0:
        return 0.0, 0.0
    tc = st.tc
    csum = st.csum
    counts = st.counts
    for c in range(tc.shape[0]):
        tc[c] = csum[zone, c] + sign * counts[i, c]
    wi = st.w[i]
    W = st.W[zone] + sign * wi
    npos = st.npos[zone] + (isign if wi > 0.0 else 0)
    S = st.S
    x = st.x
    Ssq = 0.0
    for t in range(x.shape[1]):
        v = S[zone, t] + sign * (wi * x[i, t])
        Ssq += v * v
    Q = st.Q[zone] + sign * st.q[i]
    H = st.H[zone] + sign * hz
    A = st.A[zone] + sign * st.area[i]
    P = st.P[zone] + sign * (st.perim[i] - 2.0 * lz)
    ns = st.nstab[zone]
    if st.kind[2] == 1 and st.prev[i] != st.anchor[zone]:
        ns += isign
    return zone_value(st.par, tc, npos, W, Ssq, Q, H, A, P, ns)


@inner
def stored_value(st, zone):
    """(cost, break) of zone from its kept sums."""
    if st.size[zone] == 0:
        return 0.0, 0.0
    S = st.S
    Ssq = 0.0
    for t in range(S.shape[1]):
        Ssq += S[zone, t] * S[zone, t]
    return zone_value(
        st.par, st.csum[zone], st.npos[zone], st.W[zone], Ssq, st.Q[zone], st.H[zone], st.A[zone], st.P[zone], st.nstab[zone]
    )


# ---------------------------------------------------------------- boundary


@inner
def recount(st, j):
    """Recount j's neighbours in other zones and update the boundary list."""
    indptr = st.indptr
    indices = st.indices
    labels = st.labels
    lab = labels[j]
    cnt = 0
    for e in range(indptr[j], indptr[j + 1]):
        if labels[indices[e]] != lab:
            cnt += 1
    st.nbdiff[j] = cnt
    boundary_status(st, j)


@inner
def refresh_zone_boundary(st, zone):
    """Recount the boundary status of zone's members and of their neighbours."""
    indptr = st.indptr
    indices = st.indices
    labels = st.labels
    nxt = st.nxt
    u = st.head[zone]
    while u >= 0:
        recount(st, u)
        for p in range(indptr[u], indptr[u + 1]):
            v = indices[p]
            if labels[v] != zone:
                recount(st, v)
        u = nxt[u]


# ---------------------------------------------------------------- building


@inner
def recompute_zone(st, zone):
    """Recompute zone's sums from its members (exact), keeping the running totals."""
    fv = st.fv
    fv[FV_TOTAL] -= st.cost[zone]
    fv[FV_BRK] -= st.brk[zone]
    indptr = st.indptr
    indices = st.indices
    length = st.length
    labels = st.labels
    nxt = st.nxt
    counts = st.counts
    x = st.x
    w = st.w
    q = st.q
    area = st.area
    perim = st.perim
    prev = st.prev
    csum = st.csum
    S = st.S
    c = csum.shape[1]
    a = S.shape[1]
    for t in range(c):
        csum[zone, t] = 0.0
    for t in range(a):
        S[zone, t] = 0.0
    W = 0.0
    npos = 0
    Q = 0.0
    A = 0.0
    H = 0.0
    nstab = 0
    m = 0
    per = 0.0
    internal = 0.0
    anc = st.anchor[zone]
    stab = st.kind[2] == 1
    pairs = st.kind[0] == 1 and st.coef[1] != 0.0
    u = st.head[zone]
    while u >= 0:
        m += 1
        for t in range(c):
            csum[zone, t] += counts[u, t]
        wu = w[u]
        W += wu
        if wu > 0.0:
            npos += 1
        for t in range(a):
            S[zone, t] += wu * x[u, t]
        Q += q[u]
        A += area[u]
        per += perim[u]
        for p in range(indptr[u], indptr[u + 1]):
            v = indices[p]
            if v > u and labels[v] == zone:
                internal += length[p]
        if stab and prev[u] != anc:
            nstab += 1
        if pairs:
            v = nxt[u]
            while v >= 0:
                H += dist(x, u, v)
                v = nxt[v]
        u = nxt[u]
    st.size[zone] = m
    st.W[zone] = W
    st.npos[zone] = npos
    st.Q[zone] = Q
    st.A[zone] = A
    st.H[zone] = H
    st.nstab[zone] = nstab
    st.P[zone] = per - 2.0 * internal
    cost, brk = stored_value(st, zone)
    st.cost[zone] = cost
    st.brk[zone] = brk
    fv[FV_TOTAL] += cost
    fv[FV_BRK] += brk


@njit(cache=True)
def build_state(st, labels, anchors):
    """Fill st from a labelling (slots 0..k-1, -1 for unassigned units) and zone anchors."""
    n = labels.shape[0]
    head = st.head
    size = st.size
    K = head.shape[0]
    for zone in range(K):
        head[zone] = -1
        size[zone] = 0
        st.cost[zone] = 0.0
        st.brk[zone] = 0.0
        st.anchor[zone] = -1
    for zone in range(anchors.shape[0]):
        st.anchor[zone] = anchors[zone]
    # members linked in descending unit order so each list reads ascending
    lab = st.labels
    for i in range(n - 1, -1, -1):
        lab[i] = labels[i]
        st.nxt[i] = -1
        st.prv[i] = -1
        if labels[i] >= 0:
            link(st, i, labels[i])
            size[labels[i]] += 1
    nf = 0
    for zone in range(K - 1, -1, -1):
        if size[zone] > 0:
            recompute_zone(st, zone)
        else:
            st.free[nf] = zone
            nf += 1
    st.iv[IV_NFREE] = nf
    # totals summed afresh, not accumulated zone by zone
    tot = 0.0
    brk = 0.0
    for zone in range(K):
        tot += st.cost[zone]
        brk += st.brk[zone]
    st.fv[FV_TOTAL] = tot
    st.fv[FV_BRK] = brk
    st.iv[IV_NB] = 0
    for i in range(n):
        st.bpos[i] = -1
    for i in range(n):
        recount(st, i)


@njit(cache=True)
def relabel(st, units, new_labels, anchors, zones):
    """Give each unit u of `units` the label new_labels[u] (-1: unassigned).

    Every zone that gains or loses a unit, and every zone listed in `zones`, takes its
    anchor from anchors (K,) and is recomputed from its members; the free stack and the
    boundary are brought up to date. Cost: the sizes of the zones touched, not the whole
    problem.
    """
    labels = st.labels
    zmark = st.zmark
    ztouch = st.ztouch
    st.iv[IV_ZSTAMP] += 1
    stamp = st.iv[IV_ZSTAMP]
    nt = 0
    for k in range(zones.shape[0]):
        z = zones[k]
        if z >= 0 and zmark[z] != stamp:
            zmark[z] = stamp
            ztouch[nt] = z
            nt += 1
    for k in range(units.shape[0]):
        u = units[k]
        old = labels[u]
        new = new_labels[u]
        if old == new:
            continue
        for z in (old, new):
            if z >= 0 and zmark[z] != stamp:
                zmark[z] = stamp
                ztouch[nt] = z
                nt += 1
        if old >= 0:
            unlink(st, u, old)
        if new >= 0:
            link(st, u, new)
        labels[u] = new
    for k in range(nt):
        z = ztouch[k]
        st.anchor[z] = anchors[z]
        recompute_zone(st, z)
    nf = 0
    size = st.size
    for z in range(size.shape[0] - 1, -1, -1):
        if size[z] == 0:
            st.free[nf] = z
            nf += 1
    st.iv[IV_NFREE] = nf
    indptr = st.indptr
    indices = st.indices
    for k in range(units.shape[0]):
        u = units[k]
        recount(st, u)
        for p in range(indptr[u], indptr[u + 1]):
            recount(st, indices[p])


# ---------------------------------------------------------------- single-unit moves


@njit(cache=True)
def unit_links(st, i, a):
    """Scan i's row: (shared length with zone a, neighbours in a, touched other zones).

    The other zones go to st.ztouch[:nt] with their shared length in st.zacc[zone].
    """
    indptr = st.indptr
    indices = st.indices
    length = st.length
    labels = st.labels
    zmark = st.zmark
    zacc = st.zacc
    ztouch = st.ztouch
    st.iv[IV_ZSTAMP] += 1
    stamp = st.iv[IV_ZSTAMP]
    la = 0.0
    nda = 0
    nt = 0
    for p in range(indptr[i], indptr[i + 1]):
        lab = labels[indices[p]]
        if lab == a:
            la += length[p]
            nda += 1
        elif lab >= 0:
            if zmark[lab] != stamp:
                zmark[lab] = stamp
                zacc[lab] = 0.0
                ztouch[nt] = lab
                nt += 1
            zacc[lab] += length[p]
    return la, nda, nt


@njit(cache=True)
def donor_ok(st, i):
    """True when taking i out of its zone leaves the zone non-empty and connected.

    Searches the donor zone from one of i's neighbours in it, never entering i, and stops
    as soon as every one of i's neighbours in the zone has been reached.
    """
    labels = st.labels
    a = labels[i]
    if a < 0:
        return True
    if st.size[a] <= 1:
        return False
    indptr = st.indptr
    indices = st.indices
    mark = st.mark
    queue = st.queue
    st.iv[IV_STAMP] += 2
    target = st.iv[IV_STAMP]
    seen = target + 1
    want = 0
    first = -1
    for p in range(indptr[i], indptr[i + 1]):
        j = indices[p]
        if labels[j] == a and mark[j] != target:
            mark[j] = target
            want += 1
            if first < 0:
                first = j
    if want <= 1:
        return True
    mark[first] = seen
    found = 1
    head = 0
    tail = 0
    queue[tail] = first
    tail += 1
    while head < tail:
        u = queue[head]
        head += 1
        for p in range(indptr[u], indptr[u + 1]):
            v = indices[p]
            if v == i or labels[v] != a:
                continue
            mv = mark[v]
            if mv == seen:
                continue
            if mv == target:
                found += 1
                if found == want:
                    return True
            mark[v] = seen
            queue[tail] = v
            tail += 1
    return False


@inner
def move_values(st, i, a, b, la, lb):
    """(donor cost, donor break, receiver cost, receiver break) after moving i from a to b."""
    ha = 0.0
    hb = 0.0
    if st.kind[0] == 1 and st.coef[1] != 0.0:
        ha = dist_to_zone(st, i, a)
        hb = dist_to_zone(st, i, b)
    ca = 0.0
    ba = 0.0
    if a >= 0:
        ca, ba = value_with(st, a, i, -1.0, la, ha)
    cb, bb = value_with(st, b, i, 1.0, lb, hb)
    return ca, ba, cb, bb


@inner
def apply_move(st, i, b, la, lb):
    """Move unit i to zone b (i may be unassigned); la, lb: i's shared length with each."""
    labels = st.labels
    counts = st.counts
    x = st.x
    csum = st.csum
    S = st.S
    fv = st.fv
    a = labels[i]
    track_h = st.kind[0] == 1 and st.coef[1] != 0.0
    stab = st.kind[2] == 1
    wi = st.w[i]
    if a >= 0:
        ha = dist_to_zone(st, i, a) if track_h else 0.0
        for c in range(csum.shape[1]):
            csum[a, c] -= counts[i, c]
        st.W[a] -= wi
        if wi > 0.0:
            st.npos[a] -= 1
        for t in range(S.shape[1]):
            S[a, t] -= wi * x[i, t]
        st.Q[a] -= st.q[i]
        st.H[a] -= ha
        st.A[a] -= st.area[i]
        st.P[a] -= st.perim[i] - 2.0 * la
        if stab and st.prev[i] != st.anchor[a]:
            st.nstab[a] -= 1
        st.size[a] -= 1
        unlink(st, i, a)
        fv[FV_TOTAL] -= st.cost[a]
        fv[FV_BRK] -= st.brk[a]
        if st.size[a] == 0:
            st.cost[a] = 0.0
            st.brk[a] = 0.0
            push_free(st, a)
        else:
            ca, ba = stored_value(st, a)
            st.cost[a] = ca
            st.brk[a] = ba
            fv[FV_TOTAL] += ca
            fv[FV_BRK] += ba
    hb = dist_to_zone(st, i, b) if track_h else 0.0
    for c in range(csum.shape[1]):
        csum[b, c] += counts[i, c]
    st.W[b] += wi
    if wi > 0.0:
        st.npos[b] += 1
    for t in range(S.shape[1]):
        S[b, t] += wi * x[i, t]
    st.Q[b] += st.q[i]
    st.H[b] += hb
    st.A[b] += st.area[i]
    st.P[b] += st.perim[i] - 2.0 * lb
    if stab and st.prev[i] != st.anchor[b]:
        st.nstab[b] += 1
    st.size[b] += 1
    link(st, i, b)
    labels[i] = b
    fv[FV_TOTAL] -= st.cost[b]
    fv[FV_BRK] -= st.brk[b]
    cb, bb = stored_value(st, b)
    st.cost[b] = cb
    st.brk[b] = bb
    fv[FV_TOTAL] += cb
    fv[FV_BRK] += bb
    # boundary bookkeeping: only i and its neighbours can change status
    indptr = st.indptr
    indices = st.indices
    nbdiff = st.nbdiff
    cnt = 0
    for p in range(indptr[i], indptr[i + 1]):
        j = indices[p]
        lj = labels[j]
        if lj != b:
            cnt += 1
        before = 1 if lj != a else 0
        after = 1 if lj != b else 0
        if before != after:
            nbdiff[j] += after - before
            boundary_status(st, j)
    nbdiff[i] = cnt
    boundary_status(st, i)


@njit(cache=True)
def move_delta(st, i, b):
    """(break change, objective change) of moving unit i to zone b."""
    a = st.labels[i]
    la, nda, nt = unit_links(st, i, a)
    lb = 0.0
    for t in range(nt):
        if st.ztouch[t] == b:
            lb = st.zacc[b]
    ca, ba, cb, bb = move_values(st, i, a, b, la, lb)
    old_c = st.cost[b]
    old_b = st.brk[b]
    if a >= 0:
        old_c += st.cost[a]
        old_b += st.brk[a]
    return (ba + bb) - old_b, (ca + cb) - old_c


@njit(cache=True)
def move_unit(st, i, b):
    """Move unit i (assigned or not) to zone b."""
    a = st.labels[i]
    la, nda, nt = unit_links(st, i, a)
    lb = 0.0
    for t in range(nt):
        if st.ztouch[t] == b:
            lb = st.zacc[b]
    apply_move(st, i, b, la, lb)


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
