"""Initial zones by region growing in the manner of max-p regions (Duque, Anselin & Rey 2012).

A zone starts from a random unassigned seed unit and takes, one at a time, the neighbouring
unassigned unit that keeps it most alike (attribute distance to the zone mean) and compact
(share of the unit's perimeter it shares with the zone), never passing a ceiling. Once every
floor is met it keeps growing only while a unit brings the first targeted count closer to
its target. A zone that cannot reach its floors is dissolved: its units become enclaves,
and each enclave later joins the neighbouring zone that takes it at least cost (breaks
first, so a ceiling is passed only when no neighbour can take the unit otherwise). Units
of a connected component that holds no zone at all (a component below a floor) form one
zone per component, the best a component can do.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from zonedesign.search.kernels import (
    IV_ZSTAMP,
    inner,
    key_less,
    pop_free,
)
from zonedesign.search.moves import (
    apply_move,
    unit_links,
)
from zonedesign.search.valuation import (
    dist_to_zone,
    value_with,
)


@njit(cache=True)
def grow_zones(st, seed, alpha, beta, labels, units, k0, aim_lo, aim_hi):
    """Region growing over the units labelled -1; returns the number of zones k made.

    Seeds are drawn in random order from `units` (those still labelled -1). Units with
    another label stay as they are and are never entered. New zones get ids
    k0..k0+k-1; units of zones that missed a floor are left at -1 (enclaves). Each zone
    grows towards an aim drawn between aim_lo and aim_hi times the target (1, 1 for the
    target itself).
    """
    np.random.seed(seed)
    n = labels.shape[0]
    fr = np.empty(n, dtype=np.int64)
    flen = np.zeros(n)
    fmark = np.full(n, -1, dtype=np.int64)
    mem = np.empty(n, dtype=np.int64)
    perm = units.copy()
    # a typed stamp: the reshape passes an int64 one, and a literal 0 would compile it again
    made, _ = grow_region(
        st, alpha, beta, labels, perm, perm.shape[0], k0, aim_lo, aim_hi, fr, flen, fmark, mem, np.int64(0)
    )
    # a zone may have grown into units labelled -1 outside `units`
    for i in range(n):
        if labels[i] == -2:
            labels[i] = -1
    return made


@inner
def grow_region(st, alpha, beta, labels, perm, m_units, k0, aim_lo, aim_hi, fr, flen, fmark, mem, stamp):
    """grow_zones over perm[:m_units] (shuffled in place) with the kernels' generator as
    it stands and caller-owned scratch: fr, flen, fmark, mem (n,) each, fmark holding
    values below `stamp` only. Returns (zones made, the last stamp used), so a caller
    can grow again and again over the same scratch at a cost proportional to the region.
    Units of zones that missed a floor are set back to -1 when they are in perm[:m_units]
    (left at -2 otherwise), so every unit labelled -1 should be there.

    One kernel on purpose: numba compiles each callee again inside its caller, so cutting this
    into helpers adds compile time and calls in the hot loop without making it clearer.
    """
    indptr = st.indptr
    indices = st.indices
    length = st.length
    counts = st.counts
    x = st.x
    lo = st.lo
    hi = st.hi
    target = st.target
    perim = st.perim
    tmask = st.tmask
    nc = counts.shape[1]
    na = x.shape[1]
    enclave = -2
    tcol = -1
    for c in range(nc):
        if tmask[c] == 1:
            tcol = c
            break
    tc = np.zeros(nc)
    xs = np.zeros(na)
    for t in range(m_units - 1, 0, -1):
        r = np.random.randint(t + 1)
        tmp = perm[t]
        perm[t] = perm[r]
        perm[r] = tmp
    k = k0
    aim = 0.0
    for ps in range(m_units):
        s = perm[ps]
        if labels[s] != -1:
            continue
        stamp += 1
        if tcol >= 0:
            aim = target[tcol] * (aim_lo + (aim_hi - aim_lo) * np.random.random())
        for c in range(nc):
            tc[c] = 0.0
        for t in range(na):
            xs[t] = 0.0
        m = 0
        nf = 0
        u = s
        while u >= 0:
            labels[u] = k
            mem[m] = u
            m += 1
            for c in range(nc):
                tc[c] += counts[u, c]
            for t in range(na):
                xs[t] += x[u, t]
            for p in range(indptr[u], indptr[u + 1]):
                j = indices[p]
                if labels[j] != -1:
                    continue
                if fmark[j] != stamp:
                    fmark[j] = stamp
                    flen[j] = 0.0
                    fr[nf] = j
                    nf += 1
                flen[j] += length[p]
            floors = True
            for c in range(nc):
                if np.isfinite(lo[c]) and tc[c] < lo[c]:
                    floors = False
            if floors and tcol < 0:
                break
            # pick the next unit; drop assigned units from the frontier on the way
            best = -1
            bscore = np.inf
            keep = 0
            for q in range(nf):
                j = fr[q]
                if labels[j] != -1:
                    continue
                fr[keep] = j
                keep += 1
                ok = True
                for c in range(nc):
                    if np.isfinite(hi[c]) and tc[c] + counts[j, c] > hi[c]:
                        ok = False
                if not ok:
                    continue
                if floors:
                    now = abs(tc[tcol] - aim)
                    after = abs(tc[tcol] + counts[j, tcol] - aim)
                    if after >= now:
                        continue
                sc = 0.0
                if alpha > 0.0 and na > 0:
                    dd = 0.0
                    for t in range(na):
                        v = x[j, t] - xs[t] / m
                        dd += v * v
                    sc += alpha * dd / na
                if beta > 0.0:
                    share = flen[j] / perim[j] if perim[j] > 0.0 else 0.0
                    sc += beta * (1.0 - min(share, 1.0))
                if sc < bscore:
                    bscore = sc
                    best = j
            nf = keep
            u = best
        floors = True
        for c in range(nc):
            if np.isfinite(lo[c]) and tc[c] < lo[c]:
                floors = False
        if floors:
            k += 1
        else:
            for q in range(m):
                labels[mem[q]] = enclave
    for ps in range(m_units):
        if labels[perm[ps]] == enclave:
            labels[perm[ps]] = -1
    return k - k0, stamp


@inner
def attach_to_neighbours(st, units, m, cand):
    """Give every unit of units[:m] still labelled -1 that touches a zone the neighbouring
    zone that takes it at least cost (breaks first), in random order, until none is left
    touching a zone; what stays -1 are whole parts that no zone touches.

    cand: scratch of at least m entries. Draws from numba's generator (seed it first)."""
    indptr = st.indptr
    indices = st.indices
    labels = st.labels
    pairwise = st.kind[0] == 1 and st.coef[1] != 0.0
    # typed, not literal, so callees compile once (numba specialises on literal ints)
    none = np.int64(-1)
    while True:
        nc = 0
        for k in range(m):
            i = units[k]
            if labels[i] >= 0:
                continue
            for p in range(indptr[i], indptr[i + 1]):
                if labels[indices[p]] >= 0:
                    cand[nc] = i
                    nc += 1
                    break
        if nc == 0:
            break
        for t in range(nc - 1, 0, -1):
            r = np.random.randint(t + 1)
            tmp = cand[t]
            cand[t] = cand[r]
            cand[r] = tmp
        for t in range(nc):
            i = cand[t]
            if labels[i] >= 0:
                continue
            _, _, nt = unit_links(st, i, none)
            bb = none
            bdb = 0.0
            bdo = 0.0
            blen = 0.0
            for q in range(nt):
                b = st.ztouch[q]
                hb = dist_to_zone(st, i, b) if pairwise else 0.0
                cb, kb = value_with(st, b, i, 1.0, st.zacc[b], hb)
                db = kb - st.brk[b]
                do = cb - st.cost[b]
                if bb < 0 or key_less(db, do, bdb, bdo):
                    bb = b
                    bdb = db
                    bdo = do
                    blen = st.zacc[b]
            apply_move(st, i, bb, 0.0, blen)


@njit(cache=True)
def absorb_enclaves(st, seed):
    """Give every unassigned unit a zone; returns the number of zones made for lone components.

    st must hold the partial labelling (unassigned units labelled -1).
    """
    indptr = st.indptr
    indices = st.indices
    labels = st.labels
    queue = st.queue
    np.random.seed(seed)
    n = labels.shape[0]
    cand = np.empty(n, dtype=np.int64)
    # typed, not literal, so callees compile once (numba specialises on literal ints)
    none = np.int64(-1)
    attach_to_neighbours(st, np.arange(n, dtype=np.int64), n, cand)
    # what is left are whole components without a zone: one zone each
    made = 0
    for s in range(n):
        if labels[s] >= 0:
            continue
        nz = pop_free(st)
        made += 1
        apply_move(st, s, nz, 0.0, 0.0)
        head = 0
        tail = 0
        queue[tail] = s
        tail += 1
        while head < tail:
            u = queue[head]
            head += 1
            for p in range(indptr[u], indptr[u + 1]):
                v = indices[p]
                if labels[v] < 0:
                    la, nda, nt = unit_links(st, v, none)
                    apply_move(st, v, nz, 0.0, st.zacc[nz] if st.zmark[nz] == st.iv[IV_ZSTAMP] else 0.0)
                    queue[tail] = v
                    tail += 1
    return made
