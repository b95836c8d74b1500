"""Zone values: the objective and bound break of a zone from its kept sums.

`zone_value` is the one compiled copy of `zonedesign.measures`' formulas (tests hold
them equal); the others price a zone with one unit added or removed, or recompute a
zone's sums from its members.
"""

from __future__ import annotations

import numpy as np

from zonedesign.search.kernels import (
    FV_BRK,
    FV_TOTAL,
    PAR_BOUNDS,
    PAR_KIND,
    boundary_status,
    dist,
    inner,
)

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
