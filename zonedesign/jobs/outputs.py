"""Finishing a run: the independent audit, the zone tables, and every output written atomically."""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from zonedesign.cli.progress import Stages
from zonedesign.jobs.inputs import Prepared, Progress, codes_of, say
from zonedesign.jobs.summary import (
    RunResult,
    add_lock_checks,
    bound_breaks,
    explain_breaks,
    mark_locked_breaks,
    run_certificate,
    run_head,
    violations_of,
)
from zonedesign.summaryparts import AuditPart, RedrawPart, TierChanges, TierFigures, Violation
from zonedesign.summaryrecord import RunSummary


def finish(
    prep: Prepared,
    lookup: dict[str, np.ndarray],
    summary: RunSummary,
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
    summary.audit = AuditPart(ok=bool(checked.ok), violations=[Violation.of(v) for v in violations_of(checked)])
    add_lock_checks(prep, lookup, summary)
    uncertified = False
    if certify:
        stage("building the CP-SAT certificate per fence and tier")
        uncertified = not all(c.ok for c in run_certificate(prep, lookup, tiers, summary, progress))
    seconds["audit"] = time.perf_counter() - t0

    stage("measuring every zone")
    tables = all_tables(prep.areas, prep.graph, lookup, tiers)
    summary.tiers = {
        t.name: TierFigures.of(tier_figures(tables[t.name], t, prep.areas.count_names)) for t in tiers
    }
    breaks = bound_breaks(tiers, tables)
    mark_locked_breaks(prep, breaks)
    summary.bound_breaks = breaks
    broken = len({(b.tier, b.fence) for b in breaks})
    stage(f"seeking proofs for {broken} fence(s) with bound breaks" if broken
          else "every zone within its bounds: no proof to seek")
    summary.proofs = explain_breaks(prep, lookup, breaks)
    stage.close()
    summary.seconds = {k: round(v, 3) for k, v in seconds.items()}
    rc = 1 if (breaks or not summary.audit.ok or failed or uncertified) else 0
    summary.exit_code = rc
    summary.settle()
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
    return RunResult(out=None if out is None else Path(out), record=summary, exit_code=rc, lookup=lookup)


def write_outputs(
    prep: Prepared,
    lookup: dict[str, np.ndarray],
    tables: dict[str, pd.DataFrame],
    summary: RunSummary,
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
        say(progress, f"writing {out}")
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
        summary.seconds = {k: round(v, 3) for k, v in seconds.items()}
        write_json(tmp / "summary.json", summary)


def repair_moves(ids: np.ndarray, before: Mapping[str, np.ndarray], after: Mapping[str, np.ndarray]) -> pd.DataFrame:
    """repair.csv rows: every area whose zone changed, per tier."""
    rows = []
    for tier, new in after.items():
        old = np.asarray(before[tier], dtype=object)
        for i in np.flatnonzero(np.asarray(new, dtype=object) != old):
            rows.append({"area": str(ids[i]), "tier": tier, "old_zone": "" if old[i] is None else str(old[i]),
                         "new_zone": str(new[i])})
    return pd.DataFrame(rows, columns=["area", "tier", "old_zone", "new_zone"])


def write_repaired(
    folder: Path, prep: Prepared, before: Mapping[str, np.ndarray], repaired: Mapping[str, np.ndarray],
    summary: RunSummary, *, id_column: str, report: bool,
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
    prev = {t.name: codes_of(before[t.name]) for t in tiers}
    now = {t.name: codes_of(repaired[t.name]) for t in tiers}
    write_lookup(folder / "lookup.csv", prep.areas.ids, now, id_column=id_column)
    tables = all_tables(prep.areas, prep.graph, now, tiers)
    layers = zone_layers(prep.geometry, now, tables)
    write_layers_gpkg(folder / "zones.gpkg", layers)
    from zonedesign.report.changelist import repair_effects

    changes, per_area, figures = redraw_tables(prep, prev, now, policy=prep.rules.redraw.codes)
    if summary.repair is not None:
        summary.repair.zones = repair_effects(changes)  # drawn in the audit's report
    changes.to_csv(folder / "changes.csv", index=False, lineterminator="\n")
    per_area.to_csv(folder / "area_changes.csv", index=False, lineterminator="\n")
    if report:
        from zonedesign.report.html import write_report

        inner = run_head(prep, "audit --repair")
        inner.changes = {name: TierChanges.of(f) for name, f in figures.items()}
        if summary.repair is not None:
            inner.repair = dataclasses.replace(summary.repair, folder=None, zones=None)
        inner.redraw = RedrawPart(code_policy=prep.rules.redraw.codes)
        write_report(folder / "report.html", summary=inner, tables=tables, layers=layers, changes=changes)
