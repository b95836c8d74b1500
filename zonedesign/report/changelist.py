"""Report parts of a redraw and a repair: the code policy, every changed zone with its
reason, and the repair's method, proof status and moves."""

from __future__ import annotations

from typing import Any

import pandas as pd

from zonedesign.report.format import esc, html_table, num
from zonedesign.report.style import KIND_STYLE, KIND_WORDS
from zonedesign.report.svgmap import MAP_BYTES, MAX_ZONES_PER_MAP, element_id, zone_map
from zonedesign.summaryparts import RepairPart
from zonedesign.summaryrecord import RunSummary

POLICY_WORDS = {
    "successor": (
        "Codes carry on by succession: each previous code passes to the one new zone holding the "
        "largest share of the previous zone's published count (ties: most areas, then the lowest "
        "new zone), each new zone takes at most one code, and a zone claimed by two previous codes "
        "takes the one with the larger share in it; the other retires."
    ),
    "fresh": "Codes are fresh: only a zone holding exactly the areas of a previous zone keeps its code.",
}
NEW_CODES = (
    "A zone without a previous code gets the next free number in its fence and tier, after every "
    "code the previous lookup holds there, so a retired code is never handed out again. An area "
    "moved is an area whose zone's code changed; every count of moved areas here, in summary.json, "
    "changes.csv and area_changes.csv counts it so."
)


def policy_note(summary: RunSummary) -> str:
    """The code policy and the stability weights the redraw used, in words."""
    info = summary.redraw
    if info is None:
        return ""
    policy = str(info.code_policy or "")
    out = [f'<p id="code-policy">{esc(POLICY_WORDS.get(policy, f"Code policy: {policy}."))} {esc(NEW_CODES)}</p>']
    weights = info.stability or {}
    if weights:
        parts = ", ".join(f"tier {t}: {'off' if float(w) == 0 else num(w)}" for t, w in weights.items())
        out.append(f"<p>Stability weight used: {esc(parts)} (0 switches stability off).</p>")
    return "".join(out)


def change_list(changes: pd.DataFrame | None) -> str:
    """Every zone that is not kept and every retired code, with its reason."""
    if changes is None or changes.empty or "reason" not in changes:
        return ""
    rows = changes[changes["kind"].astype(str) != "kept"]
    if rows.empty:
        return "<p>Every previous zone is kept with its code.</p>"
    cols = ["tier", "kind", "old_codes", "new_code", "successors", "areas_in", "areas_out", "reason"]
    cols = [c for c in cols if c in rows]
    body = [[r[c] for c in cols] for r in rows.to_dict("records")]
    return html_table(
        "Zones changed and codes retired, with the reason for each",
        [c.replace("_", " ") for c in cols],
        body,
    )


def repair_effects(changes: pd.DataFrame) -> dict[str, dict[str, str]]:
    """Per tier, what a repair does to each audited zone it touches (by code): its kind of
    change while it keeps its code, or "retired"; zones left out are untouched."""
    out: dict[str, dict[str, str]] = {}
    for r in changes.to_dict("records") if changes is not None and not changes.empty else []:
        if r["kind"] == "kept":
            continue
        if r["kind"] == "retired":
            out.setdefault(str(r["tier"]), {})[str(r["old_codes"])] = "retired"
        elif str(r["new_code"]) in str(r["old_codes"]).split(";"):
            out.setdefault(str(r["tier"]), {})[str(r["new_code"])] = str(r["kind"])
    return out


def repair_maps(run: Any, effects: dict) -> str:
    """The audited zones of each tier the repair touches, drawn by what it does to them,
    fence by fence where it acts (the fences it leaves alone are not drawn)."""
    out = []
    for tier, kinds in effects.items():
        if tier not in run.layers or not kinds:
            continue
        df = run.frame(tier)
        fences = df["fence"].astype(str) if "fence" in df else pd.Series([""] * len(df))
        touched = set(fences[df["zone"].isin(list(kinds))])
        part = df[fences.isin(touched).to_numpy()]
        if part.empty or len(part) > MAX_ZONES_PER_MAP:
            continue
        zones = part["zone"].to_numpy()
        kind = [kinds.get(z, "kept") for z in zones]
        classes = [f"k-{k}" if k in KIND_STYLE else "k-other" for k in kind]
        titles = [
            f"zone {z} · tier {tier}\n"
            + ("retired by the repair" if k == "retired" else KIND_WORDS.get(k, k) if k != "kept" else "untouched by the repair")
            for z, k in zip(zones, kind)
        ]
        drawn = zone_map(
            part["geometry"].to_numpy(),
            element_ids=[element_id("repair", tier, z) for z in zones],
            classes=classes, titles=titles, data={"zone": zones, "tier": [tier] * len(zones), "change": kind},
            fences=part["fence"].to_numpy() if "fence" in part else None,
            label=f"Repair in tier {tier}", svg_id=f"repair-map-{tier}",
        )
        if len(drawn.svg) > MAP_BYTES:
            continue
        out.append(
            f'<figure class="map">{drawn.svg}<figcaption>{esc(f"Tier {tier}: the audited zones the repair touches, by what it does to them (unhatched white: retired); fences it leaves alone are not drawn")}</figcaption></figure>'
        )
    return "".join(out)


def repair_section(run: Any) -> str:
    """An audit's repair: method, whether its moves are proven fewest, moves per tier, and
    the audited zones it touches on a map."""
    rep = run.summary.repair
    if rep is None:
        return ""
    proven = bool(rep.proven_fewest)
    out = [
        f"<p>Method: {esc(rep.method or '?')}. Status: {esc(rep.status or '?')}. "
        + ("The number of moves is proven the fewest that mend every break."
           if proven else "The number of moves is <strong>not</strong> proven the fewest.")
        + f" {esc(num(rep.moves or 0))} area move(s) in all; the repaired hierarchy "
        + ("passes" if rep.repaired_lookup_passes else "does <strong>not</strong> pass")
        + " the independent audit"
        + _left_words(rep)
        + ".</p>"
    ]
    moved = rep.moved_per_tier or {}
    if moved:
        out.append(html_table("Areas moved by the repair, per tier", ["tier", "areas moved"],
                              [[t, n] for t, n in moved.items()]))
    effects = rep.zones or {}
    if effects and getattr(run, "layers", None):
        out.append(repair_maps(run, effects))
    if rep.folder:
        out.append(
            f'<p>The repaired hierarchy is a full output in <a href="{esc(rep.folder)}/report.html">'
            f"{esc(rep.folder)}/</a> (lookup.csv, zones.gpkg, changes.csv, area_changes.csv); its "
            "report draws the moves on a map, zone by zone, by kind of change.</p>"
        )
    return "".join(out)


def _left_words(rep: RepairPart) -> str:
    """What the repaired hierarchy still breaks, and how much of it the proofs show forced."""
    left, forced = rep.breaks_left, rep.breaks_left_forced or 0
    if not left:
        return ""
    if forced == left:
        return f": it keeps only the {esc(num(left))} break(s) the proofs show no zoning can mend"
    return f": it keeps {esc(num(left))} break(s), {esc(num(forced))} of them shown forced by the proofs"
