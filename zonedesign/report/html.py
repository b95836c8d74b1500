"""The run report: one self-contained HTML file that opens offline.

Everything is inline: styles, a few lines of script for the map tooltip, maps as SVG,
charts as data URIs. A Content-Security-Policy forbids any fetch, so a report can be
opened anywhere without reaching the network.

Size budget: the file stays under `REPORT_BYTES` (8 MB) whatever the run's size.
- Maps share `MAPS_BYTES` (6 MB); one tier's maps get at most `svgmap.MAP_BYTES` (2.5 MB).
  Tiers are budgeted from the top down, so upper tiers (few, large zones) are always drawn.
- A tier of more than `svgmap.MAX_ZONES_PER_MAP` zones, or whose map is larger than its
  share, is drawn fence by fence in collapsible sections while its share lasts; fences
  past it (and whole tiers, when nothing fits) are named in a line saying why they were
  left out. Change maps of a redraw come after the tier maps, from what is left.
- Long tables stop at `TABLE_ROWS` rows and say how many rows were left out; zone lists
  show every zone of a tier of at most `ZONE_LIST_ROWS` zones, else only zones that break
  a rule. summary.json, violations.csv and zones.gpkg always hold everything.
"""

from __future__ import annotations

import html
import json
import math
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from zonedesign.report import charts
from zonedesign.report.colouring import PALETTE, WARNING, colour_zones, palette
from zonedesign.report.svgmap import MAP_BYTES, MAX_ZONES_PER_MAP, DrawnMap, element_id, frame_for, zone_map

REPORT_BYTES = 8_000_000
MAPS_BYTES = 6_000_000
TABLE_ROWS = 1000
ZONE_LIST_ROWS = 500
MIN_ZONE_BYTES = 120  # a drawn zone never costs less: used to skip fences that cannot fit

DEFAULT_CAUTION = (
    "Thresholds must follow your own statistical-disclosure-control rules. These results "
    "need review by the responsible statistician before publication."
)

CHANGE_KINDS = ("kept", "merged", "split", "reshaped", "new")
_KIND_STYLE = {
    # fill, pattern drawn over it; each kind differs in pattern as well as in colour
    "kept": ("#e4e1d9", ""),
    "merged": ("#a9c8e8", '<path d="M0 2h8M0 6h8" stroke="#2f4f6f" stroke-width="1"/>'),
    "split": ("#f2c48d", '<path d="M2 0v8M6 0v8" stroke="#7a4a12" stroke-width="1"/>'),
    "reshaped": ("#b5d6a7", '<circle cx="4" cy="4" r="1.3" fill="#2f5a25"/>'),
    "new": ("#d9b8e0", '<path d="M0 4h8M4 0v8" stroke="#5a2f66" stroke-width="1"/>'),
    "other": ("#ffffff", '<path d="M0 8L8 0" stroke="#555" stroke-width="0.8"/>'),
}
_KIND_WORDS = {
    "kept": "kept: same areas as before",
    "merged": "merged: two or more previous zones joined",
    "split": "split: part of a previous zone",
    "reshaped": "reshaped: a previous zone with areas moved in or out",
    "new": "new: no previous zone behind it",
    "other": "other",
}


def write_report(
    path: Path | str,
    *,
    summary: Mapping[str, Any],
    tables: Mapping[str, pd.DataFrame],
    layers: Mapping[str, Any],
    graph: Mapping[str, Iterable[tuple[str, str]]] | None = None,
    changes: pd.DataFrame | None = None,
    sweep: pd.DataFrame | None = None,
    sweep_charts: Mapping[str, bytes] | None = None,
) -> None:
    """Write the run's report to `path` (UTF-8 HTML, self-contained).

    `graph` may map a tier to extra (zone, zone) pairs that count as neighbours when
    colouring, such as zones joined by a declared link.
    """
    text = render_report(
        summary=summary, tables=tables, layers=layers, graph=graph,
        changes=changes, sweep=sweep, sweep_charts=sweep_charts,
    )
    Path(path).write_text(text, encoding="utf-8")


def render_report(
    *,
    summary: Mapping[str, Any],
    tables: Mapping[str, pd.DataFrame],
    layers: Mapping[str, Any],
    graph: Mapping[str, Iterable[tuple[str, str]]] | None = None,
    changes: pd.DataFrame | None = None,
    sweep: pd.DataFrame | None = None,
    sweep_charts: Mapping[str, bytes] | None = None,
) -> str:
    """The report as one HTML string (see `write_report`)."""
    run = _Run(
        summary=dict(summary or {}),
        tables=dict(tables or {}),
        layers=dict(layers or {}),
        links=dict(graph or {}),
        changes=changes,
        sweep=sweep,
        sweep_charts=dict(sweep_charts or {}),
    )
    run.prepare()
    sections: list[tuple[str, str, Callable[[_Run], str]]] = [
        ("overview", "At a glance", _overview),
        ("maps", "Maps", _maps),
        ("changes", "Changes since the previous zones", _changes),
        ("distributions", "Distributions", _distributions),
        ("sweep", "Variants compared", _sweep),
        ("tiers", "Tiers", _tiers),
        ("zones", "Zones", _zones),
        ("fences", "Fences", _fences),
        ("violations", "Rule breaks", _violations),
        ("certificate", "Certificate and proofs", _certificate),
        ("input", "Input", _input),
        ("rules", "Rules used", _rules),
        ("run", "Run", _run_details),
    ]
    body = []
    contents = []
    for ident, title, make in sections:
        try:
            inner = make(run)
        except Exception as exc:  # noqa: BLE001 - one broken section must not cost the report
            inner = f'<p class="note">This section could not be drawn: {_e(type(exc).__name__)}: {_e(str(exc))}</p>'
        if not inner:
            continue
        contents.append(f'<li><a href="#{ident}">{_e(title)}</a></li>')
        body.append(f'<section id="{ident}" aria-labelledby="{ident}-h"><h2 id="{ident}-h">{_e(title)}</h2>{inner}</section>')
    command = str(run.summary.get("command", "run"))
    caution = str(run.summary.get("caution") or DEFAULT_CAUTION)
    head = (
        "<!DOCTYPE html>\n"
        '<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        '<meta http-equiv="Content-Security-Policy" content="default-src \'none\'; '
        "img-src data:; style-src 'unsafe-inline'; script-src 'unsafe-inline'\">"
        f"<title>zonedesign {_e(command)} report</title>"
        f"<style>{_css(run.n_colours)}</style></head><body>"
    )
    top = (
        f'<header><h1>zonedesign {_e(command)} report</h1>'
        f'<div class="caution" role="note"><strong>Caution.</strong> {_e(caution)}</div>'
        f"{_headline(run)}</header>"
        f'<nav aria-label="Contents"><ul>{"".join(contents)}</ul></nav>'
    )
    tail = (
        '<div id="tip" role="tooltip" hidden></div>'
        f"<script>{_SCRIPT}</script></body></html>\n"
    )
    return head + _defs(run.n_colours) + top + "<main>" + "".join(body) + "</main>" + tail


# ---------------------------------------------------------------- the run's data


@dataclass
class _TierMaps:
    tier: str
    full: DrawnMap | None = None
    per_fence: list[tuple[str, DrawnMap, int]] = field(default_factory=list)  # fence, map, breaks
    left_out: list[str] = field(default_factory=list)  # fences not drawn
    note: str = ""
    drawn: set[str] = field(default_factory=set)
    bytes: int = 0


@dataclass
class _Run:
    summary: dict
    tables: dict[str, pd.DataFrame]
    layers: dict[str, Any]
    links: dict
    changes: pd.DataFrame | None
    sweep: pd.DataFrame | None
    sweep_charts: dict[str, bytes]
    tiers: list[str] = field(default_factory=list)
    limits: dict = field(default_factory=dict)
    counts: list[str] = field(default_factory=list)
    problems: dict[tuple[str, str], list[str]] = field(default_factory=dict)
    maps: dict[str, _TierMaps] = field(default_factory=dict)
    change_maps: dict[str, tuple[DrawnMap | None, str]] = field(default_factory=dict)
    kinds: dict[str, dict[str, str]] = field(default_factory=dict)
    listed: dict[str, set[str]] = field(default_factory=dict)
    n_colours: int = len(PALETTE)

    def prepare(self) -> None:
        self.tiers = list(dict.fromkeys(list(self.tables) + list(self.layers)))
        self.limits = charts.limits_from_rules(self.summary.get("rules"), self.tiers)
        self.counts = _count_columns(self.tables)
        self._collect_problems()
        self._collect_kinds()
        self._plan_listing()
        self._plan_maps()

    def frame(self, tier: str) -> pd.DataFrame:
        """The tier's zones with figures and geometry (geometry None when no layer)."""
        table = self.tables.get(tier)
        layer = self.layers.get(tier)
        if layer is None:
            df = table.copy() if table is not None else pd.DataFrame({"zone": []})
            df["geometry"] = None
        else:
            df = pd.DataFrame(layer).copy()
            geom_col = getattr(layer, "geometry", None)
            df["geometry"] = np.asarray(geom_col.values if geom_col is not None else df.get("geometry"), dtype=object)
            if table is not None and "zone" in table and "zone" in df:
                missing = [c for c in table.columns if c not in df.columns]
                if missing:
                    extra = table[["zone", *missing]].astype({"zone": str})
                    df = df.astype({"zone": str}).merge(extra, on="zone", how="left")
        if "zone" not in df:
            df["zone"] = [str(i) for i in range(len(df))]
        df["zone"] = df["zone"].astype(str)
        if "fence" in df:
            df["fence"] = df["fence"].astype(str)
        return df.reset_index(drop=True)

    def _collect_problems(self) -> None:
        def add(tier: Any, zone: Any, text: Any) -> None:
            if tier in (None, "") or zone in (None, ""):
                return
            key = (str(tier), str(zone))
            msgs = self.problems.setdefault(key, [])
            if text and str(text) not in msgs:
                msgs.append(str(text))

        for tier, table in self.tables.items():
            if "bound_break" in table and "zone" in table:
                broken = table[table["bound_break"].fillna(False).astype(bool)]
                texts = broken["breaks"] if "breaks" in broken else [""] * len(broken)
                for z, t in zip(broken["zone"].astype(str), texts):
                    add(tier, z, t or "outside its bounds")
        for b in _dicts(self.summary.get("bound_breaks")):
            add(b.get("tier"), b.get("zone"), b.get("breaks") or "outside its bounds")
        for v in _dicts(_get(self.summary, "audit", "violations")):
            add(v.get("tier"), v.get("zone"), v.get("message") or v.get("kind"))

    def _collect_kinds(self) -> None:
        for tier in self.tiers:
            table = self.tables.get(tier)
            if table is not None and "change" in table and "zone" in table:
                self.kinds[tier] = dict(zip(table["zone"].astype(str), table["change"].astype(str)))
        ch = self.changes
        if ch is None or not isinstance(ch, pd.DataFrame) or ch.empty or "kind" not in ch:
            return
        new_col = "new_zone" if "new_zone" in ch else ("new_zones" if "new_zones" in ch else None)
        if new_col is None or "tier" not in ch:
            return
        for tier, part in ch.groupby("tier", sort=False):
            if str(tier) in self.kinds:
                continue
            rows = part[part[new_col].astype(str) != ""]
            self.kinds[str(tier)] = dict(zip(rows[new_col].astype(str), rows["kind"].astype(str)))

    def _plan_listing(self) -> None:
        for tier in self.tiers:
            table = self.tables.get(tier)
            if table is None or "zone" not in table:
                continue
            zones = table["zone"].astype(str)
            if len(table) <= ZONE_LIST_ROWS:
                self.listed[tier] = set(zones)
            else:
                self.listed[tier] = {z for z in zones if (tier, z) in self.problems}
                if len(self.listed[tier]) > ZONE_LIST_ROWS:
                    self.listed[tier] = set(sorted(self.listed[tier])[:ZONE_LIST_ROWS])

    # ------------------------------------------------------------ maps

    def _plan_maps(self) -> None:
        left = MAPS_BYTES
        with_geometry = [t for t in self.tiers if self.layers.get(t) is not None]
        for tier in reversed(with_geometry):
            plan = self._plan_tier(tier, min(MAP_BYTES, left))
            self.maps[tier] = plan
            left -= plan.bytes
        for tier in with_geometry:
            if tier not in self.kinds:
                continue
            df = self.frame(tier)
            if len(df) > MAX_ZONES_PER_MAP:
                self.change_maps[tier] = (None, f"The change map of tier {tier} is left out: its {len(df):,} zones are more than one map can carry ({MAX_ZONES_PER_MAP:,}).")
                continue
            drawn = self._draw_changes(tier, df)
            if len(drawn.svg) > min(MAP_BYTES, left):
                self.change_maps[tier] = (None, f"The change map of tier {tier} is left out: the report's map budget ({MAPS_BYTES / 1e6:g} MB) is spent.")
                continue
            left -= len(drawn.svg)
            self.change_maps[tier] = (drawn, "")

    def _plan_tier(self, tier: str, budget: int) -> _TierMaps:
        plan = _TierMaps(tier=tier)
        df = self.frame(tier)
        n = len(df)
        if n == 0:
            plan.note = f"Tier {tier} has no zones to draw."
            return plan
        if n <= MAX_ZONES_PER_MAP:
            drawn = self._draw(tier, df, np.arange(n), f"Map of tier {tier}: {n:,} zones", f"map-{_slug(tier)}")
            if len(drawn.svg) <= budget:
                plan.full = drawn
                plan.bytes = len(drawn.svg)
                plan.drawn = set(df["zone"])
                return plan
            why = f"its map ({len(drawn.svg) / 1e6:.1f} MB) is larger than its share of the report ({budget / 1e6:.1f} MB)"
        else:
            why = f"its {n:,} zones are more than one map can carry ({MAX_ZONES_PER_MAP:,})"
        fences = df["fence"] if "fence" in df else pd.Series([""] * n)
        groups = {f: np.flatnonzero(fences.to_numpy() == f) for f in dict.fromkeys(fences.tolist())}
        breaks = {f: sum((tier, z) in self.problems for z in df["zone"].to_numpy()[idx]) for f, idx in groups.items()}
        # fences holding rule breaks first: those are the maps a reviewer needs
        order = sorted(groups, key=lambda f: (breaks[f] == 0, _natural(f)))
        spent = 0
        per_zone = MIN_ZONE_BYTES  # bytes a drawn zone costs, learnt from the maps drawn so far
        for f in order:
            idx = groups[f]
            if len(groups) == 1 or idx.shape[0] > MAX_ZONES_PER_MAP or idx.shape[0] * per_zone > budget - spent:
                plan.left_out.append(f)
                continue
            drawn = self._draw(
                tier, df, idx, f"Map of tier {tier}, fence {f}: {idx.shape[0]:,} zones",
                f"map-{_slug(tier)}-fence-{_slug(f)}",
            )
            if spent + len(drawn.svg) > budget:
                plan.left_out.append(f)
                per_zone = max(per_zone, 0.9 * len(drawn.svg) / max(drawn.zones, 1))
                continue
            spent += len(drawn.svg)
            per_zone = max(MIN_ZONE_BYTES, 0.9 * spent / sum(d.zones for _, d, _ in plan.per_fence + [(f, drawn, 0)]))
            plan.per_fence.append((f, drawn, breaks[f]))
            plan.drawn.update(df["zone"].to_numpy()[idx].tolist())
        plan.bytes = spent
        if plan.per_fence:
            plan.note = f"Tier {tier} is drawn fence by fence, because {why}."
            if plan.left_out:
                names = ", ".join(plan.left_out[:30]) + (" and more" if len(plan.left_out) > 30 else "")
                plan.note += (
                    f" Left out: {len(plan.left_out):,} of {len(groups):,} fences ({names}), because the "
                    f"report's size budget ({REPORT_BYTES / 1e6:g} MB in all, {budget / 1e6:.1f} MB for this tier) "
                    "ran out or a fence alone is too large; their zones are in zones.gpkg."
                )
        else:
            plan.note = (
                f"Tier {tier} is not drawn, because {why} and no fence fits the report's size budget "
                f"({REPORT_BYTES / 1e6:g} MB in all, {budget / 1e6:.1f} MB for this tier); the maps of the upper tiers "
                "are shown, and every zone is in zones.gpkg."
            )
            plan.left_out = list(groups)
        return plan

    def _pairs(self, tier: str, zones: np.ndarray) -> np.ndarray:
        extra = self.links.get(tier)
        if not extra:
            return np.zeros((0, 2), dtype=np.int64)
        pos = {z: i for i, z in enumerate(zones.tolist())}
        out = [(pos[str(a)], pos[str(b)]) for a, b in extra if str(a) in pos and str(b) in pos]
        return np.asarray(out, dtype=np.int64).reshape(-1, 2)

    def _draw(self, tier: str, df: pd.DataFrame, idx: np.ndarray, label: str, svg_id: str) -> DrawnMap:
        part = df.iloc[idx]
        geoms = part["geometry"].to_numpy()
        zones = part["zone"].to_numpy()
        frame = frame_for(_bounds(geoms))
        colours = colour_zones(geoms, tolerance=0.5 * frame.unit, extra_pairs=self._pairs(tier, zones))
        self.n_colours = max(self.n_colours, int(colours.max()) + 1 if colours.size else 0)
        broken = np.array([(tier, z) in self.problems for z in zones], dtype=bool)
        classes = [f"h{c} broken" if b else f"f{c}" for c, b in zip(colours.tolist(), broken.tolist())]
        titles = [self._title(tier, row) for row in part.to_dict("records")]
        data = {"zone": zones, "tier": [tier] * len(zones)}
        if "fence" in part:
            data["fence"] = part["fence"].to_numpy()
        return zone_map(
            geoms,
            element_ids=[element_id("zone", tier, z) for z in zones],
            classes=classes,
            titles=titles,
            data=data,
            on_top=broken,
            fences=part["fence"].to_numpy() if "fence" in part else None,
            label=label,
            svg_id=svg_id,
        )

    def _draw_changes(self, tier: str, df: pd.DataFrame) -> DrawnMap:
        kinds = self.kinds.get(tier, {})
        zones = df["zone"].to_numpy()
        kind = [kinds.get(z, "other") for z in zones]
        kind = [k if k in _KIND_STYLE else "other" for k in kind]
        broken = np.array([(tier, z) in self.problems for z in zones], dtype=bool)
        classes = [f"k-{k}" + (" broken" if b else "") for k, b in zip(kind, broken.tolist())]
        titles = [f"{_KIND_WORDS[k]}\n{self._title(tier, row)}" for k, row in zip(kind, df.to_dict("records"))]
        return zone_map(
            df["geometry"].to_numpy(),
            element_ids=[element_id("change", tier, z) for z in zones],
            classes=classes,
            titles=titles,
            data={"zone": zones, "tier": [tier] * len(zones), "change": kind},
            on_top=broken,
            fences=df["fence"].to_numpy() if "fence" in df else None,
            label=f"Changes in tier {tier}",
            svg_id=f"changes-map-{_slug(tier)}",
        )

    def _title(self, tier: str, row: Mapping[str, Any]) -> str:
        zone = str(row.get("zone", ""))
        head = f"zone {zone} · tier {tier}"
        if row.get("fence") not in (None, ""):
            head += f" · fence {row['fence']}"
        lines = [head]
        if row.get("parent") not in (None, "") and not _isnan(row.get("parent")):
            lines.append(f"within {row['parent']}")
        lim = self.limits.get(tier, {})
        for c in self.counts:
            if c not in row:
                continue
            text = f"{c} {_num(row[c])}"
            dev = row.get(f"{c}_vs_target")
            target = lim.get(c, {}).get("target")
            if dev is not None and not _isnan(dev):
                text += f" ({_pct(dev)} vs target" + (f" {_num(target)})" if target is not None else ")")
            lines.append(text)
        shape = []
        if "polsby_popper" in row:
            shape.append(f"Polsby-Popper {_num(row['polsby_popper'])}")
        if "homogeneity" in row:
            shape.append(f"homogeneity {_num(row['homogeneity'])}")
        if shape:
            lines.append(" · ".join(shape))
        for msg in self.problems.get((tier, zone), []):
            lines.append(f"⚠ breaks a rule: {msg}")
        return "\n".join(lines)

    def href(self, tier: Any, zone: Any) -> str:
        """The best element to show for one zone: its map path, its list row, its map section."""
        tier, zone = str(tier or ""), str(zone or "")
        plan = self.maps.get(tier)
        if zone and plan is not None and zone in plan.drawn:
            return "#" + element_id("zone", tier, zone)
        if zone and zone in self.listed.get(tier, set()):
            return "#" + element_id("row", tier, zone)
        if plan is not None:
            return f"#maps-{_slug(tier)}"
        return "#violations"


# ---------------------------------------------------------------- sections


def _headline(run: _Run) -> str:
    s = run.summary
    parts = []
    n_areas = _get(s, "areas", "count")
    if n_areas is not None:
        parts.append(f"{_num(n_areas)} areas")
    n_fences = _get(s, "areas", "fences")
    if n_fences is not None:
        parts.append(f"{_num(n_fences)} fences")
    for t in run.tiers:
        n = len(run.tables[t]) if t in run.tables else _get(s, "tiers", t, "zones")
        if n is not None:
            parts.append(f"tier {t}: {_num(n)} zones")
    return f'<p class="lede">{_e(" · ".join(parts))}</p>' if parts else ""


def _overview(run: _Run) -> str:
    s = run.summary
    items = []
    if "command" in s:
        items.append(("Command", str(s["command"])))
    rc = s.get("exit_code")
    if rc is not None:
        meaning = {0: "every rule holds", 1: "ran, but a rule is broken", 2: "bad input or usage"}.get(rc, "")
        items.append(("Exit code", f"{rc} ({meaning})" if meaning else str(rc)))
    audit = s.get("audit")
    if isinstance(audit, dict):
        n = len(_dicts(audit.get("violations")))
        ok = audit.get("ok")
        items.append(("Independent audit", "passed" if ok else f"found {n:,} problem(s)" if n else "did not pass"))
    breaks = _dicts(s.get("bound_breaks"))
    if "bound_breaks" in s:
        items.append(("Zones outside their bounds", f"{len(breaks):,}"))
    failures = _dicts(s.get("fence_failures"))
    if "fence_failures" in s:
        items.append(("Fences that failed", f"{len(failures):,}"))
    seconds = s.get("seconds")
    if isinstance(seconds, dict) and "total" in seconds:
        items.append(("Run time", f"{_num(seconds['total'])} s"))
    if not items:
        return ""
    rows = "".join(f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>" for k, v in items)
    return f'<dl class="facts">{rows}</dl>'


def _maps(run: _Run) -> str:
    if not run.maps:
        return ""
    out = [_map_legend()]
    for tier in run.tiers:
        plan = run.maps.get(tier)
        if plan is None:
            continue
        sid = f"maps-{_slug(tier)}"
        out.append(f'<section id="{sid}" aria-labelledby="{sid}-h"><h3 id="{sid}-h">Tier {_e(tier)}</h3>')
        if plan.note:
            out.append(f'<p class="note" id="{sid}-note">{_e(plan.note)}</p>')
        if plan.full is not None:
            out.append(_figure(plan.full.svg, f"Tier {tier}: {plan.full.zones:,} zones; hover a zone for its figures."))
        for i, (fence, drawn, n_breaks) in enumerate(plan.per_fence):
            flag = f", {n_breaks:,} breaking a rule" if n_breaks else ""
            opened = " open" if i == 0 else ""
            out.append(
                f"<details{opened}><summary>Fence {_e(fence)} ({drawn.zones:,} zones{flag})</summary>"
                f"{_figure(drawn.svg, f'Tier {tier}, fence {fence}')}</details>"
            )
        out.append("</section>")
    return "".join(out)


def _map_legend() -> str:
    sw = '<svg class="swatch" viewBox="0 0 24 16" aria-hidden="true">{}</svg>'
    fills = "".join(f'<rect class="zone f{i}" x="{i * 3}" y="0" width="3" height="16"/>' for i in range(8))
    items = [
        (sw.format(fills), "zone fills only tell neighbours apart: no two neighbouring zones share one"),
        (sw.format('<rect class="zone h0 broken" x="1" y="1" width="22" height="14"/>'),
         "hatched with a dark red outline: the zone breaks a rule (hover it, or see Rule breaks)"),
        (sw.format('<path class="fence" d="M0 8H24"/>'), "heavy line: fence boundary, never crossed"),
    ]
    lis = "".join(f"<li>{s}<span>{_e(t)}</span></li>" for s, t in items)
    return f'<ul class="legend" aria-label="Map legend">{lis}</ul>'


def _figure(svg: str, caption: str) -> str:
    return f'<figure class="map">{svg}<figcaption>{_e(caption)}</figcaption></figure>'


def _changes(run: _Run) -> str:
    shares = run.summary.get("changes") if isinstance(run.summary.get("changes"), dict) else {}
    ch = run.changes if isinstance(run.changes, pd.DataFrame) else None
    if not shares and (ch is None or ch.empty) and not run.kinds:
        return ""
    out = []
    if run.change_maps:
        out.append(_kind_legend())
    for tier in run.tiers:
        if tier not in run.change_maps:
            continue
        drawn, note = run.change_maps[tier]
        sid = f"changes-{_slug(tier)}"
        out.append(f'<section id="{sid}" aria-labelledby="{sid}-h"><h3 id="{sid}-h">Tier {_e(tier)}: what changed</h3>')
        if note:
            out.append(f'<p class="note">{_e(note)}</p>')
        if drawn is not None:
            out.append(_figure(drawn.svg, f"Tier {tier}: each zone by its kind of change"))
        out.append("</section>")
    unchanged = {}
    for tier in run.tiers:
        if isinstance(shares.get(tier), dict) and "share_unchanged" in shares[tier]:
            unchanged[tier] = float(shares[tier]["share_unchanged"])
        elif tier in run.kinds and run.kinds[tier]:
            ks = list(run.kinds[tier].values())
            unchanged[tier] = ks.count("kept") / len(ks)
    if unchanged:
        out.append('<h3 id="changes-share">Share of zones unchanged</h3>')
        uri = charts.share_bars(unchanged, "share of zones unchanged")
        if uri:
            alt = "; ".join(f"tier {t}: {100 * v:.1f}% unchanged" for t, v in unchanged.items())
            out.append(f'<img class="chart" src="{uri}" alt="{_e(alt)}">')
    rows = []
    kinds_seen: list[str] = []
    per_tier: dict[str, dict[str, int]] = {}
    for tier in run.tiers:
        counts: dict[str, int] = {}
        if isinstance(shares.get(tier), dict) and isinstance(shares[tier].get("kinds"), dict):
            counts = {str(k): int(v) for k, v in shares[tier]["kinds"].items()}
        elif ch is not None and not ch.empty and "tier" in ch and "kind" in ch:
            counts = ch[ch["tier"].astype(str) == tier]["kind"].astype(str).value_counts().to_dict()
        elif tier in run.kinds:
            counts = pd.Series(list(run.kinds[tier].values()), dtype=object).value_counts().to_dict()
        per_tier[tier] = counts
        for k in counts:
            if k not in kinds_seen:
                kinds_seen.append(k)
    order = [k for k in (*CHANGE_KINDS, "retired") if k in kinds_seen] + [k for k in kinds_seen if k not in CHANGE_KINDS and k != "retired"]
    if order:
        for tier in run.tiers:
            info = shares.get(tier, {}) if isinstance(shares.get(tier), dict) else {}
            rows.append(
                [tier]
                + [per_tier[tier].get(k, 0) for k in order]
                + [_pct_plain(unchanged[tier]) if tier in unchanged else "–", info.get("areas_moved", "–")]
            )
        out.append(_table("Zones by kind of change, per tier", ["tier", *order, "unchanged", "areas moved"], rows))
    return "".join(out)


def _kind_legend() -> str:
    items = []
    for k in (*CHANGE_KINDS, "other"):
        sw = f'<svg class="swatch" viewBox="0 0 24 16" aria-hidden="true"><rect class="zone k-{k}" x="1" y="1" width="22" height="14"/></svg>'
        items.append(f"<li>{sw}<span>{_e(_KIND_WORDS[k])}</span></li>")
    return f'<ul class="legend" aria-label="Change map legend">{"".join(items)}</ul>'


def _distributions(run: _Run) -> str:
    out = []
    for tier in run.tiers:
        table = run.tables.get(tier)
        if table is None or table.empty:
            continue
        values = {c: table[c].to_numpy(dtype=float) for c in run.counts if c in table}
        uri = charts.count_histograms(values, run.limits.get(tier, {}), tier)
        if uri:
            lim = run.limits.get(tier, {})
            desc = "; ".join(
                f"{c}: zones from {_num(np.nanmin(v))} to {_num(np.nanmax(v))}"
                + "".join(f", {k} {_num(lim[c][k])}" for k in ("min", "target", "max") if k in lim.get(c, {}))
                for c, v in values.items() if v.size
            )
            out.append(f'<h3 id="dist-{_slug(tier)}">Tier {_e(tier)}: zone sizes</h3>')
            out.append(f'<img class="chart" src="{uri}" alt="{_e(f"Histograms of zone sizes in tier {tier}. {desc}")}">')
    series: dict[str, dict[str, np.ndarray]] = {}
    for col, name in (("polsby_popper", "Polsby-Popper (1 = circle)"), ("homogeneity", "homogeneity (within-zone variance, 0 = alike)")):
        per = {t: run.tables[t][col].to_numpy(dtype=float) for t in run.tiers if t in run.tables and col in run.tables[t]}
        if per:
            series[name] = per
    uri = charts.shape_boxplots(series)
    if uri:
        desc = "; ".join(
            f"{m} median in tier {t} {_num(np.nanmedian(v))}" for m, per in series.items() for t, v in per.items() if v.size
        )
        out.append('<h3 id="dist-shape">Shape and homogeneity</h3>')
        out.append(f'<img class="chart" src="{uri}" alt="{_e(f"Box plots per tier. {desc}")}">')
    return "".join(out)


def _sweep(run: _Run) -> str:
    table = run.sweep
    if not isinstance(table, pd.DataFrame) or table.empty:
        if not run.sweep_charts:
            return ""
        table = pd.DataFrame()
    out = []
    vary = _get(run.summary, "sweep", "vary")
    if isinstance(vary, dict) and vary:
        out.append("<p>Varied: " + _e("; ".join(f"{k} = {', '.join(map(str, v)) if isinstance(v, list) else v}" for k, v in vary.items())) + "</p>")
    if not table.empty:
        cols = [str(c) for c in table.columns]
        rows = [[_cell(v) for v in rec] for rec in table.itertuples(index=False, name=None)]
        out.append(_table("One row per variant of the rules", cols, rows))
    for name, data in run.sweep_charts.items():
        label = Path(str(name)).stem.replace("_", " ")
        out.append(f'<figure class="chart"><img class="chart" src="{charts.png_uri(data)}" alt="{_e(f"Sweep chart: {label} against the varied rule")}">'
                   f"<figcaption>{_e(label)}</figcaption></figure>")
    return "".join(out)


def _tiers(run: _Run) -> str:
    figures = run.summary.get("tiers") if isinstance(run.summary.get("tiers"), dict) else {}
    names = [t for t in run.tiers] or list(figures)
    if not names:
        return ""
    cols = ["tier", "zones", "outside bounds"]
    for c in run.counts:
        cols += [f"{c} mean (min–max)", f"{c} within 10% of target"]
    cols += ["Polsby-Popper median (p10–p90)", "homogeneity median (p10–p90)"]
    rows = []
    for t in names:
        f = figures.get(t) if isinstance(figures.get(t), dict) else _tier_figures(run.tables.get(t), run.counts)
        row = [t, _num(f.get("zones")), _num(f.get("bound_breaks"))]
        for c in run.counts:
            cf = _get(f, "counts", c) or {}
            row.append(f"{_num(cf.get('mean'))} ({_num(cf.get('min'))}–{_num(cf.get('max'))})" if cf else "–")
            share = _get(f, "share_within_10pct_of_target", c)
            row.append(_pct_plain(share) if share is not None else "no target")
        for key in ("polsby_popper", "homogeneity"):
            q = f.get(key) or {}
            row.append(f"{_num(q.get('median'))} ({_num(q.get('p10'))}–{_num(q.get('p90'))})" if q else "–")
        rows.append(row)
    out = [_table("Figures per tier", cols, rows, row_headers=True)]
    obj = run.summary.get("objective")
    if isinstance(obj, dict) and obj:
        orows = []
        for t, o in obj.items():
            if not isinstance(o, dict):
                continue
            w = o.get("weights") if isinstance(o.get("weights"), dict) else {}
            orows.append([t, o.get("homogeneity", "–"), o.get("compactness", "–"), ", ".join(f"{k} {_num(v)}" for k, v in w.items()) or "–"])
        if orows:
            out.append(_table("Objective per tier", ["tier", "homogeneity measure", "compactness measure", "weights"], orows, row_headers=True))
    return "".join(out)


def _zones(run: _Run) -> str:
    out = []
    for tier in run.tiers:
        table = run.tables.get(tier)
        listed = run.listed.get(tier)
        if table is None or not listed:
            continue
        sub = table[table["zone"].astype(str).isin(listed)]
        sub = sub.assign(zone=sub["zone"].astype(str)).sort_values("zone", kind="stable")
        cols = ["zone"] + [c for c in ("fence", "parent") if c in sub]
        cols += [c for c in run.counts if c in sub] + [f"{c}_vs_target" for c in run.counts if f"{c}_vs_target" in sub]
        cols += [c for c in ("polsby_popper", "homogeneity", "n_units", "n_areas", "area_km2", "breaks") if c in sub]
        rows = []
        ids = []
        plan = run.maps.get(tier)
        for rec in sub.to_dict("records"):
            z = str(rec["zone"])
            cell = _e(z)
            if plan is not None and z in plan.drawn:
                cell = f'<a href="#{element_id("zone", tier, z)}">{cell}</a>'
            row = [_Raw(cell)]
            for c in cols[1:]:
                v = rec.get(c)
                row.append(_pct(v) if c.endswith("_vs_target") and not _isnan(v) else _cell(v))
            rows.append(row)
            ids.append(element_id("row", tier, z))
        if len(table) <= ZONE_LIST_ROWS:
            caption = f"Every zone of tier {tier} ({len(table):,})"
        else:
            caption = f"Zones of tier {tier} that break a rule ({len(sub):,} of {len(table):,} zones; the full list is in zones.gpkg)"
        out.append(
            f'<details><summary>Tier {_e(tier)}: {len(sub):,} zone(s) listed</summary>'
            f"{_table(caption, [c.replace('_', ' ') for c in cols], rows, row_ids=ids, row_headers=True)}</details>"
        )
    return "".join(out)


def _fences(run: _Run) -> str:
    fences = _dicts(run.summary.get("fences"))
    failures = _dicts(run.summary.get("fence_failures"))
    out = []
    if fences:
        cols = ["tier", "fence", "zones", "units", "breaks", "objective", "terms", "seconds", "error"]
        rows = []
        for f in fences:
            terms = f.get("terms")
            terms = ", ".join(f"{k} {_num(v)}" for k, v in terms.items()) if isinstance(terms, dict) else _cell(terms)
            rows.append([f.get("tier"), f.get("fence"), _num(f.get("zones")), _num(f.get("units")), _num(f.get("breaks")),
                         _num(f.get("objective")), terms, _num(f.get("seconds")), f.get("error") or ""])
        out.append(_table("Figures per fence and tier", cols, rows))
    if failures:
        rows = [[f.get("tier"), f.get("fence"), f.get("error")] for f in failures]
        out.append(_table("Fences that failed (no zoning written for them)", ["tier", "fence", "error"], rows))
    return "".join(out)


def _violations(run: _Run) -> str:
    out = []
    breaks = _dicts(run.summary.get("bound_breaks"))
    if breaks:
        rows = []
        for b in breaks:
            rows.append([b.get("tier"), _zone_link(run, b.get("tier"), b.get("zone")), b.get("fence"), b.get("breaks")])
        out.append(_table("Zones outside their bounds", ["tier", "zone", "fence", "what is out of bounds"], rows, row_class="violation"))
    audit = run.summary.get("audit")
    viol = _dicts(audit.get("violations")) if isinstance(audit, dict) else []
    if viol:
        rows = []
        for v in viol:
            areas = v.get("areas")
            areas = ", ".join(map(str, areas[:5])) + (" …" if len(areas) > 5 else "") if isinstance(areas, list) else _cell(areas)
            rows.append([v.get("kind"), v.get("tier"), _zone_link(run, v.get("tier"), v.get("zone")),
                         ", ".join(map(str, v.get("fences") or [])), areas, v.get("message")])
        out.append(_table("Problems found by the independent audit", ["kind", "tier", "zone", "fences", "areas", "message"], rows, row_class="violation"))
    elif isinstance(audit, dict):
        out.append("<p>The independent audit found no problem.</p>" if audit.get("ok") else "<p>The audit did not pass.</p>")
    if not out and "bound_breaks" in run.summary:
        out.append("<p>Every zone is within its bounds.</p>")
    return "".join(out)


def _zone_link(run: _Run, tier: Any, zone: Any) -> _Raw:
    label = _e(zone) if zone not in (None, "") else "(whole tier)" if tier else "(whole input)"
    href = run.href(tier, zone)
    hint = "" if href.startswith("#zone-") else ' title="not drawn on a map; see the note there"'
    return _Raw(f'<a href="{href}"{hint}>{label}</a>')


_CERT_WORDS = {
    "OPTIMAL": "confirmed: an independent CP-SAT model accepts these zones under every rule",
    "FEASIBLE": "confirmed: an independent CP-SAT model accepts these zones under every rule",
    "INFEASIBLE": "refuted: the independent CP-SAT model finds a rule these zones break",
    "UNKNOWN": "undecided: the solver stopped before reaching a verdict",
    "MODEL_INVALID": "not checked: the model could not be built",
}
_PROOF_WORDS = {
    "INFEASIBLE": "proved: no zoning of this fence can meet every bound",
    "UNKNOWN": "not decided: too large to prove within the time allowed",
    "no proof": "no proof: the bounds were missed, but no proof says they cannot be met",
}


def _certificate(run: _Run) -> str:
    out = []
    certs = _dicts(run.summary.get("certificate"))
    if certs:
        rows = []
        for c in certs:
            status = str(c.get("status", ""))
            words = _CERT_WORDS.get(status.upper(), status)
            extra = ", ".join(f"{k} {_cell(v)}" for k, v in c.items() if k not in ("tier", "fence", "status", "seconds", "text", "message"))
            rows.append([c.get("tier"), c.get("fence"), words + (f" ({c['text']})" if c.get("text") else ""), _num(c.get("seconds")), extra])
        out.append(_table("Certificate per fence and tier", ["tier", "fence", "verdict", "seconds", "details"], rows))
    proofs = _dicts(run.summary.get("proofs"))
    if proofs:
        rows = []
        for p in proofs:
            status = str(p.get("status", ""))
            rows.append([p.get("tier"), p.get("fence"), _PROOF_WORDS.get(status, status), p.get("text", "")])
        out.append(_table("Why some bounds could not be met", ["tier", "fence", "verdict", "in plain words"], rows))
    return "".join(out)


def _input(run: _Run) -> str:
    s = run.summary
    out = []
    areas = s.get("areas") if isinstance(s.get("areas"), dict) else {}
    graph = s.get("graph") if isinstance(s.get("graph"), dict) else {}
    facts = []
    for label, value in (
        ("Input files", ", ".join(map(str, s.get("inputs") or [])) if s.get("inputs") else None),
        ("Areas", _num(areas.get("count")) if "count" in areas else None),
        ("Coordinate reference system", areas.get("crs")),
        ("Fences", _num(areas.get("fences")) if "fences" in areas else None),
        ("Contiguity", graph.get("contiguity")),
        ("Neighbour pairs", _num(graph.get("edges")) if "edges" in graph else None),
        ("Declared links", _num(graph.get("links")) if "links" in graph else None),
    ):
        if value not in (None, ""):
            facts.append(f"<dt>{_e(label)}</dt><dd>{_e(value)}</dd>")
    if facts:
        out.append(f'<dl class="facts">{"".join(facts)}</dl>')
    notes = areas.get("notes") or []
    if notes:
        out.append('<h3 id="input-notes">Notes from reading the input</h3><ul>' + "".join(f"<li>{_e(n)}</li>" for n in notes[:TABLE_ROWS]) + "</ul>")
    repaired = areas.get("repaired_polygons")
    if repaired:
        shown = ", ".join(map(str, repaired[:200])) + (f" and {len(repaired) - 200:,} more" if len(repaired) > 200 else "")
        out.append(f'<h3 id="input-repaired">Repaired polygons</h3><p>{len(repaired):,} invalid polygon(s) were repaired before use: {_e(shown)}.</p>')
    islands = _dicts(graph.get("islands"))
    if islands:
        cols = list(dict.fromkeys(k for d in islands for k in d))
        rows = [[_cell(d.get(k)) for k in cols] for d in islands]
        out.append('<h3 id="input-islands">Islands</h3><p>Parts of a fence with no neighbour path to the rest of it.</p>')
        out.append(_table("Islands found in the area graph", cols, rows))
    elif "islands" in graph:
        out.append("<p>No islands: every fence's areas are connected.</p>")
    return "".join(out)


def _rules(run: _Run) -> str:
    text = run.summary.get("rules")
    if not text:
        return ""
    return f'<pre class="rules" aria-label="Rules file">{_e(text)}</pre>'


def _run_details(run: _Run) -> str:
    s = run.summary
    out = []
    search = s.get("search")
    if isinstance(search, dict) and search:
        rows = "".join(f"<dt>{_e(k)}</dt><dd>{_e(_cell(v))}</dd>" for k, v in search.items())
        out.append(f'<h3 id="run-search">Search</h3><dl class="facts">{rows}</dl>')
    versions = s.get("versions")
    if isinstance(versions, dict) and versions:
        out.append('<h3 id="run-versions">Software</h3>')
        out.append(_table("Software versions", ["package", "version"], [[k, v] for k, v in versions.items()], row_headers=True))
    seconds = s.get("seconds")
    if isinstance(seconds, dict) and seconds:
        out.append('<h3 id="run-times">Run times</h3>')
        out.append(_table("Seconds per phase", ["phase", "seconds"], [[k, _num(v)] for k, v in seconds.items()], row_headers=True))
    return "".join(out)


# ---------------------------------------------------------------- helpers


class _Raw(str):
    """Cell text that is already HTML."""


def _e(x: Any) -> str:
    return html.escape("" if x is None else str(x), quote=True)


def _table(
    caption: str,
    cols: Sequence[str],
    rows: Sequence[Sequence[Any]],
    *,
    row_ids: Sequence[str] | None = None,
    row_headers: bool = False,
    row_class: str | None = None,
) -> str:
    head = "".join(f'<th scope="col">{_e(c)}</th>' for c in cols)
    body = []
    cls = f' class="{row_class}"' if row_class else ""
    for i, row in enumerate(rows[:TABLE_ROWS]):
        ident = f' id="{row_ids[i]}"' if row_ids is not None else ""
        cells = []
        for j, v in enumerate(row):
            text = v if isinstance(v, _Raw) else _e(_cell(v))
            cells.append(f'<th scope="row">{text}</th>' if row_headers and j == 0 else f"<td>{text}</td>")
        body.append(f"<tr{ident}{cls}>{''.join(cells)}</tr>")
    more = ""
    if len(rows) > TABLE_ROWS:
        more = f'<p class="note">{len(rows) - TABLE_ROWS:,} more row(s) left out to keep the report small; summary.json holds them all.</p>'
    return (
        f'<div class="table-wrap"><table><caption>{_e(caption)}</caption><thead><tr>{head}</tr></thead>'
        f"<tbody>{''.join(body)}</tbody></table></div>{more}"
    )


def _cell(v: Any) -> str:
    if isinstance(v, _Raw):
        return v
    if v is None:
        return ""
    if isinstance(v, bool | np.bool_):
        return "yes" if v else "no"
    if isinstance(v, int | float | np.integer | np.floating):
        return _num(v)
    if isinstance(v, list | tuple):
        return ", ".join(_cell(x) for x in v)
    if isinstance(v, dict):
        return json.dumps(v, default=str)
    return str(v)


def _num(v: Any) -> str:
    if v is None:
        return "–"
    if isinstance(v, bool | np.bool_):
        return "yes" if v else "no"
    try:
        x = float(v)
    except (TypeError, ValueError):
        return str(v)
    if not math.isfinite(x):
        return "–" if math.isnan(x) else ("∞" if x > 0 else "−∞")
    if x == round(x) and abs(x) < 1e15:
        return f"{int(round(x)):,}"
    if abs(x) >= 1000:
        return f"{x:,.0f}"
    return f"{x:.3g}"


def _pct(v: Any) -> str:
    try:
        return f"{100 * float(v):+.1f}%".replace("-", "−")
    except (TypeError, ValueError):
        return "–"


def _pct_plain(v: Any) -> str:
    try:
        return f"{100 * float(v):.1f}%"
    except (TypeError, ValueError):
        return "–"


def _isnan(v: Any) -> bool:
    try:
        return v is None or bool(isinstance(v, float | np.floating) and math.isnan(v))
    except TypeError:
        return False


def _natural(s: Any) -> tuple:
    """Sort key that puts D2 before D10."""
    import re

    return tuple((0, int(p), "") if p.isdigit() else (1, 0, p) for p in re.split(r"(\d+)", str(s)) if p)


def _slug(s: Any) -> str:
    return element_id("x", "t", str(s))[4:]


def _get(d: Any, *keys: str) -> Any:
    for k in keys:
        if not isinstance(d, dict):
            return None
        d = d.get(k)
    return d


def _dicts(x: Any) -> list[dict]:
    return [d for d in x if isinstance(d, dict)] if isinstance(x, list | tuple) else []


def _count_columns(tables: Mapping[str, pd.DataFrame]) -> list[str]:
    """Count columns: numeric columns that are neither measures nor bookkeeping."""
    known = {"zone", "fence", "parent", "polsby_popper", "homogeneity", "n_areas", "n_units", "area_km2",
             "bound_break", "breaks", "change", "geometry"}
    out: list[str] = []
    for table in tables.values():
        for c in table.columns:
            c = str(c)
            if c in known or c.endswith("_vs_target") or c in out:
                continue
            if pd.api.types.is_numeric_dtype(table[c]) and not pd.api.types.is_bool_dtype(table[c]):
                out.append(c)
    return out


def _tier_figures(table: pd.DataFrame | None, counts: Sequence[str]) -> dict:
    if table is None:
        return {}
    out: dict = {"zones": len(table)}
    if "bound_break" in table:
        out["bound_breaks"] = int(table["bound_break"].fillna(False).astype(bool).sum())
    out["counts"] = {c: {"mean": table[c].mean(), "min": table[c].min(), "max": table[c].max()} for c in counts if c in table}
    out["share_within_10pct_of_target"] = {
        c: float((table[f"{c}_vs_target"].abs() <= 0.10).mean()) for c in counts if f"{c}_vs_target" in table and len(table)
    }
    for key in ("polsby_popper", "homogeneity"):
        if key in table and len(table):
            x = table[key].to_numpy(dtype=float)
            out[key] = {"median": float(np.nanmedian(x)), "p10": float(np.nanquantile(x, 0.1)), "p90": float(np.nanquantile(x, 0.9))}
    return out


def _bounds(geoms: np.ndarray) -> np.ndarray:
    import shapely

    return shapely.total_bounds(geoms) if len(geoms) else np.array([0.0, 0.0, 1.0, 1.0])


# ---------------------------------------------------------------- style and script


def _defs(n_colours: int) -> str:
    """Fill patterns shared by every map: hatching per colour, one pattern per change kind."""
    pats = []
    for i, c in enumerate(palette(n_colours)):
        pats.append(
            f'<pattern id="hatch-{i}" patternUnits="userSpaceOnUse" width="8" height="8" patternTransform="rotate(45)">'
            f'<rect width="8" height="8" fill="{c}"/><path d="M1 0v8" stroke="#4a1712" stroke-width="1.6"/></pattern>'
        )
    for k, (fill, mark) in _KIND_STYLE.items():
        pats.append(
            f'<pattern id="kind-{k}" patternUnits="userSpaceOnUse" width="8" height="8">'
            f'<rect width="8" height="8" fill="{fill}"/>{mark}</pattern>'
        )
    return (
        '<svg class="defs" width="0" height="0" aria-hidden="true" focusable="false">'
        f"<defs>{''.join(pats)}</defs></svg>"
    )


def _css(n_colours: int) -> str:
    fills = "".join(f".f{i}{{fill:{c}}}.h{i}{{fill:url(#hatch-{i})}}" for i, c in enumerate(palette(n_colours)))
    kinds = "".join(f".k-{k}{{fill:url(#kind-{k})}}" for k in _KIND_STYLE)
    return (
        ":root{--ink:#1f2328;--muted:#4a4f57;--paper:#fbfaf7;--rule:#d9d4ca;--head:#efebe3;--link:#1b4f86}"
        "*{box-sizing:border-box}"
        "body{margin:0;background:var(--paper);color:var(--ink);font:15px/1.5 system-ui,-apple-system,'Segoe UI',"
        "Roboto,'Noto Sans','DejaVu Sans',sans-serif}"
        "header,nav,main{max-width:1120px;margin:0 auto;padding:0 24px}"
        "header{padding-top:20px}h1{font-size:1.6rem;margin:.2em 0 .4em;color:#1d2a36}"
        "h2{font-size:1.3rem;margin:1.8em 0 .5em;padding-bottom:.2em;border-bottom:2px solid var(--rule);color:#1d2a36}"
        "h3{font-size:1.08rem;margin:1.4em 0 .4em;color:#26323d}"
        "a{color:var(--link)}a:focus,summary:focus{outline:2px solid #1b4f86;outline-offset:2px}"
        ".caution{background:#fff4d4;border-left:5px solid #8a6a00;color:#352a00;padding:10px 14px;margin:0 0 12px}"
        ".lede{color:var(--muted);margin:.3em 0 1em}.note{color:#3d3a33;background:#f1eee7;padding:6px 10px;border-radius:3px}"
        "nav ul{list-style:none;padding:0;margin:0 0 8px;display:flex;flex-wrap:wrap;gap:4px 16px;font-size:.92rem}"
        "dl.facts{display:grid;grid-template-columns:max-content 1fr;gap:2px 18px;margin:.5em 0}"
        "dl.facts dt{color:var(--muted)}dl.facts dd{margin:0}"
        ".table-wrap{overflow-x:auto;margin:.6em 0 1em}"
        "table{border-collapse:collapse;font-size:.88rem;background:#fff;min-width:min(100%,30rem)}"
        "caption{text-align:left;font-weight:600;padding:4px 0;color:#26323d}"
        "th,td{border:1px solid var(--rule);padding:3px 8px;text-align:left;vertical-align:top}"
        "thead th{background:var(--head)}tbody th{font-weight:600;background:#f7f5f0}"
        "tbody tr:nth-child(even) td{background:#faf9f6}tr:target td,tr:target th{background:#fff0b8}"
        "pre.rules{background:#fff;border:1px solid var(--rule);padding:10px 14px;overflow-x:auto;font-size:.85rem}"
        "figure{margin:.6em 0 1.2em}figcaption{color:var(--muted);font-size:.88rem}"
        "figure.map{background:#fff;border:1px solid var(--rule);padding:6px}"
        "svg.zonemap{display:block;width:100%;height:auto;max-height:82vh}"
        "svg.defs{position:absolute;width:0;height:0;overflow:hidden}"
        ".zone{stroke:#ffffff;stroke-width:.7;vector-effect:non-scaling-stroke;stroke-linejoin:round}"
        ".zone:hover{stroke:#1f2328;stroke-width:2}"
        f".zone.broken{{stroke:{WARNING};stroke-width:2.2}}"
        ".zone:target{stroke:#000;stroke-width:3.5}"
        ".fence{fill:none;stroke:#2b2f33;stroke-width:2.2;vector-effect:non-scaling-stroke;pointer-events:none;stroke-linejoin:round}"
        f"{fills}{kinds}"
        ".legend{list-style:none;padding:0;margin:.4em 0 .8em;display:flex;flex-wrap:wrap;gap:6px 22px;font-size:.88rem}"
        ".legend li{display:flex;align-items:center;gap:6px}svg.swatch{width:30px;height:20px;flex:none}"
        "details{margin:.3em 0;border:1px solid var(--rule);background:#fff;padding:4px 8px}"
        "summary{cursor:pointer;font-weight:600}"
        "img.chart{display:block;max-width:100%;height:auto;margin:.4em 0 1em;background:#fff}"
        "#tip{position:fixed;z-index:10;max-width:340px;background:#fff;color:var(--ink);border:1px solid #5d6167;"
        "border-radius:4px;padding:6px 9px;font-size:.84rem;line-height:1.35;white-space:pre-line;pointer-events:none;"
        "box-shadow:0 2px 8px rgba(0,0,0,.18)}"
        "[hidden]{display:none!important}"
        "@media print{body{background:#fff;font-size:11pt}nav,#tip{display:none}figure,table{break-inside:avoid}"
        "a{color:inherit}svg.zonemap{max-height:none}}"
    )


_SCRIPT = """
(function(){
var tip=document.getElementById('tip');
function zoneOf(t){return t&&t.closest?t.closest('.zone'):null;}
function place(x,y){var w=tip.offsetWidth,h=tip.offsetHeight,l=x+14,t=y+14;
if(l+w>innerWidth-6)l=x-w-14;if(t+h>innerHeight-6)t=y-h-14;
tip.style.left=Math.max(4,l)+'px';tip.style.top=Math.max(4,t)+'px';}
function show(z,x,y){var t=z.querySelector('title');
if(t){z.setAttribute('data-tip',t.textContent);z.removeChild(t);}
tip.textContent=z.getAttribute('data-tip')||'';tip.hidden=false;place(x,y);}
function hide(z){tip.hidden=true;
if(z&&z.hasAttribute('data-tip')&&!z.querySelector('title')){
var t=document.createElementNS('http://www.w3.org/2000/svg','title');
t.textContent=z.getAttribute('data-tip');z.appendChild(t);}}
document.addEventListener('mouseover',function(e){var z=zoneOf(e.target);if(z)show(z,e.clientX,e.clientY);});
document.addEventListener('mousemove',function(e){if(!tip.hidden&&zoneOf(e.target))place(e.clientX,e.clientY);});
document.addEventListener('mouseout',function(e){var z=zoneOf(e.target);if(z&&zoneOf(e.relatedTarget)!==z)hide(z);});
function reveal(){var id=location.hash.slice(1);if(!id)return;
var el=document.getElementById(decodeURIComponent(id));if(!el)return;
for(var p=el.parentNode;p;p=p.parentNode){if(p.tagName==='DETAILS')p.open=true;}
el.scrollIntoView({block:'center'});}
addEventListener('hashchange',reveal);reveal();
addEventListener('beforeprint',function(){document.querySelectorAll('details').forEach(function(d){d.open=true;});});
})();
"""
