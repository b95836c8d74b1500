"""reshape: the compiled reshape phase against the Python loop it replaced.

The reshape phase (`search.reshape`) makes forced changes (split, merge, regrow, shift)
around random zones, repairs each with a local descent and keeps it only when it is
better. It used to be a Python loop whose bookkeeping cost the fence's size on every try
(copies of all labels and anchors, a scan for live zones, `np.isin` over every unit); it
now runs in compiled blocks with an undo log. The Python loop is kept below
(`previous_reshape`) over the same compiled kernels it used, so both are timed in one run.

Instances: clustered Voronoi fences of 5,000 (full run only), 2,000 and 200 units
(`synthetic.voronoi_tessellation` seed 1, bounds and weights of the demo's finest tier, as
in quality-scale). One starting
labelling per instance: the engine's phases before the reshape (construction, improvement,
annealing, improvement with pair repartitions) from seed 1. Both implementations then run
the reshape phase from that labelling with seeds 1-5 (quick: 1-3) and the same number of
tries; the two draw their random choices differently, so they reach different zonings.
Each (seed, implementation) is timed REPEATS times, alternating the two, and the fastest
run counts (a seed's run is the same search every time; the machine's load is not).

Reported: seconds per try (median over seeds) and their ratio previous / compiled, and
the objective reached (median over seeds; no bound is broken by either). Goals: the
compiled phase faster per try on every fence, and its median objective no worse than the
previous loop's.
"""

from __future__ import annotations

import statistics
import time
from pathlib import Path

import numpy as np

from benchmarks.common import md_table, warm_engine, write_results
from benchmarks.quality_scale import _problem

NAME = "reshape"
TITLE = "reshape (compiled reshape phase vs the previous Python loop)"
SIZES = (5000, 2000, 200)
QUICK_SIZES = (2000, 200)
SEEDS = (1, 2, 3, 4, 5)
QUICK_SEEDS = (1, 2, 3)
REPEATS = 3  # timed runs per seed and implementation, alternating; the fastest counts


# ---------------------------------------------------------------- the previous loop


def previous_reshape(run) -> None:
    """The reshape phase as a Python loop over the compiled kernels (the implementation
    before the compiled blocks), kept for comparison."""
    from zonedesign.search.azp import local_descent
    from zonedesign.search.kernels import is_less
    from zonedesign.search.reshape import MIN_TRIES, RESHAPE_TRIES

    state = run.state
    st, zones = state.st, state.zones
    n = state.problem.n
    tries = max(MIN_TRIES, int(RESHAPE_TRIES * n))
    stats = np.zeros(2, dtype=np.int64)
    kept = 0
    makes = (_split, _merge, _regrow, _shift)
    for _ in range(tries):
        if run.out_of_time():
            break
        live = np.flatnonzero(zones.size > 0)
        a = int(live[run.rng.integers(live.size)])
        before = state.running_key()
        labels, anchors = zones.labels.copy(), zones.anchor.copy()
        touched = makes[run.rng.integers(len(makes))](run, a, labels, anchors)
        if touched is None:
            continue
        local_descent(st, run.seed(), touched, stats)
        after = state.running_key()
        if is_less(after[0], after[1], before[0], before[1]):
            kept += 1
        else:
            state.restore(labels, anchors)
    run.info["moves_tried"] += int(stats[0])
    run.info["moves_accepted"] += int(stats[1])
    run.info["reshapes"] = kept


def _split(run, a, labels, anchors):
    from zonedesign.search.kernels import seed_rng
    from zonedesign.search.mergesplit import N_TREES, try_split

    state = run.state
    if state.zones.size[a] < 2:
        return _regrow(run, a, labels, anchors)
    seed_rng(run.seed())
    new = int(try_split(state.st, a, N_TREES, np.empty(state.problem.n, dtype=np.int64), 1))
    return np.array([a, new], dtype=np.int64)


def _merge(run, a, labels, anchors):
    from zonedesign.search.mergesplit import best_merge, merge_zones

    st = run.state.st
    b, _, _, anc = best_merge(st, a, 0, 0)
    if b < 0:
        return None
    merge_zones(st, a, int(b), int(anc))
    return np.array([a], dtype=np.int64)


def _regrow(run, a, labels, anchors):
    from zonedesign.search import moves as KM
    from zonedesign.search.construct import absorb_enclaves, grow_zones
    from zonedesign.search.forced import REGROW_AIM, REGROW_NEIGHBOURS
    from zonedesign.search.reshape import growth_weights

    state = run.state
    g = state.problem.graph
    n = labels.shape[0]
    members = np.flatnonzero(labels == a)
    rows = np.concatenate([g.indices[g.indptr[u] : g.indptr[u + 1]] for u in members])
    near = np.unique(labels[rows])
    near = near[near != a]
    if near.size > REGROW_NEIGHBOURS:
        near = run.rng.choice(near, REGROW_NEIGHBOURS, replace=False)
    old = np.concatenate([[a], near]).astype(np.int64)
    region = np.flatnonzero(np.isin(labels, old))
    work = labels.copy()
    work[region] = -1
    alpha, beta = growth_weights(state)
    made = int(grow_zones(state.st, run.seed(), alpha, beta, work, region, n, REGROW_AIM[0], REGROW_AIM[1]))
    if made == 0:
        return None
    slots = np.concatenate([old, np.flatnonzero(state.zones.size == 0)])[:made]
    grown = work >= n
    work[grown] = slots[work[grown] - n]
    new_anchors = anchors.copy()
    new_anchors[slots] = -1
    KM.relabel(state.st, region, work, new_anchors, slots)
    absorb_enclaves(state.st, run.seed())
    return slots


def _shift(run, a, labels, anchors):
    from zonedesign.search import moves as KM

    state = run.state
    st, zones = state.st, state.zones
    edge = np.flatnonzero((labels == a) & (zones.bpos >= 0))
    if edge.size == 0:
        return None
    u = int(edge[run.rng.integers(edge.size)])
    if not KM.donor_ok(st, u):
        return None
    others = state.neighbour_zones(u)
    b = int(others[run.rng.integers(others.size)])
    KM.move_unit(st, u, b)
    return np.array([a, b], dtype=np.int64)


# ---------------------------------------------------------------- the benchmark


def start_labelling(problem, seed: int = 1) -> tuple[np.ndarray, np.ndarray]:
    """(labels, anchors) after the engine's phases that run before the reshape."""
    from zonedesign.rules import SearchRules
    from zonedesign.search import engine as E
    from zonedesign.search.state import ZoneState

    state = ZoneState(problem)
    run = E._Run(state, SearchRules(), seed, 1e9)
    labels, _ = E._construct(run, 1)
    state.load(labels)
    E._improve(run)
    E._anneal(run)
    E._improve(run, pairs=True)
    return state.zones.labels.copy(), state.zones.anchor.copy()


def time_reshape(problem, start: tuple[np.ndarray, np.ndarray], seed: int, previous: bool) -> tuple[dict, np.ndarray]:
    """Seconds, tries and the (breaks, objective) reached by one reshape phase from start,
    and the labels it ends on."""
    from zonedesign.rules import SearchRules
    from zonedesign.search import engine as E
    from zonedesign.search.reshape import MIN_TRIES, RESHAPE_TRIES, reshape
    from zonedesign.search.state import ZoneState

    state = ZoneState(problem, start[0], start[1])
    run = E._Run(state, SearchRules(), seed, 1e9)
    t0 = time.perf_counter()
    (previous_reshape if previous else reshape)(run)
    seconds = time.perf_counter() - t0
    tries = max(MIN_TRIES, int(RESHAPE_TRIES * problem.n))
    brk, tot = state.key()
    row = {"seconds": seconds, "tries": tries, "per_try_s": seconds / tries, "breaks": brk, "objective": tot,
           "kept": int(run.info["reshapes"])}
    return row, state.compact()[0]


def main(quick: bool = False, folder: Path | None = None, log=print) -> dict:
    from zonedesign.demo.synthetic import voronoi_tessellation
    from zonedesign.search.state import ZoneState

    t0 = time.perf_counter()
    log(f"  engine warm-up (numba compile or cache load): {warm_engine():.1f} s")
    seeds = QUICK_SEEDS if quick else SEEDS
    rows, summary = [], []
    warmed = False
    for n in QUICK_SIZES if quick else SIZES:
        problem = _problem(voronoi_tessellation(n, 1, clustered=True, n_fences=1), f"voronoi {n}", "voronoi").problem
        start = start_labelling(problem)
        start_brk, start_obj = ZoneState(problem, *start).key()
        if not warmed:
            # the previous loop calls kernels from Python that a search does not: compile them first
            for previous in (True, False):
                time_reshape(problem, start, 0, previous)
            warmed = True
        per = {"previous": [], "compiled": []}
        for s in seeds:
            best: dict[str, dict] = {}
            for _ in range(REPEATS):
                for impl in ("previous", "compiled"):
                    r, _ = time_reshape(problem, start, s, impl == "previous")
                    if impl not in best or r["seconds"] < best[impl]["seconds"]:
                        best[impl] = r
            for impl in ("previous", "compiled"):
                r = best[impl]
                per[impl].append(r)
                rows.append({"units": problem.n, "seed": s, "implementation": impl, "start_objective": start_obj, **r})
            log(f"  {problem.n} units seed {s}: previous {per['previous'][-1]['per_try_s'] * 1e3:.3f} ms/try "
                f"-> {per['previous'][-1]['objective']:.5f}, compiled {per['compiled'][-1]['per_try_s'] * 1e3:.3f} "
                f"ms/try -> {per['compiled'][-1]['objective']:.5f}")

        def med(impl: str, key: str, per: dict = per) -> float:
            return float(statistics.median(r[key] for r in per[impl]))

        summary.append({
            "units": problem.n, "tries": per["compiled"][0]["tries"], "start breaks": start_brk,
            "start objective": start_obj, "previous ms/try": 1e3 * med("previous", "per_try_s"), "compiled ms/try": 1e3 * med("compiled", "per_try_s"),
            "ratio previous / compiled": med("previous", "per_try_s") / max(med("compiled", "per_try_s"), 1e-12),
            "previous objective (median)": med("previous", "objective"),
            "compiled objective (median)": med("compiled", "objective"),
            "previous kept (median)": med("previous", "kept"), "compiled kept (median)": med("compiled", "kept"),
            "breaks (max)": max(r["breaks"] for r in per["previous"] + per["compiled"]),
        })  # fmt: skip
    goals = [
        "- compiled faster per try than the previous loop on every fence: "
        + ", ".join(f"{s['units']} units {s['ratio previous / compiled']:.2f} x" for s in summary),
        "- compiled median objective no worse than the previous loop's: "
        + ", ".join(
            f"{s['units']} units {'met' if s['compiled objective (median)'] <= s['previous objective (median)'] else 'NOT met'}"
            f" ({s['compiled objective (median)']:.5f} vs {s['previous objective (median)']:.5f})"
            for s in summary
        ),
    ]
    sections = [
        ("Goals", "\n".join(goals)),
        ("Summary (medians over seeds; seconds per try as a ratio measured in this run)", md_table(summary, digits=4)),
        ("Per run", md_table(rows, digits=5)),
        ("Method", __doc__),
    ]
    write_results(NAME, TITLE, rows, sections, quick=quick, seconds=time.perf_counter() - t0, folder=folder)
    for s in summary:
        log(f"  {s['units']} units: {s['ratio previous / compiled']:.2f} x per try; objective "
            f"{s['previous objective (median)']:.5f} -> {s['compiled objective (median)']:.5f}")
    return {"summary": summary, "rows": rows}
