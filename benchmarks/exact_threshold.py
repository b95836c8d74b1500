"""exact-threshold: exact solve time against annealing time, by a fence's feasible zones.

The design step solves a fence-tier exactly when its feasible zones number at most
`[search] exact_zones`. This benchmark measures where that pays: per instance, the
feasible zones (counted by `verify.feasible.count_feasible_zones`), the seconds of the
capped count at the default threshold (what every fence-tier pays to decide), the exact
solve's seconds (`verify.exact.solve_exact`, default solver, limit EXACT_TIME) and the
default annealing search's seconds (`search.engine.solve` with default `[search]`, after
an untimed run so that no compile is timed), with the search's gap to the proven optimum.

Instances:
- the demo region's own fence-tiers (`zonedesign demo`'s input, 5,000 areas, region seed
  7): every fence of every tier as the tier runner builds it (exact solving off while
  they are captured, so each tier's units come from the search alone);
- the `quality` benchmark's grids, Voronoi tessellations and NY8 tracts (open data,
  r-cran-spdata `NY8_utm18.shp`), plus larger Voronoi tessellations and NY8 subsets that
  pass 40,000 feasible zones.

The threshold rule: order the solved instances by feasible zones; the threshold is the
largest count at which the exact seconds summed over every instance up to it are at most
RATIO_GOAL times the annealing seconds summed over the same instances (exact solving,
over all fence-tiers it takes on, costs no more time than the search it replaces),
rounded down to a multiple of 1,000; every instance up to it must be proven. The bins
table shows the same figures grouped. Ratios are taken within one run on one machine.
"""

from __future__ import annotations

import math
import tempfile
import time
from pathlib import Path

import numpy as np

from benchmarks.common import Clock, Instance, md_table, read_ny8, warm_engine, write_results

NAME = "exact-threshold"
TITLE = "exact-threshold (exact solve vs annealing, by feasible zones)"
EXACT_TIME = 60.0  # seconds per exact solve
COUNT_CAP = 640_000  # instances with more feasible zones are counted, not solved
RATIO_GOAL = 1.0  # exact at most as slow as annealing (median in a bin)
BINS = [0, 5_000, 10_000, 20_000, 40_000, 80_000, 160_000, 320_000, COUNT_CAP]
EXTRA_VORONOI = [(110, 21), (130, 22), (150, 23)]
EXTRA_NY8 = [("36067", 60, 100), ("36067", 10, 110)]


def demo_instances(n: int = 5000, seed: int = 7) -> list[Instance]:
    """Every fence-tier problem of the demo region, as the tier runner builds it."""
    from dataclasses import replace

    from zonedesign.demo.scenarios import write_demo_input
    from zonedesign.jobs.inputs import prepare
    from zonedesign.tiers.design import build_hierarchy
    from zonedesign.tiers.executors import serial_executor

    found: list[Instance] = []

    def capture(tasks, fn=None):
        for t in tasks:
            found.append(Instance(f"demo {t.tier} {t.fence} ({t.problem.n} units)", f"demo-{t.tier}", t.problem))
        return serial_executor(tasks, fn)  # fn: the design strategy's fence function

    with tempfile.TemporaryDirectory(prefix="zonedesign-bench-") as tmp:
        written = write_demo_input(Path(tmp) / "input", seed=seed, n=n)
        prep = prepare(written["areas"], written["rules"])
        rules = replace(prep.rules, search=replace(prep.rules.search, exact_zones=0))
        build_hierarchy(prep.areas, prep.graph, rules, executor=capture, locks=prep.locks)
    return found


def other_instances(quick: bool) -> list[Instance]:
    from benchmarks import quality

    out = quality.instances(quick)
    if quick:
        return out
    out += [quality.voronoi_instance(*v) for v in EXTRA_VORONOI]
    ny8 = read_ny8()
    out += [quality.ny8_instance(ny8, *c) for c in EXTRA_NY8]
    return out


def measure(inst: Instance, threshold: int) -> dict:
    from benchmarks.quality import run_engine
    from zonedesign.verify.exact import solve_exact
    from zonedesign.verify.feasible import count_feasible_zones

    p = inst.problem
    with Clock() as c:
        count_feasible_zones(p, threshold)
    capped_s = c.seconds
    full = count_feasible_zones(p, COUNT_CAP, node_cap=20 * COUNT_CAP)
    row = {
        "instance": inst.name,
        "family": inst.family,
        "units": p.n,
        "feasible_zones": full.count if full.complete else math.nan,
        "over_cap": not full.complete,
        "count_s_at_threshold": capped_s,
    }
    run_engine(p, "annealing")  # untimed: a new array layout may compile a specialisation
    search = run_engine(p, "annealing")
    row["anneal_s"] = search.seconds
    if full.complete:
        with Clock() as c:
            ex = solve_exact(p, time_limit=EXACT_TIME, max_zones_enumerated=COUNT_CAP)
        proven = bool(ex.proven and ex.labels is not None)
        row["exact_s"] = c.seconds
        row["proven"] = proven
        row["exact_status"] = ex.status
        row["ratio_exact_to_anneal"] = c.seconds / max(search.seconds, 1e-9)
        ok = proven and search.breaks == 0
        row["anneal_gap_pct"] = 100.0 * (search.objective - ex.objective) / ex.objective if ok and ex.objective else math.nan
    else:
        row.update(exact_s=math.nan, proven=False, exact_status=full.reason, ratio_exact_to_anneal=math.nan,
                   anneal_gap_pct=math.nan)
    return row


def by_bin(rows: list[dict]) -> list[dict]:
    out = []
    for lo, hi in zip(BINS[:-1], BINS[1:]):
        inside = [r for r in rows if not r["over_cap"] and lo < r["feasible_zones"] <= hi]
        if not inside:
            continue
        ratios = np.array([r["ratio_exact_to_anneal"] for r in inside])
        out.append({
            "feasible zones": f"{lo:,}-{hi:,}",
            "upper": hi,
            "instances": len(inside),
            "proven": sum(r["proven"] for r in inside),
            "median exact s": float(np.median([r["exact_s"] for r in inside])),
            "median anneal s": float(np.median([r["anneal_s"] for r in inside])),
            "median ratio exact/anneal": float(np.median(ratios)),
            "worst ratio": float(ratios.max()),
        })
    return out


def threshold_of(rows: list[dict]) -> int:
    """The largest feasible-zone count meeting the rule (module docstring); 0 when none."""
    solved = sorted((r for r in rows if not r["over_cap"]), key=lambda r: r["feasible_zones"])
    chosen, exact, anneal = 0, 0.0, 0.0
    for r in solved:
        if not r["proven"]:
            break
        exact += r["exact_s"]
        anneal += r["anneal_s"]
        r["cumulative_ratio"] = exact / max(anneal, 1e-9)
        if r["cumulative_ratio"] <= RATIO_GOAL:
            chosen = int(r["feasible_zones"])
    return chosen // 1000 * 1000


def main(quick: bool = False, folder: Path | None = None, log=print) -> dict:
    from zonedesign.rules import SearchRules

    t0 = time.perf_counter()
    log(f"  engine warm-up (numba compile or cache load): {warm_engine():.1f} s")
    default = SearchRules().exact_zones
    insts = demo_instances(n=2000 if quick else 5000) + other_instances(quick)
    rows = []
    for inst in insts:
        row = measure(inst, default)
        rows.append(row)
        log(f"  {inst.name}: {row['feasible_zones']} zones, exact {row['exact_s']:.2f} s "
            f"({row['exact_status']}), anneal {row['anneal_s']:.2f} s")
    rows.sort(key=lambda r: (r["over_cap"], r["feasible_zones"] if not r["over_cap"] else 0))
    bins = by_bin(rows)
    chosen = threshold_of(rows)
    demo = [r for r in rows if r["family"].startswith("demo")]
    sections = [
        ("Threshold", (
            f"Rule: the largest feasible-zone count up to which the summed exact seconds are at most "
            f"{RATIO_GOAL:g} x the summed annealing seconds, every instance proven within {EXACT_TIME:g} s, "
            f"rounded down to 1,000. Measured threshold: **{chosen:,}** feasible "
            f"zones; the default `[search] exact_zones` at this commit is {default:,}."
        )),
        ("By feasible zones", md_table(bins, [k for k in bins[0] if k != "upper"] if bins else None)),
        ("Demo fence-tiers", md_table(demo, ["instance", "units", "feasible_zones", "count_s_at_threshold",
                                             "exact_s", "anneal_s", "ratio_exact_to_anneal", "anneal_gap_pct"])),
        ("Per instance", md_table(rows, ["instance", "units", "feasible_zones", "count_s_at_threshold", "exact_s",
                                         "anneal_s", "ratio_exact_to_anneal", "cumulative_ratio", "proven",
                                         "anneal_gap_pct"])),
        ("Method", __doc__.split("\n\n", 1)[1]),
    ]
    write_results(NAME, TITLE, rows, sections, quick=quick, seconds=time.perf_counter() - t0, folder=folder)
    return {"rows": rows, "bins": bins, "threshold": chosen}
