"""Report parts of a redraw and a repair: the code policy, every changed zone with its
reason, and the repair's method, proof status and moves."""

from __future__ import annotations

import pandas as pd

from zonedesign.report.format import esc, html_table, num

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


def policy_note(summary: dict) -> str:
    """The code policy and the stability weights the redraw used, in words."""
    info = summary.get("redraw") if isinstance(summary.get("redraw"), dict) else None
    if not info:
        return ""
    policy = str(info.get("code_policy", ""))
    out = [f'<p id="code-policy">{esc(POLICY_WORDS.get(policy, f"Code policy: {policy}."))} {esc(NEW_CODES)}</p>']
    weights = info.get("stability") if isinstance(info.get("stability"), dict) else {}
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


def repair_section(summary: dict) -> str:
    """An audit's repair: method, whether its moves are proven fewest, moves per tier."""
    rep = summary.get("repair") if isinstance(summary.get("repair"), dict) else None
    if not rep:
        return ""
    proven = bool(rep.get("proven_fewest"))
    out = [
        f"<p>Method: {esc(rep.get('method', '?'))}. Status: {esc(rep.get('status', '?'))}. "
        + ("The number of moves is proven the fewest that mend every break."
           if proven else "The number of moves is <strong>not</strong> proven the fewest.")
        + f" {esc(num(rep.get('moves', 0)))} area move(s) in all; the repaired hierarchy "
        + ("passes" if rep.get("repaired_lookup_passes") else "does <strong>not</strong> pass")
        + " the independent audit.</p>"
    ]
    moved = rep.get("moved_per_tier") if isinstance(rep.get("moved_per_tier"), dict) else {}
    if moved:
        out.append(html_table("Areas moved by the repair, per tier", ["tier", "areas moved"],
                              [[t, n] for t, n in moved.items()]))
    if rep.get("folder"):
        out.append(
            f'<p>The repaired hierarchy is a full output in <a href="{esc(rep["folder"])}/report.html">'
            f"{esc(rep['folder'])}/</a> (lookup.csv, zones.gpkg, changes.csv, area_changes.csv); its "
            "report draws the moves on a map, zone by zone, by kind of change.</p>"
        )
    return "".join(out)
