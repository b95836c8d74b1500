"""Simulated annealing over single-unit moves (Openshaw & Rao 1995).

A move that raises the bound breaks is never taken; one that lowers them always is; any
other is taken by the Metropolis rule on the objective change at the current temperature.
The temperature falls geometrically, one block of moves per temperature. The best
labelling seen is kept (copied lazily: only when the search is about to leave it).
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
    apply_move,
    donor_ok,
    key_less,
    move_values,
    unit_links,
)

# slots of the int control array shared by the annealing and tabu kernels
CT_CUR_BEST = 0  # 1 when the current labelling is the best seen
CT_SAVED = 1  # 1 when best_labels holds the best seen
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


@njit(cache=True)
def keep_best(st, db, do, best_labels, ctl, cti):
    """Before leaving the current labelling: save it if it is the best seen and unsaved.

    Returns True when the move (db, do) about to be made yields a new best.
    """
    newbest = key_less(st.fv[FV_BRK] + db, st.fv[FV_TOTAL] + do, ctl[0], ctl[1])
    if cti[CT_CUR_BEST] == 1 and cti[CT_SAVED] == 0 and not newbest:
        for u in range(best_labels.shape[0]):
            best_labels[u] = st.labels[u]
        cti[CT_SAVED] = 1
    return newbest


@njit(cache=True)
def note_best(st, newbest, ctl, cti):
    if newbest:
        ctl[0] = st.fv[FV_BRK]
        ctl[1] = st.fv[FV_TOTAL]
        cti[CT_CUR_BEST] = 1
        cti[CT_SAVED] = 0
        cti[CT_IMPROVED] += 1
    else:
        cti[CT_CUR_BEST] = 0


@njit(cache=True)
def anneal_block(st, seed, temp, nmoves, best_labels, ctl, cti):
    """nmoves Metropolis trials at temperature temp.

    ctl: [best breaks, best total]; cti: control counters (CT_*); best_labels: (n,).
    """
    labels = st.labels
    size = st.size
    brk = st.brk
    cost = st.cost
    ztouch = st.ztouch
    zacc = st.zacc
    blist = st.blist
    iv = st.iv
    np.random.seed(seed)
    for _ in range(nmoves):
        nb = iv[IV_NB]
        if nb == 0:
            break
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
        newbest = keep_best(st, db, do, best_labels, ctl, cti)
        apply_move(st, i, b, la, lb)
        cti[CT_ACCEPTED] += 1
        if db < -EPS_BRK or abs(do) > EPS_OBJ:
            cti[CT_CHANGED] += 1
        note_best(st, newbest, ctl, cti)
