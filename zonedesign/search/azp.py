"""AZP local search (Openshaw 1977): move edge units to the neighbouring zone that improves.

One sweep visits every unit on a zone edge in random order and moves it to the
neighbouring zone giving the best strict improvement of (breaks, objective), provided its
zone stays non-empty and connected. Sweeps repeat until one moves nothing: the labelling is
then a local optimum for single-unit moves.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from zonedesign.search.kernels import (
    IV_NB,
    IV_STAMP,
    better,
    inner,
    key_less,
)
from zonedesign.search.moves import (
    apply_move,
    donor_ok,
    unit_links,
)
from zonedesign.search.valuation import (
    dist_to_zone,
    value_with,
)


@njit(cache=True)
def descent_sweep(st, seed, order, stats):
    """One sweep over the boundary units; returns the number of moves made.

    order: (n,) int64 scratch. stats[0] counts moves evaluated, stats[1] moves made.
    """
    labels = st.labels
    size = st.size
    brk = st.brk
    cost = st.cost
    ztouch = st.ztouch
    zacc = st.zacc
    blist = st.blist
    bpos = st.bpos
    iv = st.iv
    np.random.seed(seed)
    nb = iv[IV_NB]
    for t in range(nb):
        order[t] = blist[t]
    for t in range(nb - 1, 0, -1):
        r = np.random.randint(t + 1)
        tmp = order[t]
        order[t] = order[r]
        order[r] = tmp
    pairwise = st.kind[0] == 1 and st.coef[1] != 0.0
    made = 0
    for t in range(nb):
        i = order[t]
        if bpos[i] < 0:
            continue
        a = labels[i]
        if size[a] <= 1:
            continue
        la, nda, nt = unit_links(st, i, a)
        ha = dist_to_zone(st, i, a) if pairwise else 0.0
        ca, ka = value_with(st, a, i, -1.0, la, ha)
        bb = np.int64(-1)
        bdb = 0.0
        bdo = 0.0
        blen = 0.0
        for q in range(nt):
            b = ztouch[q]
            hb = dist_to_zone(st, i, b) if pairwise else 0.0
            cb, kb = value_with(st, b, i, 1.0, zacc[b], hb)
            db = (ka + kb) - (brk[a] + brk[b])
            do = (ca + cb) - (cost[a] + cost[b])
            stats[0] += 1
            if better(db, do) and (bb < 0 or key_less(db, do, bdb, bdo)):
                bb = b
                bdb = db
                bdo = do
                blen = zacc[b]
        if bb >= 0 and donor_ok(st, i):
            apply_move(st, i, bb, la, blen)
            stats[1] += 1
            made += 1
    return made


@njit(cache=True)
def local_descent(st, seed, zones, stats):
    """Descent over the members of `zones` and their neighbours only, to a local optimum.

    Used to repair the labelling around a forced merge or split. stats as descent_sweep.
    """
    np.random.seed(seed)
    units = np.empty(st.labels.shape[0], dtype=np.int64)
    nu = descent_units(st, zones, zones.shape[0], units)
    descend_units(st, units, nu, stats)


@inner
def descent_units(st, zones, nz, units):
    """The members of zones[:nz] (entries < 0 skipped) and their neighbours, into units;
    returns how many. Only these units can move in `descend_units`."""
    indptr = st.indptr
    indices = st.indices
    nxt = st.nxt
    mark = st.mark
    st.iv[IV_STAMP] += 2
    stamp = st.iv[IV_STAMP]
    nu = 0
    for k in range(nz):
        z = zones[k]
        if z < 0:
            continue
        u = st.head[z]
        while u >= 0:
            if mark[u] != stamp:
                mark[u] = stamp
                units[nu] = u
                nu += 1
            for p in range(indptr[u], indptr[u + 1]):
                v = indices[p]
                if mark[v] != stamp:
                    mark[v] = stamp
                    units[nu] = v
                    nu += 1
            u = nxt[u]
    return nu


@inner
def descend_units(st, units, nu, stats):
    """Sweeps over units[:nu] in random order (the kernels' generator) until one moves
    nothing: each boundary unit goes to the neighbouring zone that improves most."""
    labels = st.labels
    pairwise = st.kind[0] == 1 and st.coef[1] != 0.0
    brk = st.brk
    cost = st.cost
    for _sweep in range(100):
        for t in range(nu - 1, 0, -1):
            r = np.random.randint(t + 1)
            tmp = units[t]
            units[t] = units[r]
            units[r] = tmp
        made = 0
        for t in range(nu):
            i = units[t]
            if st.bpos[i] < 0:
                continue
            a = labels[i]
            if st.size[a] <= 1:
                continue
            la, nda, nt = unit_links(st, i, a)
            ha = dist_to_zone(st, i, a) if pairwise else 0.0
            ca, ka = value_with(st, a, i, -1.0, la, ha)
            bb = np.int64(-1)
            bdb = 0.0
            bdo = 0.0
            blen = 0.0
            for q in range(nt):
                b = st.ztouch[q]
                hb = dist_to_zone(st, i, b) if pairwise else 0.0
                cb, kb = value_with(st, b, i, 1.0, st.zacc[b], hb)
                db = (ka + kb) - (brk[a] + brk[b])
                do = (ca + cb) - (cost[a] + cost[b])
                stats[0] += 1
                if better(db, do) and (bb < 0 or key_less(db, do, bdb, bdo)):
                    bb = b
                    bdb = db
                    bdo = do
                    blen = st.zacc[b]
            if bb >= 0 and donor_ok(st, i):
                apply_move(st, i, bb, la, blen)
                stats[1] += 1
                made += 1
        if made == 0:
            break
