"""`audit`: any hierarchy checked by the independent checker, and its repair policy."""

from __future__ import annotations

import time
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from zonedesign.cli.progress import Stages
from zonedesign.errors import InputError
from zonedesign.jobs.inputs import (
    Prepared,
    Progress,
    check_out,
    codes_of,
    complete,
    id_column,
    layer_labels,
    lookup_labels,
    mend_nesting,
    prepare,
    say,
)
from zonedesign.jobs.outputs import repair_moves, write_repaired
from zonedesign.jobs.summary import (
    RunResult,
    add_lock_checks,
    bound_breaks,
    explain_breaks,
    mark_locked_breaks,
    run_certificate,
    run_head,
)
from zonedesign.plain import plain
from zonedesign.rules import Rules
from zonedesign.summaryparts import AuditPart, Overlay, ProofEntry, RepairPart

AUDIT_REPAIR_WORK = 15.0  # CP-SAT deterministic time for audit --repair (about a minute on 2 cores)


AUDIT_REPAIR_CAP = 600.0  # seconds: ends only a model far slower than expected


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
        check_out(Path(out), overwrite)
    prep = prepare(areas_path, rules, layer=layer, crs=crs, progress=progress)
    prep.inputs.append(Path(lookup or tiers_from))
    if out is not None:
        check_out(Path(out), overwrite, prep.inputs)
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
    summary = run_head(prep, "audit")
    summary.audit = AuditPart.of(checked.to_json())
    summary.audit.source = str(lookup or tiers_from)
    add_lock_checks(prep, labels, summary)
    if tiers_from is not None:
        summary.audit.overlay = Overlay(tolerance_share=tolerance, flags=plain(overlay_flags))
    certs = []
    if certify:
        stage("building the CP-SAT certificate per fence and tier")
        certs = run_certificate(prep, labels, tiers, summary, progress)
    seconds["audit"] = time.perf_counter() - t0
    repaired = None
    moves = None
    if repair and not checked.ok:
        t0 = time.perf_counter()
        summary.repair, repaired, moves, after = repair_policy(prep, labels, stage)
        seconds["repair"] = time.perf_counter() - t0
    stage.close()
    tables = {}
    if all(complete(labels[n]) for n in names):
        from zonedesign.zonetables import all_tables

        tables = all_tables(prep.areas, prep.graph, labels, tiers)
        # a bound no zoning could meet is proven so, with the highest floor it could meet
        breaks = bound_breaks(tiers, tables)
        mark_locked_breaks(prep, breaks)
        summary.bound_breaks = breaks
        if breaks:
            say(progress, f"seeking proofs for {len({(b.tier, b.fence) for b in breaks})} fence(s) with bound breaks")
            summary.proofs = explain_breaks(prep, labels, breaks)
    rc = 0 if summary.audit.ok and not overlay_flags and all(c.ok for c in certs) else 1
    if repaired is not None:
        summary.repair.breaks_left, summary.repair.breaks_left_forced = breaks_left(
            prep, after, summary.proofs or [])
    summary.exit_code = rc
    summary.settle()
    if out is not None:
        written = AuditOutput(checked, labels, repaired, moves, tables, id_column(lookup, prep))
        write_audit(Path(out), prep, summary, written, seconds, t_start,
                    overwrite=overwrite, certify=certify, report=report, progress=progress)
    return RunResult(out=None if out is None else Path(out), record=summary, exit_code=rc, lookup=labels)


def repair_policy(prep: Prepared, labels: Mapping[str, np.ndarray], stage: Stages
                  ) -> tuple[RepairPart, dict[str, np.ndarray] | None, pd.DataFrame, Any]:
    """The repair of a broken hierarchy: CP-SAT's fewest moves first; when that is not
    proven (or mends nothing), the redraw search too, keeping whichever mends with fewer
    moves or leaves fewer faults. Returns the summary part, the repaired labels (None when
    none), the moves and the checker's report on the repaired labels (None when none)."""
    from zonedesign.tiers.naming import moved_areas
    from zonedesign.verify.checks import audit as run_audit
    from zonedesign.verify.repair import minimal_repair

    tiers = list(prep.rules.tiers)
    stage("searching for the fewest area moves that mend every break")
    # the budget is solver work, not seconds, so the same lookup gets the same repair on
    # any machine and under any load; the wall-clock cap only ends a runaway model
    # the model keeps locked zones as they are and holds each fence to its own bounds
    res = minimal_repair(prep.areas, prep.graph, labels, tiers, time_limit=AUDIT_REPAIR_CAP,
                         deterministic_time=AUDIT_REPAIR_WORK, locks=prep.locks.codes if prep.locks else None)
    moves = res.repair_frame()
    repaired = res.labels
    recheck = run_audit(prep.areas, prep.graph, repaired, tiers) if repaired is not None else None
    after = recheck
    if recheck is not None and prep.locks:
        from zonedesign.locks import lock_breaks

        if lock_breaks(prep.locks, repaired, prep.areas):
            recheck = None  # a repair that moves a locked zone is none (a safeguard)
    part = RepairPart(
        method="cp-sat (fewest moves)",
        status=res.status,
        proven_fewest=res.status == "optimal",
        moves=int(len(moves)),
        repaired_lookup_passes=bool(recheck.ok) if recheck is not None else False,
    )
    if recheck is None or not recheck.ok or res.status != "optimal":
        # not proven fewest: the redraw search may mend with fewer moves, or mend at all
        stage("the CP-SAT repair is not proven fewest; trying the redraw search as well")
        mended = search_repair(prep, labels)
        again = run_audit(prep.areas, prep.graph, mended, tiers)
        search_moves = repair_moves(prep.areas.ids, labels, mended)
        part.extra["redraw_search_moves"] = int(len(search_moves)) if again.ok else None
        cp_sat_failed = recheck is None or not recheck.ok
        mends_with_fewer = again.ok and (cp_sat_failed or len(search_moves) < len(moves))
        leaves_fewer_faults = not again.ok and (
            recheck is None or len(again.violations) < len(recheck.violations)
        )
        if mends_with_fewer or leaves_fewer_faults:
            repaired = mended
            moves = search_moves
            after = again
            part = RepairPart(
                method="redraw search (not proven fewest moves)",
                # a solve word: valid, proven impossible, or neither
                status="feasible" if again.ok else ("infeasible" if res.status == "infeasible" else "undecided"),
                proven_fewest=False,
                moves=int(len(moves)),
                repaired_lookup_passes=bool(again.ok),
                extra={"mends_every_break": bool(again.ok), "cp_sat_status": res.status},
            )
    if repaired is not None:
        part.moved_per_tier = {
            t.name: int(moved_areas(codes_of(labels[t.name]), repaired[t.name]).sum()) for t in tiers
        }
        part.folder = "repaired"
    return part, repaired, moves, after


@dataclass
class AuditOutput:
    """What an audit writes besides its summary."""

    checked: Any  # the checker's report
    labels: Mapping[str, np.ndarray]
    repaired: Mapping[str, np.ndarray] | None
    moves: pd.DataFrame | None
    tables: dict
    id_column: str


def write_audit(out: Path, prep: Prepared, summary: Any, written: AuditOutput, seconds: dict, t_start: float,
                *, overwrite: bool, certify: bool, report: bool, progress: Progress | None) -> None:
    """The audit's folder, written whole or not at all: audit.json, violations.csv, the
    certificate, the repair (repair.csv and a full output in repaired/), the audited zones'
    layers, the report and summary.json."""
    from zonedesign.io.output import atomic_output, write_json

    with atomic_output(out, overwrite=overwrite, inputs=prep.inputs) as tmp:
        say(progress, f"writing {out}")
        write_json(tmp / "audit.json", summary.audit)
        written.checked.violations_frame().to_csv(tmp / "violations.csv", index=False, lineterminator="\n")
        if certify:
            write_json(tmp / "certificate.json", summary.certificate)
        if written.moves is not None:
            written.moves.to_csv(tmp / "repair.csv", index=False, lineterminator="\n")
            if written.repaired is not None:
                write_repaired(tmp / "repaired", prep, written.labels, written.repaired, summary,
                               id_column=written.id_column, report=report)
        layers = {}
        if written.tables:
            from zonedesign.dissolve import zone_layers
            from zonedesign.io.output import write_layers_gpkg

            layers = zone_layers(prep.geometry, written.labels, written.tables)
            write_layers_gpkg(tmp / "zones.gpkg", layers)
        seconds["total"] = time.perf_counter() - t_start
        summary.seconds = {k: round(v, 3) for k, v in seconds.items()}
        if report:
            from zonedesign.report.html import write_report

            write_report(tmp / "report.html", summary=summary, tables=written.tables, layers=layers)
        write_json(tmp / "summary.json", summary)


def breaks_left(prep: Prepared, after: Any, proofs: list[ProofEntry]) -> tuple[int, int]:
    """What the repaired hierarchy still breaks (`after`, the checker's report on it), and
    how much of it is proven forced: a bound break in a fence-tier the proofs show no
    zoning can mend, or a locked zone's."""
    locked = {name: set(prep.locks.zones(name)) for name in prep.locks.codes} if prep.locks else {}
    proven = {(p.tier, p.fence) for p in proofs if p.status == "INFEASIBLE"}
    forced = [
        v for v in after.violations
        if v.kind == "bounds" and (v.zone in locked.get(v.tier, set()) or any((v.tier, f) in proven for f in v.fences))
    ]
    return len(after.violations), len(forced)


def search_repair(prep: Prepared, labels: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Mend a broken hierarchy with the redraw search: nesting by majority, then every
    broken zone and its neighbours re-searched with a heavy stability weight. Not proven
    minimal; used when the CP-SAT repair cannot finish."""
    from zonedesign.tiers.redraw import redraw_hierarchy

    names = [t.name for t in prep.rules.tiers]
    given = {n: np.array(["" if v is None else str(v) for v in labels[n]], dtype=object) for n in names}
    prev = mend_nesting(given, names)
    # codes carry on by the rules' code policy, so the moves listed are areas that moved
    return redraw_hierarchy(prep.areas, prep.graph, prep.rules, prev, locks=prep.locks).lookup()
