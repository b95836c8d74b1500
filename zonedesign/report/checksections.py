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
    breaks = dicts(run.summary.get("bound_breaks"))
    if breaks:
        rows = []
        for b in breaks:
            rows.append(
                [
                    b.get("tier"),
                    zone_link(run, b.get("tier"), b.get("zone")),
                    b.get("fence"),
                    b.get("breaks"),
                ]
            )
        out.append(
            html_table(
                "Zones outside their bounds",
                ["tier", "zone", "fence", "what is out of bounds"],
                rows,
                row_class="violation",
            )
        )
    audit = run.summary.get("audit")
    viol = dicts(audit.get("violations")) if isinstance(audit, dict) else []
    if viol:
        rows = []
        for v in viol:
            areas = v.get("areas")
            areas = (
                ", ".join(map(str, areas[:5])) + (" …" if len(areas) > 5 else "")
                if isinstance(areas, list)
                else text_of(areas)
            )
            rows.append(
                [
                    v.get("kind"),
                    v.get("tier"),
                    zone_link(run, v.get("tier"), v.get("zone")),
                    ", ".join(map(str, v.get("fences") or [])),
                    areas,
                    v.get("message"),
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
    elif isinstance(audit, dict):
        out.append(
            "<p>The independent audit found no problem.</p>"
            if audit.get("ok")
            else "<p>The audit did not pass.</p>"
        )
    if not out and "bound_breaks" in run.summary:
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
    certs = dicts(run.summary.get("certificate"))
    if certs:
        rows = []
        for c in certs:
            status = str(c.get("status", ""))
            words = _CERT_WORDS.get(status.upper(), status)
            extra = ", ".join(
                f"{k} {text_of(v)}"
                for k, v in c.items()
                if k not in ("tier", "fence", "status", "seconds", "text", "message")
            )
            rows.append(
                [
                    c.get("tier"),
                    c.get("fence"),
                    words + (f" ({c['text']})" if c.get("text") else ""),
                    num(c.get("seconds")),
                    extra,
                ]
            )
        out.append(
            html_table(
                "Certificate per fence and tier",
                ["tier", "fence", "verdict", "seconds", "details"],
                rows,
            )
        )
    proofs = dicts(run.summary.get("proofs"))
    if proofs:
        rows = []
        for p in proofs:
            status = str(p.get("status", ""))
            verdict = _LOCK_WORDS if p.get("kind") == "lock" else _PROOF_WORDS.get(status, status)
            rows.append([p.get("tier"), p.get("fence"), verdict, floors_cell(p.get("floors")), p.get("text", "")])
        out.append(
            html_table(
                "Why some bounds could not be met",
                ["tier", "fence", "verdict", "highest floor that could be met", "in plain words"],
                rows,
            )
        )
    return "".join(out)
