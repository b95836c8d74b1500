"""`zonedesign show DIR`: a terminal summary of an output folder."""

from __future__ import annotations

import json
from pathlib import Path

from zonedesign.errors import InputError


def show(folder: Path) -> str:
    """Tiers, zones, breaks and where the report is, as plain text lines."""
    path = Path(folder) / "summary.json"
    if not path.exists():
        alt = Path(folder) / "audit.json"
        if alt.exists():
            path = alt
        else:
            raise InputError(f"{folder}: no summary.json or audit.json here; is it a zonedesign output folder?")
    try:
        s = json.loads(path.read_text())
    except json.JSONDecodeError as exc:
        raise InputError(f"{path}: not valid JSON (line {exc.lineno}, column {exc.colno})") from None
    lines = [f"{folder}  ({s.get('command', '?')}, zonedesign {s.get('zonedesign', '?')})"]
    areas = s.get("areas", {})
    if areas:
        lines.append(f"  areas: {areas.get('count')} in {areas.get('fences')} fence(s), CRS {areas.get('crs')}")
    for name, t in (s.get("tiers") or {}).items():
        within = ", ".join(f"{k} {v:.0%}" for k, v in (t.get("share_within_10pct_of_target") or {}).items())
        pp = (t.get("polsby_popper") or {}).get("median")
        pp_text = f", median Polsby-Popper {pp:.2f}" if pp is not None else ""
        lines.append(
            f"  tier {name}: {t.get('zones')} zones, {t.get('bound_breaks')} bound break(s)"
            + (f", within 10% of target: {within}" if within else "")
            + pp_text
        )
    audit = s.get("audit") or {}
    if audit:
        n = len(audit.get("violations", []))
        lines.append(f"  audit: {'passed' if audit.get('ok') else f'{n} violation(s)'}")
    cert = s.get("certificate") or []
    if cert:
        good = sum(1 for c in cert if str(c.get("status", "")).upper() in ("FEASIBLE", "OPTIMAL"))
        lines.append(f"  certificate: {good}/{len(cert)} fence-tier models feasible")
    for b in (s.get("bound_breaks") or [])[:10]:
        lines.append(f"  break: tier {b['tier']} zone {b['zone']}: {b.get('breaks', '')}")
    for p in (s.get("proofs") or [])[:10]:
        lines.append(f"  proof: {p.get('text', '')}")
    fails = s.get("fence_failures") or []
    for f in fails:
        lines.append(f"  FAILED fence {f['fence']} tier {f['tier']}: {f['error']}")
    report = Path(folder) / "report.html"
    if report.exists():
        lines.append(f"  report: {report}")
    lines.append(f"  exit code of the run: {s.get('exit_code', '?')}")
    return "\n".join(lines)
