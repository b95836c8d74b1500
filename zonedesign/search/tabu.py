"""Tabu search over single-unit moves (Openshaw & Rao 1995).

Each iteration prices the moves of the boundary units (all of them while they are few, a
random sample otherwise) and makes the best admissible one even when it worsens the
objective. A move is admissible when it keeps the donor zone non-empty and connected,
does not raise the bound breaks, and is not tabu: moving a unit back into the zone it
left is tabu for `tenure` iterations, unless the move beats the best labelling seen
(aspiration). The best labelling seen is kept.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from zonedesign.search.anneal import (
    CT_ACCEPTED,
    CT_NO_IMPROVE,
    CT_TRIED,
    is_new_best,
    log_move,
)
from zonedesign.search.kernels import (
    EPS_BRK,
    FV_BRK,
    FV_TOTAL,
    IV_NB,
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
def tabu_block(
    st, seed, it0, niter, sample, tenure, max_no_improve, tabu_zone, tabu_until, best_labels, log, ctl, cti
):
    """Run iterations it0 .. it0+niter-1; returns the next iteration, or -1 when stopped.

    Stops (returns -1) when no admissible move remains or after max_no_improve iterations
    without a new best. tabu_zone / tabu_until: (n,) the zone each unit may not re-enter
    and the iteration that ban ends. best_labels, log, ctl, cti as for anneal_block.

    One kernel on purpose: numba compiles each callee again inside its caller, so cutting this
    into helpers adds compile time and calls in the hot loop without making it clearer.
    """
    labels = st.labels
    size = st.size
    brk = st.brk
    cost = st.cost
    ztouch = st.ztouch
    zacc = st.zacc
    blist = st.blist
    iv = st.iv
    fv = st.fv
    np.random.seed(seed)
    pairwise = st.kind[0] == 1 and st.coef[1] != 0.0
    for it in range(it0, it0 + niter):
        nb = iv[IV_NB]
        if nb == 0:
            return -1
        full = nb <= sample
        cnt = nb if full else sample
        bi = np.int64(-1)
        bb = np.int64(-1)
        bdb = 0.0
        bdo = 0.0
        bla = 0.0
        blb = 0.0
        for s in range(cnt):
            i = blist[s] if full else blist[np.random.randint(nb)]
            a = labels[i]
            if size[a] <= 1:
                continue
            la, nda, nt = unit_links(st, i, a)
            ha = dist_to_zone(st, i, a) if pairwise else 0.0
            ca, ka = value_with(st, a, i, -1.0, la, ha)
            conn = -1
            for q in range(nt):
                b = ztouch[q]
                hb = dist_to_zone(st, i, b) if pairwise else 0.0
                cb, kb = value_with(st, b, i, 1.0, zacc[b], hb)
                db = (ka + kb) - (brk[a] + brk[b])
                do = (ca + cb) - (cost[a] + cost[b])
                cti[CT_TRIED] += 1
                if db > EPS_BRK:
                    continue
                if bi >= 0 and not key_less(db, do, bdb, bdo):
                    continue
                if tabu_zone[i] == b and it < tabu_until[i]:
                    if not key_less(fv[FV_BRK] + db, fv[FV_TOTAL] + do, ctl[0], ctl[1]):
                        continue
                if conn < 0:
                    conn = 1 if donor_ok(st, i) else 0
                if conn == 0:
                    break
                bi = i
                bb = b
                bdb = db
                bdo = do
                bla = la
                blb = zacc[b]
        if bi < 0:
            return -1
        a = labels[bi]
        newbest = is_new_best(st, bdb, bdo, ctl)
        apply_move(st, bi, bb, bla, blb)
        cti[CT_ACCEPTED] += 1
        tabu_zone[bi] = a
        tabu_until[bi] = it + tenure
        log_move(st, bi, bb, newbest, best_labels, log, ctl, cti)
        if newbest:
            cti[CT_NO_IMPROVE] = 0
        else:
            cti[CT_NO_IMPROVE] += 1
            if cti[CT_NO_IMPROVE] >= max_no_improve:
                return -1
    return it0 + niter
