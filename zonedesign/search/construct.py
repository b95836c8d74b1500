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
    apply_move,
    dist_to_zone,
    key_less,
    move_unit,
    pop_free,
    unit_links,
    value_with,
)


@njit(cache=True)
def grow_zones(d, seed, alpha, beta, labels):
    """Region growing; writes zone ids 0..k-1 to labels (-1 for enclaves) and returns k."""
    np.random.seed(seed)
    n = labels.shape[0]
    nc = d.counts.shape[1]
    na = d.x.shape[1]
    for i in range(n):
        labels[i] = -1
    enclave = -2
    tcol = -1
    for c in range(nc):
        if d.tmask[c] == 1:
            tcol = c
            break
    tc = np.zeros(nc)
    xs = np.zeros(na)
    fr = np.empty(n, dtype=np.int64)
    flen = np.zeros(n)
    fmark = np.full(n, -1, dtype=np.int64)
    mem = np.empty(n, dtype=np.int64)
    perm = np.random.permutation(n)
    k = 0
    stamp = 0
    for s in perm:
        if labels[s] != -1:
            continue
        stamp += 1
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
                tc[c] += d.counts[u, c]
            for t in range(na):
                xs[t] += d.x[u, t]
            for p in range(d.indptr[u], d.indptr[u + 1]):
                j = d.indices[p]
                if labels[j] != -1:
                    continue
                if fmark[j] != stamp:
                    fmark[j] = stamp
                    flen[j] = 0.0
                    fr[nf] = j
                    nf += 1
                flen[j] += d.length[p]
            floors = True
            for c in range(nc):
                if np.isfinite(d.lo[c]) and tc[c] < d.lo[c]:
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
                    if np.isfinite(d.hi[c]) and tc[c] + d.counts[j, c] > d.hi[c]:
                        ok = False
                if not ok:
                    continue
                if floors:
                    now = abs(tc[tcol] - d.target[tcol])
                    after = abs(tc[tcol] + d.counts[j, tcol] - d.target[tcol])
                    if after >= now:
                        continue
                sc = 0.0
                if alpha > 0.0 and na > 0:
                    dd = 0.0
                    for t in range(na):
                        v = d.x[j, t] - xs[t] / m
                        dd += v * v
                    sc += alpha * dd / na
                if beta > 0.0:
                    share = flen[j] / d.perim[j] if d.perim[j] > 0.0 else 0.0
                    sc += beta * (1.0 - min(share, 1.0))
                if sc < bscore:
                    bscore = sc
                    best = j
            nf = keep
            u = best
        floors = True
        for c in range(nc):
            if np.isfinite(d.lo[c]) and tc[c] < d.lo[c]:
                floors = False
        if floors:
            k += 1
        else:
            for q in range(m):
                labels[mem[q]] = enclave
    for i in range(n):
        if labels[i] == enclave:
            labels[i] = -1
    return k


@njit(cache=True)
def absorb_enclaves(d, z, seed):
    """Give every unassigned unit a zone; returns the number of zones made for lone components.

    z must hold the partial labelling (unassigned units labelled -1).
    """
    np.random.seed(seed)
    n = z.labels.shape[0]
    cand = np.empty(n, dtype=np.int64)
    pairwise = d.kind[0] == 1 and d.coef[1] != 0.0
    while True:
        nc = 0
        for i in range(n):
            if z.labels[i] >= 0:
                continue
            for p in range(d.indptr[i], d.indptr[i + 1]):
                if z.labels[d.indices[p]] >= 0:
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
            if z.labels[i] >= 0:
                continue
            la, nda, nt = unit_links(d, z, i, -1)
            bb = -1
            bdb = 0.0
            bdo = 0.0
            blen = 0.0
            for q in range(nt):
                b = z.ztouch[q]
                hb = dist_to_zone(d, z, i, b) if pairwise else 0.0
                cb, kb = value_with(d, z, b, i, 1.0, z.zacc[b], hb)
                db = kb - z.brk[b]
                do = cb - z.cost[b]
                if bb < 0 or key_less(db, do, bdb, bdo):
                    bb = b
                    bdb = db
                    bdo = do
                    blen = z.zacc[b]
            apply_move(d, z, i, bb, 0.0, blen)
    # what is left are whole components without a zone: one zone each
    made = 0
    for s in range(n):
        if z.labels[s] >= 0:
            continue
        nz = pop_free(z)
        made += 1
        move_unit(d, z, s, nz)
        head = 0
        tail = 0
        z.queue[tail] = s
        tail += 1
        while head < tail:
            u = z.queue[head]
            head += 1
            for p in range(d.indptr[u], d.indptr[u + 1]):
                v = d.indices[p]
                if z.labels[v] < 0:
                    move_unit(d, z, v, nz)
                    z.queue[tail] = v
                    tail += 1
    return made
