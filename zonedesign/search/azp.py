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
    apply_move,
    better,
    dist_to_zone,
    donor_ok,
    key_less,
    unit_links,
    value_with,
)


@njit(cache=True)
def descent_sweep(d, z, seed, order, stats):
    """One sweep over the boundary units; returns the number of moves made.

    order: (n,) int64 scratch. stats[0] counts moves evaluated, stats[1] moves made.
    """
    np.random.seed(seed)
    nb = z.iv[IV_NB]
    for t in range(nb):
        order[t] = z.blist[t]
    for t in range(nb - 1, 0, -1):
        r = np.random.randint(t + 1)
        tmp = order[t]
        order[t] = order[r]
        order[r] = tmp
    pairwise = d.kind[0] == 1 and d.coef[1] != 0.0
    made = 0
    for t in range(nb):
        i = order[t]
        if z.bpos[i] < 0:
            continue
        a = z.labels[i]
        if z.size[a] <= 1:
            continue
        la, nda, nt = unit_links(d, z, i, a)
        ha = dist_to_zone(d, z, i, a) if pairwise else 0.0
        ca, ka = value_with(d, z, a, i, -1.0, la, ha)
        bb = -1
        bdb = 0.0
        bdo = 0.0
        blen = 0.0
        for q in range(nt):
            b = z.ztouch[q]
            hb = dist_to_zone(d, z, i, b) if pairwise else 0.0
            cb, kb = value_with(d, z, b, i, 1.0, z.zacc[b], hb)
            db = (ka + kb) - (z.brk[a] + z.brk[b])
            do = (ca + cb) - (z.cost[a] + z.cost[b])
            stats[0] += 1
            if better(db, do) and (bb < 0 or key_less(db, do, bdb, bdo)):
                bb = b
                bdb = db
                bdo = do
                blen = z.zacc[b]
        if bb >= 0 and donor_ok(d, z, i):
            apply_move(d, z, i, bb, la, blen)
            stats[1] += 1
            made += 1
    return made
