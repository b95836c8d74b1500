"""What every benchmark shares: the machine header, instance builders and result files.

Timings on a shared machine drift from run to run, so each benchmark reports its figures
as ratios of times measured in the same run; absolute seconds are given for context only.
"""

from __future__ import annotations

import csv
import datetime as _dt
import os
import platform
import time
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import shapely

from zonedesign import measures
from zonedesign.graph.adjacency import rook_graph
from zonedesign.records import Bounds, Graph, Problem

RESULTS = Path(__file__).resolve().parent / "results"
SPDATA_DEFAULT = "/tmp/spd/x/usr/lib/R/site-library/spData/shapes"


# ---------------------------------------------------------------- machine


def machine() -> dict[str, str]:
    """Date, cores, CPU model, RAM, load and Python of this run."""
    cpu = "unknown"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    ram = "unknown"
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemTotal"):
                ram = f"{int(line.split()[1]) / 1024**2:.1f} GiB"
                break
    except OSError:
        pass
    try:
        load = ", ".join(f"{v:.2f}" for v in os.getloadavg())
    except OSError:
        load = "unknown"
    return {
        "date": _dt.datetime.now().astimezone().strftime("%Y-%m-%d %H:%M %Z"),
        "nproc": str(os.cpu_count()),
        "cpu": cpu,
        "ram": ram,
        "load": load,
        "python": platform.python_version(),
    }


def code_version() -> str:
    """The commit the code was run at, and whether the package had uncommitted changes."""
    import subprocess

    root = Path(__file__).resolve().parent.parent
    try:
        head = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=root, capture_output=True, text=True, timeout=10)
        dirty = subprocess.run(["git", "status", "--porcelain", "--", "zonedesign"], cwd=root, capture_output=True, text=True, timeout=10)
    except (OSError, subprocess.TimeoutExpired):
        return "unknown"
    if head.returncode != 0:
        return "unknown"
    return head.stdout.strip() + (" with uncommitted changes to zonedesign/" if dirty.stdout.strip() else "")


class Clock:
    """Wall-clock seconds of a block: `with Clock() as c: ...; c.seconds`."""

    def __enter__(self) -> Clock:
        self.t0 = time.perf_counter()
        self.seconds = 0.0
        return self

    def __exit__(self, *exc) -> None:
        self.seconds = time.perf_counter() - self.t0


# ---------------------------------------------------------------- instances


def spdata_folder() -> Path:
    """The r-cran-spdata shapes folder (ZONEDESIGN_SPDATA, or the project's fetch helper)."""
    stated = os.environ.get("ZONEDESIGN_SPDATA")
    if stated:
        return Path(stated)
    if (Path(SPDATA_DEFAULT) / "NY8_utm18.shp").is_file():
        return Path(SPDATA_DEFAULT)
    from zonedesign.io.opendata import spdata_dir

    return spdata_dir()


def read_ny8(repair: bool = True):
    """NY8 census tracts (r-cran-spdata NY8_utm18.shp) with a 5-digit county column taken
    from AREAKEY; with `repair`, the five invalid polygons are made valid and whatever a
    repaired polygon then overlaps of a valid neighbour is cut from it."""
    import geopandas as gpd

    gdf = gpd.read_file(spdata_folder() / "NY8_utm18.shp", engine="pyogrio")
    gdf["county"] = gdf["AREAKEY"].astype(str).str[:5]
    if not repair:
        return gdf
    geom = np.asarray(gdf.geometry.values, dtype=object).copy()
    bad = np.flatnonzero(~shapely.is_valid(geom))
    for i in bad:
        # make_valid may return a collection with stray lines; keep the polygonal part
        geom[i] = _polygonal(shapely.make_valid(geom[i]))
    tree = shapely.STRtree(geom)
    for i in bad:
        others = [j for j in tree.query(geom[i], predicate="intersects") if j != i and j not in set(bad)]
        if others:
            geom[i] = _polygonal(shapely.difference(geom[i], shapely.union_all(geom[others])))
    return gdf.set_geometry(gpd.GeoSeries(geom, crs=gdf.crs))


def _polygonal(g):
    if g.geom_type in ("Polygon", "MultiPolygon"):
        return g
    parts = [p for p in shapely.get_parts(g) if p.geom_type in ("Polygon", "MultiPolygon")]
    return shapely.union_all(parts) if parts else g


def largest_component(graph: Graph) -> np.ndarray:
    """Positions of the units in the largest connected component, ascending."""
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import connected_components

    m = csr_matrix((np.ones(graph.indices.shape[0]), graph.indices, graph.indptr), shape=(graph.n, graph.n))
    _, comp = connected_components(m, directed=False)
    big = np.bincount(comp).argmax()
    return np.flatnonzero(comp == big)


def grown_subset(graph: Graph, start: int, size: int) -> np.ndarray:
    """A connected set of `size` units grown breadth-first from `start`, ascending."""
    seen = {int(start)}
    order = [int(start)]
    head = 0
    while head < len(order) and len(order) < size:
        u = order[head]
        head += 1
        for v in graph.neighbours(u):
            v = int(v)
            if v not in seen and len(order) < size:
                seen.add(v)
                order.append(v)
    return np.array(sorted(order), dtype=np.int64)


@dataclass
class Instance:
    """One named benchmark problem with its source."""

    name: str
    family: str
    problem: Problem


def build_problem(
    geometry,
    counts: np.ndarray,
    count_names: Sequence[str],
    attrs: np.ndarray,
    weight: np.ndarray,
    *,
    lo: Sequence[float],
    hi: Sequence[float],
    target: Sequence[float],
    graph: Graph | None = None,
) -> Problem:
    """A Problem straight from polygons: rook graph, standardised attributes (weighted as
    the hierarchy does: weights scaled to mean 1), area and perimeter from the geometry."""
    geom = np.asarray(geometry)
    graph = rook_graph(geom) if graph is None else graph
    weight = np.asarray(weight, dtype=np.float64)
    mean_w = weight.mean() if weight.size and weight.mean() > 0 else 1.0
    weight = weight / mean_w
    return Problem(
        graph=graph,
        counts=np.asarray(counts, dtype=np.float64).reshape(len(geom), -1),
        bounds=Bounds(
            count_names=tuple(count_names),
            lo=np.asarray(lo, dtype=np.float64),
            hi=np.asarray(hi, dtype=np.float64),
            target=np.asarray(target, dtype=np.float64),
        ),
        attrs=measures.standardise(np.asarray(attrs, dtype=np.float64), weight),
        weight=weight,
        area=shapely.area(geom).astype(np.float64),
        perimeter=shapely.length(geom).astype(np.float64),
    )


def frame_problem(gdf, count: str, attrs: Sequence[str], weight: str, units_per_zone=(3.0, 6.0)) -> Problem:
    """A one-count Problem of a GeoDataFrame whose bounds let zones hold about
    units_per_zone[0]..units_per_zone[1] units of median size, target in the middle."""
    values = gdf[count].to_numpy(dtype=np.float64)
    med = float(np.median(values))
    lo, hi = units_per_zone[0] * med, units_per_zone[1] * med
    return build_problem(
        gdf.geometry.values,
        values[:, None],
        (count,),
        gdf[list(attrs)].to_numpy(dtype=np.float64),
        gdf[weight].to_numpy(dtype=np.float64),
        lo=[lo],
        hi=[hi],
        target=[0.5 * (lo + hi)],
    )


# ---------------------------------------------------------------- results


def fmt(v, digits: int = 3) -> str:
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, float | np.floating):
        if np.isnan(v):
            return "–"
        if not np.isfinite(v):
            return "inf" if v > 0 else "-inf"
        if abs(v) >= 1e4:
            return f"{v:,.0f}"
        if v != 0 and abs(v) < 10 ** (-digits):
            return f"{v:.{digits}g}"
        return f"{v:,.{digits}f}"
    if isinstance(v, int | np.integer):
        return f"{int(v):,}"
    return str(v)


def md_table(rows: list[dict], columns: Sequence[str] | None = None, digits: int = 3) -> str:
    if not rows:
        return "(no rows)\n"
    if columns is None:
        columns = []
        for r in rows:
            columns += [k for k in r if k not in columns]
    columns = list(columns)
    out = ["| " + " | ".join(columns) + " |", "|" + "|".join("---" for _ in columns) + "|"]
    for r in rows:
        out.append("| " + " | ".join(fmt(r.get(c, ""), digits) for c in columns) + " |")
    return "\n".join(out) + "\n"


def write_results(
    name: str,
    title: str,
    rows: list[dict],
    sections: list[tuple[str, str]],
    *,
    quick: bool,
    seconds: float,
    folder: Path | None = None,
) -> tuple[Path, Path]:
    """Write `<name>.md` (machine header, then sections) and `<name>.csv` (rows)."""
    folder = RESULTS if folder is None else Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    m = machine()
    head = [
        f"# Benchmark: {title}",
        "",
        f"- date: {m['date']}",
        f"- machine: {m['nproc']} cores ({m['cpu']}), {m['ram']} RAM, load average {m['load']} at the end",
        f"- Python {m['python']}; code at commit {code_version()}; mode: {'--quick' if quick else 'full'}; run time {seconds:.0f} s",
        f"- command: `python -m benchmarks {name}{' --quick' if quick else ''}`",
        "",
    ]
    body = []
    for heading, text in sections:
        body += [f"## {heading}", "", text.rstrip(), ""]
    md = folder / f"{name}.md"
    md.write_text("\n".join(head + body), encoding="utf-8")
    path = folder / f"{name}.csv"
    columns: list[str] = []
    for r in rows:
        for k in r:
            if k not in columns:
                columns.append(k)
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=columns, lineterminator="\n")
        w.writeheader()
        for r in rows:
            w.writerow({k: _csv(v) for k, v in r.items()})
    return md, path


def _csv(v):
    if isinstance(v, float | np.floating):
        return "" if np.isnan(v) else f"{float(v):.6g}"
    if isinstance(v, np.integer):
        return int(v)
    return v


def warm_engine() -> float:
    """Solve a tiny problem with every method so numba's compile (or cache load) is not
    timed inside a benchmark; returns the seconds it took."""
    from zonedesign.demo.synthetic import grid_with_holes
    from zonedesign.rules import METHODS
    from zonedesign.search.engine import solve

    gdf = grid_with_holes(5, 5, 0.0, 0, n_fences=1)
    problem = frame_problem(gdf, "persons", ("attr_a", "attr_b"), "persons")
    with Clock() as c:
        for method in METHODS:
            solve(problem, seed=1, method=method, time_limit=600.0)
    return c.seconds


ROOT = Path(__file__).resolve().parent.parent
# what `pip install DIR` needs of the project besides the package
PROJECT_FILES = ("pyproject.toml", "setup.py", "README.md")


def package_copy(target: Path, source: Path | None = None) -> None:
    """Copy the zonedesign package (or the folder `source`) to `target`, without
    bytecode or numba cache files, which belong to the copy's own runs."""
    import shutil

    shutil.copytree(source or ROOT / "zonedesign", target, ignore=shutil.ignore_patterns("__pycache__", "*.pyc"))


def project_copy(folder: Path) -> Path:
    """An installable copy of the project in `folder` (its package and PROJECT_FILES),
    as a user's checkout has it; returns `folder`."""
    import shutil

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    for name in PROJECT_FILES:
        shutil.copy2(ROOT / name, folder / name)
    package_copy(folder / "zonedesign")
    return folder


def code_snapshot(folder: Path) -> dict[str, str]:
    """Copy the zonedesign package into `folder` and return a child environment that
    imports that copy, with numba's cache beside it.

    Child processes of a benchmark then run one fixed version of the code with a cache
    that stays valid for the whole series, even when the working tree changes meanwhile.
    """
    import shutil

    folder = Path(folder)
    target = folder / "zonedesign"
    if target.exists():
        shutil.rmtree(target)
    package_copy(target)
    shutil.copytree(ROOT / "benchmarks", folder / "benchmarks", ignore=shutil.ignore_patterns("__pycache__", "*.pyc", "results"), dirs_exist_ok=True)
    cache = folder / "numba-cache"
    cache.mkdir(exist_ok=True)
    env = dict(os.environ)
    env["PYTHONPATH"] = str(folder) + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    env["NUMBA_CACHE_DIR"] = str(cache)
    return env


README = Path(__file__).resolve().parent / "README.md"
LATEST_MARK = "<!-- latest -->"


def refresh_readme(folder: Path | None = None, readme: Path = README) -> None:
    """Rewrite the README below its marker: each result's header lines and goals."""
    folder = RESULTS if folder is None else Path(folder)
    text = readme.read_text(encoding="utf-8")
    if LATEST_MARK not in text:
        return
    parts = [text.split(LATEST_MARK, 1)[0].rstrip() + "\n\n" + LATEST_MARK + "\n"]
    for name in ("quality", "quality-scale", "speed", "scale", "baseline", "redraw", "reshape"):
        md = folder / f"{name}.md"
        if not md.is_file():
            continue
        lines = md.read_text(encoding="utf-8").splitlines()
        title = lines[0].removeprefix("# Benchmark: ")
        # the whole header list: date, machine, code, command and any note on how it ran
        end = next((k for k, ln in enumerate(lines) if ln.startswith("## ")), len(lines))
        head = [ln for ln in lines[1:end] if ln.startswith("- ")]
        goals = _section(lines, "## Goals")
        parts.append(f"\n### {title}\n\n" + "\n".join(head) + "\n\n" + "\n".join(goals).strip() + "\n")
    readme.write_text("".join(parts), encoding="utf-8")


def _section(lines: list[str], heading: str) -> list[str]:
    out: list[str] = []
    inside = False
    for ln in lines:
        if ln.startswith("## "):
            if inside:
                break
            inside = ln.strip() == heading
            continue
        if inside:
            out.append(ln)
    return out
