"""Merge and split moves, so the number of zones is not fixed by the construction.

Merge: two adjacent zones become one when the merged zone meets its ceilings and
(breaks, objective) improves; the merged zone keeps whichever anchor prices lower.

Split: a zone above a ceiling, or far above its target, is cut in two along an edge of a
random spanning tree of the zone, so both parts are connected. Several random trees are
tried and every tree edge is priced from subtree sums (counts, attribute sums, area,
perimeter through the internal boundary below each edge's lowest common ancestor); the
best cut is made when it improves (breaks, objective). One part keeps the zone's slot and
anchor, the other is a new zone (anchor -1).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from zonedesign.search.kernels import (
    IV_ZSTAMP,
    _link,
    better,
    dist,
    key_less,
    pop_free,
    push_free,
    recompute_zone,
    refresh_zone_boundary,
    zone_value,
)

FAR_ABOVE_TARGET = 1.5  # a zone this many times its target is worth trying to split
N_TREES = 4
N_EXACT = 8  # cuts priced exactly per tree when the pairwise term needs the members


# ---------------------------------------------------------------- merge


@njit(cache=True)
def zone_neighbours(d, z, a):
    """Zones adjacent to a: z.ztouch[:nt] with shared length in z.zacc; returns nt."""
    z.iv[IV_ZSTAMP] += 1
    stamp = z.iv[IV_ZSTAMP]
    nt = 0
    u = z.head[a]
    while u >= 0:
        for p in range(d.indptr[u], d.indptr[u + 1]):
            lab = z.labels[d.indices[p]]
            if lab == a or lab < 0:
                continue
            if z.zmark[lab] != stamp:
                z.zmark[lab] = stamp
                z.zacc[lab] = 0.0
                z.ztouch[nt] = lab
                nt += 1
            z.zacc[lab] += d.length[p]
        u = z.nxt[u]
    return nt


@njit(cache=True)
def merge_value(d, z, a, b, shared, anc):
    """(cost, break) of the union of zones a and b with anchor anc."""
    tc = z.tc
    for c in range(tc.shape[0]):
        tc[c] = z.csum[a, c] + z.csum[b, c]
    Ssq = 0.0
    for t in range(z.S.shape[1]):
        v = z.S[a, t] + z.S[b, t]
        Ssq += v * v
    H = 0.0
    if d.kind[0] == 1 and d.coef[1] != 0.0:
        H = z.H[a] + z.H[b]
        u = z.head[a]
        while u >= 0:
            v = z.head[b]
            while v >= 0:
                H += dist(d.x, u, v)
                v = z.nxt[v]
            u = z.nxt[u]
    ns = 0
    if d.kind[2] == 1:
        for zone in (a, b):
            u = z.head[zone]
            while u >= 0:
                if d.prev[u] != anc:
                    ns += 1
                u = z.nxt[u]
    return zone_value(
        d,
        tc,
        z.npos[a] + z.npos[b],
        z.W[a] + z.W[b],
        Ssq,
        z.Q[a] + z.Q[b],
        H,
        z.A[a] + z.A[b],
        z.P[a] + z.P[b] - 2.0 * shared,
        ns,
    )


@njit(cache=True)
def merge_zones(d, z, keep, gone, anc):
    """Move every member of zone `gone` into zone `keep`, whose anchor becomes anc."""
    u = z.head[gone]
    while u >= 0:
        nxt = z.nxt[u]
        z.labels[u] = keep
        _link(z, u, keep)
        u = nxt
    z.head[gone] = -1
    z.size[keep] += z.size[gone]
    z.size[gone] = 0
    z.fv[0] -= z.cost[gone]
    z.fv[1] -= z.brk[gone]
    z.cost[gone] = 0.0
    z.brk[gone] = 0.0
    push_free(z, gone)
    z.anchor[keep] = anc
    recompute_zone(d, z, keep)
    refresh_zone_boundary(d, z, keep)


@njit(cache=True)
def merge_delta(d, z, a, b):
    """(break change, objective change, anchor) of the best way to merge zones a and b."""
    shared = 0.0
    nt = zone_neighbours(d, z, a)
    for q in range(nt):
        if z.ztouch[q] == b:
            shared = z.zacc[b]
    cost, brk = merge_value(d, z, a, b, shared, z.anchor[a])
    anc = z.anchor[a]
    if d.kind[2] == 1 and z.anchor[b] != z.anchor[a]:
        cost2, brk2 = merge_value(d, z, a, b, shared, z.anchor[b])
        if key_less(brk2, cost2, brk, cost):
            cost = cost2
            brk = brk2
            anc = z.anchor[b]
    return brk - z.brk[a] - z.brk[b], cost - z.cost[a] - z.cost[b], anc


@njit(cache=True)
def merge_pass(d, z, seed):
    """Merge each zone (in random order) with its best adjacent partner when that improves."""
    np.random.seed(seed)
    K = z.size.shape[0]
    order = np.empty(K, dtype=np.int64)
    nz = 0
    for zone in range(K):
        if z.size[zone] > 0:
            order[nz] = zone
            nz += 1
    for t in range(nz - 1, 0, -1):
        r = np.random.randint(t + 1)
        tmp = order[t]
        order[t] = order[r]
        order[r] = tmp
    nb_zone = np.empty(K, dtype=np.int64)
    nb_len = np.empty(K)
    merges = 0
    for t in range(nz):
        a = order[t]
        if z.size[a] == 0:
            continue
        nt = zone_neighbours(d, z, a)
        for q in range(nt):
            nb_zone[q] = z.ztouch[q]
            nb_len[q] = z.zacc[z.ztouch[q]]
        best = -1
        bdb = 0.0
        bdo = 0.0
        banc = -1
        for q in range(nt):
            b = nb_zone[q]
            fits = True
            for c in range(z.csum.shape[1]):
                if np.isfinite(d.hi[c]) and z.csum[a, c] + z.csum[b, c] > d.hi[c]:
                    fits = False
            if not fits:
                continue
            for option in range(2):
                anc = z.anchor[a] if option == 0 else z.anchor[b]
                if option == 1 and (d.kind[2] == 0 or anc == z.anchor[a]):
                    continue
                cost, brk = merge_value(d, z, a, b, nb_len[q], anc)
                db = brk - z.brk[a] - z.brk[b]
                do = cost - z.cost[a] - z.cost[b]
                if better(db, do) and (best < 0 or key_less(db, do, bdb, bdo)):
                    best = b
                    bdb = db
                    bdo = do
                    banc = anc
        if best >= 0:
            # the larger zone keeps its slot unless the smaller one's anchor was chosen
            keep, gone = a, best
            if d.kind[2] == 1:
                if banc != z.anchor[a]:
                    keep, gone = best, a
            elif z.size[best] > z.size[a]:
                keep, gone = best, a
            merge_zones(d, z, keep, gone, banc)
            merges += 1
    return merges


# ---------------------------------------------------------------- split


@njit(cache=True)
def _part_value(d, s, npos, W, Svec, Q, H, A, P, ns):
    Ssq = 0.0
    for t in range(Svec.shape[0]):
        Ssq += Svec[t] * Svec[t]
    return zone_value(d, s, npos, W, Ssq, Q, H, A, P, ns)


@njit(cache=True)
def _pair_sum(d, mem, part, side):
    """Pairwise distance sum over members whose part flag equals side."""
    m = mem.shape[0]
    h = 0.0
    for p in range(m):
        if part[p] != side:
            continue
        for q in range(p + 1, m):
            if part[q] == side:
                h += dist(d.x, mem[p], mem[q])
    return h


@njit(cache=True)
def try_split(d, z, zone, ntrees, loc, force):
    """Cut zone in two along the best edge of ntrees random spanning trees.

    Makes the cut when it improves (breaks, objective), or always when force is set.
    Returns the new zone's slot, or -1. loc: (n,) int64 scratch.
    """
    m = z.size[zone]
    if m < 2:
        return -1
    nc = z.csum.shape[1]
    na = z.S.shape[1]
    stab = d.kind[2] == 1
    pairwise = d.kind[0] == 1 and d.coef[1] != 0.0
    anc = z.anchor[zone]
    mem = np.empty(m, dtype=np.int64)
    u = z.head[zone]
    for p in range(m):
        mem[p] = u
        loc[u] = p
        u = z.nxt[u]
    # per-member values, summed up each tree afterwards
    sc = np.empty((m, nc))
    sS = np.empty((m, na))
    sW = np.empty(m)
    snp = np.empty(m, dtype=np.int64)
    sQ = np.empty(m)
    sA = np.empty(m)
    sper = np.empty(m)
    sdeg = np.empty(m)
    sint = np.empty(m)
    sstA = np.empty(m, dtype=np.int64)
    sstN = np.empty(m, dtype=np.int64)
    parent = np.empty(m, dtype=np.int64)
    depth = np.empty(m, dtype=np.int64)
    order = np.empty(m, dtype=np.int64)
    intree = np.zeros(m, dtype=np.int64)
    fr = np.empty(m, dtype=np.int64)
    part = np.zeros(m, dtype=np.int64)
    best_part = np.zeros(m, dtype=np.int64)
    tot_c = np.empty(nc)
    tot_S = np.empty(na)
    yc = np.empty(nc)
    yS = np.empty(na)
    cand_t = np.empty(N_EXACT, dtype=np.int64)
    cand_o = np.empty(N_EXACT, dtype=np.int64)
    cand_db = np.empty(N_EXACT)
    cand_do = np.empty(N_EXACT)
    have = False
    gdb = 0.0
    gdo = 0.0
    gkeep_x = 0
    for _tree in range(ntrees):
        # random spanning tree: grow from a random root, taking frontier units at random
        for p in range(m):
            intree[p] = 0
        r = np.random.randint(m)
        intree[r] = 2  # 2: in the tree, 1: on the frontier
        parent[r] = -1
        depth[r] = 0
        order[0] = r
        cnt = 1
        nf = 0
        v = r
        while True:
            uu = mem[v]
            for p in range(d.indptr[uu], d.indptr[uu + 1]):
                w = d.indices[p]
                if z.labels[w] != zone:
                    continue
                lw = loc[w]
                if intree[lw] == 0:
                    intree[lw] = 1
                    parent[lw] = v
                    fr[nf] = lw
                    nf += 1
            if nf == 0:
                break
            q = np.random.randint(nf)
            v = fr[q]
            fr[q] = fr[nf - 1]
            nf -= 1
            intree[v] = 2
            depth[v] = depth[parent[v]] + 1
            order[cnt] = v
            cnt += 1
        if cnt < m:
            return -1  # the zone is not connected; splitting is not defined
        for p in range(m):
            uu = mem[p]
            for c in range(nc):
                sc[p, c] = d.counts[uu, c]
            wu = d.w[uu]
            for t in range(na):
                sS[p, t] = wu * d.x[uu, t]
            sW[p] = wu
            snp[p] = 1 if wu > 0.0 else 0
            sQ[p] = d.q[uu]
            sA[p] = d.area[uu]
            sper[p] = d.perim[uu]
            sstA[p] = 1 if d.prev[uu] != anc else 0
            sstN[p] = 1 if d.prev[uu] != -1 else 0
            sdeg[p] = 0.0
            sint[p] = 0.0
        # internal boundary: each zone edge counts at the lowest common ancestor of its ends
        for p in range(m):
            uu = mem[p]
            for e in range(d.indptr[uu], d.indptr[uu + 1]):
                w = d.indices[e]
                if z.labels[w] != zone:
                    continue
                sdeg[p] += d.length[e]
                if w < uu:
                    continue
                x1 = p
                x2 = loc[w]
                while x1 != x2:
                    if depth[x1] >= depth[x2]:
                        x1 = parent[x1]
                    else:
                        x2 = parent[x2]
                sint[x1] += d.length[e]
        for k in range(m - 1, 0, -1):
            v = order[k]
            pv = parent[v]
            for c in range(nc):
                sc[pv, c] += sc[v, c]
            for t in range(na):
                sS[pv, t] += sS[v, t]
            sW[pv] += sW[v]
            snp[pv] += snp[v]
            sQ[pv] += sQ[v]
            sA[pv] += sA[v]
            sper[pv] += sper[v]
            sdeg[pv] += sdeg[v]
            sint[pv] += sint[v]
            sstA[pv] += sstA[v]
            sstN[pv] += sstN[v]
        for c in range(nc):
            tot_c[c] = sc[r, c]
        for t in range(na):
            tot_S[t] = sS[r, t]
        p_tot = sper[r] - 2.0 * sint[r]
        ncand = 0
        tdb = 0.0
        tdo = 0.0
        tt = -1
        tkeep_x = 0
        for k in range(1, m):
            v = order[k]
            for c in range(nc):
                yc[c] = tot_c[c] - sc[v, c]
            for t in range(na):
                yS[t] = tot_S[t] - sS[v, t]
            px = sper[v] - 2.0 * sint[v]
            cut = sdeg[v] - 2.0 * sint[v]
            py = p_tot + 2.0 * cut - px
            for keep_x in range(2):
                if keep_x == 1 and not stab:
                    continue
                if keep_x == 1:
                    nsx = sstA[v]
                    nsy = sstN[r] - sstN[v]
                else:
                    nsx = sstN[v]
                    nsy = sstA[r] - sstA[v]
                if not stab:
                    nsx = 0
                    nsy = 0
                cx, kx = _part_value(d, sc[v], snp[v], sW[v], sS[v], sQ[v], 0.0, sA[v], px, nsx)
                cy, ky = _part_value(
                    d, yc, snp[r] - snp[v], sW[r] - sW[v], yS, sQ[r] - sQ[v], 0.0, sA[r] - sA[v], py, nsy
                )
                db = (kx + ky) - z.brk[zone]
                do = (cx + cy) - z.cost[zone]
                if pairwise:
                    # keep the N_EXACT best by everything but the pairwise term
                    if ncand < N_EXACT:
                        slot = ncand
                        ncand += 1
                    else:
                        slot = -1
                        for s in range(N_EXACT):
                            if key_less(db, do, cand_db[s], cand_do[s]) and (
                                slot < 0 or key_less(cand_db[slot], cand_do[slot], cand_db[s], cand_do[s])
                            ):
                                slot = s
                        if slot < 0:
                            continue
                    cand_t[slot] = k
                    cand_o[slot] = keep_x
                    cand_db[slot] = db
                    cand_do[slot] = do
                elif tt < 0 or key_less(db, do, tdb, tdo):
                    tt = k
                    tdb = db
                    tdo = do
                    tkeep_x = keep_x
        if pairwise:
            for s in range(ncand):
                _mark_part(order, parent, cand_t[s], part, m)
                hx = _pair_sum(d, mem, part, 1)
                hy = _pair_sum(d, mem, part, 0)
                # the pairwise term enters through H; the other terms were priced already
                do = cand_do[s] + d.coef[1] * (hx + hy)
                if tt < 0 or key_less(cand_db[s], do, tdb, tdo):
                    tt = cand_t[s]
                    tdb = cand_db[s]
                    tdo = do
                    tkeep_x = cand_o[s]
        if tt >= 0 and (not have or key_less(tdb, tdo, gdb, gdo)):
            have = True
            gdb = tdb
            gdo = tdo
            gkeep_x = tkeep_x
            _mark_part(order, parent, tt, part, m)
            for p in range(m):
                best_part[p] = part[p]
    if not have or not (force or better(gdb, gdo)):
        return -1
    # the part that keeps the anchor keeps the slot; the other becomes a new zone
    new_side = 0 if gkeep_x == 1 else 1
    nz = pop_free(z)
    z.cost[nz] = 0.0
    z.brk[nz] = 0.0
    z.head[zone] = -1
    z.head[nz] = -1
    for p in range(m - 1, -1, -1):
        uu = mem[p]
        lab = nz if best_part[p] == new_side else zone
        z.labels[uu] = lab
        _link(z, uu, lab)
    recompute_zone(d, z, zone)
    recompute_zone(d, z, nz)
    refresh_zone_boundary(d, z, zone)
    refresh_zone_boundary(d, z, nz)
    return nz


@njit(cache=True)
def _mark_part(order, parent, k, part, m):
    """part[p] = 1 for the subtree below order[k] (parents precede children in order)."""
    for p in range(m):
        part[p] = 0
    part[order[k]] = 1
    for j in range(k + 1, m):
        v = order[j]
        if part[parent[v]] == 1:
            part[v] = 1


@njit(cache=True)
def split_pass(d, z, seed, ntrees, far):
    """Try to split every zone above a ceiling or `far` times above a target."""
    np.random.seed(seed)
    K = z.size.shape[0]
    n = z.labels.shape[0]
    loc = np.empty(n, dtype=np.int64)
    todo = np.empty(K, dtype=np.int64)
    nt = 0
    for zone in range(K):
        if z.size[zone] < 2:
            continue
        want = False
        for c in range(z.csum.shape[1]):
            s = z.csum[zone, c]
            if np.isfinite(d.hi[c]) and s > d.hi[c]:
                want = True
            if d.tmask[c] == 1 and d.target[c] > 0.0 and s > far * d.target[c]:
                want = True
        if want:
            todo[nt] = zone
            nt += 1
    splits = 0
    for t in range(nt):
        if try_split(d, z, todo[t], ntrees, loc, False) >= 0:
            splits += 1
    return splits
