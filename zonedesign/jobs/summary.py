"""The run summary: its head, per-fence figures, the certificate, locks and proofs, built
as a `RunSummary` record (zonedesign/summaryrecord.py) that summary.json is written from."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from zonedesign import __version__
from zonedesign.exactfence import PROOF_KEYS, proof_fields
from zonedesign.glossary import CAUTION
from zonedesign.jobs.inputs import Prepared, Progress, versions
from zonedesign.plain import plain
from zonedesign.summaryparts import (
    AreasPart,
    BoundBreak,
    CertificateEntry,
    DuplicateMerged,
    FenceRow,
    GraphPart,
    LocksPart,
    OverlapCut,
    Override,
    ProofEntry,
    SearchPart,
    TierObjective,
    Violation,
)
from zonedesign.summaryrecord import RunSummary


@dataclass
class RunResult:
    """A run's output folder, its summary record, exit code and lookup per tier."""

    out: Path | None
    record: RunSummary
    exit_code: int
    lookup: dict[str, np.ndarray] = field(default_factory=dict)

    def __post_init__(self) -> None:
        if isinstance(self.record, Mapping):  # a summary's JSON form, as a caller may hold it
            self.record = RunSummary.from_json(self.record, source="the run's summary", partial=True)

    @property
    def summary(self) -> dict:
        """The summary as summary.json holds it (plain values; NaN kept as NaN)."""
        return plain(self.record.to_json())


def run_summary(prep: Prepared, command: str, result: Any, executor: str, workers: int) -> tuple[dict, RunSummary]:
    """Phase timings and the summary's head shared by design and redraw."""
    seconds = dict(prep.seconds)
    seconds.update(result.seconds)
    summary = run_head(prep, command)
    summary.search = SearchPart(method=prep.rules.search.method, seed=prep.rules.search.seed,
                                executor=executor, workers=workers)
    return seconds, summary


def fence_rows(result: Any) -> list[FenceRow]:
    """One row per fence of every tier: zones, units, breaks, objective, proof, info."""
    rows = []
    for tier in result.tiers:
        for f in tier.fences:
            rows.append(
                FenceRow(
                    tier=tier.name,
                    fence=f.fence,
                    zones=int(np.unique(f.labels).shape[0]) if f.labels.size else 0,
                    units=int(f.labels.shape[0]),
                    breaks=f.breaks,
                    objective=f.total,
                    terms=f.terms,
                    seconds=round(f.seconds, 3),
                    error=f.error,
                    **proof_fields(f.info),
                    info={k: v for k, v in f.info.items() if k != "traceback" and k not in PROOF_KEYS},
                )
            )
    return rows


def fence_figures(result: Any) -> list[dict]:
    """The fence rows as summary.json holds them."""
    return [r.to_json() for r in fence_rows(result)]


def run_head(prep: Prepared, command: str) -> RunSummary:
    """The head every command's summary starts with: inputs, areas, graph, rules."""
    fences = prep.areas.fence.tolist()
    return RunSummary(
        command=command,
        caution=CAUTION,
        version=__version__,
        versions=versions(),
        inputs=[str(p) for p in prep.inputs],
        areas=AreasPart(
            count=prep.areas.n,
            crs=prep.areas.crs,
            crs_choice=prep.crs_note,
            fences=len(set(fences)),
            fence_codes=sorted(set(fences)),
            fences_per_tier={t.name: len(set(prep.areas.in_tier(t.name).fence.tolist())) for t in prep.rules.tiers},
            repaired_polygons=list(prep.areas.repaired),
            overlaps_cut=[OverlapCut.of(c) for c in prep.overlaps_cut],
            duplicates_merged=[DuplicateMerged.of(d) for d in prep.duplicates_merged],
            notes=prep.notes,
        ),
        graph=GraphPart(contiguity=prep.rules.graph.contiguity, edges=prep.graph.n_edges, links=prep.links,
                        islands=prep.islands),
        rules=prep.rules.text,
        tier_order=[t.name for t in prep.rules.tiers],
        overrides={
            t.name: [Override(fences=list(o.fences), min=o.min, max=o.max, target=o.target, weights=o.weights)
                     for o in t.overrides]
            for t in prep.rules.tiers
            if t.overrides
        },
        objective=tier_objectives(prep.rules.tiers),
    )


def tier_objectives(tiers: list) -> dict[str, TierObjective]:
    return {t.name: TierObjective(homogeneity=t.homogeneity, compactness=t.compactness, weights=dict(t.weights))
            for t in tiers}


def base_summary(prep: Prepared, command: str) -> dict:
    """The head as summary.json holds it."""
    return run_head(prep, command).to_json()


def run_certificate(prep: Prepared, labels: Mapping[str, np.ndarray], tiers: list, summary: RunSummary,
                    progress: Progress | None) -> list:
    """The CP-SAT certificate into the summary, with a fence-tier counter; every
    undecided fence and tier is named on the progress line (it makes the exit code 1)."""
    from zonedesign.cli.progress import bar, say
    from zonedesign.verify.certificate import certify, fence_tiers

    with bar(progress, fence_tiers(prep.areas, tiers), "certificate (fence-tiers)") as b:
        certs = certify(prep.areas, prep.graph, labels, tiers, on_done=lambda _done, _total: b.update())
    summary.certificate = [CertificateEntry.of(c) for c in certs]
    for c in certs:
        if c.undecided:
            say(progress, f"certificate undecided for tier {c.tier} fence {c.fence}: CP-SAT stopped at its time limit")
    return certs


def add_lock_checks(prep: Prepared, lookup: Mapping[str, np.ndarray], summary: RunSummary) -> None:
    """Every locked zone must be in the lookup exactly as the lock file gives it."""
    if not prep.locks:
        return
    from zonedesign.locks import lock_breaks

    found = lock_breaks(prep.locks, lookup, prep.areas)
    summary.locks = LocksPart(
        file=str(prep.locks.source),
        zones={name: sorted(prep.locks.zones(name)) for name in prep.locks.codes},
        kept=not found,
    )
    if found:
        summary.audit.violations = list(summary.audit.violations) + [Violation.of(v) for v in found]
        summary.audit.ok = False


def mark_locked_breaks(prep: Prepared, breaks: list[BoundBreak]) -> None:
    """A locked zone that breaks a bound stays as agreed; its break says so."""
    if not prep.locks:
        return
    for b in breaks:
        b.locked = b.zone in prep.locks.zones(b.tier)


def explain_breaks(prep: Prepared, lookup: Mapping[str, np.ndarray], breaks: list[BoundBreak]) -> list[ProofEntry]:
    """A plain-words proof for each fence whose breaks no zoning could avoid."""
    from zonedesign.breakproofs import explain_breaks as explain

    found = explain(prep.areas, prep.graph, prep.rules.tiers, lookup, [b.to_json() for b in breaks],
                    locks=prep.locks or None)
    return [ProofEntry.of(p) for p in found]


def bound_breaks(tiers: list, tables: Mapping[str, Any]) -> list[BoundBreak]:
    """One entry per zone that breaks a bound, from the zone tables."""
    from zonedesign.zonetables import table_breaks

    return [BoundBreak.of(b) for b in table_breaks(tiers, tables)]


def violations_of(checked: Any) -> list:
    return list(getattr(checked, "violations", []))
