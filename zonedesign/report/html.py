"""The run report: one self-contained HTML file that opens offline.

Everything is inline: styles, a few lines of script for the map tooltip, maps as SVG,
charts as data URIs. A Content-Security-Policy forbids any fetch, so a report can be
opened anywhere without reaching the network.

Size budget: the file stays under `REPORT_BYTES` (8 MB) whatever the run's size.
- Maps share `MAPS_BYTES` (6 MB); one tier's maps get at most `svgmap.MAP_BYTES` (2.5 MB).
  Tiers are budgeted from the top down, so upper tiers (few, large zones) are always drawn.
- A tier of more than `svgmap.MAX_ZONES_PER_MAP` (3,000) zones, or whose map is larger
  than its share, is drawn fence by fence in collapsible sections while its share lasts
  (fences holding rule breaks first); fences past it, and whole tiers when nothing fits,
  are named in a line saying why they were left out. Change maps of a redraw come after
  the tier maps, from what is left.
- Long tables stop at `format.TABLE_ROWS` rows and say how many were left out; the Zones
  section lists every tier: all zones of a tier of at most `plan.ZONE_LIST_ROWS` zones, else
  the zones that break a rule and the `plan.DEVIATION_ROWS` zones furthest from their target,
  with a sentence pointing to zones.gpkg. summary.json, violations.csv and zones.gpkg always
  hold everything.
- Maps zoom with the wheel (or + and -), pan by dragging (or the arrow keys) and show a
  zone's code and figures on hover; the one inline script is allowed by its hash in the
  content security policy.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

import pandas as pd

from zonedesign.glossary import CAUTION
from zonedesign.report.format import esc
from zonedesign.report.plan import MAPS_BYTES, REPORT_BYTES, ReportPlan
from zonedesign.report.sections import SECTIONS, headline
from zonedesign.report.style import SCRIPT, SCRIPT_HASH, css, defs
from zonedesign.summaryrecord import RunSummary

__all__ = ["DEFAULT_CAUTION", "MAPS_BYTES", "REPORT_BYTES", "render_report", "write_report"]

DEFAULT_CAUTION = CAUTION  # a summary without its own caution still carries it


def write_report(
    path: Path | str,
    *,
    summary: RunSummary | Mapping[str, Any],
    tables: Mapping[str, pd.DataFrame],
    layers: Mapping[str, Any],
    graph: Mapping[str, Iterable[tuple[str, str]]] | None = None,
    changes: pd.DataFrame | None = None,
) -> None:
    """Write the run's report to `path` (UTF-8 HTML, self-contained).

    summary: the run's summary record (a mapping, such as summary.json's content, is read
    as a partial summary: what it lacks is left out of the report); tables: zone table per tier, bottom first;
    layers: the same zones with geometry (projected CRS); graph: optional extra
    (zone, zone) pairs per tier that count as neighbours when colouring (declared links);
    changes: a redraw's change table. A sweep has its own page (report.sweepreport).
    """
    text = render_report(
        summary=summary,
        tables=tables,
        layers=layers,
        graph=graph,
        changes=changes,
    )
    Path(path).write_text(text, encoding="utf-8")


def render_report(
    *,
    summary: RunSummary | Mapping[str, Any],
    tables: Mapping[str, pd.DataFrame],
    layers: Mapping[str, Any],
    graph: Mapping[str, Iterable[tuple[str, str]]] | None = None,
    changes: pd.DataFrame | None = None,
) -> str:
    """The report as one HTML string (see `write_report`)."""
    plan = ReportPlan(
        summary=summary if isinstance(summary, RunSummary)
        else RunSummary.from_json(summary or {}, source="the report's summary", partial=True),
        tables=dict(tables or {}),
        layers=dict(layers or {}),
        links=dict(graph or {}),
        changes=changes,
    )
    plan.prepare()
    contents, body = render_sections(SECTIONS, plan)
    command = str(plan.summary.command or "run")
    caution = str(plan.summary.caution or DEFAULT_CAUTION)
    return page(command, caution, headline(plan), contents, body, plan.n_colours)


def render_sections(sections, plan) -> tuple[list[str], list[str]]:
    """Contents entries and section HTML; an empty section is left out of both."""
    body = []
    contents = []
    for ident, title, make in sections:
        try:
            inner = make(plan)
        except Exception as exc:  # noqa: BLE001 - one broken section must not cost the whole report
            inner = f'<p class="note">This section could not be drawn: {esc(type(exc).__name__)}: {esc(exc)}</p>'
        if not inner:
            continue
        contents.append(f'<li><a href="#{ident}">{esc(title)}</a></li>')
        body.append(
            f'<section id="{ident}" aria-labelledby="{ident}-h">'
            f'<h2 id="{ident}-h">{esc(title)}</h2>{inner}</section>'
        )
    return contents, body


def page(command: str, caution: str, headline_html: str, contents: list[str], body: list[str],
         n_colours: int, *, wide: bool = False) -> str:
    """The page around the sections: strict content security policy, style, script."""
    body_class = ' class="wide"' if wide else ""
    head = (
        "<!DOCTYPE html>\n"
        '<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        # no fetch of any kind: the report must open the same offline; the one inline
        # script is allowed by its hash, never by 'unsafe-inline'
        '<meta http-equiv="Content-Security-Policy" content="default-src \'none\'; '
        f"img-src data:; style-src 'unsafe-inline'; script-src '{SCRIPT_HASH}'\">"
        f"<title>zonedesign {esc(command)} report</title>"
        f"<style>{css(n_colours)}</style></head><body{body_class}>"
    )
    top = (
        f"<header><h1>zonedesign {esc(command)} report</h1>"
        f'<div class="caution" role="note"><strong>Caution.</strong> {esc(caution)}</div>'
        f"{headline_html}</header>"
        f'<nav aria-label="Contents"><ul>{"".join(contents)}</ul></nav>'
    )
    tail = f'<div id="tip" role="tooltip" hidden></div><script>{SCRIPT}</script></body></html>\n'
    return head + defs(n_colours) + top + "<main>" + "".join(body) + "</main>" + tail
