"""The report's sections on what went in and how the run went: input, rules, run details."""

from __future__ import annotations

from zonedesign.report.format import (
    TABLE_ROWS,
    dicts,
    esc,
    html_table,
    num,
    text_of,
)
from zonedesign.report.plan import ReportPlan
from zonedesign.summaryparts import AreasPart, GraphPart, Override


def _mended(areas: AreasPart) -> list[str]:
    """Every duplicate merged and every overlap cut under overlaps = "cut"."""
    out = []
    merged = areas.duplicates_merged
    if merged:
        rows = "".join(
            f"<tr><td>{esc(d.kept)}</td><td>{esc(', '.join(map(str, d.merged or [])))}</td>"
            f"<td>{esc(_counts_before(d.counts or {}))}</td></tr>"
            for d in merged[:TABLE_ROWS]
        )
        out.append(
            '<h3 id="input-duplicates">Duplicate polygons merged</h3><table><thead><tr><th>kept id</th>'
            f"<th>merged into it</th><th>counts before</th></tr></thead><tbody>{rows}</tbody></table>"
        )
    cut = areas.overlaps_cut
    if cut:
        rows = "".join(
            f"<tr><td>{esc(c.kept_by)}</td><td>{esc(c.cut_from)}</td>"
            f"<td>{float(c.overlap_m2 or 0.0):.6g}</td></tr>"
            for c in cut[:TABLE_ROWS]
        )
        out.append(
            '<h3 id="input-overlaps">Overlaps cut</h3><table><thead><tr><th>kept by</th><th>cut from</th>'
            f"<th>overlap (m2)</th></tr></thead><tbody>{rows}</tbody></table>"
        )
    return out


def _counts_before(counts: dict) -> str:
    return "; ".join(f"{k}: " + ", ".join(f"{c} {num(x)}" for c, x in v.items()) for k, v in counts.items())


def _overrides(overrides: dict[str, list[Override]] | None) -> list[str]:
    """The per-fence bounds of [[tier.override]], beside the tiers' own."""
    if not overrides:
        return []
    rows = []
    for tier, items in overrides.items():
        for o in items:
            given = "; ".join(
                f"{name} " + ", ".join(f"{c} {num(v)}" for c, v in (values or {}).items())
                for name, values in (("min", o.min), ("max", o.max), ("target", o.target), ("weights", o.weights))
                if values
            )
            rows.append(
                f"<tr><td>{esc(tier)}</td><td>{esc(', '.join(map(str, o.fences or [])))}</td>"
                f"<td>{esc(given)}</td></tr>"
            )
    return [
        '<h3 id="input-overrides">Bounds that apply in some fences only</h3><table><thead><tr><th>tier</th>'
        f"<th>fences</th><th>in place of the tier's own</th></tr></thead><tbody>{''.join(rows)}</tbody></table>"
    ]


def _codes_text(codes: object) -> str | None:
    if not isinstance(codes, list) or not codes or codes == ["all"]:
        return None
    shown = ", ".join(map(str, codes[:40]))
    return shown + (f" and {len(codes) - 40:,} more" if len(codes) > 40 else "")


def input_section(run: ReportPlan) -> str:
    s = run.summary
    out = []
    areas = s.areas or AreasPart()
    graph = s.graph or GraphPart()
    facts = []
    for label, value in (
        ("Input files", ", ".join(map(str, s.inputs)) if s.inputs else None),
        ("Areas", num(areas.count) if areas.count is not None else None),
        ("Coordinate reference system", areas.crs),
        ("Why this CRS", areas.crs_choice),
        ("Fences", areas.fences_said() if areas.fences is not None else None),
        ("Fence codes", _codes_text(areas.fence_codes)),
        ("Contiguity", graph.contiguity),
        ("Neighbour pairs", num(graph.edges) if graph.edges is not None else None),
        ("Declared links", num(graph.links) if graph.links is not None else None),
    ):
        if value not in (None, ""):
            facts.append(f"<dt>{esc(label)}</dt><dd>{esc(value)}</dd>")
    if facts:
        out.append(f'<dl class="facts">{"".join(facts)}</dl>')
    notes = areas.notes or []
    if notes:
        out.append(
            '<h3 id="input-notes">Notes from reading the input</h3><ul>'
            + "".join(f"<li>{esc(n)}</li>" for n in notes[:TABLE_ROWS])
            + "</ul>"
        )
    out += _mended(areas)
    out += _overrides(s.overrides)
    repaired = areas.repaired_polygons
    if repaired:
        shown = ", ".join(map(str, repaired[:200])) + (
            f" and {len(repaired) - 200:,} more" if len(repaired) > 200 else ""
        )
        out.append(
            f'<h3 id="input-repaired">Repaired polygons</h3><p>{len(repaired):,} invalid polygon(s) were repaired before use: {esc(shown)}.</p>'
        )
    islands = dicts(graph.islands)
    if islands:
        cols = list(dict.fromkeys(k for d in islands for k in d))
        rows = [[text_of(d.get(k)) for k in cols] for d in islands]
        out.append(
            '<h3 id="input-islands">Islands</h3><p>Parts of a fence with no neighbour path to the rest of it.</p>'
        )
        out.append(html_table("Islands found in the area graph", cols, rows))
    elif graph.islands is not None:
        out.append("<p>No islands: every fence's areas are connected.</p>")
    return "".join(out)


def rules_section(run: ReportPlan) -> str:
    text = run.summary.rules
    if not text:
        return ""
    return f'<pre class="rules" aria-label="Rules file">{esc(text)}</pre>'


def run_details(run: ReportPlan) -> str:
    s = run.summary
    out = []
    search = s.search.to_json() if s.search is not None else {}
    if search:
        rows = "".join(f"<dt>{esc(k)}</dt><dd>{esc(text_of(v))}</dd>" for k, v in search.items())
        out.append(f'<h3 id="run-search">Search</h3><dl class="facts">{rows}</dl>')
    versions = s.versions
    if isinstance(versions, dict) and versions:
        out.append('<h3 id="run-versions">Software</h3>')
        out.append(
            html_table(
                "Software versions",
                ["package", "version"],
                [[k, v] for k, v in versions.items()],
                row_headers=True,
            )
        )
    seconds = s.seconds
    if isinstance(seconds, dict) and seconds:
        out.append('<h3 id="run-times">Run times</h3>')
        out.append(
            html_table(
                "Seconds per phase",
                ["phase", "seconds"],
                [[k, num(v)] for k, v in seconds.items()],
                row_headers=True,
            )
        )
    return "".join(out)
