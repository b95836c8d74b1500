"""`zonedesign show DIR`: a terminal summary of an output folder."""

from __future__ import annotations

import json
from pathlib import Path

from zonedesign.errors import InputError
from zonedesign.status import solve_word
from zonedesign.summaryparts import AuditPart, SearchPart, Where
from zonedesign.summaryrecord import RunSummary

SHOWN = 10  # breaks, proofs and violations listed before "and N more"


def show(folder: str | Path) -> str:
    """What a run found, as plain text lines: tiers in rules order with their zones and
    breaks, the audit, proofs, failed fences and where the report is."""
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"{folder}: no such folder")
    path = folder / "summary.json"
    if not path.exists():
        alt = folder / "audit.json"
        if not alt.exists():
            raise InputError(f"{folder}: no summary.json or audit.json here; is it a zonedesign output folder?")
        path = alt
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except json.JSONDecodeError as exc:
        raise InputError(f"{path}: not valid JSON (line {exc.lineno}, column {exc.colno})") from None
    except UnicodeDecodeError as exc:
        raise InputError(f"{path}: not UTF-8 text (byte {exc.start})") from None
    if not isinstance(data, dict):
        raise InputError(f"{path}: not a zonedesign summary (expected a JSON object)")
    if path.name == "audit.json":
        s = RunSummary(command="audit", audit=AuditPart.read(data, Where(source=str(path)))).settle()
    else:
        s = RunSummary.from_json(data, source=str(path))
    return "\n".join(summary_lines(folder, s))


def summary_lines(folder: Path, s: RunSummary) -> list[str]:
    """The lines `show` prints for one run's summary record."""
    search = s.search or SearchPart()
    # two seeds can be in play: the demo's region seed (its map and counts) and the
    # search seed of the rules; each is named
    demo = s.demo or {}
    seed = f", demo region seed {demo['region_seed']}" if "region_seed" in demo else ""
    seed += f", search seed {search.seed}" if search.seed is not None else ""
    lines = [f"{folder}  ({s.command or '?'}, zonedesign {s.version or '?'}{seed})"]
    if s.areas is not None:
        a = s.areas
        lines.append(f"  areas: {a.count}, {a.fences_said()}, CRS {a.crs}")
        if a.overlaps_cut:
            lines.append(f"  overlaps cut: {len(a.overlaps_cut)} pair(s) "
                         f"({_first([f'{o.cut_from} gave to {o.kept_by}' for o in a.overlaps_cut])})")
        if a.duplicates_merged:
            merged = [f"{d.kept} took in " + " + ".join(map(str, d.merged)) for d in a.duplicates_merged]
            lines.append(f"  duplicates merged: {len(a.duplicates_merged)} ({_first(merged)})")
        if a.repaired_polygons:
            lines.append(f"  repaired polygons: {len(a.repaired_polygons)} ({_first(a.repaired_polygons)})")
    tiers = s.tiers or {}
    for name in s.tier_names:
        t = tiers.get(name)
        if t is None:
            continue
        within = ", ".join(f"{k} {v:.0%}" for k, v in (t.share_within_10pct_of_target or {}).items())
        pp = (t.polsby_popper or {}).get("median")
        lines.append(
            f"  tier {name}: {t.zones} zones, {t.bound_breaks} bound break(s)"
            + (f", within 10% of target: {within}" if within else "")
            + (f", median Polsby-Popper {pp:.2f}" if pp is not None else "")
        )
    changes = s.changes or {}
    order = [t for t in (s.tier_order or []) if t in changes] or list(changes)
    for name, c in ((t, changes[t]) for t in order):
        if c.share_changed is not None:
            lines.append(
                f"  changed in tier {name}: {c.share_changed:.1%} of previous zones "
                f"({_or_q(c.kept)} of {_or_q(c.previous_zones)} kept), "
                f"{_or_q(c.areas_moved)} areas moved"
                + (f", {c.codes_retired} code(s) retired" if c.codes_retired else "")
                + (f" (codes: {c.code_policy})" if c.code_policy else "")
            )
    lines += _sweep_lines(s)
    lines += _repair_line(s)
    if s.audit is not None:
        violations = s.audit.violations
        kinds: dict[str, int] = {}
        for v in violations:
            kinds[v.kind] = kinds.get(v.kind, 0) + 1
        by_kind = ", ".join(f"{n} {k}" for k, n in sorted(kinds.items()))
        lines.append(f"  audit: {'passed' if s.audit.ok else f'{len(violations)} violation(s) ({by_kind})'}")
        # bound breaks are listed below with their proofs; the other kinds are listed here
        other = [v for v in violations if v.kind != "bounds"]
        lines += [f"    {v.message if v.message is not None else v.to_json()}" for v in other[:SHOWN]]
        lines += _more(other)
    rows = [f for f in s.fences or [] if f.proof is not None]
    if rows:
        proven = [f for f in rows if f.proof == "optimal"]
        per_tier = ", ".join(f"{t} {sum(1 for f in proven if f.tier == t)}" for t in dict.fromkeys(
            f.tier for f in rows))
        lines.append(f"  exact: {len(proven)} of {len(rows)} fence-tiers proven optimal (per tier: {per_tier})")
    cert = s.certificate_counts
    if cert:
        verdict, counts = cert
        parts = ", ".join(f"{n} {w}" for w, n in counts.items() if n)
        lines.append(f"  certificate: {verdict} ({parts} of {len(s.certificate)} fence-tier models)")
    breaks = s.bound_breaks or []
    for b in breaks[:SHOWN]:
        lines.append(f"  break: tier {b.tier} zone {b.zone}: {b.breaks or ''}")
    lines += _more(breaks)
    proofs = s.proofs or []
    for p in proofs[:SHOWN]:
        lines.append(f"  proof ({solve_word(p.status or '')}): {p.text or ''}")
    lines += _more(proofs)
    for f in s.fence_failures or []:
        lines.append(f"  FAILED fence {f.fence} tier {f.tier}: {f.error}")
    report = folder / "report.html"
    if report.exists():
        lines.append(f"  report: {report}")
    why = s.outcome.reasons if s.outcome is not None and s.exit_code else ()
    lines.append(f"  exit code of the run: {_or_q(s.exit_code)}" + (f" ({', '.join(why)})" if why else ""))
    return lines


def _or_q(value: object) -> object:
    return "?" if value is None else value


def _sweep_lines(s: RunSummary) -> list[str]:
    sweep = s.sweep
    rows = [r for r in sweep.variants if isinstance(r, dict)] if sweep is not None else []
    if not rows:
        return []
    keys = sweep.varied
    out = [f"  sweep: {len(rows)} variant(s) of {', '.join(keys)}"]
    for r in rows[:SHOWN * 2]:
        values = ", ".join(f"{k}={r.get(k)}" for k in keys)
        if not r.get("valid", True):
            out.append(f"    {r.get('variant')}: {values}: not run: {r.get('problem')}")
            continue
        zones = ", ".join(f"{n} {r[f'zones.{n}']}" for n in s.tier_names if f"zones.{n}" in r)
        audit = "audit passed" if r.get("audit_ok") else "audit failed"
        out.append(f"    {r.get('variant')}: {values}: zones {zones}; {r.get('bound_breaks', '?')} bound break(s), {audit}"
                   f" (variants/{r.get('name')})")
    return out


def _first(items: list) -> str:
    shown = ", ".join(map(str, items[:5]))
    return shown + (f" and {len(items) - 5} more" if len(items) > 5 else "")


def _more(items: list) -> list[str]:
    return [f"    ... and {len(items) - SHOWN} more (see summary.json)"] if len(items) > SHOWN else []


def _repair_line(s: RunSummary) -> list[str]:
    """One line on an audit's repair: method, moves, whether proven fewest, where it is."""
    rep = s.repair
    if rep is None:
        return []
    proven = "proven fewest" if rep.proven_fewest else "not proven fewest"
    passes = "passes" if rep.repaired_lookup_passes else "does not pass"
    left, forced = rep.breaks_left, rep.breaks_left_forced
    if left and forced == left:
        passes = f"keeps only the {left} break(s) proven forced (see the proofs); it does not pass"
    elif left and forced:
        passes = f"keeps {left} break(s), {forced} of them proven forced; it does not pass"
    where = f", in {rep.folder}/" if rep.folder else ""
    word = solve_word(rep.status or "")
    return [f"  repair: {word}, {rep.method or '?'}, {_or_q(rep.moves)} area move(s) ({proven}); "
            f"the repaired hierarchy {passes} the audit{where}"]
