"""Compiled zone state: per-zone sums kept incrementally over the CSR graph.

Everything here runs under numba over flat arrays. Two named tuples carry the arrays:

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
from numba import njit

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


# ---------------------------------------------------------------- zone value


@njit(cache=True)
def count_value(d, s):
    """(size cost, bound break) of a zone whose count sums are s (measures' formulas)."""
    size = 0.0
    brk = 0.0
    for c in range(s.shape[0]):
        v = s[c]
        if d.tmask[c] == 1:
            size += abs(v - d.target[c]) / d.target[c]
        lo = d.lo[c]
        hi = d.hi[c]
        under = 0.0
        over = 0.0
        if np.isfinite(lo) and v < lo:
            under = (lo - v) / max(abs(lo), 1.0)
        if np.isfinite(hi) and v > hi:
            over = (v - hi) / max(abs(hi), 1.0)
        brk += under + over
    return size, brk


@njit(cache=True)
def zone_value(d, s, npos, W, Ssq, Q, H, A, P, nstab):
    """(weighted normalised cost, bound break) of a zone from its sums."""
    size, brk = count_value(d, s)
    if d.kind[0] == 1:
        hom = H
    elif npos > 0:
        hom = Q - Ssq / W
        if hom < 0.0:
            hom = 0.0
    else:
        hom = 0.0
    if d.kind[1] == 1:
        comp = P / 2.0
    elif P > 0.0:
        comp = 1.0 - 4.0 * np.pi * A / (P * P)
    else:
        comp = 1.0
    cost = d.coef[0] * size + d.coef[1] * hom + d.coef[2] * comp + d.coef[3] * nstab
    return cost, brk


@njit(cache=True)
def dist(x, i, j):
    s = 0.0
    for t in range(x.shape[1]):
        v = x[i, t] - x[j, t]
        s += v * v
    return np.sqrt(s)


@njit(cache=True)
def dist_to_zone(d, z, i, zone):
    """Sum of attribute distances from unit i to the members of zone (i itself excluded)."""
    s = 0.0
    if zone < 0:
        return s
    j = z.head[zone]
    while j >= 0:
        if j != i:
            s += dist(d.x, i, j)
        j = z.nxt[j]
    return s


@njit(cache=True)
def value_with(d, z, zone, i, sign, lz, hz):
    """(cost, break) of `zone` after adding (sign=+1) or removing (sign=-1) unit i.

    lz: i's shared boundary with the other members of zone; hz: i's distance sum to them.
    """
    if z.size[zone] + int(sign) == 0:
        return 0.0, 0.0
    tc = z.tc
    for c in range(tc.shape[0]):
        tc[c] = z.csum[zone, c] + sign * d.counts[i, c]
    wi = d.w[i]
    W = z.W[zone] + sign * wi
    npos = z.npos[zone] + (int(sign) if wi > 0.0 else 0)
    Ssq = 0.0
    for t in range(d.x.shape[1]):
        v = z.S[zone, t] + sign * (wi * d.x[i, t])
        Ssq += v * v
    Q = z.Q[zone] + sign * d.q[i]
    H = z.H[zone] + sign * hz
    A = z.A[zone] + sign * d.area[i]
    P = z.P[zone] + sign * (d.perim[i] - 2.0 * lz)
    ns = z.nstab[zone]
    if d.kind[2] == 1 and d.prev[i] != z.anchor[zone]:
        ns += int(sign)
    return zone_value(d, tc, npos, W, Ssq, Q, H, A, P, ns)


@njit(cache=True)
def stored_value(d, z, zone):
    """(cost, break) of zone from its kept sums."""
    if z.size[zone] == 0:
        return 0.0, 0.0
    Ssq = 0.0
    for t in range(z.S.shape[1]):
        Ssq += z.S[zone, t] * z.S[zone, t]
    return zone_value(
        d, z.csum[zone], z.npos[zone], z.W[zone], Ssq, z.Q[zone], z.H[zone], z.A[zone], z.P[zone], z.nstab[zone]
    )


# ---------------------------------------------------------------- lists and boundary


@njit(cache=True)
def _link(z, i, zone):
    h = z.head[zone]
    z.nxt[i] = h
    z.prv[i] = -1
    if h >= 0:
        z.prv[h] = i
    z.head[zone] = i


@njit(cache=True)
def _unlink(z, i, zone):
    p = z.prv[i]
    q = z.nxt[i]
    if p >= 0:
        z.nxt[p] = q
    else:
        z.head[zone] = q
    if q >= 0:
        z.prv[q] = p
    z.nxt[i] = -1
    z.prv[i] = -1


@njit(cache=True)
def _bl_update(z, j):
    if z.nbdiff[j] > 0:
        if z.bpos[j] < 0:
            nb = z.iv[IV_NB]
            z.blist[nb] = j
            z.bpos[j] = nb
            z.iv[IV_NB] = nb + 1
    elif z.bpos[j] >= 0:
        nb = z.iv[IV_NB] - 1
        p = z.bpos[j]
        last = z.blist[nb]
        z.blist[p] = last
        z.bpos[last] = p
        z.bpos[j] = -1
        z.iv[IV_NB] = nb


@njit(cache=True)
def refresh_unit(d, z, i):
    """Recount i's neighbours in other zones and update the boundary list."""
    lab = z.labels[i]
    cnt = 0
    for p in range(d.indptr[i], d.indptr[i + 1]):
        if z.labels[d.indices[p]] != lab:
            cnt += 1
    z.nbdiff[i] = cnt
    _bl_update(z, i)


@njit(cache=True)
def refresh_zone_boundary(d, z, zone):
    """Recount the boundary status of zone's members and of their neighbours."""
    u = z.head[zone]
    while u >= 0:
        refresh_unit(d, z, u)
        for p in range(d.indptr[u], d.indptr[u + 1]):
            v = d.indices[p]
            if z.labels[v] != zone:
                refresh_unit(d, z, v)
        u = z.nxt[u]


# ---------------------------------------------------------------- building


@njit(cache=True)
def pop_free(z):
    nf = z.iv[IV_NFREE] - 1
    z.iv[IV_NFREE] = nf
    zone = z.free[nf]
    z.anchor[zone] = -1
    return zone


@njit(cache=True)
def push_free(z, zone):
    z.free[z.iv[IV_NFREE]] = zone
    z.iv[IV_NFREE] += 1


@njit(cache=True)
def recompute_zone(d, z, zone):
    """Recompute zone's sums from its members (exact), keeping the running totals."""
    z.fv[FV_TOTAL] -= z.cost[zone]
    z.fv[FV_BRK] -= z.brk[zone]
    c = z.csum.shape[1]
    a = z.S.shape[1]
    for t in range(c):
        z.csum[zone, t] = 0.0
    for t in range(a):
        z.S[zone, t] = 0.0
    z.W[zone] = 0.0
    z.npos[zone] = 0
    z.Q[zone] = 0.0
    z.A[zone] = 0.0
    z.H[zone] = 0.0
    z.nstab[zone] = 0
    m = 0
    per = 0.0
    internal = 0.0
    anc = z.anchor[zone]
    u = z.head[zone]
    while u >= 0:
        m += 1
        for t in range(c):
            z.csum[zone, t] += d.counts[u, t]
        wu = d.w[u]
        z.W[zone] += wu
        if wu > 0.0:
            z.npos[zone] += 1
        for t in range(a):
            z.S[zone, t] += wu * d.x[u, t]
        z.Q[zone] += d.q[u]
        z.A[zone] += d.area[u]
        per += d.perim[u]
        for p in range(d.indptr[u], d.indptr[u + 1]):
            v = d.indices[p]
            if v > u and z.labels[v] == zone:
                internal += d.length[p]
        if d.kind[2] == 1 and d.prev[u] != anc:
            z.nstab[zone] += 1
        if d.kind[0] == 1 and d.coef[1] != 0.0:
            v = z.nxt[u]
            while v >= 0:
                z.H[zone] += dist(d.x, u, v)
                v = z.nxt[v]
        u = z.nxt[u]
    z.size[zone] = m
    z.P[zone] = per - 2.0 * internal
    cost, brk = stored_value(d, z, zone)
    z.cost[zone] = cost
    z.brk[zone] = brk
    z.fv[FV_TOTAL] += cost
    z.fv[FV_BRK] += brk


@njit(cache=True)
def build_state(d, z, labels, anchors):
    """Fill z from a labelling (slots 0..k-1, -1 for unassigned units) and zone anchors."""
    n = labels.shape[0]
    K = z.head.shape[0]
    for zone in range(K):
        z.head[zone] = -1
        z.size[zone] = 0
        z.cost[zone] = 0.0
        z.brk[zone] = 0.0
        z.anchor[zone] = -1
    for zone in range(anchors.shape[0]):
        z.anchor[zone] = anchors[zone]
    z.fv[FV_TOTAL] = 0.0
    z.fv[FV_BRK] = 0.0
    # members linked in descending unit order so each list reads ascending
    for i in range(n - 1, -1, -1):
        z.labels[i] = labels[i]
        z.nxt[i] = -1
        z.prv[i] = -1
        if labels[i] >= 0:
            _link(z, i, labels[i])
            z.size[labels[i]] += 1
    nf = 0
    for zone in range(K - 1, -1, -1):
        if z.size[zone] > 0:
            recompute_zone(d, z, zone)
        else:
            z.free[nf] = zone
            nf += 1
    z.iv[IV_NFREE] = nf
    # recompute_zone accumulated the totals zone by zone; restart them from a clean sum
    tot = 0.0
    brk = 0.0
    for zone in range(K):
        tot += z.cost[zone]
        brk += z.brk[zone]
    z.fv[FV_TOTAL] = tot
    z.fv[FV_BRK] = brk
    z.iv[IV_NB] = 0
    for i in range(n):
        z.bpos[i] = -1
    for i in range(n):
        refresh_unit(d, z, i)


# ---------------------------------------------------------------- single-unit moves


@njit(cache=True)
def unit_links(d, z, i, a):
    """Scan i's row: (shared length with zone a, neighbours in a, touched other zones).

    The other zones go to z.ztouch[:nt] with their shared length in z.zacc[zone].
    """
    z.iv[IV_ZSTAMP] += 1
    stamp = z.iv[IV_ZSTAMP]
    la = 0.0
    nda = 0
    nt = 0
    for p in range(d.indptr[i], d.indptr[i + 1]):
        lab = z.labels[d.indices[p]]
        if lab == a:
            la += d.length[p]
            nda += 1
        elif lab >= 0:
            if z.zmark[lab] != stamp:
                z.zmark[lab] = stamp
                z.zacc[lab] = 0.0
                z.ztouch[nt] = lab
                nt += 1
            z.zacc[lab] += d.length[p]
    return la, nda, nt


@njit(cache=True)
def donor_ok(d, z, i):
    """True when taking i out of its zone leaves the zone non-empty and connected.

    Searches the donor zone from one of i's neighbours in it, never entering i, and stops
    as soon as every one of i's neighbours in the zone has been reached.
    """
    a = z.labels[i]
    if a < 0:
        return True
    if z.size[a] <= 1:
        return False
    z.iv[IV_STAMP] += 2
    target = z.iv[IV_STAMP]
    seen = target + 1
    want = 0
    first = -1
    for p in range(d.indptr[i], d.indptr[i + 1]):
        j = d.indices[p]
        if z.labels[j] == a and z.mark[j] != target:
            z.mark[j] = target
            want += 1
            if first < 0:
                first = j
    if want <= 1:
        return True
    z.mark[first] = seen
    found = 1
    head = 0
    tail = 0
    z.queue[tail] = first
    tail += 1
    while head < tail:
        u = z.queue[head]
        head += 1
        for p in range(d.indptr[u], d.indptr[u + 1]):
            v = d.indices[p]
            if v == i or z.labels[v] != a:
                continue
            mv = z.mark[v]
            if mv == seen:
                continue
            if mv == target:
                found += 1
                if found == want:
                    return True
            z.mark[v] = seen
            z.queue[tail] = v
            tail += 1
    return False


@njit(cache=True)
def move_values(d, z, i, a, b, la, lb):
    """(donor cost, donor break, receiver cost, receiver break) after moving i from a to b."""
    ha = 0.0
    hb = 0.0
    if d.kind[0] == 1 and d.coef[1] != 0.0:
        ha = dist_to_zone(d, z, i, a)
        hb = dist_to_zone(d, z, i, b)
    ca = 0.0
    ba = 0.0
    if a >= 0:
        ca, ba = value_with(d, z, a, i, -1.0, la, ha)
    cb, bb = value_with(d, z, b, i, 1.0, lb, hb)
    return ca, ba, cb, bb


@njit(cache=True)
def apply_move(d, z, i, b, la, lb):
    """Move unit i to zone b (i may be unassigned); la, lb: i's shared length with each."""
    a = z.labels[i]
    track_h = d.kind[0] == 1 and d.coef[1] != 0.0
    wi = d.w[i]
    if a >= 0:
        ha = dist_to_zone(d, z, i, a) if track_h else 0.0
        for c in range(z.csum.shape[1]):
            z.csum[a, c] -= d.counts[i, c]
        z.W[a] -= wi
        if wi > 0.0:
            z.npos[a] -= 1
        for t in range(z.S.shape[1]):
            z.S[a, t] -= wi * d.x[i, t]
        z.Q[a] -= d.q[i]
        z.H[a] -= ha
        z.A[a] -= d.area[i]
        z.P[a] -= d.perim[i] - 2.0 * la
        if d.kind[2] == 1 and d.prev[i] != z.anchor[a]:
            z.nstab[a] -= 1
        z.size[a] -= 1
        _unlink(z, i, a)
        z.fv[FV_TOTAL] -= z.cost[a]
        z.fv[FV_BRK] -= z.brk[a]
        if z.size[a] == 0:
            z.cost[a] = 0.0
            z.brk[a] = 0.0
            push_free(z, a)
        else:
            ca, ba = stored_value(d, z, a)
            z.cost[a] = ca
            z.brk[a] = ba
            z.fv[FV_TOTAL] += ca
            z.fv[FV_BRK] += ba
    hb = dist_to_zone(d, z, i, b) if track_h else 0.0
    for c in range(z.csum.shape[1]):
        z.csum[b, c] += d.counts[i, c]
    z.W[b] += wi
    if wi > 0.0:
        z.npos[b] += 1
    for t in range(z.S.shape[1]):
        z.S[b, t] += wi * d.x[i, t]
    z.Q[b] += d.q[i]
    z.H[b] += hb
    z.A[b] += d.area[i]
    z.P[b] += d.perim[i] - 2.0 * lb
    if d.kind[2] == 1 and d.prev[i] != z.anchor[b]:
        z.nstab[b] += 1
    z.size[b] += 1
    _link(z, i, b)
    z.labels[i] = b
    z.fv[FV_TOTAL] -= z.cost[b]
    z.fv[FV_BRK] -= z.brk[b]
    cb, bb = stored_value(d, z, b)
    z.cost[b] = cb
    z.brk[b] = bb
    z.fv[FV_TOTAL] += cb
    z.fv[FV_BRK] += bb
    # boundary bookkeeping: only i and its neighbours can change status
    cnt = 0
    for p in range(d.indptr[i], d.indptr[i + 1]):
        j = d.indices[p]
        lj = z.labels[j]
        if lj != b:
            cnt += 1
        before = 1 if lj != a else 0
        after = 1 if lj != b else 0
        if before != after:
            z.nbdiff[j] += after - before
            _bl_update(z, j)
    z.nbdiff[i] = cnt
    _bl_update(z, i)


@njit(cache=True)
def move_unit(d, z, i, b):
    """Move unit i to zone b, computing the shared lengths."""
    a = z.labels[i]
    la, nda, nt = unit_links(d, z, i, a)
    lb = 0.0
    for t in range(nt):
        if z.ztouch[t] == b:
            lb = z.zacc[b]
    apply_move(d, z, i, b, la, lb)


@njit(cache=True)
def move_delta(d, z, i, b):
    """(break change, objective change) of moving unit i to zone b."""
    a = z.labels[i]
    la, nda, nt = unit_links(d, z, i, a)
    lb = 0.0
    for t in range(nt):
        if z.ztouch[t] == b:
            lb = z.zacc[b]
    ca, ba, cb, bb = move_values(d, z, i, a, b, la, lb)
    old_c = z.cost[b]
    old_b = z.brk[b]
    if a >= 0:
        old_c += z.cost[a]
        old_b += z.brk[a]
    return (ba + bb) - old_b, (ca + cb) - old_c


@njit(cache=True)
def better(db, do):
    """A change (break change db, objective change do) that is a strict improvement."""
    return db < -EPS_BRK or (db <= EPS_BRK and do < -EPS_OBJ)


@njit(cache=True)
def key_less(b1, t1, b2, t2):
    """(b1, t1) strictly before (b2, t2), breaks first."""
    return b1 < b2 - EPS_BRK or (b1 <= b2 + EPS_BRK and t1 < t2 - EPS_OBJ)


@njit(cache=True)
def exact_totals(z):
    """(total, breaks) summed afresh over zones, without the drift of running sums."""
    tot = 0.0
    brk = 0.0
    for zone in range(z.cost.shape[0]):
        if z.size[zone] > 0:
            tot += z.cost[zone]
            brk += z.brk[zone]
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
