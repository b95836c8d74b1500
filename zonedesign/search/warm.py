"""Compiling the search's kernels before a search, in groups other processes can share.

`warm_up()` runs every kernel a search uses once on a four-unit problem, so a search's
time limit never pays for a compile. The kernels come in groups (`GROUPS`), each run under
its own lock in numba's cache folder (`zonedesign.compilelock`): a background process
started by the command line (`zonedesign.precompile`) may be compiling some of them
already, and this process then waits for those and loads them from the cache instead of
compiling them a second time. The groups are taken from the last to the first, while the
background process goes from the first to the last.
"""

from __future__ import annotations

import sys
import time
from collections.abc import Callable

import numpy as np

from zonedesign import compilelock
from zonedesign.records import Bounds, Graph, Problem
from zonedesign.search import kernels as K
from zonedesign.search import mergesplit as MS
from zonedesign.search import moves as KM
from zonedesign.search.anneal import CT_CUR_BEST, CT_SIZE, anneal_block, hot_units, sample_uphill
from zonedesign.search.azp import descent_sweep, local_descent
from zonedesign.search.construct import absorb_enclaves, grow_zones
from zonedesign.search.pairs import pair_pass
from zonedesign.search.reshape import MOVES
from zonedesign.search.reshape import warm as warm_move
from zonedesign.search.state import ZoneState
from zonedesign.search.tabu import tabu_block
from zonedesign.search.triples import TripleWork, triple_pass

_WARM: set[str] = set()  # groups run in this process
TWO_ZONES = np.array([0, 0, 1, 1])


def tiny_state() -> ZoneState:
    """A four-unit path in one count column, as two zones of two."""
    g = Graph.from_edges(4, np.array([0, 1, 2]), np.array([1, 2, 3]), np.ones(3))
    tiny = Problem(
        graph=g,
        counts=np.ones((4, 1)),
        bounds=Bounds(("c",), np.array([1.0]), np.array([3.0]), np.array([2.0])),
        attrs=np.zeros((4, 1)),
        weight=np.ones(4),
        area=np.ones(4),
        perimeter=np.full(4, 4.0),
    )
    state = ZoneState(tiny)
    state.load(TWO_ZONES)
    return state


def _control(state: ZoneState):
    # the arguments the engine's blocks take (engine._search_control, built the same way)
    brk, tot = state.running_key()
    ctl = np.array([brk, tot, 0.0, 0.0])
    cti = np.zeros(CT_SIZE, dtype=np.int64)
    cti[CT_CUR_BEST] = 1
    return state.labels(), np.zeros((state.problem.n, 2), dtype=np.int64), ctl, cti


def _warm_state() -> None:
    state = tiny_state()
    K.exact_totals(state.st)
    K.pair_total(np.zeros((2, 1)))
    K.seed_rng(1)


def _warm_construct() -> None:
    state = tiny_state()
    st = state.st
    everyone = np.arange(4, dtype=np.int64)
    labels = np.full(4, -1, dtype=np.int64)
    grow_zones(st, 1, 1.0, 1.0, labels, everyone, 0, 1.0, 1.0)
    state.load(labels)
    absorb_enclaves(st, 1)
    KM.relabel(st, everyone, TWO_ZONES.copy(), state.zones.anchor.copy(), everyone[:0])
    state.load(TWO_ZONES)
    KM.unit_links(st, 1, 0)


def _warm_descent() -> None:
    state = tiny_state()
    st = state.st
    stats = np.zeros(2, dtype=np.int64)
    everyone = np.arange(4, dtype=np.int64)
    descent_sweep(st, 1, np.empty(4, dtype=np.int64), stats)
    local_descent(st, 1, everyone[:1], stats)


def _warm_anneal() -> None:
    state = tiny_state()
    st = state.st
    best, log, ctl, cti = _control(state)
    sample_uphill(st, 1, 1)
    cand = np.zeros(4, dtype=np.int64)
    ncand = hot_units(st, np.ones(state.zones.size.size, dtype=np.bool_), cand)
    anneal_block(st, 1, 1.0, 1, best, log, ctl, cti, cand, ncand, 0.1)


def _warm_tabu() -> None:
    state = tiny_state()
    best, log, ctl, cti = _control(state)
    tabu_block(
        state.st, 1, 0, 1, 4, 1, 1, np.full(4, -1, dtype=np.int64), np.zeros(4, dtype=np.int64), best, log, ctl, cti
    )


def _warm_reshape() -> None:
    # one compiled block runs every kind of move: one group
    for kind in range(len(MOVES)):
        warm_move(tiny_state(), kind)
    # the merge and split passes called from Python (mergesplit.merge_pass, split_pass,
    # ZoneState.try_split) pass Python ints: a signature of their own
    st = tiny_state().st
    MS.best_merge(st, 0, 1, 1)
    MS.try_split(st, 0, 1, np.empty(4, dtype=np.int64), 0)


def _warm_pairs() -> None:
    state = tiny_state()
    pair_pass(state.st, 1, 4, np.ones(4, dtype=np.int64), np.zeros(2, dtype=np.int64))
    d = state.data
    work = TripleWork(d.counts.shape[0], d.counts.shape[1], d.x.shape[1])
    triple_pass(state.st, 1, 6, np.ones(state.zones.size.size, dtype=np.int64), np.zeros(2, dtype=np.int64), *work.arrays())


# the background process takes them in this order, a run from the last to the first:
# "state" first (every other group builds a tiny state with its kernels), then the largest
# compile by far (the reshape block), for the background process to start on it while the
# run still reads its input
GROUPS: dict[str, Callable[[], None]] = {
    "search-state": _warm_state,
    "search-reshape": _warm_reshape,
    "search-construct": _warm_construct,
    "search-descent": _warm_descent,
    "search-anneal": _warm_anneal,
    "search-pairs": _warm_pairs,
    "search-tabu": _warm_tabu,
}
# the groups each method's search runs (engine.solve_once: descent merges and splits,
# annealing and tabu add their blocks, the reshape moves and the exact pair and triple
# repartitions)
_COMMON = ("search-state", "search-construct", "search-descent", "search-reshape")
NEEDS: dict[str, tuple[str, ...]] = {
    "descent": _COMMON,
    "annealing": (*_COMMON, "search-anneal", "search-pairs"),
    "tabu": (*_COMMON, "search-tabu", "search-pairs"),
}
# what the background process compiles: the default method's groups (a tabu search
# compiles its block itself, on its first run)
BACKGROUND = tuple(g for g in GROUPS if g in NEEDS["annealing"])


def cache_folder():
    """numba's cache folder of the search kernels (None when they are not cached)."""
    return compilelock.cache_folder(K._new_state)


def stamp() -> str:
    """The stamp of every compiled search module's source (see `compilelock.sources_stamp`)."""
    from zonedesign.search.cachestamp import compiled_modules

    mods = [m for name, m in sorted(sys.modules.items()) if name.startswith("zonedesign.search.") and m is not None]
    return compilelock.sources_stamp([m.__file__ for m in compiled_modules(mods)])


def warm_group(name: str, *, wait: bool = True) -> bool:
    """Run one group under its lock; False when wait=False and another process holds it."""
    return compilelock.run_group(cache_folder(), name, stamp(), GROUPS[name], wait=wait)


def warm_up(method: str | None = None) -> float:
    """Compile (or load from cache) every kernel a search by `method` uses (every method's
    when None); seconds taken, 0 if already done in this process."""
    names = [g for g in GROUPS if method is None or g in NEEDS.get(method, tuple(GROUPS))]
    todo = [g for g in names if g not in _WARM]
    if not todo:
        return 0.0
    t0 = time.perf_counter()
    # the state's kernels first: every group needs them
    if "search-state" in todo:
        warm_group("search-state")
    rest = [g for g in reversed(todo) if g != "search-state"]
    # groups no other process holds are run now; the ones held are waited for afterwards
    held = [g for g in rest if not warm_group(g, wait=False)]
    for g in held:
        warm_group(g)
    _WARM.update(todo)
    # the groups ran in an order that depends on other processes and drew from numba's
    # generator: it is left seeded the same way whatever that order was
    K.seed_rng(1)
    return time.perf_counter() - t0
