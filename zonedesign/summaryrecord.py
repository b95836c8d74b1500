"""The run summary as one typed record: what every command writes to summary.json.

`RunSummary.to_json()` is summary.json's content; `RunSummary.from_json(data, source=...)`
reads one back (`zonedesign show DIR`, the report of an existing folder), taking every
optional part as absent when it is missing and refusing a summary without a required key
with the file and key named. The outcome of the run (its break counts and the reasons for
its exit code) is counted once, when the record is built, and read by the CLI and `show`.
"""

from __future__ import annotations

import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from zonedesign.status import certificate_verdict
from zonedesign.summaryparts import (
    DERIVED,
    REQUIRED,
    AreasPart,
    AuditPart,
    BoundBreak,
    CertificateEntry,
    FenceFailure,
    FenceRow,
    GraphPart,
    LocksPart,
    Override,
    Part,
    PreviousPart,
    ProofEntry,
    RedrawPart,
    RepairPart,
    SearchPart,
    SweepPart,
    TierChanges,
    TierFigures,
    TierObjective,
    Where,
    extra,
    key,
)


@dataclass(frozen=True)
class Outcome:
    """How a run ended, counted once: zones outside their bounds (a zone breaking bounds
    of two counts is one), audit violations of other kinds (with areas an overlay split
    between zones), failed fences, the certificate's verdict (None: not certified), and
    the reasons for a nonzero exit code."""

    exit_code: int | None
    bound_breaks: int
    violations: int
    failed_fences: int
    certificate: str | None
    reasons: tuple[str, ...]

    @property
    def holds(self) -> bool:
        """Every rule holds and nothing is left undecided."""
        return self.exit_code == 0 and self.certificate in (None, "confirmed")


@dataclass
class RunSummary(Part):
    """Every figure of one run. Parts that a command does not make are None."""

    command: str | None = key(need=REQUIRED, kind=str)
    exit_code: int | None = key(need=REQUIRED, kind=int)
    # the head: what went in
    caution: str | None = key(kind=str)
    version: str | None = key("zonedesign", kind=str)
    versions: dict | None = key(kind=dict)
    inputs: list | None = key(kind=list)
    areas: AreasPart | None = key(of=AreasPart)
    graph: GraphPart | None = key(of=GraphPart)
    rules: str | None = key(kind=str)  # the rules file's text
    tier_order: list | None = key(kind=list)
    overrides: dict[str, list[Override]] | None = key(of=Override, shape="maplist")
    objective: dict[str, TierObjective] | None = key(of=TierObjective, shape="map")
    # design and redraw
    search: SearchPart | None = key(of=SearchPart)
    fences: list[FenceRow] | None = key(of=FenceRow, shape="list")
    fence_failures: list[FenceFailure] | None = key(of=FenceFailure, shape="list")
    previous: PreviousPart | None = key(of=PreviousPart)
    redraw: RedrawPart | None = key(of=RedrawPart)
    changes: dict[str, TierChanges] | None = key(of=TierChanges, shape="map")
    # the checks
    audit: AuditPart | None = key(of=AuditPart)
    locks: LocksPart | None = key(of=LocksPart)
    certificate: list[CertificateEntry] | None = key(of=CertificateEntry, shape="list")
    tiers: dict[str, TierFigures] | None = key(of=TierFigures, shape="map")
    bound_breaks: list[BoundBreak] | None = key(of=BoundBreak, shape="list")
    proofs: list[ProofEntry] | None = key(of=ProofEntry, shape="list")
    repair: RepairPart | None = key(of=RepairPart)
    # a sweep, and a sweep's variant folder
    sweep: SweepPart | None = key(of=SweepPart)
    variant: dict | None = key(kind=dict)
    sweep_row: dict | None = key(kind=dict)
    # the demo
    demo: dict | None = key(kind=dict)
    first_design_exit_code: int | None = key(kind=int)  # the later scenario's first design
    seconds: dict | None = key(kind=dict)  # per phase
    extra: dict = extra()
    outcome: Outcome | None = field(default=None, compare=False, metadata={"need": DERIVED})

    @classmethod
    def from_json(cls, data: Mapping[str, Any], *, source: str = "summary.json", partial: bool = False) -> RunSummary:
        """A summary read back from summary.json's content. partial: take a missing required
        key as absent and leave out parts of the wrong type (a report of whatever is at hand)."""
        where = Where(source=str(source), partial=partial)
        if not isinstance(data, Mapping):
            if partial:
                data = {}
            else:
                where.fail("not a zonedesign summary (expected a JSON object)")
        summary = cls.read(dict(data), where)
        summary.settle()
        return summary

    def settle(self) -> RunSummary:
        """Count the outcome from the parts, once the exit code is known."""
        self.outcome = outcome_of(self)
        return self

    # ---------------------------------------------------------------- read by the readers

    @property
    def tier_names(self) -> list[str]:
        """Tier names bottom first, as the rules list them."""
        if self.tier_order:
            return [str(x) for x in self.tier_order]
        try:
            tiers = tomllib.loads(self.rules or "").get("tier") or []
            names = [str(t["name"]) for t in tiers if isinstance(t, dict) and "name" in t]
        except (tomllib.TOMLDecodeError, TypeError):
            names = []
        if names:
            return names
        seen = dict.fromkeys(f.tier for f in self.fences or [])
        return list(seen) or list(self.tiers or {})

    @property
    def violations(self) -> list:
        return list(self.audit.violations) if self.audit is not None else []

    @property
    def certificate_counts(self) -> tuple[str, dict[str, int]] | None:
        """The certificate's verdict and its count per word, or None when not certified."""
        if not self.certificate:
            return None
        return certificate_verdict([{"status": c.word} for c in self.certificate])


def outcome_of(s: RunSummary) -> Outcome:
    """The break counts and exit reasons of a summary (the CLI's last line reads them)."""
    violations = s.violations
    if s.bound_breaks is not None:
        bound = len(s.bound_breaks)
    else:  # an audit of an incomplete lookup: a zone that breaks bounds of two counts is one break
        bound = len({(v.tier, v.zone) for v in violations if v.kind == "bounds"})
    # bound breaks are counted once, above; the audit adds what else it found
    viol = sum(1 for v in violations if v.kind != "bounds")
    if s.audit is not None and s.audit.overlay is not None:
        viol += len(s.audit.overlay.flags)  # areas split between zones
    fails = len(s.fence_failures or [])
    reasons = []
    if s.sweep is not None:
        rows = [r for r in s.sweep.variants if isinstance(r, dict) and r.get("valid")]
        bound = sum(int(r.get("bound_breaks") or 0) for r in rows)
        viol = sum(1 for r in rows if not r.get("audit_ok", True))
        if s.sweep.invalid:
            reasons.append(f"{len(s.sweep.invalid)} variant(s) not run")
        failing = sum(1 for r in rows if r.get("fence_failures"))
        if failing:
            reasons.append(f"{failing} variant(s) with failed fences")
    counts = s.certificate_counts
    verdict = counts[0] if counts else None
    if bound:
        reasons.append(f"{bound} bound break(s)")
    if viol:
        reasons.append(f"{viol} audit violation(s)")
    if s.audit is not None and not s.audit.ok and not viol and not bound:
        reasons.append("the audit did not pass")
    if fails:
        reasons.append(f"{fails} failed fence(s)")
    if verdict not in (None, "confirmed"):
        reasons.append(f"certificate {verdict}")
    return Outcome(exit_code=s.exit_code, bound_breaks=bound, violations=viol, failed_fences=fails,
                   certificate=verdict, reasons=tuple(reasons))
