"""`zonedesign show DIR`: a terminal summary of an output folder."""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

from zonedesign.errors import InputError
from zonedesign.status import certificate_verdict, solve_word

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
        s = json.loads(path.read_text(encoding="utf-8"))
    except json.JSONDecodeError as exc:
        raise InputError(f"{path}: not valid JSON (line {exc.lineno}, column {exc.colno})") from None
    except UnicodeDecodeError as exc:
        raise InputError(f"{path}: not UTF-8 text (byte {exc.start})") from None
    if not isinstance(s, dict):
        raise InputError(f"{path}: not a zonedesign summary (expected a JSON object)")
    if path.name == "audit.json":
        s = {"command": "audit", "audit": s}

    search = s.get("search") or {}
    # two seeds can be in play: the demo's region seed (its map and counts) and the
    # search seed of the rules; each is named
    demo = s.get("demo") or {}
    seed = f", demo region seed {demo['region_seed']}" if "region_seed" in demo else ""
    seed += f", search seed {search['seed']}" if "seed" in search else ""
    lines = [f"{folder}  ({s.get('command', '?')}, zonedesign {s.get('zonedesign', '?')}{seed})"]
    areas = s.get("areas") or {}
    if areas:
        per_tier = areas.get("fences_per_tier") or {}
        if len(set(per_tier.values())) > 1:  # tiers keep to fences of their own
            fences = "fences per tier: " + ", ".join(f"{t} {k}" for t, k in per_tier.items())
            lines.append(f"  areas: {areas.get('count')}, {fences}, CRS {areas.get('crs')}")
        else:
            lines.append(f"  areas: {areas.get('count')} in {areas.get('fences')} fence(s), CRS {areas.get('crs')}")
        repaired = areas.get("repaired_polygons") or []
        if repaired:
            lines.append(f"  repaired polygons: {len(repaired)} ({_first(repaired)})")
    tiers = s.get("tiers") or {}
    for name in tier_order(s):
        t = tiers.get(name)
        if t is None:
            continue
        within = ", ".join(f"{k} {v:.0%}" for k, v in (t.get("share_within_10pct_of_target") or {}).items())
        pp = (t.get("polsby_popper") or {}).get("median")
        lines.append(
            f"  tier {name}: {t.get('zones')} zones, {t.get('bound_breaks')} bound break(s)"
            + (f", within 10% of target: {within}" if within else "")
            + (f", median Polsby-Popper {pp:.2f}" if pp is not None else "")
        )
    changes = s.get("changes") or {}
    order = [t for t in (s.get("tier_order") or []) if t in changes] or list(changes)
    for name, c in ((t, changes[t]) for t in order):
        if isinstance(c, dict) and "share_changed" in c:
            lines.append(
                f"  changed in tier {name}: {c['share_changed']:.1%} of previous zones "
                f"({c.get('kept', '?')} of {c.get('previous_zones', '?')} kept), "
                f"{c.get('areas_moved', '?')} areas moved"
                + (f", {c['codes_retired']} code(s) retired" if c.get("codes_retired") else "")
                + (f" (codes: {c['code_policy']})" if c.get("code_policy") else "")
            )
    lines += _sweep_lines(s)
    lines += _repair_line(s)
    audit = s.get("audit") or {}
    if audit:
        violations = [v for v in audit.get("violations") or [] if isinstance(v, dict)]
        kinds: dict[str, int] = {}
        for v in violations:
            kinds[str(v.get("kind", "?"))] = kinds.get(str(v.get("kind", "?")), 0) + 1
        by_kind = ", ".join(f"{n} {k}" for k, n in sorted(kinds.items()))
        lines.append(f"  audit: {'passed' if audit.get('ok') else f'{len(violations)} violation(s) ({by_kind})'}")
        # bound breaks are listed below with their proofs; the other kinds are listed here
        other = [v for v in violations if v.get("kind") != "bounds"]
        lines += [f"    {v.get('message', v)}" for v in other[:SHOWN]]
        lines += _more(other)
    rows = [f for f in s.get("fences") or [] if isinstance(f, dict) and "proof" in f]
    if rows:
        proven = [f for f in rows if f.get("proof") == "optimal"]
        per_tier = ", ".join(f"{t} {sum(1 for f in proven if f.get('tier') == t)}" for t in dict.fromkeys(
            str(f.get("tier")) for f in rows))
        lines.append(f"  exact: {len(proven)} of {len(rows)} fence-tiers proven optimal (per tier: {per_tier})")
    cert = [c for c in s.get("certificate") or [] if isinstance(c, dict)]
    if cert:
        verdict, counts = certificate_verdict(cert)
        parts = ", ".join(f"{n} {w}" for w, n in counts.items() if n)
        lines.append(f"  certificate: {verdict} ({parts} of {len(cert)} fence-tier models)")
    breaks = s.get("bound_breaks") or []
    for b in breaks[:SHOWN]:
        lines.append(f"  break: tier {b['tier']} zone {b['zone']}: {b.get('breaks', '')}")
    lines += _more(breaks)
    proofs = s.get("proofs") or []
    for p in proofs[:SHOWN]:
        lines.append(f"  proof ({solve_word(p.get('status', ''))}): {p.get('text', '')}")
    lines += _more(proofs)
    for f in s.get("fence_failures") or []:
        lines.append(f"  FAILED fence {f['fence']} tier {f['tier']}: {f['error']}")
    report = folder / "report.html"
    if report.exists():
        lines.append(f"  report: {report}")
    lines.append(f"  exit code of the run: {s.get('exit_code', '?')}")
    return "\n".join(lines)


def tier_order(summary: dict) -> list[str]:
    """Tier names bottom first, as the rules list them."""
    order = summary.get("tier_order")
    if isinstance(order, list) and order:
        return [str(x) for x in order]
    try:
        tiers = tomllib.loads(summary.get("rules") or "").get("tier") or []
        names = [str(t["name"]) for t in tiers if isinstance(t, dict) and "name" in t]
    except (tomllib.TOMLDecodeError, TypeError):
        names = []
    if names:
        return names
    seen = dict.fromkeys(str(f.get("tier")) for f in summary.get("fences") or [] if isinstance(f, dict))
    return list(seen) or list(summary.get("tiers") or {})


def _sweep_lines(s: dict) -> list[str]:
    sweep = s.get("sweep") or {}
    rows = sweep.get("variants") or []
    if not rows:
        return []
    keys = [k for axis in sweep.get("vary") or [] if isinstance(axis, dict) for k in axis.get("keys", [])]
    out = [f"  sweep: {len(rows)} variant(s) of {', '.join(keys)}"]
    for r in rows[:SHOWN * 2]:
        values = ", ".join(f"{k}={r.get(k)}" for k in keys)
        if not r.get("valid", True):
            out.append(f"    {r.get('variant')}: {values}: not run: {r.get('problem')}")
            continue
        zones = ", ".join(f"{n} {r[f'zones.{n}']}" for n in tier_order(s) if f"zones.{n}" in r)
        audit = "audit passed" if r.get("audit_ok") else "audit failed"
        out.append(f"    {r.get('variant')}: {values}: zones {zones}; {r.get('bound_breaks', '?')} bound break(s), {audit}"
                   f" (variants/{r.get('name')})")
    return out


def _first(items: list) -> str:
    shown = ", ".join(map(str, items[:5]))
    return shown + (f" and {len(items) - 5} more" if len(items) > 5 else "")


def _more(items: list) -> list[str]:
    return [f"    ... and {len(items) - SHOWN} more (see summary.json)"] if len(items) > SHOWN else []


def _repair_line(s: dict) -> list[str]:
    """One line on an audit's repair: method, moves, whether proven fewest, where it is."""
    rep = s.get("repair")
    if not isinstance(rep, dict):
        return []
    proven = "proven fewest" if rep.get("proven_fewest") else "not proven fewest"
    passes = "passes" if rep.get("repaired_lookup_passes") else "does not pass"
    left, forced = rep.get("breaks_left"), rep.get("breaks_left_forced")
    if left and forced == left:
        passes = f"keeps only the {left} break(s) proven forced (see the proofs); it does not pass"
    elif left and forced:
        passes = f"keeps {left} break(s), {forced} of them proven forced; it does not pass"
    where = f", in {rep['folder']}/" if rep.get("folder") else ""
    word = solve_word(rep.get("status", ""))
    return [f"  repair: {word}, {rep.get('method', '?')}, {rep.get('moves', '?')} area move(s) ({proven}); "
            f"the repaired hierarchy {passes} the audit{where}"]
