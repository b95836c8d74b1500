"""quality-scale: the default search on 2,000-unit fences against a best-known zoning.

No exact solver proves fences this large, so each instance's reference is the best
objective of a long run, made once and committed with the command that made it
(`results/quality-scale-reference.csv`):

    python -m benchmarks.quality_scale --reference

which runs `effort = "thorough"` (34 times the default's moves per unit, slower cooling)
from seeds 1 and 2 and keeps the better. Any run of this benchmark that finds a lower
objective than the reference is used as the best known instead, and the table says so.

Instances: one fence each of about 2,000 units, bounds and weights of the demo's finest
tier (`scenarios.demo_rules_text`, stability off since nothing is redrawn), attributes
standardised and weighted as the hierarchy does: clustered Voronoi tessellations
(`synthetic.voronoi_tessellation`, seeds 1-3) and square grids with 2 % holes
(`synthetic.grid_with_holes`, 45 x 45, seeds 1-2), largest connected part.

Runs, each from seeds 1-3 (quick: seed 1), CPU seconds of this process
(`time.process_time`) around `search.engine.solve`:
- default: `SearchRules()` as shipped;
- previous default: the schedule the engine ran before effort was a setting, stated as
  settings (600 moves per unit, cooling 0.97, 8 x units moves per temperature, one run),
  with the engine's other settings of that time (`PREVIOUS_ENGINE`: first temperature at
  10 % acceptance of the average uphill move, no pair repartition): the CPU ratio
  default / previous default is measured in the same run;
- multilevel: the default with the multilevel path forced (`solve(..., multilevel=True)`),
  which records why fences of this size take the flat path.

Goals: the default's median gap <= 1 %, worst <= 2 %, CPU ratio to the previous default
<= 1.
"""

from __future__ import annotations

import argparse
import csv
import math
import sys
import time
from contextlib import contextmanager, nullcontext
from pathlib import Path

import numpy as np

from benchmarks.common import (
    RESULTS,
    Instance,
    build_problem,
    code_version,
    largest_component,
    md_table,
    warm_engine,
    write_results,
)
from zonedesign.rules import SearchRules

NAME = "quality-scale"
TITLE = "quality-scale (default search on 2,000-unit fences vs best known)"
REFERENCE = RESULTS / "quality-scale-reference.csv"
REFERENCE_COMMAND = "python -m benchmarks.quality_scale --reference"
REFERENCE_SEEDS = (1, 2)
GOAL_MEDIAN = 1.0  # per cent
GOAL_WORST = 2.0
GOAL_CPU = 1.0
VORONOI = (1, 2, 3)
GRIDS = (1, 2)
SEEDS = (1, 2, 3)
QUICK = ["voronoi 2000 seed 1", "grid 45x45 seed 1"]
TIME_LIMIT = 3600.0  # a safety cap only: every run stops on its move budget


def _finest_tier():
    from zonedesign.demo.scenarios import demo_rules_text
    from zonedesign.rules import parse_rules

    return parse_rules(demo_rules_text()).tiers[0]


def _problem(gdf, name: str, family: str) -> Instance:
    from dataclasses import replace

    from zonedesign.graph.adjacency import rook_graph

    gdf = gdf.iloc[largest_component(rook_graph(gdf.geometry.values))].reset_index(drop=True)
    tier = _finest_tier()
    names = ("households", "persons")
    p = build_problem(
        gdf.geometry.values,
        gdf[list(names)].to_numpy(dtype=np.float64),
        names,
        gdf[["attr_a", "attr_b"]].to_numpy(dtype=np.float64),
        gdf["persons"].to_numpy(dtype=np.float64),
        lo=[float(tier.min.get(c, -np.inf)) for c in names],
        hi=[float(tier.max.get(c, np.inf)) for c in names],
        target=[float(tier.target.get(c, np.nan)) for c in names],
    )
    weights = {**tier.weights, "stability": 0.0}
    return Instance(name, family, replace(p, term_weights=weights))


def instances(quick: bool = False) -> list[Instance]:
    from zonedesign.demo.synthetic import grid_with_holes, voronoi_tessellation

    out = [_problem(voronoi_tessellation(2000, s, clustered=True, n_fences=1), f"voronoi 2000 seed {s}", "voronoi") for s in VORONOI]
    out += [_problem(grid_with_holes(45, 45, 0.02, s, n_fences=1), f"grid 45x45 seed {s}", "grid") for s in GRIDS]
    return [i for i in out if i.name in QUICK] if quick else out


def previous_default(n: int) -> SearchRules:
    """The engine's schedule before effort was a setting: 600 n moves, 8 n per temperature."""
    return SearchRules(moves_per_unit=600, cooling=0.97, moves_per_temperature=8 * n, restarts=1)


# what the engine did before the quality-scale work besides its schedule: the first
# temperature took 10 % of the average uphill move, no pair or triple of zones was
# repartitioned, trials were not focused, and the reshape phase made 0.2 x units tries
# (module, name, value)
PREVIOUS_ENGINE = (
    ("zonedesign.search.engine", "ANNEAL_START_ACCEPT", 0.1),
    ("zonedesign.search.engine", "PAIR_UNITS", 0),
    ("zonedesign.search.engine", "TRIPLE_UNITS", 0),
    ("zonedesign.search.engine", "FOCUS_SHARE", 1.0),
    ("zonedesign.search.reshape", "RESHAPE_TRIES", 0.2),
)


@contextmanager
def previous_engine():
    """The engine's settings as they were before (PREVIOUS_ENGINE), for the previous default."""
    import importlib

    kept = []
    for module, name, value in PREVIOUS_ENGINE:
        mod = importlib.import_module(module)
        kept.append((mod, name, getattr(mod, name)))
        setattr(mod, name, value)
    try:
        yield
    finally:
        for mod, name, value in kept:
            setattr(mod, name, value)


def run(problem, rules: SearchRules, seed: int, multilevel: bool | None = None, previous: bool = False) -> dict:
    from zonedesign.search.engine import solve

    t0 = time.process_time()
    with previous_engine() if previous else nullcontext():
        sol = solve(problem, search_rules=rules, seed=seed, time_limit=TIME_LIMIT, multilevel=multilevel)
    return {
        "objective": float(sol.score.total),
        "breaks": float(sol.score.breaks),
        "zones": int(sol.labels.max()) + 1,
        "cpu_s": time.process_time() - t0,
        "path": sol.info.get("path", ""),
    }


# ---------------------------------------------------------------- reference


def make_reference(log=print) -> None:
    """Run the long reference searches and write them with their command."""
    warm_engine()
    # the code as loaded now: later edits to the working tree do not change this run
    commit = code_version()
    rows = []
    for inst in instances():
        runs = [run(inst.problem, SearchRules(effort="thorough"), s) for s in REFERENCE_SEEDS]
        best = min((r for r in runs if r["breaks"] == 0.0), key=lambda r: r["objective"])
        rows.append({
            "instance": inst.name, "units": inst.problem.n, "objective": best["objective"], "zones": best["zones"],
            "effort": "thorough", "seeds": " ".join(map(str, REFERENCE_SEEDS)),
            "cpu_s": sum(r["cpu_s"] for r in runs), "command": REFERENCE_COMMAND, "commit": commit,
        })
        log(f"  {inst.name}: {best['objective']:.5f} in {rows[-1]['cpu_s']:.0f} CPU s")
    with REFERENCE.open("w", newline="") as f:
        w = csv.DictWriter(f, fieldnames=list(rows[0]))
        w.writeheader()
        w.writerows(rows)


def read_reference() -> dict[str, float]:
    if not REFERENCE.is_file():
        raise SystemExit(f"{REFERENCE}: no reference objectives; make them with `{REFERENCE_COMMAND}`")
    with REFERENCE.open() as f:
        return {r["instance"]: float(r["objective"]) for r in csv.DictReader(f)}


# ---------------------------------------------------------------- benchmark


def main(quick: bool = False, folder: Path | None = None, log=print) -> dict:
    t0 = time.perf_counter()
    log(f"  engine warm-up (numba compile or cache load): {warm_engine():.1f} s")
    reference = read_reference()
    seeds = SEEDS[:1] if quick else SEEDS
    rows = []
    for inst in instances(quick):
        p = inst.problem
        for s in seeds:
            d = run(p, SearchRules(), s)
            old = run(p, previous_default(p.n), s, previous=True)
            ml = run(p, SearchRules(), s, multilevel=True)
            rows.append({"instance": inst.name, "family": inst.family, "units": p.n, "seed": s,
                         **{f"default_{k}": v for k, v in d.items()},
                         **{f"previous_{k}": v for k, v in old.items()},
                         **{f"multilevel_{k}": v for k, v in ml.items()}})
            log(f"  {inst.name} seed {s}: default {d['objective']:.5f} ({d['cpu_s']:.2f} s), previous "
                f"{old['objective']:.5f} ({old['cpu_s']:.2f} s), multilevel {ml['objective']:.5f} ({ml['cpu_s']:.2f} s)")
    for r in rows:
        seen = [x[f"{m}_objective"] for x in rows if x["instance"] == r["instance"] for m in ("default", "previous", "multilevel")
                if x[f"{m}_breaks"] == 0.0]
        best = min([reference[r["instance"]], *seen])
        r["reference"] = reference[r["instance"]]
        r["best_known"] = best
        for m in ("default", "previous", "multilevel"):
            ok = r[f"{m}_breaks"] == 0.0
            r[f"{m}_gap_pct"] = 100.0 * (r[f"{m}_objective"] - best) / best if ok else math.nan
        r["cpu_ratio"] = r["default_cpu_s"] / max(r["previous_cpu_s"], 1e-9)
        r["multilevel_cpu_ratio"] = r["multilevel_cpu_s"] / max(r["previous_cpu_s"], 1e-9)
    summary = summarise(rows)
    sections = [
        ("Goals", _goal_text(summary)),
        ("Summary", md_table(summary)),
        ("Per run (gap % over the best known; CPU as a ratio to the previous default, same run)", md_table([
            {"instance": r["instance"], "units": r["units"], "seed": r["seed"], "best known": r["best_known"],
             "reference": r["reference"], "default gap %": r["default_gap_pct"], "previous gap %": r["previous_gap_pct"],
             "multilevel gap %": r["multilevel_gap_pct"], "default CPU / previous": r["cpu_ratio"],
             "multilevel CPU / previous": r["multilevel_cpu_ratio"], "default CPU s": r["default_cpu_s"]}
            for r in rows
        ])),
        ("Method", __doc__.split("\n\n", 1)[1]),
    ]
    write_results(NAME, TITLE, rows, sections, quick=quick, seconds=time.perf_counter() - t0, folder=folder)
    return {"summary": summary, "rows": rows}


def summarise(rows: list[dict]) -> list[dict]:
    out = []
    for m, label in (("default", "default"), ("previous", "previous default"), ("multilevel", "default, multilevel forced")):
        gaps = np.array([r[f"{m}_gap_pct"] for r in rows], dtype=np.float64)
        gaps = gaps[~np.isnan(gaps)]
        cpu = np.array([r[f"{m}_cpu_s"] / max(r["previous_cpu_s"], 1e-9) for r in rows])
        out.append({
            "search": label, "runs": len(rows), "with breaks": len(rows) - gaps.size,
            "median_gap_pct": float(np.median(gaps)) if gaps.size else math.nan,
            "worst_gap_pct": float(gaps.max()) if gaps.size else math.nan,
            "median_cpu_vs_previous": float(np.median(cpu)) if cpu.size else math.nan,
        })
    return out


def _goal_text(summary: list[dict]) -> str:
    d = summary[0]
    met = {
        "median": d["median_gap_pct"] <= GOAL_MEDIAN,
        "worst": d["worst_gap_pct"] <= GOAL_WORST,
        "cpu": d["median_cpu_vs_previous"] <= GOAL_CPU,
    }
    lines = [
        f"Goals for the default: median gap <= {GOAL_MEDIAN} %, worst <= {GOAL_WORST} % to the best known, "
        f"CPU <= {GOAL_CPU} x the previous default.",
        "",
        f"- median gap {d['median_gap_pct']:.3f} % ({'met' if met['median'] else 'MISSED'}), worst "
        f"{d['worst_gap_pct']:.3f} % ({'met' if met['worst'] else 'MISSED'}), CPU "
        f"{d['median_cpu_vs_previous']:.2f} x the previous default ({'met' if met['cpu'] else 'MISSED'}); "
        f"{d['with breaks']} run(s) with a broken bound",
    ]
    for s in summary[1:]:
        lines.append(f"- {s['search']}: median gap {s['median_gap_pct']:.3f} %, worst {s['worst_gap_pct']:.3f} %, "
                     f"CPU {s['median_cpu_vs_previous']:.2f} x the previous default")
    return "\n".join(lines)


if __name__ == "__main__":
    parser = argparse.ArgumentParser(prog="python -m benchmarks.quality_scale")
    parser.add_argument("--reference", action="store_true", help=f"remake {REFERENCE.name} (long)")
    parser.add_argument("--quick", action="store_true")
    args = parser.parse_args()
    if args.reference:
        make_reference()
    else:
        main(quick=args.quick)
    sys.exit(0)
