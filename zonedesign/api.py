"""The Python face of zonedesign: design(), audit(), redraw(), sweep().

Each function reads its inputs, runs the job and writes an output folder atomically; it
returns a plain `RunResult` (summary dict, exit code, output folder).
"""

from __future__ import annotations

import contextlib
import platform
import time
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from zonedesign import __version__
from zonedesign.errors import InputError
from zonedesign.glossary import CAUTION
from zonedesign.plain import plain
from zonedesign.progress import Stages, TaskBars
from zonedesign.records import Areas, Graph
from zonedesign.rules import Rules, load_rules

AUDIT_REPAIR_WORK = 15.0  # CP-SAT deterministic time for audit --repair (about a minute on 2 cores)
AUDIT_REPAIR_CAP = 600.0  # seconds: ends only a model far slower than expected

Progress = Callable[[str], None]


@dataclass
class Prepared:
    """Inputs read, validated and turned into arrays and a graph."""

    rules: Rules
    areas: Areas
    geometry: Any  # GeoSeries in the projected CRS, row order of `areas`
    graph: Graph  # rook/queen edges plus declared links, across fences too
    notes: list[str]
    islands: list[dict]
    links: int
    inputs: list[Path]
    seconds: dict[str, float] = field(default_factory=dict)
    crs_note: str = ""  # which CRS areas and lengths are measured in, and why
    overlaps_cut: list[dict] = field(default_factory=list)  # [areas] overlaps = "cut"
    locks: Any = None  # zonedesign.locks.Locks from [lock] file, or None
    duplicates_merged: list[dict] = field(default_factory=list)


@dataclass
class RunResult:
    out: Path | None
    summary: dict
    exit_code: int
    lookup: dict[str, np.ndarray] = field(default_factory=dict)


def _say(progress: Progress | None, text: str) -> None:
    if progress is not None:
        progress(text)


def versions() -> dict[str, str]:
    import geopandas
    import numba
    import ortools
    import shapely

    return {
        "zonedesign": __version__,
        "python": platform.python_version(),
        "numpy": np.__version__,
        "pandas": pd.__version__,
        "shapely": shapely.__version__,
        "geopandas": geopandas.__version__,
        "numba": numba.__version__,
        "ortools": ortools.__version__,
    }


def prepare(
    areas_path: str | Path,
    rules: str | Path | Rules,
    *,
    layer: str | None = None,
    crs: str | None = None,
    progress: Progress | None = None,
) -> Prepared:
    """Read the rules and the areas, build the graph, add links, find islands."""
    from zonedesign.graph.areagraph import area_graph
    from zonedesign.io.read import read_areas, rule_columns
    from zonedesign.rules import check_fences_against, check_rules_against

    seconds: dict[str, float] = {}
    inputs = [Path(areas_path)]
    if not isinstance(rules, Rules):
        inputs.append(Path(rules))
        rules = load_rules(rules)
    t0 = time.perf_counter()
    stage = Stages(progress, "preparing", 2)
    stage(f"reading {areas_path}")
    layer = layer or rules.areas.layer
    columns, table_columns = rule_columns(areas_path, rules.areas, layer=layer)
    check_rules_against(rules, columns, str(areas_path), table_columns)
    if rules.areas.table is not None:
        inputs.append(Path(rules.areas.table))
    file = read_areas(areas_path, rules.areas, layer=layer, crs=crs)
    fences = {t.name: file.areas.in_tier(t.name).fence.tolist() for t in rules.tiers}
    check_fences_against(rules, fences, str(areas_path))
    seconds["read"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    stage(f"building the {rules.graph.contiguity} graph of {file.areas.n} areas")
    notes = list(file.notes)
    built = area_graph(file.geometry, file.areas, rules.graph, notes=notes)
    graph = built.graph
    found = [_island_dict(x) for x in built.islands]
    n_links = built.links
    if rules.graph.links is not None:
        inputs.append(Path(rules.graph.links))
    for island in found:
        # whether a declared link joins the island to the rest of its fence
        island["linked"] = bool(built.linked & set(island.get("ids", [])))
    seconds["graph"] = time.perf_counter() - t0
    locks = None
    if rules.lock.file is not None:
        from zonedesign.locks import read_locks

        inputs.append(Path(rules.lock.file))
        locks = read_locks(rules.lock.file, file.areas, graph, rules.tiers)
    stage.close()
    return Prepared(
        rules=rules,
        areas=file.areas,
        geometry=file.geometry,
        graph=graph,
        notes=notes,
        islands=found,
        links=n_links,
        inputs=inputs,
        seconds=seconds,
        crs_note=file.crs_note,
        overlaps_cut=file.overlaps_cut,
        duplicates_merged=file.duplicates_merged,
        locks=locks,
    )


def _island_dict(island: Any) -> dict:
    d = dict(island.__dict__) if hasattr(island, "__dict__") else dict(island)
    out = {}
    for k, v in d.items():
        if isinstance(v, np.ndarray):
            v = v.tolist()
        elif isinstance(v, tuple):
            v = list(v)
        elif isinstance(v, np.generic):
            v = v.item()
        out[k] = v
    return out


# ---------------------------------------------------------------- design


def design(
    areas_path: str | Path,
    rules: str | Path | Rules,
    out: str | Path | None,
    *,
    layer: str | None = None,
    crs: str | None = None,
    overwrite: bool = False,
    executor: str = "local",
    workers: int = 1,
    scheduler: str | None = None,
    certify: bool = True,
    report: bool = True,
    progress: Progress | None = None,
    extra_files: Mapping[str, Path] | None = None,
) -> RunResult:
    """Design every tier of a nested hierarchy and write it to `out`."""
    from zonedesign.hierarchy import build_hierarchy

    t_start = time.perf_counter()
    run, prep = _start_run(areas_path, rules, out, overwrite, layer, crs, executor, workers, scheduler, progress)

    def on_tier(name: str, i: int, n: int) -> None:
        _say(progress, f"tier {i}/{n} '{name}' designed")

    _say(progress, f"designing {len(prep.rules.tiers)} tiers over {len(set(prep.areas.fence))} fences")
    with _closing(run):
        result = build_hierarchy(prep.areas, prep.graph, prep.rules, executor=run, on_tier=on_tier, locks=prep.locks)
    lookup = result.lookup()
    seconds, summary = _run_summary(prep, "design", result, executor, workers)
    summary["fences"] = fence_figures(result)
    failures = [
        {"fence": f.fence, "tier": f.tier, "error": f.error} for f in result.failures
    ]
    summary["fence_failures"] = failures
    return finish(
        prep,
        lookup,
        summary,
        out,
        overwrite=overwrite,
        seconds=seconds,
        t_start=t_start,
        certify=certify,
        report=report,
        progress=progress,
        extra_files=extra_files,
        failed=bool(failures),
    )


def _start_run(areas_path, rules, out, overwrite, layer, crs, executor, workers, scheduler, progress,
               extra_input: str | Path | None = None):
    """Executor with per-tier progress bars, then the inputs read; the output folder is
    checked before the (slow) read and again once every input path is known."""
    from zonedesign.executors import make_executor

    bars = TaskBars(progress, lambda tasks: f"tier '{tasks[0].tier}' by fence")
    run = bars.wrap(make_executor(executor, workers, scheduler, on_done=bars.done))
    if out is not None:
        _check_out(Path(out), overwrite)
    prep = prepare(areas_path, rules, layer=layer, crs=crs, progress=progress)
    if extra_input is not None:
        prep.inputs.append(Path(extra_input))
    if out is not None:
        _check_out(Path(out), overwrite, prep.inputs)
    return run, prep


@contextlib.contextmanager
def _closing(run: Callable) -> Iterator[None]:
    """Close the executor after its run: a dask cluster it started lives for one run."""
    try:
        yield
    finally:
        getattr(run, "close", lambda: None)()


def _run_summary(prep: Prepared, command: str, result: Any, executor: str, workers: int) -> tuple[dict, dict]:
    """Phase timings and the summary's head shared by design and redraw."""
    seconds = dict(prep.seconds)
    seconds.update(result.seconds)
    summary = base_summary(prep, command)
    summary["search"] = {
        "method": prep.rules.search.method,
        "seed": prep.rules.search.seed,
        "executor": executor,
        "workers": workers,
    }
    return seconds, summary


def fence_figures(result: Any) -> list[dict]:
    rows = []
    for tier in result.tiers:
        for f in tier.fences:
            rows.append(
                {
                    "tier": tier.name,
                    "fence": f.fence,
                    "zones": int(np.unique(f.labels).shape[0]) if f.labels.size else 0,
                    "units": int(f.labels.shape[0]),
                    "breaks": f.breaks,
                    "objective": f.total,
                    "terms": f.terms,
                    "seconds": round(f.seconds, 3),
                    "error": f.error,
                    "info": {k: v for k, v in f.info.items() if k != "traceback"},
                }
            )
    return rows


def base_summary(prep: Prepared, command: str) -> dict:
    return {
        "command": command,
        "caution": CAUTION,
        "zonedesign": __version__,
        "versions": versions(),
        "inputs": [str(p) for p in prep.inputs],
        "areas": {
            "count": prep.areas.n,
            "crs": prep.areas.crs,
            "crs_choice": prep.crs_note,
            "fences": len(set(prep.areas.fence.tolist())),
            "fence_codes": sorted(set(prep.areas.fence.tolist())),
            "repaired_polygons": list(prep.areas.repaired),
            "overlaps_cut": prep.overlaps_cut,
            "duplicates_merged": prep.duplicates_merged,
            "notes": prep.notes,
        },
        "graph": {
            "contiguity": prep.rules.graph.contiguity,
            "edges": prep.graph.n_edges,
            "links": prep.links,
            "islands": prep.islands,
        },
        "rules": prep.rules.text,
        "tier_order": [t.name for t in prep.rules.tiers],
        "overrides": {
            t.name: [
                {"fences": list(o.fences), "min": o.min, "max": o.max, "target": o.target, "weights": o.weights}
                for o in t.overrides
            ]
            for t in prep.rules.tiers
            if t.overrides
        },
        "objective": {
            t.name: {"homogeneity": t.homogeneity, "compactness": t.compactness, "weights": dict(t.weights)}
            for t in prep.rules.tiers
        },
    }


def run_certificate(prep: Prepared, labels: Mapping[str, np.ndarray], tiers: list, summary: dict,
                    progress: Progress | None) -> list:
    """The CP-SAT certificate into summary["certificate"], with a fence-tier counter; every
    undecided fence and tier is named on the progress line (it makes the exit code 1)."""
    from zonedesign.progress import bar, say
    from zonedesign.verify.certificate import certify, fence_tiers

    with bar(progress, fence_tiers(prep.areas, tiers), "certificate (fence-tiers)") as b:
        certs = certify(prep.areas, prep.graph, labels, tiers, on_done=lambda _done, _total: b.update())
    summary["certificate"] = [plain(c) for c in certs]
    for c in certs:
        if c.undecided:
            say(progress, f"certificate undecided for tier {c.tier} fence {c.fence}: CP-SAT stopped at its time limit")
    return certs


def finish(
    prep: Prepared,
    lookup: dict[str, np.ndarray],
    summary: dict,
    out: str | Path | None,
    *,
    overwrite: bool,
    seconds: dict[str, float],
    t_start: float,
    certify: bool,
    report: bool,
    progress: Progress | None,
    extra_files: Mapping[str, Path] | None = None,
    extra_tables: Mapping[str, pd.DataFrame] | None = None,
    failed: bool = False,
) -> RunResult:
    """Audit the hierarchy independently, then write every output into `out` atomically."""
    from zonedesign.verify.checks import audit as run_audit
    from zonedesign.zonetables import all_tables, tier_figures

    t0 = time.perf_counter()
    stage = Stages(progress, "auditing", 4 if certify else 3)
    stage("auditing the result independently")
    tiers = list(prep.rules.tiers)
    checked = run_audit(prep.areas, prep.graph, lookup, tiers)
    summary["audit"] = {
        "ok": bool(checked.ok),
        "violations": [plain(v) for v in _violations(checked)],
    }
    add_lock_checks(prep, lookup, summary)
    uncertified = False
    if certify:
        stage("building the CP-SAT certificate per fence and tier")
        uncertified = not all(c.ok for c in run_certificate(prep, lookup, tiers, summary, progress))
    seconds["audit"] = time.perf_counter() - t0

    stage("measuring every zone")
    tables = all_tables(prep.areas, prep.graph, lookup, tiers)
    summary["tiers"] = {
        t.name: tier_figures(tables[t.name], t, prep.areas.count_names) for t in tiers
    }
    breaks = []
    for t in tiers:
        df = tables[t.name]
        for _, row in df[df["bound_break"]].iterrows():
            breaks.append({"tier": t.name, "zone": row["zone"], "fence": row["fence"], "breaks": row["breaks"]})
    mark_locked_breaks(prep, breaks)
    summary["bound_breaks"] = breaks
    stage(f"seeking proofs for {len({(b['tier'], b['fence']) for b in breaks})} fence(s) with bound breaks")
    summary["proofs"] = explain_breaks(prep, lookup, breaks)
    stage.close()
    summary["seconds"] = {k: round(v, 3) for k, v in seconds.items()}
    rc = 1 if (breaks or not summary["audit"]["ok"] or failed or uncertified) else 0
    summary["exit_code"] = rc
    if out is not None:
        write_outputs(
            prep,
            lookup,
            tables,
            summary,
            Path(out),
            overwrite=overwrite,
            seconds=seconds,
            t_start=t_start,
            report=report,
            progress=progress,
            extra_files=extra_files,
            extra_tables=extra_tables,
            audit_result=checked,
        )
    return RunResult(out=None if out is None else Path(out), summary=summary, exit_code=rc, lookup=lookup)


def add_lock_checks(prep: Prepared, lookup: Mapping[str, np.ndarray], summary: dict) -> None:
    """Every locked zone must be in the lookup exactly as the lock file gives it."""
    if not prep.locks:
        return
    from zonedesign.locks import lock_breaks

    found = lock_breaks(prep.locks, lookup, prep.areas)
    summary["locks"] = {
        "file": str(prep.locks.source),
        "zones": {name: sorted(prep.locks.zones(name)) for name in prep.locks.codes},
        "kept": not found,
    }
    if found:
        summary["audit"]["violations"] = list(summary["audit"].get("violations", [])) + found
        summary["audit"]["ok"] = False


def mark_locked_breaks(prep: Prepared, breaks: list[dict]) -> None:
    """A locked zone that breaks a bound stays as agreed; its break says so."""
    if not prep.locks:
        return
    for b in breaks:
        b["locked"] = b["zone"] in prep.locks.zones(b["tier"])


def explain_breaks(prep: Prepared, lookup: Mapping[str, np.ndarray], breaks: list[dict]) -> list[dict]:
    """A plain-words proof for each fence whose breaks no zoning could avoid."""
    from zonedesign.breakproofs import explain_breaks as explain

    return [plain(p) for p in explain(prep.areas, prep.graph, prep.rules.tiers, lookup, breaks)]


def _violations(checked: Any) -> list:
    return list(getattr(checked, "violations", []))


def _check_out(out: Path, overwrite: bool, inputs: list[Path] | None = None) -> None:
    """Refuse, before any work, an --out that could wipe the wrong place (io.output.check_target)."""
    from zonedesign.io.output import check_target

    check_target(out, overwrite=overwrite, inputs=inputs or [])


def write_outputs(
    prep: Prepared,
    lookup: dict[str, np.ndarray],
    tables: dict[str, pd.DataFrame],
    summary: dict,
    out: Path,
    *,
    overwrite: bool,
    seconds: dict[str, float],
    t_start: float,
    report: bool,
    progress: Progress | None,
    extra_files: Mapping[str, Path] | None,
    extra_tables: Mapping[str, pd.DataFrame] | None,
    audit_result: Any,
) -> None:
    from zonedesign.dissolve import zone_layers
    from zonedesign.io.lookup import write_lookup
    from zonedesign.io.output import atomic_output, write_json, write_layers_gpkg

    with atomic_output(out, overwrite=overwrite, inputs=prep.inputs) as tmp:
        t0 = time.perf_counter()
        _say(progress, f"writing {out}")
        write_lookup(tmp / "lookup.csv", prep.areas.ids, lookup)
        layers = zone_layers(prep.geometry, lookup, tables)
        write_layers_gpkg(tmp / "zones.gpkg", layers)
        for name, df in (extra_tables or {}).items():
            df.to_csv(tmp / name, index=False, lineterminator="\n")
        if audit_result is not None and hasattr(audit_result, "violations_frame"):
            audit_result.violations_frame().to_csv(tmp / "violations.csv", index=False, lineterminator="\n")
        for name, src in (extra_files or {}).items():
            dst = tmp / name
            dst.parent.mkdir(parents=True, exist_ok=True)
            dst.write_bytes(Path(src).read_bytes())
        seconds["write"] = time.perf_counter() - t0
        if report:
            t0 = time.perf_counter()
            from zonedesign.report.html import write_report

            changes = (extra_tables or {}).get("changes.csv")
            write_report(tmp / "report.html", summary=summary, tables=tables, layers=layers, changes=changes)
            seconds["report"] = time.perf_counter() - t0
        seconds["total"] = time.perf_counter() - t_start
        summary["seconds"] = {k: round(v, 3) for k, v in seconds.items()}
        write_json(tmp / "summary.json", summary)


# ---------------------------------------------------------------- redraw


def read_previous(
    path: str | Path, prep: Prepared, *, mend: bool
) -> tuple[dict[str, np.ndarray], dict[str, list[str]]]:
    """The previous lookup aligned to the areas ("" for areas it lacks).

    Unknown ids (gone areas), missing ids (new areas) and tiers that do not nest stop the
    run unless `mend` is set; then gone areas are dropped, new areas join a neighbouring
    zone, and each lower zone goes to the upper zone most of its areas were in.
    """
    from zonedesign.io.lookup import read_lookup

    names = [t.name for t in prep.rules.tiers]
    frame = read_lookup(path, None, names)
    first = frame.columns[0] if frame.index.name is None else None
    ids = frame[first].astype(str).to_numpy() if first is not None else frame.index.astype(str).to_numpy()
    known = set(prep.areas.ids.tolist())
    pos = {a: i for i, a in enumerate(prep.areas.ids.tolist())}
    gone = [a for a in ids if a not in known]
    have = set(ids.tolist())
    new = [a for a in prep.areas.ids.tolist() if a not in have]
    prev: dict[str, np.ndarray] = {}
    for name in names:
        col = np.full(prep.areas.n, "", dtype=object)
        vals = frame[name].astype(str).to_numpy()
        for a, v in zip(ids, vals):
            i = pos.get(a)
            if i is not None:
                col[i] = v
        prev[name] = col
    not_nested = []
    for lo, hi in zip(names[:-1], names[1:]):
        pairs = pd.DataFrame({"z": prev[lo], "p": prev[hi]})
        pairs = pairs[pairs["z"] != ""].drop_duplicates()
        multi = pairs.groupby("z")["p"].nunique()
        not_nested += [f"{lo} zone {z} lies in several {hi} zones" for z in multi[multi > 1].index[:5]]
    problems = {"gone_areas": gone, "new_areas": new, "not_nested": not_nested}
    if (gone or new or not_nested) and not mend:
        parts = []
        if gone:
            parts.append(f"{len(gone)} area id(s) not in the areas file (first: {', '.join(gone[:5])})")
        if new:
            parts.append(f"{len(new)} area(s) missing from it (first: {', '.join(new[:5])})")
        if not_nested:
            parts.append(not_nested[0])
        raise InputError(f"{path}: previous lookup does not match: {'; '.join(parts)} (use --mend to mend it first)")
    if not_nested:
        prev = mend_nesting(prev, names)
    return prev, problems


def mend_nesting(labels: dict[str, np.ndarray], names: list[str]) -> dict[str, np.ndarray]:
    """Each lower zone goes wholly to the upper zone most of its areas are in ("" = none)."""
    out = {n: np.asarray(labels[n], dtype=object).copy() for n in names}
    for lo, hi in zip(names[:-1], names[1:]):
        frame = pd.DataFrame({"z": out[lo], "p": out[hi]})
        top = (
            frame[(frame["z"] != "") & (frame["p"] != "")].groupby(["z", "p"]).size().reset_index(name="c")
            .sort_values(["z", "c", "p"], ascending=[True, False, True]).drop_duplicates("z")
        )
        to_parent = dict(zip(top["z"], top["p"]))
        out[hi] = np.array([to_parent.get(z, p) if z != "" else p for z, p in zip(out[lo], out[hi])], dtype=object)
    return out


def search_repair(prep: Prepared, labels: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Mend a broken hierarchy with the redraw search: nesting by majority, then every
    broken zone and its neighbours re-searched with a heavy stability weight. Not proven
    minimal; used when the CP-SAT repair cannot finish."""
    from zonedesign.redraw import redraw_hierarchy

    names = [t.name for t in prep.rules.tiers]
    given = {n: np.array(["" if v is None else str(v) for v in labels[n]], dtype=object) for n in names}
    prev = mend_nesting(given, names)
    # codes carry on by the rules' code policy, so the moves listed are areas that moved
    return redraw_hierarchy(prep.areas, prep.graph, prep.rules, prev, locks=prep.locks).lookup()


def repair_moves(ids: np.ndarray, before: Mapping[str, np.ndarray], after: Mapping[str, np.ndarray]) -> pd.DataFrame:
    """repair.csv rows: every area whose zone changed, per tier."""
    rows = []
    for tier, new in after.items():
        old = np.asarray(before[tier], dtype=object)
        for i in np.flatnonzero(np.asarray(new, dtype=object) != old):
            rows.append({"area": str(ids[i]), "tier": tier, "old_zone": "" if old[i] is None else str(old[i]),
                         "new_zone": str(new[i])})
    return pd.DataFrame(rows, columns=["area", "tier", "old_zone", "new_zone"])


def redraw(
    areas_path: str | Path,
    rules: str | Path | Rules,
    previous: str | Path,
    out: str | Path | None,
    *,
    layer: str | None = None,
    crs: str | None = None,
    overwrite: bool = False,
    mend: bool = False,
    executor: str = "local",
    workers: int = 1,
    scheduler: str | None = None,
    certify: bool = True,
    report: bool = True,
    progress: Progress | None = None,
    extra_files: Mapping[str, Path] | None = None,
    previous_counts: str | Path | None = None,
) -> RunResult:
    """Redraw a published hierarchy on new counts, changing as little as possible.

    previous_counts: the previous areas file (or a table of area id and counts) whose
    totals were published; changes.csv then states them beside the new totals."""
    from zonedesign.redraw import redraw_hierarchy
    from zonedesign.redraw_output import published_counts, redraw_tables

    t_start = time.perf_counter()
    run, prep = _start_run(
        areas_path, rules, out, overwrite, layer, crs, executor, workers, scheduler, progress, extra_input=previous
    )
    prev, problems = read_previous(previous, prep, mend=mend)
    names = [t.name for t in prep.rules.tiers]
    published, before = None, None
    if previous_counts is not None:
        prep.inputs.append(Path(previous_counts))
        published, before = published_counts(
            previous_counts, previous, prep.areas.ids, prep.rules.areas.id, prep.areas.count_names, names
        )
    _say(progress, f"redrawing {len(prep.rules.tiers)} tiers against {previous}")
    with _closing(run):
        result = redraw_hierarchy(prep.areas, prep.graph, prep.rules, prev, executor=run, published=published,
                                   locks=prep.locks)
    lookup = result.lookup()
    changes, per_area, figures = redraw_tables(
        prep, prev, lookup, policy=result.policy, before_totals=before,
        retired={t.name: t.succession.retired for t in result.tiers},
    )
    seconds, summary = _run_summary(prep, "redraw", result, executor, workers)
    summary["previous"] = {"lookup": str(previous), "counts": None if previous_counts is None else str(previous_counts),
                           **problems}
    summary["redraw"] = {
        "code_policy": result.policy,
        "stability": {t.name: t.stability for t in result.tiers},
        "moved_areas": "areas whose zone's code changed under the code policy",
    }
    summary["changes"] = figures
    failures = [{"fence": f.fence, "tier": t.name, "error": f.error} for t in result.tiers for f in t.fences if f.error]
    summary["fence_failures"] = failures
    return finish(
        prep, lookup, summary, out, overwrite=overwrite, seconds=seconds, t_start=t_start,
        certify=certify, report=report, progress=progress, extra_files=extra_files,
        extra_tables={"changes.csv": changes, "area_changes.csv": per_area}, failed=bool(failures),
    )


# ---------------------------------------------------------------- sweep


def sweep(
    areas_path: str | Path,
    rules: str | Path | Rules,
    vary: list[str],
    out: str | Path | None,
    *,
    previous: str | Path | None = None,
    layer: str | None = None,
    crs: str | None = None,
    overwrite: bool = False,
    executor: str = "local",
    workers: int = 1,
    scheduler: str | None = None,
    report: bool = True,
    progress: Progress | None = None,
) -> RunResult:
    """One design (or redraw) per variant of the rules, measured side by side.

    Writes sweep.csv, summary.json, charts/, report.html and variants/<name>/ (lookup.csv,
    zones.gpkg, rules.toml, summary.json) per valid variant.
    """
    from zonedesign.executors import make_executor
    from zonedesign.graph.areagraph import area_graph
    from zonedesign.io.output import atomic_output, write_json
    from zonedesign.sweep import (
        VariantTask,
        parse_vary,
        run_variant,
        sweep_table,
        variant_summary,
        variants,
        write_variant,
    )

    t_start = time.perf_counter()
    bars = TaskBars(progress, lambda tasks: "variants")
    run = bars.wrap(make_executor(executor, workers, scheduler, on_done=bars.done))
    if out is not None:
        _check_out(Path(out), overwrite)
    prep = prepare(areas_path, rules, layer=layer, crs=crs, progress=progress)
    axes = parse_vary(vary, prep.rules)
    prev = None
    if previous is not None:
        prep.inputs.append(Path(previous))
        prev, _ = read_previous(previous, prep, mend=False)
    if out is not None:
        _check_out(Path(out), overwrite, prep.inputs)
    vs = variants(prep.rules, axes)
    if all(v.rules is None for v in vs):
        raise InputError(f"--vary: no variant gives valid rules; variant {vs[0].name}: {vs[0].error}")
    # a variant that changes graph.* keys is designed and audited on its own graph
    graphs = {prep.rules.graph: (prep.graph, None)}
    tasks = []
    for v in vs:
        if v.rules is not None and v.rules.graph not in graphs:
            built = area_graph(prep.geometry, prep.areas, v.rules.graph, notes=[])
            graphs[v.rules.graph] = (built.graph, {"contiguity": v.rules.graph.contiguity,
                                                   "edges": built.graph.n_edges, "links": built.links,
                                                   "islands": [_island_dict(x) for x in built.islands]})
        graph = graphs[v.rules.graph][0] if v.rules is not None else prep.graph
        tasks.append(VariantTask(variant=v, areas=prep.areas, graph=graph, previous=prev))
    _say(progress, f"sweeping {len(vs)} variant(s)")
    with _closing(run):
        results = run(tasks, run_variant)
    tiers = [t.name for t in prep.rules.tiers]
    table = sweep_table(results, tiers)
    head = base_summary(prep, "sweep")
    summary = dict(head)
    summary["sweep"] = {
        "vary": [{"keys": list(a.keys), "values": [list(g) for g in a.values]} for a in axes],
        "variants": plain(table.to_dict("records")),
        "invalid": [{"variant": v.number, "name": v.name, "problem": v.error} for v in vs if v.rules is None],
    }
    summary["seconds"] = {"total": round(time.perf_counter() - t_start, 3)}
    failed = any(r.row.get("valid") is False or r.row.get("audit_ok") is False or r.breaks or r.failures
                 for r in results)
    summary["exit_code"] = 1 if failed else 0
    if out is not None:
        with atomic_output(Path(out), overwrite=overwrite, inputs=prep.inputs) as tmp:
            _say(progress, f"writing {out}")
            table.to_csv(tmp / "sweep.csv", index=False, lineterminator="\n")
            layers = {}
            for v, r in zip(vs, results):
                if v.rules is None:
                    continue
                vsum = variant_summary(head, v, r, graphs[v.rules.graph][1])
                layers[v.number] = write_variant(tmp / "variants" / v.name, prep.geometry, prep.areas.ids, r, vsum)
            write_json(tmp / "summary.json", summary)
            if report:
                from zonedesign.report.sweepreport import write_sweep_report

                write_sweep_report(tmp, summary=summary, table=table, variants=vs, results=results, layers=layers)
    return RunResult(out=None if out is None else Path(out), summary=summary, exit_code=summary["exit_code"])


# ---------------------------------------------------------------- audit


def audit(
    areas_path: str | Path,
    rules: str | Path | Rules,
    out: str | Path | None,
    *,
    lookup: str | Path | None = None,
    tiers_from: str | Path | None = None,
    tolerance: float = 0.01,
    repair: bool = False,
    layer: str | None = None,
    crs: str | None = None,
    overwrite: bool = False,
    certify: bool = True,
    report: bool = True,
    progress: Progress | None = None,
) -> RunResult:
    """Check any hierarchy with the independent checker; exit code 1 when a rule is broken."""
    from zonedesign.verify.checks import audit as run_audit

    t_start = time.perf_counter()
    if (lookup is None) == (tiers_from is None):
        raise InputError("audit needs exactly one of --lookup or --tiers-from")
    if not 0 <= tolerance < 0.5:
        raise InputError(f"--tolerance must be in [0, 0.5), not {tolerance}")
    if out is not None:
        _check_out(Path(out), overwrite)
    prep = prepare(areas_path, rules, layer=layer, crs=crs, progress=progress)
    prep.inputs.append(Path(lookup or tiers_from))
    if out is not None:
        _check_out(Path(out), overwrite, prep.inputs)
    names = [t.name for t in prep.rules.tiers]
    tiers = list(prep.rules.tiers)
    overlay_flags: list = []
    if lookup is not None:
        labels, problems = lookup_labels(lookup, prep, names)
    else:
        labels, overlay_flags = layer_labels(tiers_from, prep, names, tolerance)
        problems = []
    seconds = dict(prep.seconds)
    t0 = time.perf_counter()
    stage = Stages(progress, "auditing", 1 + int(certify) + int(repair))
    stage("checking coverage, nesting, contiguity, fences and bounds")
    checked = run_audit(prep.areas, prep.graph, labels, tiers, lookup_problems=problems)
    summary = base_summary(prep, "audit")
    summary["audit"] = plain(checked.to_json())
    summary["audit"]["source"] = str(lookup or tiers_from)
    add_lock_checks(prep, labels, summary)
    if tiers_from is not None:
        summary["audit"]["overlay"] = {"tolerance_share": tolerance, "flags": plain(overlay_flags)}
    certs = []
    if certify:
        stage("building the CP-SAT certificate per fence and tier")
        certs = run_certificate(prep, labels, tiers, summary, progress)
    seconds["audit"] = time.perf_counter() - t0
    repaired = None
    moves = None
    if repair and not checked.ok:
        from zonedesign.verify.repair import minimal_repair

        t0 = time.perf_counter()
        stage("searching for the fewest area moves that mend every break")
        # the budget is solver work, not seconds, so the same lookup gets the same repair on
        # any machine and under any load; the wall-clock cap only ends a runaway model
        res = minimal_repair(prep.areas, prep.graph, labels, tiers, time_limit=AUDIT_REPAIR_CAP,
                             deterministic_time=AUDIT_REPAIR_WORK)
        moves = res.repair_frame()
        repaired = res.labels
        recheck = run_audit(prep.areas, prep.graph, repaired, tiers) if repaired is not None else None
        if recheck is not None and prep.locks:
            from zonedesign.locks import lock_breaks

            if lock_breaks(prep.locks, repaired, prep.areas):
                recheck = None  # the CP-SAT model knows no locks: a repair that moves a locked zone is none
        summary["repair"] = {
            "method": "cp-sat (fewest moves)",
            "status": res.status,
            "proven_fewest": res.status == "optimal",
            "moves": int(len(moves)),
            "repaired_lookup_passes": bool(recheck.ok) if recheck is not None else False,
        }
        if recheck is None or not recheck.ok or res.status != "optimal":
            # not proven fewest: the redraw search may mend with fewer moves, or mend at all
            stage("the CP-SAT repair is not proven fewest; trying the redraw search as well")
            mended = search_repair(prep, labels)
            again = run_audit(prep.areas, prep.graph, mended, tiers)
            search_moves = repair_moves(prep.areas.ids, labels, mended)
            summary["repair"]["redraw_search_moves"] = int(len(search_moves)) if again.ok else None
            cp_sat_failed = recheck is None or not recheck.ok
            mends_with_fewer = again.ok and (cp_sat_failed or len(search_moves) < len(moves))
            leaves_fewer_faults = not again.ok and (
                recheck is None or len(again.violations) < len(recheck.violations)
            )
            if mends_with_fewer or leaves_fewer_faults:
                repaired = mended
                moves = search_moves
                summary["repair"] = {
                    "method": "redraw search (not proven fewest moves)",
                    # a solve word: valid, proven impossible, or neither
                    "status": "feasible" if again.ok else ("infeasible" if res.status == "infeasible" else "undecided"),
                    "mends_every_break": bool(again.ok),
                    "cp_sat_status": res.status,
                    "proven_fewest": False,
                    "moves": int(len(moves)),
                    "repaired_lookup_passes": bool(again.ok),
                }
        if repaired is not None:
            from zonedesign.zonecodes import moved_areas

            summary["repair"]["moved_per_tier"] = {
                n: int(moved_areas(_codes(labels[n]), repaired[n]).sum()) for n in names
            }
            summary["repair"]["folder"] = "repaired"
        seconds["repair"] = time.perf_counter() - t0
    stage.close()
    tables = {}
    if all(_complete(labels[n]) for n in names):
        from zonedesign.zonetables import all_tables

        tables = all_tables(prep.areas, prep.graph, labels, tiers)
    rc = 0 if summary["audit"]["ok"] and not overlay_flags and all(c.ok for c in certs) else 1
    summary["exit_code"] = rc
    if out is not None:
        from zonedesign.io.output import atomic_output, write_json

        with atomic_output(Path(out), overwrite=overwrite, inputs=prep.inputs) as tmp:
            _say(progress, f"writing {out}")
            write_json(tmp / "audit.json", summary["audit"])
            checked.violations_frame().to_csv(tmp / "violations.csv", index=False, lineterminator="\n")
            if certify:
                write_json(tmp / "certificate.json", summary["certificate"])
            if moves is not None:
                moves.to_csv(tmp / "repair.csv", index=False, lineterminator="\n")
                if repaired is not None:
                    write_repaired(tmp / "repaired", prep, labels, repaired, summary,
                                   id_column=_id_column(lookup, prep), report=report)
            layers = {}
            if tables:
                from zonedesign.dissolve import zone_layers
                from zonedesign.io.output import write_layers_gpkg

                layers = zone_layers(prep.geometry, labels, tables)
                write_layers_gpkg(tmp / "zones.gpkg", layers)
            seconds["total"] = time.perf_counter() - t_start
            summary["seconds"] = {k: round(v, 3) for k, v in seconds.items()}
            if report:
                from zonedesign.report.html import write_report

                write_report(tmp / "report.html", summary=summary, tables=tables, layers=layers)
            write_json(tmp / "summary.json", summary)
    return RunResult(out=None if out is None else Path(out), summary=summary, exit_code=rc, lookup=labels)


def _codes(values: np.ndarray) -> np.ndarray:
    return np.array(["" if v is None else str(v) for v in np.asarray(values, dtype=object)], dtype=object)


def _id_column(lookup: str | Path | None, prep: Prepared) -> str:
    """The id column's name in the audited lookup (the rules' id column for --tiers-from)."""
    if lookup is None:
        return prep.rules.areas.id or "area"
    from zonedesign.io.lookup import read_lookup

    frame, _ = read_lookup(lookup, None, None, strict=False)
    return str(frame.index.name or prep.rules.areas.id or "area")


def write_repaired(
    folder: Path, prep: Prepared, before: Mapping[str, np.ndarray], repaired: Mapping[str, np.ndarray],
    summary: dict, *, id_column: str, report: bool,
) -> None:
    """OUT/repaired/: the repaired hierarchy as a full output (lookup.csv with the input's id
    column name, zones.gpkg, changes.csv, area_changes.csv, and a report drawing the moves)."""
    from zonedesign.dissolve import zone_layers
    from zonedesign.io.lookup import write_lookup
    from zonedesign.io.output import write_layers_gpkg
    from zonedesign.redraw_output import redraw_tables
    from zonedesign.zonetables import all_tables

    folder.mkdir(parents=True, exist_ok=True)
    tiers = list(prep.rules.tiers)
    prev = {t.name: _codes(before[t.name]) for t in tiers}
    now = {t.name: _codes(repaired[t.name]) for t in tiers}
    write_lookup(folder / "lookup.csv", prep.areas.ids, now, id_column=id_column)
    tables = all_tables(prep.areas, prep.graph, now, tiers)
    layers = zone_layers(prep.geometry, now, tables)
    write_layers_gpkg(folder / "zones.gpkg", layers)
    from zonedesign.report.changelist import repair_effects

    changes, per_area, figures = redraw_tables(prep, prev, now, policy=prep.rules.redraw.codes)
    if isinstance(summary.get("repair"), dict):
        summary["repair"]["zones"] = repair_effects(changes)  # drawn in the audit's report
    changes.to_csv(folder / "changes.csv", index=False, lineterminator="\n")
    per_area.to_csv(folder / "area_changes.csv", index=False, lineterminator="\n")
    if report:
        from zonedesign.report.html import write_report

        inner = {**base_summary(prep, "audit --repair"), "changes": figures,
                 "repair": {k: v for k, v in (summary.get("repair") or {}).items() if k not in ("folder", "zones")},
                 "redraw": {"code_policy": prep.rules.redraw.codes}}
        write_report(folder / "report.html", summary=inner, tables=tables, layers=layers, changes=changes)


def _complete(values: np.ndarray) -> bool:
    arr = np.asarray(values, dtype=object)
    return bool(all(isinstance(v, str) and v != "" for v in arr))


def lookup_labels(path: str | Path, prep: Prepared, names: list[str]) -> tuple[dict[str, np.ndarray], list]:
    """Zone ids per area from a lookup file, with its id problems kept for the audit."""
    from zonedesign.io.lookup import read_lookup

    frame, problems = read_lookup(path, prep.areas.ids, names, strict=False)
    labels = {}
    for n in names:
        col = frame[n].to_numpy(dtype=object) if n in frame else np.full(prep.areas.n, None, dtype=object)
        labels[n] = np.array([None if (v is None or (isinstance(v, float) and np.isnan(v))) else str(v) for v in col], dtype=object)
    return labels, list(problems)


def layer_labels(path: str | Path, prep: Prepared, names: list[str], tolerance: float) -> tuple[dict[str, np.ndarray], list]:
    """Zone ids per area derived by overlay from one polygon layer per tier."""
    import pyogrio

    from zonedesign.verify.overlay import zones_from_layers

    available = [name for name, _ in pyogrio.list_layers(path)]
    missing = [n for n in names if n not in available]
    if missing:
        raise InputError(f"{path}: no layer for tier(s) {', '.join(missing)}; layers here: {', '.join(available)}")
    layers = {}
    for n in names:
        gdf = pyogrio.read_dataframe(path, layer=n)
        if gdf.crs is not None and prep.geometry.crs is not None and gdf.crs != prep.geometry.crs:
            gdf = gdf.to_crs(prep.geometry.crs)
        if "zone" not in gdf.columns:
            raise InputError(f"{path}: layer {n!r} has no 'zone' column")
        layers[n] = gdf
    labels, flags = zones_from_layers(prep.geometry, prep.areas.ids, layers, "zone", tolerance_share=tolerance)
    return labels, list(flags)


# ---------------------------------------------------------------- the later-count demo


def later_scenario(
    input_dir: Path,
    out: str | Path,
    *,
    overwrite: bool = False,
    executor: str = "local",
    workers: int = 1,
    scheduler: str | None = None,
    certify: bool = True,
    report: bool = True,
    progress: Progress | None = None,
    extra_files: Mapping[str, Path] | None = None,
    written: Any = None,
) -> RunResult:
    """Design the demo region, redraw it on the counts ten years on, audit the redraw.

    OUT/design/ holds the first hierarchy; OUT/ itself holds the redraw (lookup.csv,
    changes.csv, summary.json with the independent audit and certificate, report.html).
    """
    import shutil
    import tempfile

    areas = input_dir / "areas.gpkg"
    later = input_dir / "areas.later.gpkg"
    rules = input_dir / "rules.toml"
    work = Path(tempfile.mkdtemp(prefix="zonedesign-later-"))
    try:
        _say(progress, "designing the first hierarchy")
        first = design(areas, rules, work / "design", executor=executor, workers=workers,
                       scheduler=scheduler, report=report, certify=certify, progress=progress)
        files = dict(extra_files or {})
        for p in sorted((work / "design").rglob("*")):
            if p.is_file():
                files[f"design/{p.relative_to(work / 'design')}"] = p
        _say(progress, "redrawing on the later counts")
        res = redraw(later, rules, work / "design" / "lookup.csv", out, overwrite=overwrite,
                     executor=executor, workers=workers, scheduler=scheduler, report=report, certify=certify,
                     progress=progress, extra_files=files)
        res.summary["first_design_exit_code"] = first.exit_code
        return res
    finally:
        shutil.rmtree(work, ignore_errors=True)
