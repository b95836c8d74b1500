"""Triple repartition: the best split of three neighbouring zones' units into three zones.

A fence of many small zones that no single move, exchange or pair repartition improves
(`search.pairs`) still often improves by a change that passes units along a chain of
three zones: one zone gives a unit to the next, which gives one on to the third, so no
zone leaves its bounds on the way. This pass takes a zone and two of its neighbours
whose units number at most `max_units`, lists every connected part of their union that
keeps within the upper bounds (grown from single units, each part once), and keeps the
best split of the union into three parts within every bound when it is strictly better
than the three zones as they are. It is the three-zone case of the exact recombination
of neighbouring districts (DeFord, Duchin & Solomon 2021, "Recombination: a family of
Markov chains for redistricting"), searched exhaustively instead of sampled.

Only zones within their bounds take part, and only while stability does not count
(a redraw keeps its previous zones' slots, which the pair repartition handles): the pass
improves the objective of a zoning that already meets its bounds.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from zonedesign.search.kernels import EPS_OBJ, dist
from zonedesign.search.pairs import neighbour_zones, relabel_parts, shuffled_zones
from zonedesign.search.valuation import zone_value

MAX_TRIPLE_UNITS = 15  # 2^15 part masks in the stamp tables; larger triples are left alone
MAX_EDGES = MAX_TRIPLE_UNITS * 8


class TripleWork:
    """Scratch arrays of one pass, allocated once (the stamp tables hold 2^15 entries)."""

    def __init__(self, n: int, c: int, a: int):
        size = 1 << MAX_TRIPLE_UNITS
        self.loc = np.full(n, -1, dtype=np.int64)
        self.seen = np.zeros(size, dtype=np.int64)
        self.good = np.zeros(size, dtype=np.int64)
        self.val = np.zeros(size)
        self.queue = np.zeros(size, dtype=np.int64)
        self.qf = np.zeros((size, c + a + 7))
        self.parts = np.zeros(size, dtype=np.int64)
        self.bylow = np.zeros(size, dtype=np.int64)
        self.stamp = np.zeros(1, dtype=np.int64)  # the tables' entries of older triples differ

    def arrays(self) -> tuple:
        return (self.loc, self.seen, self.good, self.val, self.queue, self.qf, self.parts, self.bylow, self.stamp)


@njit(cache=True)
def _lowest(mask):
    """Index of mask's lowest set bit (mask > 0)."""
    j = 0
    while not (mask >> j) & 1:
        j += 1
    return j


@njit(cache=True)
def _add_unit(st, qf, src, dst, u, c, a, shared, near):
    """qf[dst] = the sums of part qf[src] with unit u added (src == dst: u alone), u
    sharing `shared` boundary and `near` pairwise distance with the part."""
    for f in range(qf.shape[1]):
        qf[dst, f] = qf[src, f] if src != dst else 0.0
    for t in range(c):
        qf[dst, t] += st.counts[u, t]
    wu = st.w[u]
    qf[dst, c] += wu
    for t in range(a):
        qf[dst, c + 1 + t] += wu * st.x[u, t]
    base = c + 1 + a
    qf[dst, base] += st.q[u]
    qf[dst, base + 1] += st.area[u]
    qf[dst, base + 2] += st.perim[u] - 2.0 * shared
    qf[dst, base + 3] += near
    if wu > 0.0:
        qf[dst, base + 4] += 1.0
    qf[dst, base + 5] += 1.0


@njit(cache=True)
def best_triple_split(st, zs, units, adj, eu, ev, el, loc, seen, good, val, queue, qf, parts, bylow, stamp):
    """Split the zones zs (3,) into their best three connected parts within bounds when
    that is strictly better than today's; returns 1 when the zones changed, else 0.

    seen, good, val (2^15,): stamp tables of the parts grown and of those within every
    bound, with their objective; queue, qf: the parts grown and their sums;
    parts, bylow: the parts within bounds, grouped by their lowest unit. Counts are never
    negative (the caller checks), so a part over an upper bound grows no further. Parts
    hold from one unit fewer than the smallest zone to one more than the largest.

    One kernel on purpose, as `pairs.best_pair_split`: callees compile again inside it.
    """
    m = np.int64(0)
    for q in range(3):
        u = st.head[zs[q]]
        while u >= 0:
            loc[u] = m
            units[m] = u
            m += 1
            u = st.nxt[u]
    ne = np.int64(0)
    for j in range(m):
        adj[j] = 0
        u = units[j]
        for p in range(st.indptr[u], st.indptr[u + 1]):
            k = loc[st.indices[p]]
            if k >= 0:
                adj[j] |= np.int64(1) << k
                if k > j:
                    eu[ne] = j
                    ev[ne] = k
                    el[ne] = st.length[p]
                    ne += 1
    for j in range(m):
        loc[units[j]] = -1
    c = st.counts.shape[1]
    a = st.x.shape[1]
    lo = st.lo
    hi = st.hi
    pairwise = st.kind[0] == 1 and st.coef[1] != 0.0
    # parts of about the zones' present sizes in units: one unit fewer than the smallest
    # to one more than the largest (a far larger or smaller part is never the best split
    # of zones of a few units each, and would make the list many times longer)
    small = m
    large = np.int64(0)
    for q in range(3):
        small = min(small, st.size[zs[q]])
        large = max(large, st.size[zs[q]])
    small = max(np.int64(1), small - 1, m - 2 * (large + 1))
    large = large + 1
    # local edges per unit, to grow a part's perimeter by what a new unit shares with it
    lptr = np.zeros(m + 1, dtype=np.int64)
    for e in range(ne):
        lptr[eu[e] + 1] += 1
        lptr[ev[e] + 1] += 1
    for j in range(m):
        lptr[j + 1] += lptr[j]
    lfill = lptr.copy()
    lnb = np.empty(2 * ne, dtype=np.int64)
    llen = np.empty(2 * ne)
    for e in range(ne):
        lnb[lfill[eu[e]]] = ev[e]
        llen[lfill[eu[e]]] = el[e]
        lfill[eu[e]] += 1
        lnb[lfill[ev[e]]] = eu[e]
        llen[lfill[ev[e]]] = el[e]
        lfill[ev[e]] += 1
    # grow every connected part from single units, each once (stamped), carrying its sums
    # (qf: counts, weight, attribute sums, sum of w ||x||^2, area, perimeter, pairwise
    # distances, then members with positive weight and members), and price those within
    # every bound
    F_W = c
    F_S = c + 1
    F_Q = c + 1 + a
    F_A = F_Q + 1
    F_P = F_Q + 2
    F_H = F_Q + 3
    F_NPOS = F_Q + 4
    F_N = F_Q + 5
    nq = np.int64(0)
    for j in range(m):
        one = np.int64(1) << j
        seen[one] = stamp
        queue[nq] = one
        for f in range(F_N + 1):
            qf[nq, f] = 0.0
        _add_unit(st, qf, nq, nq, units[j], c, a, 0.0, 0.0)
        nq += 1
    head = np.int64(0)
    ngood = np.int64(0)
    while head < nq:
        mask = queue[head]
        over = False
        under = False
        for t in range(c):
            v = qf[head, t]
            if v > hi[t]:
                over = True
            if v < lo[t]:
                under = True
        n_in = qf[head, F_N]
        if over:
            head += 1
            continue
        if not under and n_in >= small:
            Ssq = 0.0
            for t in range(a):
                Ssq += qf[head, F_S + t] * qf[head, F_S + t]
            for t in range(c):
                st.tc[t] = qf[head, t]
            cost, brk = zone_value(st.par, st.tc, np.int64(qf[head, F_NPOS]), qf[head, F_W], Ssq, qf[head, F_Q],
                                   qf[head, F_H], qf[head, F_A], qf[head, F_P], np.int64(0))
            good[mask] = stamp
            val[mask] = cost
            parts[ngood] = mask
            ngood += 1
        if n_in < large:
            grow = np.int64(0)
            for j in range(m):
                if (mask >> j) & 1:
                    grow |= adj[j]
            grow &= ~mask
            for j in range(m):
                if (grow >> j) & 1:
                    bigger = mask | (np.int64(1) << j)
                    if seen[bigger] != stamp:
                        seen[bigger] = stamp
                        queue[nq] = bigger
                        shared = 0.0
                        for p in range(lptr[j], lptr[j + 1]):
                            if (mask >> lnb[p]) & 1:
                                shared += llen[p]
                        near = 0.0
                        if pairwise:
                            for k in range(m):
                                if (mask >> k) & 1:
                                    near += dist(st.x, units[j], units[k])
                        _add_unit(st, qf, head, nq, units[j], c, a, shared, near)
                        nq += 1
        head += 1
    # group the parts by their lowest unit: a part of the rest of the union that holds the
    # rest's lowest unit has that unit as its own lowest
    start = np.zeros(m + 1, dtype=np.int64)
    for g in range(ngood):
        start[_lowest(parts[g]) + 1] += 1
    for j in range(m):
        start[j + 1] += start[j]
    fill = start.copy()
    for g in range(ngood):
        j = _lowest(parts[g])
        bylow[fill[j]] = parts[g]
        fill[j] += 1
    full = (np.int64(1) << m) - 1
    base = st.cost[zs[0]] + st.cost[zs[1]] + st.cost[zs[2]]
    best = base - EPS_OBJ
    best_a = np.int64(-1)
    best_b = np.int64(-1)
    for g in range(start[0], start[1]):
        a = bylow[g]
        rest = full & ~a
        if rest == 0:
            continue
        va = val[a]
        low = _lowest(rest)
        for h in range(start[low], start[low + 1]):
            b = bylow[h]
            if b & a:
                continue
            third = rest & ~b
            if third == 0 or good[third] != stamp:
                continue
            tot = va + val[b] + val[third]
            if tot < best:
                best = tot
                best_a = a
                best_b = b
    if best_a < 0:
        return 0
    want = np.empty(m, dtype=np.int64)
    for j in range(m):
        if (best_a >> j) & 1:
            want[j] = zs[0]
        elif (best_b >> j) & 1:
            want[j] = zs[1]
        else:
            want[j] = zs[2]
    relabel_parts(st, units, m, want, zs)
    return 1


@njit(cache=True)
def _touches(st, za, zb):
    """True when zones za and zb share a boundary."""
    u = st.head[za]
    while u >= 0:
        for p in range(st.indptr[u], st.indptr[u + 1]):
            if st.labels[st.indices[p]] == zb:
                return True
        u = st.nxt[u]
    return False


@njit(cache=True)
def triple_pass(st, seed, max_units, active, stats, loc, seen, good, val, queue, qf, parts, bylow, stamp):
    """One pass over the zones in random order, each with every two of its neighbours
    (at most max_units units in all, one zone at least `active`). Returns the number of
    triples changed; on return `active` marks the zones this pass changed. stats[0] counts
    triples priced, stats[1] triples changed. The scratch arrays are `TripleWork.arrays()`."""
    np.random.seed(seed)
    K = st.size.shape[0]
    max_units = min(max_units, MAX_TRIPLE_UNITS)
    order, nz = shuffled_zones(st)
    units = np.empty(MAX_TRIPLE_UNITS, dtype=np.int64)
    adj = np.empty(MAX_TRIPLE_UNITS, dtype=np.int64)
    eu = np.empty(MAX_EDGES, dtype=np.int64)
    ev = np.empty(MAX_EDGES, dtype=np.int64)
    el = np.empty(MAX_EDGES)
    near = np.empty(K, dtype=np.int64)
    zs = np.empty(3, dtype=np.int64)
    changed_now = np.zeros(K, dtype=np.int64)
    changed = 0
    for t in range(nz):
        za = order[t]
        if st.size[za] == 0 or st.brk[za] > 0.0:
            continue
        nn = neighbour_zones(st, za, near)
        done = False
        for q in range(nn):
            zb = near[q]
            if done:
                break
            if st.brk[zb] > 0.0:
                continue
            for r in range(q + 1, nn):
                zc = near[r]
                if st.brk[zc] > 0.0 or st.size[za] + st.size[zb] + st.size[zc] > max_units:
                    continue
                if active[za] + active[zb] + active[zc] + changed_now[za] + changed_now[zb] + changed_now[zc] == 0:
                    continue
                # a triangle of zones is met from each of its three: price it from its lowest
                if za > min(zb, zc) and _touches(st, zb, zc):
                    continue
                stats[0] += 1
                stamp[0] += 1
                zs[0] = za
                zs[1] = zb
                zs[2] = zc
                if best_triple_split(st, zs, units, adj, eu, ev, el, loc, seen, good, val, queue, qf,
                                     parts, bylow, stamp[0]):
                    stats[1] += 1
                    changed += 1
                    changed_now[za] = 1
                    changed_now[zb] = 1
                    changed_now[zc] = 1
                    # za's neighbours are no longer those listed
                    done = True
                    break
    for z in range(K):
        active[z] = changed_now[z]
    return changed
