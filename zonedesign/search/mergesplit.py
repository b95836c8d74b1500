"""Merge and split moves, so the number of zones is not fixed by the construction.

Merge: two adjacent zones become one when the merged zone meets its ceilings and
(breaks, objective) improves; the merged zone keeps whichever anchor prices lower.

Split: a zone above a ceiling, or far above its target, is cut in two along an edge of a
random spanning tree of the zone, so both parts are connected. Several random trees are
tried and every tree edge is priced from subtree sums (counts, attribute sums, area,
perimeter through the internal boundary below each edge's lowest common ancestor); the
best cut is made when it improves (breaks, objective). One part keeps the zone's slot and
anchor, the other is a new zone (anchor -1).

The passes loop over zones in Python: they run between local-search phases, not in the
hot loop, and each zone's work is one compiled call.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from zonedesign.search.kernels import (
    IV_ZSTAMP,
    better,
    dist,
    inner,
    is_better,
    key_less,
    link,
    pop_free,
    push_free,
    seed_rng,
)
from zonedesign.search.valuation import (
    recompute_zone,
    refresh_zone_boundary,
    zone_value,
)

FAR_ABOVE_TARGET = 1.5  # a zone this many times its target is worth trying to split
N_TREES = 4
N_EXACT = 8  # cuts priced exactly per tree when the pairwise term needs the members


# ---------------------------------------------------------------- merge


@inner
def zone_neighbours(st, a):
    """Zones adjacent to a: st.ztouch[:nt] with shared length in st.zacc; returns nt."""
    indptr = st.indptr
    indices = st.indices
    length = st.length
    labels = st.labels
    nxt = st.nxt
    zmark = st.zmark
    zacc = st.zacc
    ztouch = st.ztouch
    st.iv[IV_ZSTAMP] += 1
    stamp = st.iv[IV_ZSTAMP]
    nt = 0
    u = st.head[a]
    while u >= 0:
        for p in range(indptr[u], indptr[u + 1]):
            lab = labels[indices[p]]
            if lab == a or lab < 0:
                continue
            if zmark[lab] != stamp:
                zmark[lab] = stamp
                zacc[lab] = 0.0
                ztouch[nt] = lab
                nt += 1
            zacc[lab] += length[p]
        u = nxt[u]
    return nt


@inner
def merge_value(st, a, b, shared, anc):
    """(cost, break) of the union of zones a and b with anchor anc."""
    tc = st.tc
    csum = st.csum
    S = st.S
    nxt = st.nxt
    head = st.head
    for c in range(tc.shape[0]):
        tc[c] = csum[a, c] + csum[b, c]
    Ssq = 0.0
    for t in range(S.shape[1]):
        v = S[a, t] + S[b, t]
        Ssq += v * v
    H = 0.0
    if st.kind[0] == 1 and st.coef[1] != 0.0:
        x = st.x
        H = st.H[a] + st.H[b]
        u = head[a]
        while u >= 0:
            v = head[b]
            while v >= 0:
                H += dist(x, u, v)
                v = nxt[v]
            u = nxt[u]
    ns = np.int64(0)
    if st.kind[2] == 1:
        prev = st.prev
        for zone in (a, b):
            u = head[zone]
            while u >= 0:
                if prev[u] != anc:
                    ns += 1
                u = nxt[u]
    return zone_value(
        st.par,
        tc,
        st.npos[a] + st.npos[b],
        st.W[a] + st.W[b],
        Ssq,
        st.Q[a] + st.Q[b],
        H,
        st.A[a] + st.A[b],
        st.P[a] + st.P[b] - 2.0 * shared,
        ns,
    )


@njit(cache=True)
def merge_zones(st, keep, gone, anc):
    """Move every member of zone `gone` into zone `keep`, whose anchor becomes anc."""
    nxt = st.nxt
    u = st.head[gone]
    while u >= 0:
        after = nxt[u]
        st.labels[u] = keep
        link(st, u, keep)
        u = after
    st.head[gone] = -1
    st.size[keep] += st.size[gone]
    st.size[gone] = 0
    st.fv[0] -= st.cost[gone]
    st.fv[1] -= st.brk[gone]
    st.cost[gone] = 0.0
    st.brk[gone] = 0.0
    push_free(st, gone)
    st.anchor[keep] = anc
    recompute_zone(st, keep)
    refresh_zone_boundary(st, keep)


@njit(cache=True)
def best_merge(st, a, apply, fit_only):
    """Best merge of zone a with an adjacent zone (whose union meets every ceiling, when
    fit_only is 1).

    Returns (partner or -1, break change, objective change, anchor kept). With apply set
    (as 1) and a strict improvement found, the merge is made; the larger zone keeps its
    slot, unless the smaller one's anchor was the one kept.
    """
    csum = st.csum
    hi = st.hi
    anchor = st.anchor
    stab = st.kind[2] == 1
    nt = zone_neighbours(st, a)
    nbz = st.ztouch[:nt].copy()
    best = np.int64(-1)
    bdb = 0.0
    bdo = 0.0
    banc = np.int64(-1)
    for q in range(nt):
        b = nbz[q]
        shared = st.zacc[b]
        fits = True
        for c in range(csum.shape[1]):
            if np.isfinite(hi[c]) and csum[a, c] + csum[b, c] > hi[c]:
                fits = False
        if fit_only == 1 and not fits:
            continue
        for option in range(2):
            anc = anchor[a] if option == 0 else anchor[b]
            if option == 1 and (not stab or anc == anchor[a]):
                continue
            cost, brk = merge_value(st, a, b, shared, anc)
            db = brk - st.brk[a] - st.brk[b]
            do = cost - st.cost[a] - st.cost[b]
            if best < 0 or key_less(db, do, bdb, bdo):
                best = b
                bdb = db
                bdo = do
                banc = anc
    if apply == 1 and best >= 0 and better(bdb, bdo):
        keep = a
        gone = best
        if stab:
            if banc != anchor[a]:
                keep = best
                gone = a
        elif st.size[best] > st.size[a]:
            keep = best
            gone = a
        merge_zones(st, keep, gone, banc)
    return best, bdb, bdo, banc


def merge_pass(st, zones, rng: np.random.Generator) -> int:
    """Merge each zone, in random order, with its best adjacent partner when that improves.

    zones: the Zones arrays behind st (read to list live zones and check what happened).
    """
    merges = 0
    order = rng.permutation(np.flatnonzero(zones.size > 0))
    for a in order:
        if zones.size[a] == 0:
            continue
        best, db, do, _ = best_merge(st, int(a), 1, 1)
        if best >= 0 and is_better(db, do):
            merges += 1
    return merges


@njit(cache=True)
def merge_delta(st, a, b):
    """(break change, objective change, anchor kept) of the best way to merge a and b."""
    nt = zone_neighbours(st, a)
    shared = 0.0
    for q in range(nt):
        if st.ztouch[q] == b:
            shared = st.zacc[b]
    anc = st.anchor[a]
    cost, brk = merge_value(st, a, b, shared, anc)
    if st.kind[2] == 1 and st.anchor[b] != anc:
        cost2, brk2 = merge_value(st, a, b, shared, st.anchor[b])
        if key_less(brk2, cost2, brk, cost):
            cost = cost2
            brk = brk2
            anc = st.anchor[b]
    return brk - st.brk[a] - st.brk[b], cost - st.cost[a] - st.cost[b], anc


# ---------------------------------------------------------------- split


@inner
def pair_sum(x, mem, part, side):
    """Pairwise distance sum over members whose part flag equals side."""
    m = mem.shape[0]
    h = 0.0
    for p in range(m):
        if part[p] != side:
            continue
        for q in range(p + 1, m):
            if part[q] == side:
                h += dist(x, mem[p], mem[q])
    return h


@inner
def mark_part(order, parent, k, part):
    """part[p] = 1 for the subtree below order[k] (parents precede children in order)."""
    m = part.shape[0]
    for p in range(m):
        part[p] = 0
    part[order[k]] = 1
    for j in range(k + 1, m):
        v = order[j]
        if part[parent[v]] == 1:
            part[v] = 1


@inner
def random_tree(st, zone, mem, loc, parent, depth, order):
    """A random spanning tree of zone over local indices: grown from a random root by
    taking frontier units at random. Returns the number of units reached."""
    indptr = st.indptr
    indices = st.indices
    labels = st.labels
    m = mem.shape[0]
    state = np.zeros(m, dtype=np.int64)  # 2: in the tree, 1: on the frontier
    fr = np.empty(m, dtype=np.int64)
    r = np.random.randint(m)
    state[r] = 2
    parent[r] = -1
    depth[r] = 0
    order[0] = r
    cnt = 1
    nf = 0
    v = r
    while True:
        uu = mem[v]
        for p in range(indptr[uu], indptr[uu + 1]):
            w = indices[p]
            if labels[w] != zone:
                continue
            lw = loc[w]
            if state[lw] == 0:
                state[lw] = 1
                parent[lw] = v
                fr[nf] = lw
                nf += 1
        if nf == 0:
            break
        q = np.random.randint(nf)
        v = fr[q]
        fr[q] = fr[nf - 1]
        nf -= 1
        state[v] = 2
        depth[v] = depth[parent[v]] + 1
        order[cnt] = v
        cnt += 1
    return cnt


@inner
def subtree_sums(st, zone, mem, loc, parent, depth, order, sv, si):
    """Per tree node, the sums over its subtree, packed.

    sv columns: counts (c), weighted attributes (a), then weight, w||x||^2, area, unit
    perimeters, boundary with the rest of the zone, internal boundary. si columns: units
    with positive weight, units off the zone's anchor, units with a previous zone. The
    internal boundary of a subtree is found by booking each zone edge at the lowest
    common ancestor of its ends.
    """
    indptr = st.indptr
    indices = st.indices
    length = st.length
    labels = st.labels
    x = st.x
    w = st.w
    nc = st.counts.shape[1]
    na = x.shape[1]
    anc = st.anchor[zone]
    m = mem.shape[0]
    for p in range(m):
        u = mem[p]
        for c in range(nc):
            sv[p, c] = st.counts[u, c]
        for t in range(na):
            sv[p, nc + t] = w[u] * x[u, t]
        base = nc + na
        sv[p, base] = w[u]
        sv[p, base + 1] = st.q[u]
        sv[p, base + 2] = st.area[u]
        sv[p, base + 3] = st.perim[u]
        sv[p, base + 4] = 0.0
        sv[p, base + 5] = 0.0
        si[p, 0] = 1 if w[u] > 0.0 else 0
        si[p, 1] = 1 if st.prev[u] != anc else 0
        si[p, 2] = 1 if st.prev[u] != -1 else 0
    deg = nc + na + 4
    inner = nc + na + 5
    for p in range(m):
        u = mem[p]
        for e in range(indptr[u], indptr[u + 1]):
            v = indices[e]
            if labels[v] != zone:
                continue
            sv[p, deg] += length[e]
            if v < u:
                continue
            x1 = p
            x2 = loc[v]
            while x1 != x2:
                if depth[x1] >= depth[x2]:
                    x1 = parent[x1]
                else:
                    x2 = parent[x2]
            sv[x1, inner] += length[e]
    for k in range(m - 1, 0, -1):
        v = order[k]
        pv = parent[v]
        for col in range(sv.shape[1]):
            sv[pv, col] += sv[v, col]
        for col in range(si.shape[1]):
            si[pv, col] += si[v, col]


@inner
def packed_value(st, row, npos, ns, perimeter):
    """(cost, break) of a part from a packed row of subtree sums (see subtree_sums)."""
    nc = st.counts.shape[1]
    na = st.x.shape[1]
    Ssq = 0.0
    for t in range(na):
        Ssq += row[nc + t] * row[nc + t]
    base = nc + na
    tc = st.tc
    for c in range(nc):
        tc[c] = row[c]
    return zone_value(st.par, tc, npos, row[base], Ssq, row[base + 1], 0.0, row[base + 2], perimeter, ns)


@njit(cache=True)
def try_split(st, zone, ntrees, loc, force):
    """Cut zone in two along the best edge of ntrees random spanning trees.

    Makes the cut when it improves (breaks, objective), or always when force is set.
    Returns the new zone's slot, or -1. loc: (n,) int64 scratch.

    One kernel on purpose: numba compiles each callee again inside its caller, so cutting this
    into helpers adds compile time and calls in the hot loop without making it clearer.
    """
    m = st.size[zone]
    if m < 2:
        return -1
    nc = st.counts.shape[1]
    na = st.x.shape[1]
    width = nc + na + 6
    per_col = nc + na + 3
    deg_col = nc + na + 4
    int_col = nc + na + 5
    stab = st.kind[2] == 1
    pairwise = st.kind[0] == 1 and st.coef[1] != 0.0
    one = np.int64(1)
    zero = np.int64(0)
    mem = np.empty(m, dtype=np.int64)
    u = st.head[zone]
    for p in range(m):
        mem[p] = u
        loc[u] = p
        u = st.nxt[u]
    sv = np.empty((m, width))
    si = np.empty((m, 3), dtype=np.int64)
    rest = np.empty(width)
    parent = np.empty(m, dtype=np.int64)
    depth = np.empty(m, dtype=np.int64)
    order = np.empty(m, dtype=np.int64)
    part = np.zeros(m, dtype=np.int64)
    best_part = np.zeros(m, dtype=np.int64)
    cand_t = np.empty(N_EXACT, dtype=np.int64)
    cand_o = np.empty(N_EXACT, dtype=np.int64)
    cand_db = np.empty(N_EXACT)
    cand_do = np.empty(N_EXACT)
    have = False
    gdb = 0.0
    gdo = 0.0
    gkeep_x = 0
    for _tree in range(ntrees):
        if random_tree(st, zone, mem, loc, parent, depth, order) < m:
            return -1  # the zone is not connected; splitting is not defined
        subtree_sums(st, zone, mem, loc, parent, depth, order, sv, si)
        r = order[0]
        p_tot = sv[r, per_col] - 2.0 * sv[r, int_col]
        ncand = 0
        tdb = 0.0
        tdo = 0.0
        tt = np.int64(-1)
        tkeep_x = 0
        for k in range(1, m):
            v = order[k]
            for col in range(width):
                rest[col] = sv[r, col] - sv[v, col]
            px = sv[v, per_col] - 2.0 * sv[v, int_col]
            cut = sv[v, deg_col] - 2.0 * sv[v, int_col]
            py = p_tot + 2.0 * cut - px
            for keep_x in range(2 if stab else 1):
                # the part that keeps the anchor counts units off it; the other, a new
                # zone, counts every unit that had a previous zone
                nsx = 0
                nsy = 0
                if stab and keep_x == 1:
                    nsx = si[v, 1]
                    nsy = si[r, 2] - si[v, 2]
                elif stab:
                    nsx = si[v, 2]
                    nsy = si[r, 1] - si[v, 1]
                cx, kx = packed_value(st, sv[v], si[v, 0], nsx, px)
                cy, ky = packed_value(st, rest, si[r, 0] - si[v, 0], nsy, py)
                db = (kx + ky) - st.brk[zone]
                do = (cx + cy) - st.cost[zone]
                if pairwise:
                    # keep the N_EXACT best by everything but the pairwise term
                    slot = -1
                    if ncand < N_EXACT:
                        slot = ncand
                        ncand += 1
                    else:
                        for s in range(N_EXACT):
                            if key_less(db, do, cand_db[s], cand_do[s]) and (
                                slot < 0 or key_less(cand_db[slot], cand_do[slot], cand_db[s], cand_do[s])
                            ):
                                slot = s
                    if slot >= 0:
                        cand_t[slot] = k
                        cand_o[slot] = keep_x
                        cand_db[slot] = db
                        cand_do[slot] = do
                elif tt < 0 or key_less(db, do, tdb, tdo):
                    tt = k
                    tdb = db
                    tdo = do
                    tkeep_x = keep_x
        for s in range(ncand):
            mark_part(order, parent, cand_t[s], part)
            # the pairwise term enters through H; the other terms were priced already
            do = cand_do[s] + st.coef[1] * (pair_sum(st.x, mem, part, one) + pair_sum(st.x, mem, part, zero))
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
            mark_part(order, parent, tt, part)
            for p in range(m):
                best_part[p] = part[p]
    if not have or not (force != 0 or better(gdb, gdo)):
        return -1
    # the part that keeps the anchor keeps the slot; the other becomes a new zone
    new_side = 0 if gkeep_x == 1 else 1
    nz = pop_free(st)
    st.cost[nz] = 0.0
    st.brk[nz] = 0.0
    st.head[zone] = -1
    st.head[nz] = -1
    for p in range(m - 1, -1, -1):
        uu = mem[p]
        lab = nz if best_part[p] == new_side else zone
        st.labels[uu] = lab
        link(st, uu, lab)
    recompute_zone(st, zone)
    recompute_zone(st, nz)
    refresh_zone_boundary(st, zone)
    refresh_zone_boundary(st, nz)
    return nz


def split_pass(st, data, zones, seed: int, ntrees: int = N_TREES, far: float = FAR_ABOVE_TARGET) -> int:
    """Try to split every zone above a ceiling or `far` times above a target; returns splits."""
    live = zones.size >= 2
    sums = zones.csum
    with np.errstate(invalid="ignore"):
        over = (np.isfinite(data.hi)[None, :] & (sums > data.hi[None, :])).any(axis=1)
        has_t = (data.tmask == 1) & (data.target > 0)
        far_above = (has_t[None, :] & (sums > far * data.target[None, :])).any(axis=1)
    todo = np.flatnonzero(live & (over | far_above))
    if todo.size == 0:
        return 0
    seed_rng(int(seed))
    loc = np.empty(zones.labels.shape[0], dtype=np.int64)
    splits = 0
    for zone in todo:
        if try_split(st, int(zone), int(ntrees), loc, 0) >= 0:
            splits += 1
    return splits
