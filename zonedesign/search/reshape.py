"""The reshape phase and its named move registry.

A single move never changes the number of zones, and a merge, split or exchange of
units that only pays once a few units have moved is never taken by the improving
passes. The reshape phase makes such changes by force around a random zone, repairs
the neighbourhood with a local descent and keeps the result only when it beats the
labelling before the change (breaks first); otherwise the change's undo log
(`search.forced`) puts that labelling back. The tries run in compiled blocks
(`reshape_block`), so their bookkeeping costs what they touch, not the fence's size.

Each kind of change is one `Move` in `MOVES`: its name and the compiled kernel that makes
it (`make(st, w, zone)`, see `search.forced`). The blocks call the kernels through one
function over the registry's kernels, and `warm` runs a block of each kind on a tiny state
(`warm.warm_up` calls it for every entry). A new move type is one entry here; the
reshape phase draws among the entries evenly.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numba import njit

from zonedesign.search.azp import descend_units, descent_units
from zonedesign.search.forced import (
    C_NFIX,
    C_NLIVE,
    C_NU,
    C_NZ,
    Work,
    begin_try,
    log_unit,
    merge_change,
    new_work,
    regrow_change,
    shift_change,
    split_change,
    sync_live,
    undo,
)
from zonedesign.search.kernels import FV_BRK, FV_TOTAL, inner, key_less
from zonedesign.search.state import ZoneState

# x n forced changes with repair (at least MIN_TRIES). On the 2,000-unit fences of
# benchmarks/results/quality-scale.md a try bought more objective per CPU second than
# annealing moves did: 1.5 n tries with 350 n moves (schedule.PRESETS) beat 0.2 n tries
# with 600 n moves at about the same CPU
RESHAPE_TRIES = 1.5
MIN_TRIES = 200
BLOCK = 64  # tries per compiled call (time checks between calls)


@dataclass(frozen=True)
class Move:
    """One kind of forced change: make(st, w, zone) -> 1 with the slots to repair in w,
    or 0 when it does not apply (a compiled kernel, see search.forced)."""

    name: str
    make: Callable


# the order is part of a seed's meaning: the reshape draws an index into this tuple
MOVES: tuple[Move, ...] = (
    Move("split", split_change),
    Move("merge", merge_change),
    Move("regrow", regrow_change),
    Move("shift", shift_change),
)


# The block itself calls the kernels by index, through up to MAX_MOVES module globals
# padded with a kernel that never applies. numba links a callee's whole compiled tree into
# each caller and optimises and emits it there once more, so a chain of dispatchers (one
# per move) or a kernel calling another kernel would compile everything below it again.
MAX_MOVES = 6


@inner
def _no_move(st, w, a):
    return 0


if len(MOVES) > MAX_MOVES:
    raise RuntimeError(f"reshape: {len(MOVES)} moves in MOVES, the block calls at most {MAX_MOVES}")
_M0, _M1, _M2, _M3, _M4, _M5 = (*(m.make for m in MOVES), *(_no_move,) * (MAX_MOVES - len(MOVES)))
# a one-unit zone cannot be split: the split try regrows it instead
_SPLIT = next(i for i, m in enumerate(MOVES) if m.name == "split")
_REGROW = next(i for i, m in enumerate(MOVES) if m.name == "regrow")
N_MOVES = len(MOVES)


@njit(cache=True)
def reshape_block(st, w, seed, tries, kind, stats):
    """`tries` forced changes around random live zones, each repaired by a local descent
    and kept only when (breaks, objective) improves; returns how many were kept.

    kind: the index in MOVES of the one change to make, or -1 to draw one per try.
    stats as azp.descent_sweep.
    """
    np.random.seed(seed)
    fv = st.fv
    kept = 0
    for _ in range(tries):
        nl = w.cnt[C_NLIVE]
        if nl == 0:
            break
        a = w.live[np.random.randint(nl)]
        k = np.random.randint(N_MOVES) if kind < 0 else kind
        b0 = fv[FV_BRK]
        t0 = fv[FV_TOTAL]
        if k == _SPLIT and st.size[a] < 2:
            k = _REGROW
        begin_try(st, w)
        if k == 0:
            made = _M0(st, w, a)
        elif k == 1:
            made = _M1(st, w, a)
        elif k == 2:
            made = _M2(st, w, a)
        elif k == 3:
            made = _M3(st, w, a)
        elif k == 4:
            made = _M4(st, w, a)
        else:
            made = _M5(st, w, a)
        if made == 0:
            if w.cnt[C_NU] > 0 or w.cnt[C_NZ] > 0:
                undo(st, w)
                sync_live(st, w)
            continue
        nu = descent_units(st, w.fix, w.cnt[C_NFIX], w.units)
        for t in range(nu):
            log_unit(st, w, w.units[t])
        descend_units(st, w.units, nu, stats)
        if key_less(fv[FV_BRK], fv[FV_TOTAL], b0, t0):
            kept += 1
        else:
            undo(st, w)
        sync_live(st, w)
    return kept


def growth_weights(state: ZoneState) -> tuple[float, float]:
    """(alpha, beta) of region growing: homogeneity when it is weighed, else compactness."""
    tw = state.problem.term_weights
    alpha = 1.0 if tw.get("homogeneity", 0.0) > 0 else 0.0
    beta = 1.0 if tw.get("compactness", 0.0) > 0 or alpha == 0.0 else 0.0
    return alpha, beta


def work_for(state: ZoneState) -> Work:
    """The undo log and scratch of the reshape phase on `state`."""
    return new_work(state.zones.size, *growth_weights(state))


def warm(state: ZoneState, kind: int) -> None:
    """Compile (or load) the reshape block and run one try of MOVES[kind] on state."""
    reshape_block(state.st, work_for(state), 1, 1, int(kind), np.zeros(2, dtype=np.int64))


def reshape(run) -> None:
    """Forced changes around random zones, each repaired by a local descent, kept if better.

    run: the engine's per-solve record (state, rng, seed(), out_of_time(), info).
    """
    state = run.state
    n = state.problem.n
    tries = max(MIN_TRIES, int(RESHAPE_TRIES * n))
    stats = np.zeros(2, dtype=np.int64)
    w = work_for(state)
    kept = 0
    done = 0
    while done < tries and not run.out_of_time():
        block = min(BLOCK, tries - done)
        kept += int(reshape_block(state.st, w, run.seed(), block, -1, stats))
        done += block
    run.info["moves_tried"] += int(stats[0])
    run.info["moves_accepted"] += int(stats[1])
    run.info["reshapes"] = kept
