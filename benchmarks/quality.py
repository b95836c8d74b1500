"""quality: the engine's objective against the proven optimum on small fences.

The exact solver (`verify.exact.solve_exact`: every feasible zone enumerated, then set
partitioning with its default solver) proves the best zoning of fences of 20 to about 100 units. The engine runs each of its
methods (descent, annealing, tabu) with default search settings on the same Problem; the
gap is (engine - optimum) / optimum in per cent, on `measures.score(...).total` with no
bound broken.

Instances, all with bounds (one count, lower and upper bound, target in the middle):
- grids with holes (`synthetic.grid_with_holes`, one fence, largest connected part);
- clustered Voronoi tessellations (`synthetic.voronoi_tessellation`);
- NY8 census tracts (open data, r-cran-spdata `NY8_utm18.shp`): whole counties of 20-100
  tracts and connected subsets of 30-90 tracts grown inside the 142-tract county 36067;
  POP8 bounds so that zones hold 3 to 5-6 tracts of median size.

Goals: median gap <= 0.5 %, worst gap <= 2 %, a zoning with no break on every instance the
exact solver proves feasible.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from benchmarks.common import (
    Clock,
    Instance,
    frame_problem,
    grown_subset,
    largest_component,
    md_table,
    read_ny8,
    warm_engine,
    write_results,
)
from zonedesign.graph.adjacency import rook_graph
from zonedesign.rules import METHODS, SearchRules

NAME = "quality"
TITLE = "quality (engine vs proven optimum)"
GOAL_MEDIAN = 0.5  # per cent
GOAL_WORST = 2.0  # per cent
EXACT_TIME = 120.0  # seconds per instance for the exact solver
NY8_ATTRS = ("PCTOWNHOME", "PCTAGE65P", "PEXPOSURE")
SYN_ATTRS = ("attr_a", "attr_b")

# (nx, ny, hole fraction, seed)
GRIDS = [(6, 5, 0.10, 1), (7, 7, 0.15, 2), (8, 8, 0.15, 3), (9, 9, 0.10, 4), (10, 10, 0.10, 5),
         (10, 10, 0.20, 6), (11, 10, 0.10, 7)]  # fmt: skip
# (cells, seed)
VORONOI = [(25, 11), (35, 12), (45, 13), (55, 14), (65, 15), (80, 16), (95, 17)]
# (county, seed unit inside the county, subset size or 0 for the whole county)
NY8 = [("36109", 0, 0), ("36007", 0, 0), ("36067", 0, 30), ("36067", 50, 45),
       ("36067", 100, 60), ("36067", 20, 75), ("36067", 130, 90)]  # fmt: skip
QUICK = {"grid": [0, 2], "voronoi": [0, 2], "ny8": [0, 2]}
UNITS_PER_ZONE = {"grid": (3.0, 6.0), "voronoi": (3.0, 6.0), "ny8": (3.0, 5.0)}


def _sub(gdf, index):
    return gdf.iloc[np.asarray(index)].reset_index(drop=True)


def _connected(gdf):
    return _sub(gdf, largest_component(rook_graph(gdf.geometry.values)))


def grid_instance(nx: int, ny: int, hole: float, seed: int) -> Instance:
    from zonedesign.demo.synthetic import grid_with_holes

    gdf = _connected(grid_with_holes(nx, ny, hole, seed, n_fences=1))
    p = frame_problem(gdf, "persons", SYN_ATTRS, "persons", UNITS_PER_ZONE["grid"])
    return Instance(f"grid {nx}x{ny} holes {hole:.2f} seed {seed}", "grid", p)


def voronoi_instance(n: int, seed: int) -> Instance:
    from zonedesign.demo.synthetic import voronoi_tessellation

    gdf = _connected(voronoi_tessellation(n, seed, clustered=True, n_fences=1))
    p = frame_problem(gdf, "persons", SYN_ATTRS, "persons", UNITS_PER_ZONE["voronoi"])
    return Instance(f"voronoi {n} seed {seed}", "voronoi", p)


def ny8_instance(ny8, county: str, start: int, size: int) -> Instance:
    tracts = _sub(ny8, np.flatnonzero(ny8["county"].to_numpy() == county))
    if size:
        tracts = _sub(tracts, grown_subset(rook_graph(tracts.geometry.values), start, size))
    tracts = _connected(tracts)
    p = frame_problem(tracts, "POP8", NY8_ATTRS, "POP8", UNITS_PER_ZONE["ny8"])
    what = f"county {county}" if not size else f"county {county} subset from tract {start}"
    return Instance(f"NY8 {what} ({p.n} tracts)", "ny8", p)


def instances(quick: bool = False) -> list[Instance]:
    """The benchmark's instances (a few of each family with `quick`)."""
    pick = (lambda fam, seq: [seq[i] for i in QUICK[fam]]) if quick else (lambda fam, seq: seq)
    out = [grid_instance(*g) for g in pick("grid", GRIDS)]
    out += [voronoi_instance(*v) for v in pick("voronoi", VORONOI)]
    ny8 = read_ny8()
    out += [ny8_instance(ny8, *c) for c in pick("ny8", NY8)]
    return out


@dataclass
class Outcome:
    method: str
    objective: float
    breaks: float
    zones: int
    seconds: float


def run_engine(problem, method: str, seed: int = 1) -> Outcome:
    from zonedesign.search.engine import solve

    rules = SearchRules(method=method)
    with Clock() as c:
        sol = solve(problem, search_rules=rules, seed=seed, time_limit=rules.time_limit_fence)
    return Outcome(method, float(sol.score.total), float(sol.score.breaks), int(sol.labels.max()) + 1, c.seconds)


def evaluate(inst: Instance, exact_time: float = EXACT_TIME, methods=METHODS) -> dict:
    """One row: the proven optimum and each method's objective, gap and time."""
    from zonedesign.verify.exact import solve_exact

    p = inst.problem
    with Clock() as c:
        ex = solve_exact(p, time_limit=exact_time)
    optimal = ex.proven and ex.labels is not None
    infeasible = ex.proven and ex.labels is None
    row = {
        "instance": inst.name,
        "family": inst.family,
        "units": p.n,
        "lo": float(p.bounds.lo[0]),
        "hi": float(p.bounds.hi[0]),
        "feasible_zones": ex.n_feasible_zones,
        "exact_status": ex.status,
        "optimum": ex.objective if optimal else math.nan,
        "optimum_zones": int(ex.labels.max()) + 1 if ex.labels is not None else 0,
        "exact_s": c.seconds,
    }
    for m in methods:
        # an untimed run first: a new array layout may make numba compile a specialisation
        run_engine(p, m)
        o = run_engine(p, m)
        ok = o.breaks == 0.0
        row[f"{m}_objective"] = o.objective
        row[f"{m}_breaks"] = o.breaks
        row[f"{m}_zones"] = o.zones
        row[f"{m}_s"] = o.seconds
        row[f"{m}_gap_pct"] = 100.0 * (o.objective - ex.objective) / ex.objective if optimal and ok else math.nan
        row[f"{m}_feasible"] = ok if not infeasible else True
        # one-run ratio: how many times faster than proving the optimum
        row[f"{m}_speedup_vs_exact"] = c.seconds / max(o.seconds, 1e-9)
    return row


def summarise(rows: list[dict], methods=METHODS) -> list[dict]:
    out = []
    proven = [r for r in rows if not math.isnan(r["optimum"])]
    for m in methods:
        gaps = np.array([r[f"{m}_gap_pct"] for r in proven], dtype=np.float64)
        feas_missed = [r["instance"] for r in rows if not r[f"{m}_feasible"]]
        gaps_ok = gaps[~np.isnan(gaps)]
        median = float(np.median(gaps_ok)) if gaps_ok.size else math.nan
        worst = float(gaps_ok.max()) if gaps_ok.size else math.nan
        speed = np.array([r[f"{m}_speedup_vs_exact"] for r in rows])
        out.append(
            {
                "method": m,
                "instances_proven": len(proven),
                "median_gap_pct": median,
                "worst_gap_pct": worst,
                "at_optimum": int((gaps_ok <= 1e-6).sum()),
                "infeasible_results": len(feas_missed),
                "median_speedup_vs_exact": float(np.median(speed)) if speed.size else math.nan,
                "goal_median": median <= GOAL_MEDIAN,
                "goal_worst": worst <= GOAL_WORST,
                "goal_feasible": not feas_missed,
            }
        )
    return out


def main(quick: bool = False, folder: Path | None = None, log=print) -> dict:
    t0 = time.perf_counter()
    log(f"  engine warm-up (numba compile or cache load): {warm_engine():.1f} s")
    insts = instances(quick)
    rows = []
    for inst in insts:
        row = evaluate(inst)
        rows.append(row)
        log(
            f"  {inst.name}: {row['exact_status']} {row['optimum']:.5f} in {row['exact_s']:.1f} s; "
            + ", ".join(f"{m} {row[f'{m}_gap_pct']:.3f}%" for m in METHODS)
        )
    summary = summarise(rows)
    sections = [
        ("Goals", _goal_text(summary)),
        ("Summary per method", md_table(summary)),
        (
            "Per instance (gap % over the proven optimum; time as a ratio: exact seconds / engine seconds)",
            md_table(
                [
                    {
                        "instance": r["instance"],
                        "units": r["units"],
                        "bounds": f"{r['lo']:.0f}-{r['hi']:.0f}",
                        "feasible zones": r["feasible_zones"],
                        "optimum": r["optimum"],
                        "zones": r["optimum_zones"],
                        **{f"{m} gap %": r[f"{m}_gap_pct"] for m in METHODS},
                        **{f"{m} x faster": r[f"{m}_speedup_vs_exact"] for m in METHODS},
                    }
                    for r in rows
                ]
            ),
        ),
        ("Instances not proven", "\n".join(f"- {r['instance']}: {r['exact_status']}" for r in rows if math.isnan(r["optimum"])) or "none"),
        ("Method", __doc__.split("\n\n", 1)[1]),
    ]
    write_results(NAME, TITLE, rows, sections, quick=quick, seconds=time.perf_counter() - t0, folder=folder)
    return {"summary": summary, "rows": rows}


def _goal_text(summary: list[dict]) -> str:
    lines = [f"Goals: median gap <= {GOAL_MEDIAN} %, worst gap <= {GOAL_WORST} %, no broken bound on a feasible instance.", ""]
    for s in summary:
        met = s["goal_median"] and s["goal_worst"] and s["goal_feasible"]
        lines.append(
            f"- **{s['method']}**: median gap {s['median_gap_pct']:.3f} %, worst {s['worst_gap_pct']:.3f} % "
            f"over {s['instances_proven']} proven instances ({s['at_optimum']} at the optimum), "
            f"{s['infeasible_results']} infeasible result(s); goals {'met' if met else 'MISSED'}"
            + ("" if met else _missed(s))
        )
    return "\n".join(lines)


def _missed(s: dict) -> str:
    parts = []
    if not s["goal_median"]:
        parts.append(f"median over by {s['median_gap_pct'] - GOAL_MEDIAN:.3f} points")
    if not s["goal_worst"]:
        parts.append(f"worst over by {s['worst_gap_pct'] - GOAL_WORST:.3f} points")
    if not s["goal_feasible"]:
        parts.append(f"{s['infeasible_results']} result(s) break a bound")
    return " (" + "; ".join(parts) + ")"
