"""Simulated annealing over single-unit moves (Openshaw & Rao 1995).

Focused proposals: most of a cooled zoning is already as good as single moves make it,
and a trial there is almost always refused, so a share of the trials is drawn from the
units of the costliest zones and their neighbours (`hot_units`, refreshed at every
temperature), the rest from all boundary units as usual.

A move that raises the bound breaks is never taken; one that lowers them always is; any
other is taken by the Metropolis rule on the objective change at the current temperature.
The temperature falls geometrically, one block of moves per temperature. The best
labelling seen is kept without copying the labels at every new best: the moves made since
the last best are logged and replayed onto the kept copy when a new best is reached (or,
after more than n moves, the whole labelling is copied then).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from zonedesign.search.kernels import (
    EPS_BRK,
    EPS_OBJ,
    FV_BRK,
    FV_TOTAL,
    IV_NB,
    inner,
    key_less,
)
from zonedesign.search.moves import (
    apply_move,
    donor_ok,
    move_values,
    unit_links,
)

# slots of the int control array shared by the annealing and tabu kernels
CT_CUR_BEST = 0  # 1 when the current labelling is the best seen
CT_LOG = 1  # moves logged since best_labels was last brought up to date (-1: too many)
CT_TRIED = 2
CT_ACCEPTED = 3
CT_CHANGED = 4  # accepted moves that changed breaks or objective
CT_IMPROVED = 5  # times the best seen improved
CT_NO_IMPROVE = 6  # tabu: iterations since the best improved
CT_SIZE = 8


@njit(cache=True)
def sample_uphill(st, seed, nsamp):
    """Mean objective rise over random moves that keep the breaks (0 when none rise)."""
    labels = st.labels
    size = st.size
    brk = st.brk
    cost = st.cost
    ztouch = st.ztouch
    zacc = st.zacc
    blist = st.blist
    iv = st.iv
    np.random.seed(seed)
    tot = 0.0
    cnt = 0
    for _ in range(nsamp):
        nb = iv[IV_NB]
        if nb == 0:
            break
        i = blist[np.random.randint(nb)]
        a = labels[i]
        la, nda, nt = unit_links(st, i, a)
        if nt == 0 or size[a] <= 1:
            continue
        b = ztouch[np.random.randint(nt)]
        ca, ka, cb, kb = move_values(st, i, a, b, la, zacc[b])
        db = (ka + kb) - (brk[a] + brk[b])
        do = (ca + cb) - (cost[a] + cost[b])
        if db <= EPS_BRK and do > EPS_OBJ:
            tot += do
            cnt += 1
    return tot / cnt if cnt > 0 else 0.0


@inner
def is_new_best(st, db, do, ctl):
    """The move (db, do) about to be made beats the best labelling seen."""
    return key_less(st.fv[FV_BRK] + db, st.fv[FV_TOTAL] + do, ctl[0], ctl[1])


@inner
def log_move(st, i, b, newbest, best_labels, log, ctl, cti):
    """Book the move just made (unit i into zone b); on a new best, update best_labels."""
    nl = cti[CT_LOG]
    if nl >= 0:
        if nl < log.shape[0]:
            log[nl, 0] = i
            log[nl, 1] = b
            cti[CT_LOG] = nl + 1
        else:
            cti[CT_LOG] = -1
    if newbest:
        nl = cti[CT_LOG]
        if nl >= 0:
            for k in range(nl):
                best_labels[log[k, 0]] = log[k, 1]
        else:
            labels = st.labels
            for u in range(best_labels.shape[0]):
                best_labels[u] = labels[u]
        cti[CT_LOG] = 0
        ctl[0] = st.fv[FV_BRK]
        ctl[1] = st.fv[FV_TOTAL]
        cti[CT_CUR_BEST] = 1
        cti[CT_IMPROVED] += 1
    else:
        cti[CT_CUR_BEST] = 0


def hot_zones(size: np.ndarray, cost: np.ndarray, share: float) -> np.ndarray:
    """(K,) True for the costliest `share` of the live zones (size > 0; ties kept)."""
    live = size > 0
    costs = cost[live]
    hot = np.zeros(live.size, dtype=np.bool_)
    if costs.size:
        idx = min(costs.size - 1, int((1.0 - share) * costs.size))
        hot[live] = costs >= np.partition(costs, idx)[idx]
    return hot


@njit(cache=True)
def hot_units(st, hot, cand):
    """Write to cand the boundary units in a hot zone or beside one; returns how many.

    hot: (K,) True for the zones the trials focus on.
    """
    labels = st.labels
    indptr = st.indptr
    indices = st.indices
    bpos = st.bpos
    m = 0
    for i in range(labels.shape[0]):
        if bpos[i] < 0:
            continue
        h = hot[labels[i]]
        if not h:
            for p in range(indptr[i], indptr[i + 1]):
                if hot[labels[indices[p]]]:
                    h = True
                    break
        if h:
            cand[m] = i
            m += 1
    return m


@njit(cache=True)
def anneal_block(st, seed, temp, nmoves, best_labels, log, ctl, cti, cand, ncand, uniform):
    """nmoves Metropolis trials at temperature temp.

    ctl: [best breaks, best total]; cti: control counters (CT_*); best_labels: (n,) the
    best labelling seen, as of the last new best; log: (n, 2) moves since. With
    ncand > 0, a trial's unit comes from cand[:ncand] (see `hot_units`) except for a
    share `uniform` of the trials, drawn from all boundary units; a drawn unit no longer
    on a boundary is a trial lost.
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
    for _ in range(nmoves):
        nb = iv[IV_NB]
        if nb == 0:
            break
        if ncand > 0 and np.random.random() >= uniform:
            i = cand[np.random.randint(ncand)]
            if bpos[i] < 0:
                continue
        else:
            i = blist[np.random.randint(nb)]
        a = labels[i]
        if size[a] <= 1:
            continue
        la, nda, nt = unit_links(st, i, a)
        if nt == 0:
            continue
        b = ztouch[np.random.randint(nt)]
        lb = zacc[b]
        ca, ka, cb, kb = move_values(st, i, a, b, la, lb)
        db = (ka + kb) - (brk[a] + brk[b])
        do = (ca + cb) - (cost[a] + cost[b])
        cti[CT_TRIED] += 1
        if db > EPS_BRK:
            continue
        if db >= -EPS_BRK and do > 0.0:
            if temp <= 0.0 or np.random.random() >= np.exp(-do / temp):
                continue
        if not donor_ok(st, i):
            continue
        newbest = is_new_best(st, db, do, ctl)
        apply_move(st, i, b, la, lb)
        cti[CT_ACCEPTED] += 1
        if db < -EPS_BRK or abs(do) > EPS_OBJ:
            cti[CT_CHANGED] += 1
        log_move(st, i, b, newbest, best_labels, log, ctl, cti)
