"""solve(): zone one problem (one fence of one tier) into contiguous zones within bounds.

Phases:
1. construction (skipped when `start` is given): `constructions` randomised region
   growings; the best by (breaks, total) is kept;
2. improvement: AZP descent to a local optimum, then a merge pass and a split pass, again
   and again until neither changes anything;
3. for "annealing" or "tabu": that search from the local optimum, back to its best
   labelling seen, then phase 2 again, with pair repartitions (`search.pairs`: the best
   split of two neighbouring zones' units, for pairs of at most `PAIR_UNITS` units) among
   its passes after annealing. Phase 2 only ever improves, so the result is never worse
   than the labelling the phase started from.

4. for "annealing" or "tabu", a reshape phase: forced merges, splits, regrowths and
   moves around random zones, each repaired by a local descent and kept only when better,
   then phase 2 once more, with pair repartitions (reaching labellings single improving
   moves cannot: another number of zones, or units exchanged between zones).

Repeatability: every random choice comes from generators seeded by `seed`, and every
phase stops on move or iteration budgets proportional to the number of units, so a seed
gives the same labels on any machine and under any load. `time_limit` is only a safety
cap, checked between compiled blocks; a run that reaches it says so in
`info["stopped_by_time"]` and is the one case that may not repeat exactly. The clock
starts after the kernels are compiled (or loaded from numba's cache, once per process),
so a first compile never eats into the search.

info: method, constructions (tried), construction_seconds, moves_tried, moves_accepted,
merges, splits, pair_splits (pairs of zones resplit), rounds (descent / merge / split
rounds), reshapes (kept), temperatures (annealing), tabu_iterations, start_key ((breaks,
total) the improvement started from), zones, bounds_met, stopped_by_time, seconds,
compile_seconds (when this call compiled or loaded the kernels); from `solve` also path
and focused (trials focused).

Stability: zones carry an anchor, the previous zone id they stand for. With `start` and
`anchors` the anchors are those given; with `start` but no `anchors`, zone j of `start`
stands for previous zone j (`anchors = arange(k)`); without `start` each constructed
zone stands for the previous zone holding most of its units. A zone made by a split is a
new zone (anchor -1); a merged zone keeps whichever of the two anchors costs less.
A `start` zone that is not connected is split into its connected pieces first, every
piece keeping the zone's anchor.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np

from zonedesign import interrupts, measures
from zonedesign.errors import InputError
from zonedesign.graph.components import pieces as zone_pieces
from zonedesign.measures import Score
from zonedesign.records import Problem
from zonedesign.rules import METHODS, SearchRules
from zonedesign.search import kernels as K
from zonedesign.search.anneal import (
    CT_ACCEPTED,
    CT_CHANGED,
    CT_CUR_BEST,
    CT_IMPROVED,
    CT_SIZE,
    CT_TRIED,
    anneal_block,
    hot_units,
    hot_zones,
    sample_uphill,
)
from zonedesign.search.azp import descent_sweep
from zonedesign.search.construct import absorb_enclaves, grow_zones
from zonedesign.search.mergesplit import (
    FAR_ABOVE_TARGET,
    N_TREES,
    merge_pass,
    split_pass,
)
from zonedesign.search.multilevel import coarsen, uses_multilevel
from zonedesign.search.pairs import pair_pass
from zonedesign.search.reshape import growth_weights, reshape
from zonedesign.search.schedule import fence_schedule
from zonedesign.search.state import ZoneState, check_problem, full_score, search_normalisers
from zonedesign.search.tabu import tabu_block
from zonedesign.search.triples import TripleWork, triple_pass
from zonedesign.search.warm import warm_up

# budgets (the primary stop criteria; see the module docstring)
MAX_SWEEPS = 1000  # descent sweeps per call (a sweep that moves nothing ends it sooner)
MAX_ROUNDS = 50  # descent / merge / split rounds
# share of average uphill moves taken at the first temperature. A fence searched by one run
# (1,500 units or more by default) starts at 1 %: at 10 % the improved construction was
# reheated to about twice its gap before the schedule cooled into the range where the
# best zonings form (benchmarks/results/quality-scale.md). A small fence's several
# independent runs start hot, so that they explore apart (benchmarks/results/quality.md)
ANNEAL_START_ACCEPT = 0.01
ANNEAL_START_ACCEPT_RUNS = 0.1  # the same when the fence's schedule has several runs
REFINE_START_ACCEPT = 0.01  # a refinement starts cold: it keeps the coarse zoning's shape
REFINE_SHARE = 0.5  # of a run's moves, spent refining each finer level
# focused trials of a fence searched by one run (search.anneal, schedule.Schedule.focused):
# the costliest FOCUS_SHARE of zones and their neighbours, FOCUS_UNIFORM from everywhere
FOCUS_SHARE = 0.3
FOCUS_UNIFORM = 0.1
ANNEAL_FROZEN = 3  # temperatures without a new best and with (almost) no change
TABU_NO_IMPROVE = 1  # x n, when search_rules.max_no_improve is 0
TABU_MAX_ITER = 5  # x max_no_improve
TABU_SAMPLE = 48  # boundary units priced per iteration once there are more
BLOCK = 256  # tabu iterations per compiled call (time checks between calls)
PAIR_UNITS = 12  # pairs of zones with at most this many units are repartitioned exactly
TRIPLE_UNITS = 15  # and three zones of at most this many units, once no pair changes
AGREE_RUNS = 3  # independent runs that end on the same best zoning end a fence's search
MIN_WORK = 200  # floor of the per-unit budgets, for tiny problems


@dataclass
class Solution:
    """The zones found.

    labels: zone 0..k-1 of every unit, zones numbered in order of first appearance.
    score: measures.score of labels (with anchors when the problem has previous zones).
    info: what the search did (see the module docstring).
    anchors: (k,) the previous zone each zone stands for (-1: a new zone).
    """

    labels: np.ndarray
    score: Score
    info: dict = field(default_factory=dict)
    anchors: np.ndarray | None = None


class _Run:
    """Seeds, clock and counters shared by the phases of one solve."""

    def __init__(self, state: ZoneState, rules: SearchRules, seed: int, time_limit: float):
        self.state = state
        self.rules = rules
        self.rng = np.random.default_rng(seed)
        self.t0 = time.perf_counter()
        self.deadline = self.t0 + float(time_limit)
        self.info = {"moves_tried": 0, "moves_accepted": 0, "merges": 0, "splits": 0, "rounds": 0}
        self.info["stopped_by_time"] = False
        self.triples: _Triples | None = None

    def seed(self) -> int:
        return int(self.rng.integers(0, 2**31 - 1))

    def out_of_time(self) -> bool:
        # the search's loops ask this between compiled blocks: the stop flag is checked here
        interrupts.check()
        if time.perf_counter() > self.deadline:
            self.info["stopped_by_time"] = True
            return True
        return False


def solve(
    problem: Problem,
    *,
    search_rules: SearchRules | None = None,
    seed: int = 1,
    time_limit: float = 10.0,
    start: np.ndarray | None = None,
    anchors: np.ndarray | None = None,
    method: str | None = None,
    multilevel: bool | None = None,
) -> Solution:
    """Partition the problem's units into contiguous zones; breaks first, then the objective.

    multilevel: None chooses by fence size (`search.multilevel.uses_multilevel`), True
    or False forces the multilevel or the flat path; `info["path"]` says which ran.

    Without `start`, runs `schedule.fence_schedule(rules, n).runs` independent searches
    (seeds derived from `seed`) and keeps the best by (breaks, total); with `start`, one search from it.

    >>> sol = solve(problem, seed=3)            # doctest: +SKIP
    >>> sol.labels, sol.score.breaks, sol.info["bounds_met"]   # doctest: +SKIP
    """
    rules = search_rules if search_rules is not None else SearchRules()
    if not time_limit > 0:
        raise InputError(f"time limit must be positive, got {time_limit}", where="search.time_limit_fence")
    # compile first: a first compile must not eat the restarts' share of the time limit
    compile_seconds = warm_up(rules.method if method is None else method)
    t0 = time.perf_counter()
    levels = []
    if start is None and uses_multilevel(problem.n, rules.method if method is None else method, multilevel):
        levels = coarsen(problem, seed)
    if levels:
        best = _solve_multilevel(problem, levels, rules, seed, time_limit, method)
    else:
        best = _solve_restarts(problem, None, rules, seed, time_limit, start, anchors, method)
    plan = fence_schedule(rules, problem.n)
    if compile_seconds:
        best.info["compile_seconds"] = compile_seconds
    best.info["path"] = "multilevel" if levels else "flat"
    best.info["levels"] = [problem.n, *(lv.problem.n for lv in levels)]
    best.info["effort"] = rules.effort
    best.info["moves_per_run"] = plan.moves
    best.info["focused"] = bool(plan.focused and FOCUS_SHARE < 1.0 and (rules.method if method is None else method) == "annealing")
    best.info["seconds_all_restarts"] = time.perf_counter() - t0
    return best


def _solve_restarts(
    problem: Problem,
    norm: dict[str, float] | None,
    rules: SearchRules,
    seed: int,
    time_limit: float,
    start: np.ndarray | None = None,
    anchors: np.ndarray | None = None,
    method: str | None = None,
) -> Solution:
    """The best of the fence schedule's independent runs (one run from a given start)."""
    runs = 1 if start is not None else fence_schedule(rules, problem.n).runs
    t0 = time.perf_counter()
    best: Solution | None = None
    keys: list[tuple[float, float]] = []
    for r in range(runs):
        left = time_limit - (time.perf_counter() - t0)
        if r > 0 and left <= 0:
            break
        sol = solve_once(
            problem, search_rules=rules, seed=seed if r == 0 else seed * 7919 + r,
            time_limit=max(left, 1e-3), start=start, anchors=anchors, method=method, norm=norm,
        )
        if best is None or sol.score.key() < best.score.key():
            best = sol
        keys.append(sol.score.key())
        if AGREE_RUNS and start is None and _agreed(keys, best.score.key()) >= AGREE_RUNS:
            break
    assert best is not None
    best.info["restarts"] = runs
    best.info["runs_done"] = len(keys)
    return best


def _agreed(keys: list[tuple[float, float]], best: tuple[float, float]) -> int:
    """Runs whose (breaks, total) equals the best one's (to rounding)."""
    return sum(1 for b, t in keys if abs(b - best[0]) <= 1e-9 and abs(t - best[1]) <= 1e-9 * max(1.0, abs(best[1])))


def _solve_multilevel(
    problem: Problem, levels: list, rules: SearchRules, seed: int, time_limit: float, method: str | None
) -> Solution:
    """Solve the coarsest level, then project and refine level by level (search.multilevel).

    Every level is priced with the fence's own normalisers, so the levels agree on what a
    better zoning is.
    """
    t0 = time.perf_counter()
    norm = search_normalisers(problem)
    problems = [problem, *(lv.problem for lv in levels)]
    sol = _solve_restarts(problems[-1], norm, rules, seed, time_limit, method=method)
    refine_seconds = []
    for depth in range(len(levels) - 1, -1, -1):
        finer = problems[depth]
        left = max(time_limit - (time.perf_counter() - t0), 1e-3)
        t1 = time.perf_counter()
        sol = solve_once(
            finer, search_rules=rules, seed=seed + 104729 * (depth + 1), time_limit=left,
            start=sol.labels[levels[depth].parent], anchors=sol.anchors if finer.previous is not None else None,
            method=method, norm=norm if depth > 0 else None, refine=True,
        )
        refine_seconds.append(time.perf_counter() - t1)
    sol.info["refine_seconds"] = refine_seconds
    sol.info["restarts"] = 1
    return sol


def solve_once(
    problem: Problem,
    *,
    search_rules: SearchRules | None = None,
    seed: int = 1,
    time_limit: float = 10.0,
    start: np.ndarray | None = None,
    anchors: np.ndarray | None = None,
    method: str | None = None,
    norm: dict[str, float] | None = None,
    refine: bool = False,
) -> Solution:
    """One search, no restarts: `solve` with its arguments, from one seed.

    norm: the normalisers to price zones with (a coarse level's are its fine problem's);
    its score is then the search's own (breaks, total), with no terms. refine: a
    refinement of `start` (a projected coarser zoning): annealing starts cold and spends
    `REFINE_SHARE` of a run's moves.

    >>> sol = solve_once(problem, seed=3)       # doctest: +SKIP
    >>> sol.labels, sol.score.breaks, sol.info["bounds_met"]   # doctest: +SKIP
    """
    rules = search_rules if search_rules is not None else SearchRules()
    method = rules.method if method is None else method
    if method not in METHODS:
        raise InputError(f"search method {method!r} is not one of {', '.join(METHODS)}", where="search.method")
    if not time_limit > 0:
        raise InputError(f"time limit must be positive, got {time_limit}", where="search.time_limit_fence")
    check_problem(problem)
    compile_seconds = warm_up(method)
    n = problem.n
    t0 = time.perf_counter()
    if n == 0:
        empty = np.zeros(0, dtype=np.int64)
        sc = Score(breaks=0.0, total=0.0, terms={t: 0.0 for t in measures.TERMS})
        return Solution(empty, sc, {"method": method, "seconds": 0.0, "bounds_met": True}, empty)

    state = ZoneState(problem, norm=norm)
    run = _Run(state, rules, seed, time_limit)
    info = run.info
    info["method"] = method
    if compile_seconds:
        info["compile_seconds"] = compile_seconds
    if start is None:
        labels, tried = _construct(run, max(1, int(rules.constructions)))
        info["constructions"] = tried
        zone_anchors = None
        if problem.previous is not None:
            k = int(labels.max()) + 1
            zone_anchors = measures.anchors_by_overlap(np.asarray(problem.previous, dtype=np.int64), labels, k)
    else:
        labels, zone_anchors = _prepare_start(problem, start, anchors)
        info["constructions"] = 0
    info["construction_seconds"] = time.perf_counter() - t0
    state.load(labels, zone_anchors)
    info["start_key"] = list(state.key())

    _improve(run)
    if method == "annealing" and not run.out_of_time():
        if refine:
            _anneal(run, REFINE_START_ACCEPT, REFINE_SHARE)
        else:
            _anneal(run)
        _improve(run, pairs=True)
    elif method == "tabu" and not run.out_of_time():
        _tabu(run)
        _improve(run)
    if method != "descent" and not run.out_of_time():
        reshape(run)
        _improve(run, pairs=True, triples=True)

    labels, zone_anchors = state.compact()
    if norm is None:
        sc = full_score(problem, labels, zone_anchors if problem.previous is not None else None)
    else:
        brk, tot = state.key()
        sc = Score(breaks=brk, total=tot, terms={})
    info["zones"] = int(labels.max()) + 1
    info["bounds_met"] = bool(sc.breaks == 0.0)
    info["seconds"] = time.perf_counter() - t0
    return Solution(labels=labels, score=sc, info=info, anchors=zone_anchors)


# ---------------------------------------------------------------- checks and starts


def _prepare_start(problem: Problem, start: np.ndarray, anchors: np.ndarray | None) -> tuple[np.ndarray, np.ndarray | None]:
    """Start labels as slots 0..k-1 with connected zones, and their anchors."""
    n = problem.n
    start = np.asarray(start)
    if start.shape != (n,):
        raise InputError(f"start labels have shape {start.shape}, expected ({n},)", where="start")
    if not np.issubdtype(start.dtype, np.integer) or (start.size and start.min() < 0):
        raise InputError("start labels must be integers 0..k-1", where="start")
    start = start.astype(np.int64)
    k_given = int(start.max()) + 1
    if anchors is not None:
        anchors = np.asarray(anchors, dtype=np.int64)
        if anchors.shape != (k_given,):
            raise InputError(f"anchors have shape {anchors.shape}, expected ({k_given},) for labels 0..{k_given - 1}", where="anchors")
    elif problem.previous is not None:
        anchors = np.arange(k_given, dtype=np.int64)
    labels, k = measures.compact_labels(start)
    if anchors is not None:
        order = np.full(k, -1, dtype=np.int64)
        order[labels] = anchors[start]
        anchors = order
    # a zone in pieces: each connected piece becomes its own zone with the zone's anchor
    _, piece = zone_pieces(problem.graph, labels)
    if int(piece.max()) + 1 > k:
        pieces, kp = measures.compact_labels(piece)
        if anchors is not None:
            out = np.full(kp, -1, dtype=np.int64)
            out[pieces] = anchors[labels]
            anchors = out
        labels = pieces
    return labels, anchors


# ---------------------------------------------------------------- phases


def _construct(run: _Run, rounds: int) -> tuple[np.ndarray, int]:
    """Best of `rounds` region growings by (breaks, total); returns (labels, tried)."""
    state = run.state
    st = state.st
    alpha, beta = growth_weights(state)
    n = state.problem.n
    labels = np.empty(n, dtype=np.int64)
    everyone = np.arange(n, dtype=np.int64)
    best = None
    best_key = None
    tried = 0
    for _ in range(rounds):
        labels[:] = -1
        grow_zones(st, run.seed(), alpha, beta, labels, everyone, 0, 1.0, 1.0)
        state.load(labels)
        absorb_enclaves(st, run.seed())
        tried += 1
        state.resync()
        key = state.key()
        if best is None or K.is_less(key[0], key[1], best_key[0], best_key[1]):
            best = state.compact()[0]
            best_key = key
        if run.out_of_time():
            break
    return best, tried


def _descent(run: _Run) -> None:
    st = run.state.st
    order = np.empty(run.state.problem.n, dtype=np.int64)
    stats = np.zeros(2, dtype=np.int64)
    for _ in range(MAX_SWEEPS):
        if descent_sweep(st, run.seed(), order, stats) == 0 or run.out_of_time():
            break
    run.info["moves_tried"] += int(stats[0])
    run.info["moves_accepted"] += int(stats[1])


def _improve(run: _Run, pairs: bool = False, triples: bool = False) -> None:
    """Descent, merges and splits (and with `pairs`, pair repartitions; with `triples`
    too, triple repartitions once no pair changes) until none of them changes anything."""
    st = run.state.st
    changed = 1
    stats = np.zeros(2, dtype=np.int64)
    active = last = None
    tri = None
    if pairs and triples and TRIPLE_UNITS > 0:
        # one per run: a later improvement prices only the triples changed since
        if run.triples is None:
            run.triples = _Triples.of(run.state)
        tri = run.triples
    for _ in range(MAX_ROUNDS):
        run.state.resync()
        _descent(run)
        changed = 0
        run.info["rounds"] += 1
        if run.out_of_time():
            return
        m = merge_pass(st, run.state.zones, run.rng)
        s = split_pass(st, run.state.data, run.state.zones, run.seed(), N_TREES, FAR_ABOVE_TARGET)
        run.info["merges"] += m
        run.info["splits"] += s
        changed = m + s
        if pairs and PAIR_UNITS > 0:
            if changed:
                run.state.resync()
            labels = run.state.zones.labels
            if active is None:
                active = np.ones(labels.size, dtype=np.int64)
            else:
                # only pairs with a zone changed since they were last priced can change
                moved = np.flatnonzero(labels != last)
                active[labels[moved]] = 1
                active[last[moved]] = 1
            p = int(pair_pass(st, run.seed(), PAIR_UNITS, active, stats))
            last = labels.copy()
            run.info["pair_splits"] = run.info.get("pair_splits", 0) + p
            changed += p
            if changed == 0 and tri is not None:
                changed += tri.step(run)
        if changed == 0:
            break
    if changed:
        run.state.resync()
        _descent(run)


class _Triples:
    """Triple repartition rounds of one `_improve`: each prices the triples with a zone
    changed since the last round."""

    def __init__(self, state: ZoneState):
        d = state.data
        self.work = TripleWork(state.problem.n, d.counts.shape[1], d.x.shape[1])
        self.active = np.ones(state.zones.size.size, dtype=np.int64)
        self.last: np.ndarray | None = None
        self.stats = np.zeros(2, dtype=np.int64)

    @classmethod
    def of(cls, state: ZoneState) -> _Triples | None:
        """None where the pass does not apply: stability counts, or a count is negative
        (a part over an upper bound could shrink again by growing)."""
        d = state.data
        if d.kind[2] == 1 or (d.counts.size and float(d.counts.min()) < 0.0):
            return None
        return cls(state)

    def step(self, run: _Run) -> int:
        labels = run.state.zones.labels
        if self.last is not None:
            moved = np.flatnonzero(labels != self.last)
            self.active[labels[moved]] = 1
            self.active[self.last[moved]] = 1
        t = int(triple_pass(run.state.st, run.seed(), TRIPLE_UNITS, self.active, self.stats, *self.work.arrays()))
        self.last = labels.copy()
        run.info["triple_splits"] = run.info.get("triple_splits", 0) + t
        run.info["triples_priced"] = run.info.get("triples_priced", 0) + int(self.stats[0])
        self.stats[0] = 0
        return t


def _search_control(state: ZoneState) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Best labelling (the current one), its move log, best key and counters."""
    brk, tot = state.running_key()
    ctl = np.array([brk, tot, 0.0, 0.0])
    cti = np.zeros(CT_SIZE, dtype=np.int64)
    cti[CT_CUR_BEST] = 1
    log = np.zeros((state.problem.n, 2), dtype=np.int64)
    return state.labels(), log, ctl, cti


def _back_to_best(run: _Run, best: np.ndarray, cti: np.ndarray) -> None:
    run.info["moves_tried"] += int(cti[CT_TRIED])
    run.info["moves_accepted"] += int(cti[CT_ACCEPTED])
    state = run.state
    if cti[CT_CUR_BEST] == 1:
        state.resync()
    else:
        # moves never empty a zone, so the slots and their anchors are still those of best
        state.load(best, state.zones.anchor.copy())


def _anneal(run: _Run, start_accept: float | None = None, share: float = 1.0) -> None:
    """Simulated annealing from the current labelling; ends on the best labelling seen.

    start_accept: the share of average uphill moves taken at the first temperature
    (None: `ANNEAL_START_ACCEPT`, or `ANNEAL_START_ACCEPT_RUNS` when the fence's schedule
    has several runs); share: the part of the schedule's moves spent (over all
    of its temperatures).
    """
    state = run.state
    st = state.st
    n = state.problem.n
    best, log, ctl, cti = _search_control(state)
    uphill = float(sample_uphill(st, run.seed(), max(MIN_WORK, min(20 * n, 5000))))
    if uphill <= 0.0:
        return
    plan = fence_schedule(run.rules, n)
    if start_accept is None:
        start_accept = ANNEAL_START_ACCEPT_RUNS if plan.runs > 1 else ANNEAL_START_ACCEPT
    temp = uphill / -math.log(start_accept)
    cooling = plan.cooling
    per_temp = max(1, int(plan.per_temperature * share))
    budget = max(1, int(plan.moves * share))
    focused = plan.focused and FOCUS_SHARE < 1.0
    cand = np.empty(n, dtype=np.int64)
    done = 0
    frozen = 0
    temps = 0
    while done < budget and not run.out_of_time():
        block = min(per_temp, budget - done)
        changed0, improved0 = cti[CT_CHANGED], cti[CT_IMPROVED]
        ncand = int(hot_units(st, hot_zones(state.zones.size, state.zones.cost, FOCUS_SHARE), cand)) if focused else 0
        anneal_block(st, run.seed(), temp, block, best, log, ctl, cti, cand, ncand, FOCUS_UNIFORM)
        done += block
        temps += 1
        quiet = cti[CT_CHANGED] - changed0 <= block // 500 and cti[CT_IMPROVED] == improved0
        frozen = frozen + 1 if quiet else 0
        if frozen >= ANNEAL_FROZEN:
            break
        temp *= cooling
    run.info["temperatures"] = temps
    _back_to_best(run, best, cti)


def _tabu(run: _Run) -> None:
    """Tabu search from the current labelling; ends on the best labelling seen."""
    state = run.state
    st = state.st
    n = state.problem.n
    best, log, ctl, cti = _search_control(state)
    no_improve = int(run.rules.max_no_improve) or max(MIN_WORK, TABU_NO_IMPROVE * n)
    max_iter = TABU_MAX_ITER * no_improve
    tabu_zone = np.full(n, -1, dtype=np.int64)
    tabu_until = np.zeros(n, dtype=np.int64)
    tenure = int(run.rules.tenure)
    it = 0
    while 0 <= it < max_iter and not run.out_of_time():
        block = min(BLOCK, max_iter - it)
        it = int(
            tabu_block(
                st, run.seed(), it, block, TABU_SAMPLE, tenure, no_improve, tabu_zone, tabu_until, best, log, ctl, cti
            )
        )
    run.info["tabu_iterations"] = int(cti[CT_ACCEPTED])
    _back_to_best(run, best, cti)
