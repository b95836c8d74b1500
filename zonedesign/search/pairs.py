"""Pair repartition: the best split of two neighbouring zones' units into two zones.

On fences of many small zones (a few units each) single-unit moves rarely pay on their
own: a zone's shape and size change in steps of a whole unit, so the improving changes
are exchanges of several units between two zones at once. This pass takes two
neighbouring zones whose units number at most `max_units`, enumerates every split of
their union into two connected, non-empty parts (as bit masks over at most
`MAX_PAIR_UNITS` units) and keeps the best one by (breaks, objective) when it is strictly
better than the zones as they are. It is the exact version, for two zones, of the
recombination step of districting chains (DeFord, Duchin & Solomon 2021, "Recombination:
a family of Markov chains for redistricting"), and a superset of every single-unit move
and every exchange between the two zones.

Zone slots, and so anchors, stay as they are: the part holding the first unit of the
first zone keeps that zone's slot unless the other assignment prices lower (it only can
when stability counts).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from zonedesign.search.kernels import (
    EPS_BRK,
    EPS_OBJ,
    IV_ZSTAMP,
    dist,
    key_less,
    link,
    unlink,
)
from zonedesign.search.valuation import recompute_zone, recount, zone_value

MAX_PAIR_UNITS = 14  # 2^13 splits of the largest union; larger pairs are left alone


@njit(cache=True)
def _connected(mask, adj, m):
    """True when the units of `mask` (bits over the m local units) are connected."""
    if mask == 0:
        return False
    low = mask & (-mask)
    seen = low
    frontier = low
    while frontier != 0:
        grow = 0
        for j in range(m):
            if (frontier >> j) & 1:
                grow |= adj[j]
        grow &= mask & ~seen
        seen |= grow
        frontier = grow
    return seen == mask


@njit(cache=True)
def _part_value(st, mask, units, m, eu, ev, el, ne, anchor, tc, sv):
    """(cost, break) of a zone made of the local units in `mask`, with `anchor`."""
    counts = st.counts
    x = st.x
    c = counts.shape[1]
    a = x.shape[1]
    for t in range(c):
        tc[t] = 0.0
    for t in range(a):
        sv[t] = 0.0
    W = 0.0
    # int64 from the start: a plain 0 lets numba type the callee for the literal 0 first,
    # a second compile of it (the same below)
    npos = np.int64(0)
    Q = 0.0
    A = 0.0
    per = 0.0
    H = 0.0
    nstab = np.int64(0)
    stab = st.kind[2] == 1
    pairs = st.kind[0] == 1 and st.coef[1] != 0.0
    for j in range(m):
        if (mask >> j) & 1:
            u = units[j]
            for t in range(c):
                tc[t] += counts[u, t]
            wu = st.w[u]
            W += wu
            if wu > 0.0:
                npos += 1
            for t in range(a):
                sv[t] += wu * x[u, t]
            Q += st.q[u]
            A += st.area[u]
            per += st.perim[u]
            if stab and st.prev[u] != anchor:
                nstab += 1
            if pairs:
                for k in range(j + 1, m):
                    if (mask >> k) & 1:
                        H += dist(x, u, units[k])
    for e in range(ne):
        if (mask >> eu[e]) & 1 and (mask >> ev[e]) & 1:
            per -= 2.0 * el[e]
    Ssq = 0.0
    for t in range(a):
        Ssq += sv[t] * sv[t]
    return zone_value(st.par, tc, npos, W, Ssq, Q, H, A, per, nstab)


@njit(cache=True)
def best_pair_split(st, za, zb, loc, units, adj, eu, ev, el, tc, sv):
    """Split zones za and zb into their best two connected parts when that is strictly
    better than today's; returns 1 when the zones changed, else 0.

    loc: (n,) int64 all -1 (left so); units, adj: (MAX_PAIR_UNITS,) int64 scratch; eu, ev,
    el: scratch for the edges inside the pair; tc, sv: (c,) and (a,) float scratch.

    One kernel on purpose: numba compiles each callee again inside its caller, so cutting this
    into helpers adds compile time and calls in the hot loop without making it clearer.
    """
    m = np.int64(0)
    for z in (za, zb):
        u = st.head[z]
        while u >= 0:
            loc[u] = m
            units[m] = u
            m += 1
            u = st.nxt[u]
    indptr = st.indptr
    indices = st.indices
    length = st.length
    ne = np.int64(0)
    for j in range(m):
        adj[j] = 0
        u = units[j]
        for p in range(indptr[u], indptr[u + 1]):
            k = loc[indices[p]]
            if k >= 0:
                adj[j] |= np.int64(1) << k
                if k > j:
                    eu[ne] = j
                    ev[ne] = k
                    el[ne] = length[p]
                    ne += 1
    for j in range(m):
        loc[units[j]] = -1
    full = (np.int64(1) << m) - 1
    cur_mask = np.int64(0)
    for j in range(st.size[za]):
        cur_mask |= np.int64(1) << j
    base_b = st.brk[za] + st.brk[zb]
    base_c = st.cost[za] + st.cost[zb]
    best_b = base_b
    best_c = base_c
    best_mask = np.int64(-1)
    best_swap = False
    stab = st.kind[2] == 1
    anc_a = st.anchor[za]
    anc_b = st.anchor[zb]
    # bit 0 (za's first unit) always sits in the part that is enumerated
    for mask in range(1, full, 2):
        if mask == cur_mask:
            continue
        rest = full & ~mask
        if not _connected(mask, adj, m) or not _connected(rest, adj, m):
            continue
        for swap in range(2 if stab else 1):
            first = anc_b if swap else anc_a
            second = anc_a if swap else anc_b
            c1, b1 = _part_value(st, mask, units, m, eu, ev, el, ne, first, tc, sv)
            c2, b2 = _part_value(st, rest, units, m, eu, ev, el, ne, second, tc, sv)
            if key_less(b1 + b2, c1 + c2, best_b, best_c):
                best_b = b1 + b2
                best_c = c1 + c2
                best_mask = mask
                best_swap = swap == 1
    if best_mask < 0:
        return 0
    if not (best_b < base_b - EPS_BRK or (best_b <= base_b + EPS_BRK and best_c < base_c - EPS_OBJ)):
        return 0
    first = zb if best_swap else za
    second = za if best_swap else zb
    want = np.empty(m, dtype=np.int64)
    for j in range(m):
        want[j] = first if (best_mask >> j) & 1 else second
    zones = np.empty(2, dtype=np.int64)
    zones[0] = za
    zones[1] = zb
    relabel_parts(st, units, m, want, zones)
    return 1


@njit(cache=True)
def relabel_parts(st, units, m, want, zones):
    """Move each local unit units[j] (j < m) to zone want[j], then recompute `zones` (the
    zones the units were and are in) and the boundary counts around the units."""
    for j in range(m):
        u = units[j]
        old = st.labels[u]
        if old != want[j]:
            unlink(st, u, old)
            link(st, u, want[j])
            st.labels[u] = want[j]
    for z in zones:
        recompute_zone(st, z)
    for j in range(m):
        u = units[j]
        recount(st, u)
        for p in range(st.indptr[u], st.indptr[u + 1]):
            recount(st, st.indices[p])


@njit(cache=True)
def pair_pass(st, seed, max_units, active, stats):
    """One pass over the pairs of neighbouring zones with at most max_units units of which
    one zone at least is `active` (K,) (1: changed since its pairs were last priced);
    zones in random order, each pair once. Returns the number of pairs changed; on return
    `active` marks the zones this pass changed. stats[0] counts pairs priced, stats[1]
    pairs changed."""
    np.random.seed(seed)
    n = st.labels.shape[0]
    K = st.size.shape[0]
    max_units = min(max_units, MAX_PAIR_UNITS)
    order, nz = shuffled_zones(st)
    loc = np.full(n, -1, dtype=np.int64)
    units = np.empty(MAX_PAIR_UNITS, dtype=np.int64)
    adj = np.empty(MAX_PAIR_UNITS, dtype=np.int64)
    eu = np.empty(MAX_PAIR_UNITS * 8, dtype=np.int64)
    ev = np.empty(MAX_PAIR_UNITS * 8, dtype=np.int64)
    el = np.empty(MAX_PAIR_UNITS * 8)
    tc = np.empty(st.counts.shape[1])
    sv = np.empty(st.x.shape[1])
    near = np.empty(K, dtype=np.int64)
    # 1: priced this pass with its zones as they were; 2: changed by this pass
    seen = np.zeros(K, dtype=np.int64)
    changed = 0
    for t in range(nz):
        za = order[t]
        if st.size[za] == 0 or st.size[za] >= max_units:
            continue
        nn = neighbour_zones(st, za, near)
        for q in range(nn):
            zb = near[q]
            if active[za] == 0 and active[zb] == 0 and seen[za] != 2 and seen[zb] != 2:
                continue
            # each pair once: from the zone met first, unless either changed since
            if seen[zb] == 1 and seen[za] != 2:
                continue
            if st.size[za] + st.size[zb] > max_units:
                continue
            if _edge_budget(st, za, zb) > MAX_PAIR_UNITS * 8:
                continue
            stats[0] += 1
            if best_pair_split(st, za, zb, loc, units, adj, eu, ev, el, tc, sv):
                stats[1] += 1
                changed += 1
                seen[za] = 2
                seen[zb] = 2
        if seen[za] != 2:
            seen[za] = 1
    for z in range(K):
        active[z] = 1 if seen[z] == 2 else 0
    return changed


@njit(cache=True)
def shuffled_zones(st):
    """(order, nz): the zones with members, order[:nz], in a random order of numba's
    generator as seeded."""
    K = st.size.shape[0]
    order = np.empty(K, dtype=np.int64)
    nz = 0
    for z in range(K):
        if st.size[z] > 0:
            order[nz] = z
            nz += 1
    for t in range(nz - 1, 0, -1):
        r = np.random.randint(t + 1)
        tmp = order[t]
        order[t] = order[r]
        order[r] = tmp
    return order, nz


@njit(cache=True)
def neighbour_zones(st, za, near):
    """Writes the zones that share a boundary with za into near[:nn]; returns nn."""
    st.iv[IV_ZSTAMP] += 1
    stamp = st.iv[IV_ZSTAMP]
    nn = 0
    u = st.head[za]
    while u >= 0:
        for p in range(st.indptr[u], st.indptr[u + 1]):
            zb = st.labels[st.indices[p]]
            if zb != za and zb >= 0 and st.zmark[zb] != stamp:
                st.zmark[zb] = stamp
                near[nn] = zb
                nn += 1
        u = st.nxt[u]
    return nn


@njit(cache=True)
def _edge_budget(st, za, zb):
    """Edges inside the union of za and zb (counted twice) bounded by members' degrees."""
    tot = 0
    for z in (za, zb):
        u = st.head[z]
        while u >= 0:
            tot += st.indptr[u + 1] - st.indptr[u]
            u = st.nxt[u]
    return tot // 2
