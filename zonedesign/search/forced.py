"""Forced changes of the reshape phase, with an undo log, as compiled kernels.

Each change (split, merge, regrow, shift a unit) is made on the compiled state around
one zone even when it makes things worse; the reshape phase (`search.reshape`) then
repairs the neighbourhood and keeps the result only when it improves. Going back must not
cost the size of the fence, so every change writes what it is about to alter into a
`Work` record first: (unit, old label) for each unit that may change zone, (zone, old
anchor) for each zone slot it touches, and the free slots it takes. `undo` replays that
log: units go back to their zones, the zones touched are recomputed from their members,
the free slots go back on the stack and the boundary is recounted around the units that
moved. The work is proportional to the zones and units touched.

Every change takes (st, w, a) and returns 1 when it changed something worth repairing,
with the zone slots to repair in w.fix[:w.cnt[C_NFIX]], or 0 when it does not apply. A
change that gives up half-way leaves its log behind, and the caller undoes it.
"""

from __future__ import annotations

from collections import namedtuple

import numpy as np

from zonedesign.search.construct import attach_to_neighbours, grow_region
from zonedesign.search.kernels import (
    FV_BRK,
    FV_TOTAL,
    IV_NFREE,
    inner,
    link,
    pop_free,
    push_free,
    unlink,
)
from zonedesign.search.mergesplit import (
    N_TREES,
    best_merge,
    merge_zones,
    try_split,
    zone_neighbours,
)
from zonedesign.search.moves import apply_move, donor_ok, unit_links
from zonedesign.search.valuation import recompute_zone, recount

REGROW_NEIGHBOURS = 3  # zones dissolved with the chosen one in a regrowth
REGROW_AIM = (0.6, 1.4)  # regrown zones aim at a random share of the target in this range

# slots of Work.cnt
C_NU = 0  # units logged
C_NZ = 1  # zones logged
C_NPOP = 2  # free slots taken
C_STAMP = 3  # the try's stamp for umark / zmk / rmk
C_NFREE0 = 4  # free-stack height when the try began
C_GSTAMP = 5  # last stamp of grow_region's frontier marks
C_NFIX = 6  # zone slots to repair
C_NLIVE = 7  # zones with members, in live[:C_NLIVE]

Work = namedtuple(
    "Work",
    [
        "ulog",  # (n,) units logged this try
        "uold",  # (n,) their labels before it
        "umark",  # (n,) stamp: unit logged
        "zlog",  # (K,) zone slots logged this try
        "zold",  # (K,) their anchors before it
        "zmk",  # (K,) stamp: zone logged
        "rmk",  # (K,) stamp: zone to recompute on undo
        "rlist",  # (K,) zones to recompute
        "pops",  # (K,) free slots taken, in order
        "fix",  # (K,) zone slots to repair
        "live",  # (K,) zones with members
        "lpos",  # (K,) position in live, -1 when absent
        "units",  # (n,) scratch: the repair's units
        "cand",  # (n,) scratch
        "loc",  # (n,) scratch of try_split
        "fr",  # (n,) scratch of grow_region
        "flen",  # (n,) float64 scratch of grow_region
        "fmark",  # (n,) scratch of grow_region
        "mem",  # (n,) scratch of grow_region
        "perm",  # (n,) the regrown region
        "par",  # (4,) float64: growth alpha, beta, aim low, aim high
        "cnt",  # (8,) counters (C_*)
    ],
)


def new_work(size: np.ndarray, alpha: float, beta: float) -> Work:
    """A Work record for a state whose zone sizes are `size` (one slot per unit)."""
    k = size.shape[0]
    n = k
    live = np.flatnonzero(size > 0).astype(np.int64)
    lpos = np.full(k, -1, dtype=np.int64)
    lpos[live] = np.arange(live.size)
    full_live = np.zeros(k, dtype=np.int64)
    full_live[: live.size] = live
    cnt = np.zeros(8, dtype=np.int64)
    cnt[C_NLIVE] = live.size

    def ints(m: int) -> np.ndarray:
        return np.zeros(m, dtype=np.int64)

    return Work(
        ulog=ints(n), uold=ints(n), umark=ints(n), zlog=ints(k), zold=ints(k), zmk=ints(k), rmk=ints(k),
        rlist=ints(k), pops=ints(k), fix=ints(k), live=full_live, lpos=lpos, units=ints(n), cand=ints(n),
        loc=ints(n), fr=ints(n), flen=np.zeros(n), fmark=ints(n), mem=ints(n), perm=ints(n),
        par=np.array([alpha, beta, REGROW_AIM[0], REGROW_AIM[1]]), cnt=cnt,
    )  # fmt: skip


# ---------------------------------------------------------------- the log


@inner
def begin_try(st, w):
    cnt = w.cnt
    cnt[C_STAMP] += 1
    cnt[C_NU] = 0
    cnt[C_NZ] = 0
    cnt[C_NPOP] = 0
    cnt[C_NFIX] = 0
    cnt[C_NFREE0] = st.iv[IV_NFREE]


@inner
def log_unit(st, w, u):
    """Remember u's label, once per try."""
    stamp = w.cnt[C_STAMP]
    if w.umark[u] != stamp:
        w.umark[u] = stamp
        k = w.cnt[C_NU]
        w.ulog[k] = u
        w.uold[k] = st.labels[u]
        w.cnt[C_NU] = k + 1


@inner
def log_zone(st, w, z):
    """Remember zone slot z's anchor, once per try."""
    stamp = w.cnt[C_STAMP]
    if w.zmk[z] != stamp:
        w.zmk[z] = stamp
        k = w.cnt[C_NZ]
        w.zlog[k] = z
        w.zold[k] = st.anchor[z]
        w.cnt[C_NZ] = k + 1


@inner
def log_members(st, w, z):
    log_zone(st, w, z)
    u = st.head[z]
    while u >= 0:
        log_unit(st, w, u)
        u = st.nxt[u]


@inner
def take_free(st, w):
    """A free zone slot, logged (slots are taken before any is given back in a try)."""
    log_zone(st, w, st.free[st.iv[IV_NFREE] - 1])
    z = pop_free(st)
    st.cost[z] = 0.0
    st.brk[z] = 0.0
    w.pops[w.cnt[C_NPOP]] = z
    w.cnt[C_NPOP] += 1
    return z


@inner
def add_fix(w, z):
    w.fix[w.cnt[C_NFIX]] = z
    w.cnt[C_NFIX] += 1


@inner
def _mark_recompute(w, z, nr):
    if z >= 0 and w.rmk[z] != w.cnt[C_STAMP]:
        w.rmk[z] = w.cnt[C_STAMP]
        w.rlist[nr] = z
        nr += 1
    return nr


@inner
def undo(st, w):
    """Put back what the try's log says changed: labels, anchors, the zones' sums, the
    free stack and the boundary."""
    labels = st.labels
    cand = w.cand
    # typed zeros: a literal 0 passed on would compile the callees once more for it
    nr = np.int64(0)
    nc = np.int64(0)
    for k in range(w.cnt[C_NU]):
        u = w.ulog[k]
        old = w.uold[k]
        cur = labels[u]
        if cur == old:
            continue
        nr = _mark_recompute(w, cur, nr)
        nr = _mark_recompute(w, old, nr)
        if cur >= 0:
            unlink(st, u, cur)
        if old >= 0:
            link(st, u, old)
        labels[u] = old
        cand[nc] = u
        nc += 1
    for k in range(w.cnt[C_NZ]):
        st.anchor[w.zlog[k]] = w.zold[k]
        nr = _mark_recompute(w, w.zlog[k], nr)
    for k in range(nr):
        recompute_zone(st, w.rlist[k])
    # slots given back after the last one taken sit above it: dropping them and putting
    # the taken ones back in reverse order restores the stack exactly
    npop = w.cnt[C_NPOP]
    st.iv[IV_NFREE] = w.cnt[C_NFREE0] - npop
    for j in range(npop - 1, -1, -1):
        push_free(st, w.pops[j])
    recount_around(st, cand, nc)


@inner
def recount_around(st, units, nu):
    """Boundary status of units[:nu] and of their neighbours."""
    indptr = st.indptr
    indices = st.indices
    for k in range(nu):
        u = units[k]
        recount(st, u)
        for p in range(indptr[u], indptr[u + 1]):
            recount(st, indices[p])


@inner
def sync_live(st, w):
    """Bring the live-zone list up to date for the zones the try logged."""
    live = w.live
    lpos = w.lpos
    for k in range(w.cnt[C_NZ]):
        z = w.zlog[k]
        if st.size[z] > 0 and lpos[z] < 0:
            nl = w.cnt[C_NLIVE]
            live[nl] = z
            lpos[z] = nl
            w.cnt[C_NLIVE] = nl + 1
        elif st.size[z] == 0 and lpos[z] >= 0:
            nl = w.cnt[C_NLIVE] - 1
            last = live[nl]
            live[lpos[z]] = last
            lpos[last] = lpos[z]
            lpos[z] = -1
            w.cnt[C_NLIVE] = nl


# ---------------------------------------------------------------- the changes


@inner
def merge_change(st, w, a):
    """Merge zone a with its best partner whatever the price."""
    b, _, _, anc = best_merge(st, a, 0, 0)
    if b < 0:
        return 0
    log_zone(st, w, a)
    log_members(st, w, b)
    merge_zones(st, a, b, anc)
    add_fix(w, a)
    return 1


@inner
def shift_change(st, w, a):
    """Move one edge unit of zone a to a neighbouring zone even if a bound breaks; the
    repair may turn it into a swap."""
    cand = w.cand
    ne = 0
    u = st.head[a]
    while u >= 0:
        if st.bpos[u] >= 0:
            cand[ne] = u
            ne += 1
        u = st.nxt[u]
    if ne == 0:
        return 0
    u = cand[np.random.randint(ne)]
    if not donor_ok(st, u):
        return 0
    la, _, nt = unit_links(st, u, a)
    if nt == 0:
        return 0
    b = st.ztouch[np.random.randint(nt)]
    log_unit(st, w, u)
    log_zone(st, w, a)
    log_zone(st, w, b)
    apply_move(st, u, b, la, st.zacc[b])
    add_fix(w, a)
    add_fix(w, b)
    return 1


@inner
def _dissolve(st, z):
    """Take every member out of zone z (labels -1), dropping its cost from the totals."""
    u = st.head[z]
    while u >= 0:
        after = st.nxt[u]
        st.labels[u] = -1
        st.nxt[u] = -1
        st.prv[u] = -1
        u = after
    st.head[z] = -1
    st.size[z] = 0
    st.fv[FV_TOTAL] -= st.cost[z]
    st.fv[FV_BRK] -= st.brk[z]
    st.cost[z] = 0.0
    st.brk[z] = 0.0


@inner
def _next_slot(st, w, old, no):
    """A slot for a regrown zone: the dissolved zones' slots first, then free ones."""
    used = w.cnt[C_NFIX]
    z = old[used] if used < no else take_free(st, w)
    st.anchor[z] = -1
    add_fix(w, z)
    return z


@inner
def _lone_parts(st, w, region, m, old, no):
    """One zone for each connected part of region[:m] left without a zone."""
    labels = st.labels
    indptr = st.indptr
    indices = st.indices
    queue = st.queue
    for k in range(m):
        s = region[k]
        if labels[s] >= 0:
            continue
        z = _next_slot(st, w, old, no)
        labels[s] = z
        link(st, s, z)
        head = 0
        tail = 1
        queue[0] = s
        while head < tail:
            u = queue[head]
            head += 1
            for p in range(indptr[u], indptr[u + 1]):
                v = indices[p]
                if labels[v] == -1:
                    labels[v] = z
                    link(st, v, z)
                    queue[tail] = v
                    tail += 1
        recompute_zone(st, z)


@inner
def regrow_change(st, w, a):
    """Dissolve zone a and up to REGROW_NEIGHBOURS neighbours and grow them again towards
    random aims around the target; the grown zones are new zones for stability."""
    nt = zone_neighbours(st, a)
    near = st.ztouch[:nt].copy()
    take = min(nt, REGROW_NEIGHBOURS)
    for t in range(take):
        r = t + np.random.randint(nt - t)
        tmp = near[t]
        near[t] = near[r]
        near[r] = tmp
    no = take + 1
    old = np.empty(no, dtype=np.int64)
    old[0] = a
    # element by element: a slice assignment would compile numba's formatted shape error
    for t in range(take):
        old[1 + t] = near[t]
    region = w.perm
    m = np.int64(0)  # typed: a literal 0 would compile every callee taking m twice
    for j in range(no):
        log_members(st, w, old[j])
        u = st.head[old[j]]
        while u >= 0:
            region[m] = u
            m += 1
            u = st.nxt[u]
    for j in range(no):
        _dissolve(st, old[j])
    labels = st.labels
    K = st.head.shape[0]
    par = w.par
    made, stamp = grow_region(
        st, par[0], par[1], labels, region, m, K, par[2], par[3], w.fr, w.flen, w.fmark, w.mem, w.cnt[C_GSTAMP]
    )
    w.cnt[C_GSTAMP] = stamp
    if made == 0:
        return 0
    for _ in range(made):
        _next_slot(st, w, old, no)
    for k in range(m):
        u = region[k]
        if labels[u] >= K:
            z = w.fix[labels[u] - K]
            labels[u] = z
            link(st, u, z)
    for j in range(made):
        recompute_zone(st, w.fix[j])
    attach_to_neighbours(st, region, m, w.cand)
    _lone_parts(st, w, region, m, old, no)
    # dissolved slots no regrown zone took go back on the free stack, after every take
    for j in range(w.cnt[C_NFIX], no):
        push_free(st, old[j])
    recount_around(st, region, m)
    return 1


@inner
def split_change(st, w, a):
    """Cut zone a (of two units or more) at its best random-tree cut; the reshape block
    regrows a one-unit zone instead."""
    log_members(st, w, a)
    log_zone(st, w, st.free[st.iv[IV_NFREE] - 1])
    nz = try_split(st, a, N_TREES, w.loc, 1)
    if nz < 0:
        return 0
    w.pops[w.cnt[C_NPOP]] = nz
    w.cnt[C_NPOP] += 1
    add_fix(w, a)
    add_fix(w, nz)
    return 1
