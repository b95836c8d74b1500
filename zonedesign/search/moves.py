"""Building the zone state and moving units: whole-labelling loads, relabels, single moves.

Every kernel keeps the per-zone sums, the free-slot stack and the boundary list of
`search.kernels` in step with the labels, at a cost proportional to what changes.
"""

from __future__ import annotations

from numba import njit

from zonedesign.search.kernels import (
    FV_BRK,
    FV_TOTAL,
    IV_NB,
    IV_NFREE,
    IV_STAMP,
    IV_ZSTAMP,
    boundary_status,
    inner,
    link,
    push_free,
    unlink,
)
from zonedesign.search.valuation import (
    dist_to_zone,
    recompute_zone,
    recount,
    stored_value,
    value_with,
)


@njit(cache=True)
def build_state(st, labels, anchors):
    """Fill st from a labelling (slots 0..k-1, -1 for unassigned units) and zone anchors."""
    n = labels.shape[0]
    head = st.head
    size = st.size
    K = head.shape[0]
    for zone in range(K):
        head[zone] = -1
        size[zone] = 0
        st.cost[zone] = 0.0
        st.brk[zone] = 0.0
        st.anchor[zone] = -1
    for zone in range(anchors.shape[0]):
        st.anchor[zone] = anchors[zone]
    # members linked in descending unit order so each list reads ascending
    lab = st.labels
    for i in range(n - 1, -1, -1):
        lab[i] = labels[i]
        st.nxt[i] = -1
        st.prv[i] = -1
        if labels[i] >= 0:
            link(st, i, labels[i])
            size[labels[i]] += 1
    nf = 0
    for zone in range(K - 1, -1, -1):
        if size[zone] > 0:
            recompute_zone(st, zone)
        else:
            st.free[nf] = zone
            nf += 1
    st.iv[IV_NFREE] = nf
    # totals summed afresh, not accumulated zone by zone
    tot = 0.0
    brk = 0.0
    for zone in range(K):
        tot += st.cost[zone]
        brk += st.brk[zone]
    st.fv[FV_TOTAL] = tot
    st.fv[FV_BRK] = brk
    st.iv[IV_NB] = 0
    for i in range(n):
        st.bpos[i] = -1
    for i in range(n):
        recount(st, i)


@njit(cache=True)
def relabel(st, units, new_labels, anchors, zones):
    """Give each unit u of `units` the label new_labels[u] (-1: unassigned).

    Every zone that gains or loses a unit, and every zone listed in `zones`, takes its
    anchor from anchors (K,) and is recomputed from its members; the free stack and the
    boundary are brought up to date. Cost: the sizes of the zones touched, not the whole
    problem.
    """
    labels = st.labels
    zmark = st.zmark
    ztouch = st.ztouch
    st.iv[IV_ZSTAMP] += 1
    stamp = st.iv[IV_ZSTAMP]
    nt = 0
    for k in range(zones.shape[0]):
        z = zones[k]
        if z >= 0 and zmark[z] != stamp:
            zmark[z] = stamp
            ztouch[nt] = z
            nt += 1
    for k in range(units.shape[0]):
        u = units[k]
        old = labels[u]
        new = new_labels[u]
        if old == new:
            continue
        for z in (old, new):
            if z >= 0 and zmark[z] != stamp:
                zmark[z] = stamp
                ztouch[nt] = z
                nt += 1
        if old >= 0:
            unlink(st, u, old)
        if new >= 0:
            link(st, u, new)
        labels[u] = new
    for k in range(nt):
        z = ztouch[k]
        st.anchor[z] = anchors[z]
        recompute_zone(st, z)
    nf = 0
    size = st.size
    for z in range(size.shape[0] - 1, -1, -1):
        if size[z] == 0:
            st.free[nf] = z
            nf += 1
    st.iv[IV_NFREE] = nf
    indptr = st.indptr
    indices = st.indices
    for k in range(units.shape[0]):
        u = units[k]
        recount(st, u)
        for p in range(indptr[u], indptr[u + 1]):
            recount(st, indices[p])


# ---------------------------------------------------------------- single-unit moves


@njit(cache=True)
def unit_links(st, i, a):
    """Scan i's row: (shared length with zone a, neighbours in a, touched other zones).

    The other zones go to st.ztouch[:nt] with their shared length in st.zacc[zone].
    """
    indptr = st.indptr
    indices = st.indices
    length = st.length
    labels = st.labels
    zmark = st.zmark
    zacc = st.zacc
    ztouch = st.ztouch
    st.iv[IV_ZSTAMP] += 1
    stamp = st.iv[IV_ZSTAMP]
    la = 0.0
    nda = 0
    nt = 0
    for p in range(indptr[i], indptr[i + 1]):
        lab = labels[indices[p]]
        if lab == a:
            la += length[p]
            nda += 1
        elif lab >= 0:
            if zmark[lab] != stamp:
                zmark[lab] = stamp
                zacc[lab] = 0.0
                ztouch[nt] = lab
                nt += 1
            zacc[lab] += length[p]
    return la, nda, nt


@njit(cache=True)
def donor_ok(st, i):
    """True when taking i out of its zone leaves the zone non-empty and connected.

    Searches the donor zone from one of i's neighbours in it, never entering i, and stops
    as soon as every one of i's neighbours in the zone has been reached.
    """
    labels = st.labels
    a = labels[i]
    if a < 0:
        return True
    if st.size[a] <= 1:
        return False
    indptr = st.indptr
    indices = st.indices
    mark = st.mark
    queue = st.queue
    st.iv[IV_STAMP] += 2
    target = st.iv[IV_STAMP]
    seen = target + 1
    want = 0
    first = -1
    for p in range(indptr[i], indptr[i + 1]):
        j = indices[p]
        if labels[j] == a and mark[j] != target:
            mark[j] = target
            want += 1
            if first < 0:
                first = j
    if want <= 1:
        return True
    mark[first] = seen
    found = 1
    head = 0
    tail = 0
    queue[tail] = first
    tail += 1
    while head < tail:
        u = queue[head]
        head += 1
        for p in range(indptr[u], indptr[u + 1]):
            v = indices[p]
            if v == i or labels[v] != a:
                continue
            mv = mark[v]
            if mv == seen:
                continue
            if mv == target:
                found += 1
                if found == want:
                    return True
            mark[v] = seen
            queue[tail] = v
            tail += 1
    return False


@inner
def move_values(st, i, a, b, la, lb):
    """(donor cost, donor break, receiver cost, receiver break) after moving i from a to b."""
    ha = 0.0
    hb = 0.0
    if st.kind[0] == 1 and st.coef[1] != 0.0:
        ha = dist_to_zone(st, i, a)
        hb = dist_to_zone(st, i, b)
    ca = 0.0
    ba = 0.0
    if a >= 0:
        ca, ba = value_with(st, a, i, -1.0, la, ha)
    cb, bb = value_with(st, b, i, 1.0, lb, hb)
    return ca, ba, cb, bb


@inner
def apply_move(st, i, b, la, lb):
    """Move unit i to zone b (i may be unassigned); la, lb: i's shared length with each.

    One kernel on purpose: numba compiles each callee again inside its caller, so cutting this
    into helpers adds compile time and calls in the hot loop without making it clearer."""
    labels = st.labels
    counts = st.counts
    x = st.x
    csum = st.csum
    S = st.S
    fv = st.fv
    a = labels[i]
    track_h = st.kind[0] == 1 and st.coef[1] != 0.0
    stab = st.kind[2] == 1
    wi = st.w[i]
    if a >= 0:
        ha = dist_to_zone(st, i, a) if track_h else 0.0
        for c in range(csum.shape[1]):
            csum[a, c] -= counts[i, c]
        st.W[a] -= wi
        if wi > 0.0:
            st.npos[a] -= 1
        for t in range(S.shape[1]):
            S[a, t] -= wi * x[i, t]
        st.Q[a] -= st.q[i]
        st.H[a] -= ha
        st.A[a] -= st.area[i]
        st.P[a] -= st.perim[i] - 2.0 * la
        if stab and st.prev[i] != st.anchor[a]:
            st.nstab[a] -= 1
        st.size[a] -= 1
        unlink(st, i, a)
        fv[FV_TOTAL] -= st.cost[a]
        fv[FV_BRK] -= st.brk[a]
        if st.size[a] == 0:
            st.cost[a] = 0.0
            st.brk[a] = 0.0
            push_free(st, a)
        else:
            ca, ba = stored_value(st, a)
            st.cost[a] = ca
            st.brk[a] = ba
            fv[FV_TOTAL] += ca
            fv[FV_BRK] += ba
    hb = dist_to_zone(st, i, b) if track_h else 0.0
    for c in range(csum.shape[1]):
        csum[b, c] += counts[i, c]
    st.W[b] += wi
    if wi > 0.0:
        st.npos[b] += 1
    for t in range(S.shape[1]):
        S[b, t] += wi * x[i, t]
    st.Q[b] += st.q[i]
    st.H[b] += hb
    st.A[b] += st.area[i]
    st.P[b] += st.perim[i] - 2.0 * lb
    if stab and st.prev[i] != st.anchor[b]:
        st.nstab[b] += 1
    st.size[b] += 1
    link(st, i, b)
    labels[i] = b
    fv[FV_TOTAL] -= st.cost[b]
    fv[FV_BRK] -= st.brk[b]
    cb, bb = stored_value(st, b)
    st.cost[b] = cb
    st.brk[b] = bb
    fv[FV_TOTAL] += cb
    fv[FV_BRK] += bb
    # boundary bookkeeping: only i and its neighbours can change status
    indptr = st.indptr
    indices = st.indices
    nbdiff = st.nbdiff
    cnt = 0
    for p in range(indptr[i], indptr[i + 1]):
        j = indices[p]
        lj = labels[j]
        if lj != b:
            cnt += 1
        before = 1 if lj != a else 0
        after = 1 if lj != b else 0
        if before != after:
            nbdiff[j] += after - before
            boundary_status(st, j)
    nbdiff[i] = cnt
    boundary_status(st, i)


@njit(cache=True)
def move_delta(st, i, b):
    """(break change, objective change) of moving unit i to zone b."""
    a = st.labels[i]
    la, nda, nt = unit_links(st, i, a)
    lb = 0.0
    for t in range(nt):
        if st.ztouch[t] == b:
            lb = st.zacc[b]
    ca, ba, cb, bb = move_values(st, i, a, b, la, lb)
    old_c = st.cost[b]
    old_b = st.brk[b]
    if a >= 0:
        old_c += st.cost[a]
        old_b += st.brk[a]
    return (ba + bb) - old_b, (ca + cb) - old_c


@njit(cache=True)
def move_unit(st, i, b):
    """Move unit i (assigned or not) to zone b."""
    a = st.labels[i]
    la, nda, nt = unit_links(st, i, a)
    lb = 0.0
    for t in range(nt):
        if st.ztouch[t] == b:
            lb = st.zacc[b]
    apply_move(st, i, b, la, lb)
