"""scale: end-to-end runs of `zonedesign design` on 20,000 to 200,000 areas.

Inputs are synthetic clean tessellations (`synthetic.voronoi_tessellation`, clustered
cells, identical shared vertices) with one fence per about 2,000 areas, the way districts
bound real problems; a fence part cut off from the rest of its fence is handed to the
neighbouring fence it shares most boundary with, so every fence is connected and every
bound can be met. Each input is written as GeoParquet (the run's input) and GeoPackage.

Each size runs the whole job through the CLI in a child process (`zonedesign design AREAS
--rules RULES --out DIR`, three tiers, default search settings, one worker, with the
CP-SAT certificate and the HTML report on, as a user runs it): the seconds per phase come
from its summary.json, the peak resident size from the child's rusage. At the smallest
size the same job also runs once without the certificate and the report
(`--no-certificate --no-report`), to show what those two cost.

The I/O floor is what any tool must spend on the same job: reading the input (geopandas
/ pyarrow) plus writing the lookup (CSV) and the zone layers (the run's own dissolved
layers, written again with pyogrio to a GeoPackage), timed in this process right after
the run.

Goals (issue 15): 200k x 3 tiers end to end, certificate and report on, <= 25 x the I/O
floor; time(200k) / time(20k) <= 11; peak RSS <= 2 GB.
"""

from __future__ import annotations

import json
import math
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from benchmarks.common import Clock, code_snapshot, md_table, write_results
from zonedesign.summaryrecord import RunSummary

NAME = "scale"
TITLE = "scale (end to end through the CLI)"
GOAL_FLOOR = 25.0
GOAL_GROWTH = 11.0
GOAL_RSS_GB = 2.0
AREAS_PER_FENCE = 2000

def _demo_tiers() -> str:
    """The demo's three [[tier]] tables (its invented bounds and targets), without weights
    and without the overrides that name the demo's own districts."""
    import re

    from zonedesign.demo.scenarios import demo_rules_text

    text = demo_rules_text()
    tiers = text[text.index("[[tier]]"):text.index("[search]")]
    tiers = re.sub(r"\[\[tier\.override\]\]\n(?:[^\[\n].*\n)*", "", tiers)
    return "".join(line + "\n" for line in tiers.splitlines() if not line.startswith("weights"))


RULES = f"""\
# three tiers with the demo's invented bounds and default weights
[areas]
id = "id"
counts = ["households", "persons"]
attributes = ["attr_a", "attr_b"]
fence = "fence"
weight = "persons"

{_demo_tiers()}[search]
method = "annealing"
seed = 1
"""


# ---------------------------------------------------------------- inputs


def connected_fences(gdf, graph=None):
    """Give every fence part cut off from its fence's largest part to the neighbouring
    fence it shares most boundary with (repeated until every fence is connected)."""
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import connected_components

    from zonedesign.graph.adjacency import rook_graph

    g = rook_graph(gdf.geometry.values) if graph is None else graph
    fence = gdf["fence"].to_numpy(dtype=object).copy()
    i, j, w = g.edges()
    for _ in range(20):
        same = fence[i] == fence[j]
        m = csr_matrix((np.ones(int(same.sum())), (i[same], j[same])), shape=(g.n, g.n))
        _, comp = connected_components(m, directed=False)
        sizes = np.bincount(comp)
        best = {}
        for c in np.unique(comp):
            f = fence[np.flatnonzero(comp == c)[0]]
            if f not in best or sizes[c] > sizes[best[f]]:
                best[f] = c
        keep = np.isin(comp, list(best.values()))
        if keep.all():
            break
        cross = ~same
        for c in np.unique(comp[~keep]):
            member = comp == c
            out = cross & (member[i] ^ member[j])
            if not out.any():
                continue
            other = np.where(member[i[out]], fence[j[out]], fence[i[out]])
            lengths = {}
            for f, length in zip(other, w[out]):
                lengths[f] = lengths.get(f, 0.0) + length
            fence[member] = max(sorted(lengths), key=lambda f: lengths[f])
    out = gdf.copy()
    out["fence"] = fence
    return out


def make_input(n: int, folder: Path, seed: int = 1) -> dict:
    """Write the tessellation of n areas as GeoParquet and GeoPackage; returns paths and times."""
    from zonedesign.demo.synthetic import voronoi_tessellation

    folder.mkdir(parents=True, exist_ok=True)
    with Clock() as c:
        gdf = voronoi_tessellation(n, seed, clustered=True, n_fences=max(1, n // AREAS_PER_FENCE))
        gdf = connected_fences(gdf)
    paths = {"parquet": folder / f"areas_{n}.parquet", "gpkg": folder / f"areas_{n}.gpkg", "rules": folder / "rules.toml"}
    gdf.to_parquet(paths["parquet"])
    import pyogrio

    pyogrio.write_dataframe(gdf, paths["gpkg"], layer="areas", driver="GPKG")
    paths["rules"].write_text(RULES, encoding="utf-8")
    return {"paths": paths, "generate_s": c.seconds, "fences": int(gdf["fence"].nunique())}


# ---------------------------------------------------------------- runs


_RSS_SCRIPT = """
import os, resource, subprocess, sys, time, json
t0 = time.perf_counter()
rc = subprocess.call(sys.argv[1:])
ru = resource.getrusage(resource.RUSAGE_CHILDREN)
print(json.dumps({"rc": rc, "wall": time.perf_counter() - t0, "cpu": ru.ru_utime + ru.ru_stime,
                  "maxrss_kb": ru.ru_maxrss}))
"""


def run_cli_measured(
    areas: Path, rules: Path, out: Path, *, report: bool = False, certificate: bool = False, env: dict | None = None
) -> dict:
    """`run_cli` through a small parent process whose only child is the run, so
    RUSAGE_CHILDREN.ru_maxrss is the run's own peak resident size."""
    if out.exists():
        shutil.rmtree(out)
    cmd = [sys.executable, "-m", "zonedesign.cli", "design", str(areas), "--rules", str(rules), "--out", str(out), "--quiet"]
    if not report:
        cmd.append("--no-report")
    if not certificate:
        cmd.append("--no-certificate")
    done = subprocess.run([sys.executable, "-c", _RSS_SCRIPT, *cmd], capture_output=True, text=True, env=env)
    info = json.loads(done.stdout.strip().splitlines()[-1])
    path = out / "summary.json"
    summary = RunSummary.from_json(json.loads(path.read_text()), source=str(path)) if path.is_file() else None
    return {
        "wall_s": info["wall"],
        "cpu_s": info["cpu"],
        "exit_code": info["rc"],
        "peak_rss_gb": info["maxrss_kb"] / 1024**2,
        "stderr": done.stderr.strip().splitlines()[-3:],
        "summary": summary,
    }


def io_floor(areas: Path, out: Path, scratch: Path) -> dict:
    """Seconds to read the input and to write the run's lookup and zone layers again."""
    import geopandas as gpd
    import pandas as pd
    import pyogrio

    gpd.read_parquet(areas)  # untimed: the first call in a process also loads pyarrow's readers
    c0 = time.process_time()
    with Clock() as r:
        gdf = gpd.read_parquet(areas)
    n = len(gdf)
    del gdf
    c1 = time.process_time()
    lookup = pd.read_csv(out / "lookup.csv", dtype=str)
    layers = {name: pyogrio.read_dataframe(out / "zones.gpkg", layer=name) for name, _ in pyogrio.list_layers(out / "zones.gpkg")}
    read_back = time.process_time() - c1
    scratch.mkdir(parents=True, exist_ok=True)
    with Clock() as w1:
        lookup.to_csv(scratch / "lookup.csv", index=False, lineterminator="\n")
    target = scratch / "zones.gpkg"
    if target.exists():
        target.unlink()
    with Clock() as w2:
        for name, layer in layers.items():
            pyogrio.write_dataframe(layer, target, layer=name, driver="GPKG")
    cpu = time.process_time() - c0  # read and writes; the reads of the run's outputs between are excluded below
    return {
        "floor_cpu_s": cpu - read_back,
        "areas": n,
        "read_s": r.seconds,
        "write_lookup_s": w1.seconds,
        "write_layers_s": w2.seconds,
        "floor_s": r.seconds + w1.seconds + w2.seconds,
        "zones": {name: len(layer) for name, layer in layers.items()},
    }


def read_gpkg_seconds(path: Path) -> float:
    import pyogrio

    pyogrio.read_dataframe(path, layer="areas", max_features=10)
    with Clock() as c:
        pyogrio.read_dataframe(path, layer="areas")
    return c.seconds


# ---------------------------------------------------------------- the benchmark


def main(quick: bool = False, folder: Path | None = None, log=print, sizes: list[int] | None = None) -> dict:
    t0 = time.perf_counter()
    sizes = sizes or ([20_000] if quick else [20_000, 50_000, 200_000])
    rows: list[dict] = []
    extra: list[dict] = []
    work = Path(tempfile.mkdtemp(prefix="zd-scale-"))
    try:
        # the runs use a copy of the code with its own numba cache, filled by one small run
        # first, so no compile lands inside the series even if the working tree changes
        # (--quick runs the working tree with its usual cache, to stay quick)
        env = code_snapshot(work / "code") if not quick else None
        warm = make_input(2000, work / "warm")["paths"]
        with Clock() as c:
            run_cli_measured(warm["parquet"], warm["rules"], work / "warm_out", env=env)
        log(f"  warm-up run on 2,000 areas: {c.seconds:.1f} s")
        extra.append({"run": "warm-up, 2,000 areas (fills the numba cache)", "total_s": c.seconds})
        for n in sizes:
            made = make_input(n, work / f"in{n}")
            paths = made["paths"]
            log(f"  {n:,} areas: generated in {made['generate_s']:.1f} s ({made['fences']} fences); running the CLI ...")
            res = run_cli_measured(paths["parquet"], paths["rules"], work / f"out{n}", report=True, certificate=True, env=env)
            summary = res["summary"]
            sec = (summary.seconds if summary is not None else None) or {}
            floor = io_floor(paths["parquet"], work / f"out{n}", work / f"floor{n}") if summary is not None else {}
            gpkg_read = read_gpkg_seconds(paths["gpkg"])
            total = float(sec.get("total", res["wall_s"]))
            row = {
                "areas": n,
                "fences": made["fences"],
                "exit_code": res["exit_code"],
                "wall_s": res["wall_s"],
                "total_s": total,
                "cpu_s": res["cpu_s"],
                **{f"{k}_s": float(v) for k, v in sec.items() if k != "total"},
                "peak_rss_gb": res["peak_rss_gb"],
                "floor_s": floor.get("floor_s", math.nan),
                "floor_read_s": floor.get("read_s", math.nan),
                "floor_write_lookup_s": floor.get("write_lookup_s", math.nan),
                "floor_write_layers_s": floor.get("write_layers_s", math.nan),
                "gpkg_read_s": gpkg_read,
                "floor_cpu_s": floor.get("floor_cpu_s", math.nan),
                "x_floor": total / floor["floor_s"] if floor else math.nan,
                "x_floor_cpu": res["cpu_s"] / floor["floor_cpu_s"] if floor else math.nan,
                "zones": ", ".join(f"{k} {v:,}" for k, v in floor.get("zones", {}).items()),
                "bound_breaks": summary.outcome.bound_breaks if summary is not None else None,
                "audit_ok": summary.audit.ok if summary is not None and summary.audit is not None else None,
            }
            rows.append(row)
            log(f"  {n:,} areas: {total:.1f} s end to end, {row['cpu_s']:.1f} CPU s ({row['x_floor_cpu']:.1f} x the I/O floor by CPU), peak RSS {row['peak_rss_gb']:.2f} GB")
            if n == sizes[0] and not quick:
                plain = run_cli_measured(paths["parquet"], paths["rules"], work / f"plain{n}", env=env)
                ps = (plain["summary"].seconds if plain["summary"] is not None else None) or {}
                extra.append({"run": f"{n:,} areas without the certificate and the report", "total_s": float(ps.get("total", plain["wall_s"])),
                              "audit_s": float(ps.get("audit", math.nan)), "peak_rss_gb": plain["peak_rss_gb"],
                              "x_full_run": float(ps.get("total", plain["wall_s"])) / total,
                              "cpu_s": plain["cpu_s"], "x_full_run_cpu": plain["cpu_s"] / res["cpu_s"]})
                log(f"  {n:,} areas without the certificate and the report: {extra[-1]['total_s']:.1f} s")
            shutil.rmtree(work / f"in{n}", ignore_errors=True)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    sections = [("Goals", _goals(rows)), ("Runs (seconds per phase from summary.json)", md_table(rows, digits=2))]
    if extra:
        sections.append(("Extra runs", md_table(extra, digits=2)))
    sections.append(("Method", __doc__.split("\n\n", 1)[1]))
    write_results(NAME, TITLE, rows + extra, sections, quick=quick, seconds=time.perf_counter() - t0, folder=folder)
    return {"rows": rows, "extra": extra}


def _goals(rows: list[dict]) -> str:
    by = {r["areas"]: r for r in rows}
    lines = [
        "Ratios by CPU seconds (the child's user + system time against this process's for the "
        "floor) are the ones judged: on a shared machine they move far less with the load than "
        "wall-clock ratios, which are given beside them.",
        "",
    ]
    big = by.get(200_000) or rows[-1]
    lines.append(
        f"- {big['areas']:,} areas x 3 tiers end to end: {big['cpu_s']:.1f} CPU s = **{big['x_floor_cpu']:.1f} x** the I/O "
        f"floor ({big['floor_cpu_s']:.2f} CPU s) (goal <= {GOAL_FLOOR:.0f} x: {'met' if big['x_floor_cpu'] <= GOAL_FLOOR else 'MISSED'}); "
        f"by wall clock {big['total_s']:.1f} s = {big['x_floor']:.1f} x ({big['floor_s']:.2f} s)"
    )
    if 200_000 in by and 20_000 in by:
        g = by[200_000]["cpu_s"] / by[20_000]["cpu_s"]
        gw = by[200_000]["total_s"] / by[20_000]["total_s"]
        lines.append(
            f"- time(200k) / time(20k) = **{g:.1f}** by CPU seconds (goal <= {GOAL_GROWTH:.0f}: "
            f"{'met' if g <= GOAL_GROWTH else 'MISSED'}); {gw:.1f} by wall clock"
        )
    else:
        lines.append("- time(200k) / time(20k): not measured in this mode")
    peak = max(r["peak_rss_gb"] for r in rows)
    lines.append(f"- peak RSS **{peak:.2f} GB** (goal <= {GOAL_RSS_GB:.0f} GB: {'met' if peak <= GOAL_RSS_GB else 'MISSED'})")
    phases = [k for k in rows[-1] if k.endswith("_s") and k not in ("wall_s", "total_s", "cpu_s") and not k.startswith(("floor", "gpkg"))]
    if phases:
        top = max(phases, key=lambda k: rows[-1][k])
        lines.append(f"- the largest phase at {rows[-1]['areas']:,} areas: {top[:-2]} ({rows[-1][top]:.1f} s of {rows[-1]['total_s']:.1f} s)")
    return "\n".join(lines)

