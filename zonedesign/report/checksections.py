"""The report's sections on rule breaks, the certificate and the proofs."""

from __future__ import annotations

from typing import Any

from zonedesign.report.format import (
    Raw,
    dicts,
    esc,
    html_table,
    num,
    text_of,
)
from zonedesign.report.plan import ReportPlan


def violations(run: ReportPlan) -> str:
    out = []
    breaks = run.summary.bound_breaks or []
    if breaks:
        rows = []
        for b in breaks:
            rows.append([b.tier, zone_link(run, b.tier, b.zone), b.fence, b.breaks])
        out.append(
            html_table(
                "Zones outside their bounds",
                ["tier", "zone", "fence", "what is out of bounds"],
                rows,
                row_class="violation",
            )
        )
    audit = run.summary.audit
    viol = run.summary.violations
    if viol:
        rows = []
        for v in viol:
            areas = v.areas
            areas = (
                ", ".join(map(str, areas[:5])) + (" …" if len(areas) > 5 else "")
                if isinstance(areas, list)
                else text_of(areas)
            )
            rows.append(
                [
                    v.kind,
                    v.tier,
                    zone_link(run, v.tier, v.zone),
                    ", ".join(map(str, v.fences or [])),
                    areas,
                    v.message,
                ]
            )
        out.append(
            html_table(
                "Problems found by the independent audit",
                ["kind", "tier", "zone", "fences", "areas", "message"],
                rows,
                row_class="violation",
            )
        )
    elif audit is not None:
        out.append(
            "<p>The independent audit found no problem.</p>"
            if audit.ok
            else "<p>The audit did not pass.</p>"
        )
    if not out and run.summary.bound_breaks is not None:
        out.append("<p>Every zone is within its bounds.</p>")
    return "".join(out)


def zone_link(run: ReportPlan, tier: Any, zone: Any) -> Raw:
    label = esc(zone) if zone not in (None, "") else "(whole tier)" if tier else "(whole input)"
    href = run.href(tier, zone)
    hint = "" if href.startswith("#zone-") else ' title="not drawn on a map; see the note there"'
    return Raw(f'<a href="{href}"{hint}>{label}</a>')


_CERT_WORDS = {
    "CONFIRMED": "confirmed: an independent CP-SAT model accepts these zones under every rule",
    "REFUTED": "refuted: the independent CP-SAT model finds a rule these zones break",
    "UNDECIDED": "undecided: no verdict was reached (the solver stopped, or the model could not be built)",
    # solver words of older summaries
    "OPTIMAL": "confirmed: an independent CP-SAT model accepts these zones under every rule",
    "FEASIBLE": "confirmed: an independent CP-SAT model accepts these zones under every rule",
    "INFEASIBLE": "refuted: the independent CP-SAT model finds a rule these zones break",
    "UNKNOWN": "undecided: the solver stopped before reaching a verdict",
    "MODEL_INVALID": "undecided: the model could not be built",
}
_PROOF_WORDS = {
    "infeasible": "infeasible: proved that no zoning of this fence can meet every bound",
    "undecided": "undecided: too large to prove within the time allowed",
    "feasible": "feasible: a valid zoning exists; the search missed it, so no proof says the bounds cannot be met",
    # older summaries
    "INFEASIBLE": "infeasible: proved that no zoning of this fence can meet every bound",
    "UNKNOWN": "undecided: too large to prove within the time allowed",
    "no proof": "feasible: a valid zoning exists; the search missed it, so no proof says the bounds cannot be met",
}


_LOCK_WORDS = "forced by the lock: the zone is fixed by the lock file, so no zoning that keeps it can mend the break"


def floors_cell(floors: Any) -> str:
    """Each count's highest floor as the proof found it: the value, a proven range, or none."""
    parts = []
    for f in dicts(floors):
        name, lo, hi = f.get("count", ""), f.get("at_least"), f.get("at_most")
        status = f.get("status")
        if status == "optimal":
            parts.append(f"{name} {num(lo)}")
        elif status == "feasible":
            parts.append(f"{name} at least {num(lo)}, at most {num(hi)}")
        elif status == "infeasible":
            parts.append(f"{name}: none (its other bounds fail without one)")
        elif hi is not None:
            parts.append(f"{name} at most {num(hi)}")
    return "; ".join(parts)


def certificate(run: ReportPlan) -> str:
    out = []
    certs = run.summary.certificate or []
    if certs:
        rows = []
        for c in certs:
            status = str(c.status)
            words = _CERT_WORDS.get(status.upper(), status)
            # the model's size, as the certificate gives it
            details = ", ".join(f"{k} {text_of(v)}" for k, v in c.extra.items() if k != "message")
            rows.append(
                [
                    c.tier,
                    c.fence,
                    words + (f" ({c.text})" if c.text else ""),
                    num(c.seconds),
                    details,
                ]
            )
        out.append(
            html_table(
                "Certificate per fence and tier",
                ["tier", "fence", "verdict", "seconds", "details"],
                rows,
            )
        )
    proofs = run.summary.proofs or []
    if proofs:
        rows = []
        for p in proofs:
            status = str(p.status or "")
            verdict = _LOCK_WORDS if p.kind == "lock" else _PROOF_WORDS.get(status, status)
            rows.append([p.tier, p.fence, verdict, floors_cell(p.floors), p.text or ""])
        out.append(
            html_table(
                "Why some bounds could not be met",
                ["tier", "fence", "verdict", "highest floor that could be met", "in plain words"],
                rows,
            )
        )
    return "".join(out)
