"""The report of a sweep: a planner's comparison of rule variants on one page.

A decision table (variants as rows, the figures that decide as columns, the best value of
each column marked by a star and bold type, not by colour alone), small multiples of the
same figures, the fences that fail under each variant with their proofs, maps of the finest
tier that changed side by side at one scale (zones matched to the first variant's, so alike
zones share a fill), and the areas changing zone from one variant to the next.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from zonedesign.report.colouring import PALETTE, colour_by_code, zone_neighbours
from zonedesign.report.format import esc, num, pct_plain
from zonedesign.report.html import DEFAULT_CAUTION, page, render_sections
from zonedesign.report.plan import MAPS_BYTES
from zonedesign.report.svgmap import MAX_ZONES_PER_MAP, element_id, zone_map
from zonedesign.report.sweepcharts import Measure, change_bars, small_multiples
from zonedesign.status import solve_word
from zonedesign.summaryrecord import RunSummary


class SweepPage:
    """What the sweep report shows, computed once from the run's figures."""

    def __init__(self, summary: RunSummary, table: pd.DataFrame, variants: Sequence[Any],
                 results: Sequence[Any], layers: Mapping[int, Mapping[str, Any]]):
        self.summary = summary
        self.table = table.reset_index(drop=True)
        self.variants = list(variants)
        self.results = list(results)
        self.layers = dict(layers)
        self.tiers = [str(t) for t in summary.tier_order or []]
        self.keys = [k for v in self.variants[:1] for k, _ in v.values]
        self.n_vary = len(summary.sweep.vary) if summary.sweep is not None else 0
        self.valid = [v for v in self.variants if v.rules is not None]
        self.measures = decision_measures(self.table, self.tiers)
        self.charts: dict[str, bytes] = {}
        self.n_colours = len(PALETTE)

    def label(self, variant: Any) -> str:
        """The variant's values, short: what a chart tick and a table row show."""
        if self.n_vary == 1 or len(variant.values) <= 2:
            return " / ".join(v for _, v in variant.values)
        return f"#{variant.number}"

    def key_words(self, key: str) -> str:
        """`tier.2.min.POP8` as `tier 2 (district) min POP8`."""
        parts = key.split(".")
        if parts[0] == "tier" and len(parts) > 2:
            name = parts[1]
            if name.isdigit() and 0 < int(name) <= len(self.tiers):
                name = f"{name} ({self.tiers[int(name) - 1]})"
            return " ".join(["tier", name, *parts[2:]])
        return key.replace(".", " ")


def decision_measures(table: pd.DataFrame, tiers: Sequence[str]) -> list[Measure]:
    """The decision table's columns, in reading order, each in plain words."""
    cols = set(table.columns)
    out: list[Measure] = []
    for t in tiers:
        if f"zones.{t}" in cols:
            out.append(Measure(f"zones.{t}", f"zones in tier {t}", "count", ""))
    for t in tiers:
        for c in sorted(x for x in cols if x.startswith(f"smallest.{t}.")):
            out.append(Measure(c, f"smallest zone in tier {t}, {c.split('.', 2)[2]}", "count", "max"))
    for t in tiers:
        for c in sorted(x for x in cols if x.startswith(f"within_10pct.{t}.")):
            out.append(Measure(c, f"tier {t} zones within 10% of the {c.split('.', 2)[2]} target", "share", "max"))
    out.append(Measure("bound_breaks", "zones outside their bounds", "count", "min"))
    out.append(Measure("fences_infeasible", "fences proven unable to meet the bounds", "count", "min"))
    for t in tiers:
        if f"polsby_popper.median.{t}" in cols:
            out.append(Measure(f"polsby_popper.median.{t}", f"median shape of tier {t} (Polsby-Popper, 1 = circle)",
                               "value", "max"))
    changed = [t for t in tiers if f"areas_changed_vs_first.{t}" in cols]
    # the finest tier whose zones differ between the variants says most about the change
    finest = next((t for t in changed if pd.to_numeric(table[f"areas_changed_vs_first.{t}"], errors="coerce")
                   .fillna(0).gt(0).any()), changed[0] if changed else None)
    if finest is not None:
        out.append(Measure(f"areas_changed_vs_first.{finest}", f"areas in another tier {finest} zone than in the first variant",
                           "count", ""))
    before = [t for t in tiers if f"areas_changed_vs_previous.{t}" in cols]
    if before:  # a redraw sweep: how far each variant moves from the published zones
        t = next((t for t in before if pd.to_numeric(table[f"areas_changed_vs_previous.{t}"], errors="coerce")
                  .fillna(0).gt(0).any()), before[0])
        out.append(Measure(f"areas_changed_vs_previous.{t}", f"areas moved from their previous tier {t} zone",
                           "count", "min"))
    return [m for m in out if m.column in cols]


# ---------------------------------------------------------------- sections


def _decision(p: SweepPage) -> str:
    head = [f'<th scope="col">{esc(p.key_words(k))}</th>' for k in p.keys]
    head += [f'<th scope="col">{esc(m.words)}</th>' for m in p.measures]
    head.append('<th scope="col">audit</th>')
    best = {}
    ok_rows = p.table[p.table.get("valid", True).astype(bool)] if "valid" in p.table else p.table
    for m in p.measures:
        vals = pd.to_numeric(ok_rows[m.column], errors="coerce") if m.column in ok_rows else pd.Series(dtype=float)
        vals = vals[np.isfinite(vals)]
        if m.best and len(vals) > 1 and vals.max() != vals.min():
            best[m.column] = vals.max() if m.best == "max" else vals.min()
    rows = []
    for v, rec in zip(p.variants, p.table.to_dict("records")):
        shown = [num(val) if _is_number(val) else val for _, val in v.values]
        cells = [f'<th scope="row">{esc(val)}</th>' if i == 0 else f"<td>{esc(val)}</td>"
                 for i, val in enumerate(shown)]
        if v.rules is None:
            cells.append(f'<td class="bad" colspan="{len(p.measures) + 1}">not run: {esc(v.error)}</td>')
        else:
            for m in p.measures:
                x = rec.get(m.column)
                text = pct_plain(x) if m.kind == "share" else num(x)
                cls = ["num"]
                if m.column in best and x is not None and np.isfinite(float(x)) and float(x) == float(best[m.column]):
                    cls.append("best")
                if m.column in ("bound_breaks", "fences_infeasible") and x and float(x) > 0:
                    cls.append("bad")
                cells.append(f'<td class="{" ".join(cls)}">{esc(text)}</td>')
            ok = bool(rec.get("audit_ok"))
            cells.append('<td>passes</td>' if ok else '<td class="bad">rule broken</td>')
        rows.append(f'<tr id="variant-{v.number}">{"".join(cells)}</tr>')
    note = (
        '<p class="note">★ and bold mark the best value of a column among the variants that ran: the largest '
        "smallest zone, share near target and median shape; the fewest breaks and failing fences. Zone counts and "
        "changes are choices, not scores, so no best is marked there. Each row's folder under variants/ holds its "
        "lookup.csv, zones.gpkg, rules.toml and summary.json; sweep.csv holds every figure.</p>"
    )
    return (
        f'<div class="table-wrap"><table class="decide" id="decision-table"><caption>One row per variant of the rules'
        f"</caption><thead><tr>{''.join(head)}</tr></thead><tbody>{''.join(rows)}</tbody></table></div>{note}"
    )


def _multiples(p: SweepPage) -> str:
    ran = [(v, rec) for v, rec in zip(p.variants, p.table.to_dict("records")) if v.rules is not None]
    if len(ran) < 2 or not p.measures:
        return ""
    labels = [p.label(v) for v, _ in ran]
    series = [(m, np.array([_float(rec.get(m.column)) for _, rec in ran])) for m in p.measures]
    x_words = "variant: " + ", ".join(p.key_words(k) for k in p.keys)
    data = small_multiples(labels, series, x_words)
    p.charts["measures.svg"] = data
    alt = "; ".join(f"{m.words}: " + ", ".join(num(x) for x in y) for m, y in series)
    return (
        f'<figure><img class="chart full" src="{_uri(data)}" alt="{esc("Small multiples per variant. " + alt)}">'
        "<figcaption>Each panel is one column of the decision table across the variants, in order; every panel "
        "shares the variants axis.</figcaption></figure>"
    )


def _failing(p: SweepPage) -> str:
    out = []
    for v, r in zip(p.variants, p.results):
        if v.rules is None:
            out.append(f"<h3>{esc(p.label(v))}</h3><p>Not run: {esc(v.error)}</p>")
            continue
        if not r.proofs and not r.failures:
            continue
        items = []
        for proof in r.proofs:
            state = solve_word(str(proof.get("status", "")))
            items.append(f"<li><strong>fence {esc(proof.get('fence'))}, tier {esc(proof.get('tier'))}</strong> "
                         f"({esc(state)}): {esc(proof.get('text'))}</li>")
        for f in r.failures:
            items.append(f"<li><strong>fence {esc(f['fence'])}, tier {esc(f['tier'])}</strong> failed: "
                         f"{esc(f['error'])}</li>")
        out.append(f'<h3 id="fail-{v.number}">{esc(p.label(v))}</h3><ul>{"".join(items)}</ul>')
    if not out:
        return "<p>Every variant meets every bound in every fence.</p>"
    return "".join(out)


def map_tier(p: SweepPage) -> str | None:
    """The finest tier whose zones differ between variants (the finest tier when none do)."""
    for t in p.tiers:
        col = f"areas_changed_vs_first.{t}"
        if col in p.table and pd.to_numeric(p.table[col], errors="coerce").fillna(0).gt(0).any():
            return t
    return p.tiers[0] if p.tiers else None


def _maps(p: SweepPage) -> str:
    tier = map_tier(p)
    ran = [(v, r) for v, r in zip(p.variants, p.results) if v.rules is not None and v.number in p.layers]
    if tier is None or not ran:
        return ""
    note = ""
    too_many = [t for t in p.tiers if len(p.layers[ran[0][0].number][t]) > MAX_ZONES_PER_MAP]
    if tier in too_many:
        finer = tier
        tier = next((t for t in p.tiers if t not in too_many), None)
        if tier is None:
            return f'<p class="note">Every tier has more than {MAX_ZONES_PER_MAP:,} zones; the maps are in each variant\'s zones.gpkg.</p>'
        note = (f'<p class="note">Tier {esc(finer)} changed but has more than {MAX_ZONES_PER_MAP:,} zones per map; '
                f"tier {esc(tier)} is shown, and every tier is in each variant's zones.gpkg.</p>")
    first = ran[0][1].lookup[tier]
    figures, spent, left_out = [], 0, []
    for v, r in ran:
        layer = p.layers[v.number][tier]
        drawn, colours = _variant_map(p, v, r, tier, layer, first)
        if spent + len(drawn.svg) > MAPS_BYTES:
            left_out.append(p.label(v))
            continue
        spent += len(drawn.svg)
        p.n_colours = max(p.n_colours, colours)
        figures.append(f'<figure class="map"><figcaption>{esc(p.label(v))}</figcaption>{drawn.svg}</figure>')
    if left_out:
        note += (f'<p class="note">Maps of {esc(", ".join(left_out))} left out to keep the report within its size '
                 "budget; each variant's zones.gpkg holds them.</p>")
    return (
        f"<p>Tier {esc(tier)}, one map per variant at one scale. Zones are matched to the first variant's by their "
        "areas, so a zone that stays the same keeps its fill; hatching with a dark red outline marks a zone outside "
        "its bounds. Scroll to zoom and drag to pan (the maps move together); hover a zone for its code.</p>"
        f'{note}<div class="maps-side linked">{"".join(figures)}</div>'
    )


def _variant_map(p: SweepPage, v: Any, r: Any, tier: str, layer: Any, first: np.ndarray):
    here = np.asarray(r.lookup[tier], dtype=object)
    shown = match_codes(first, here)  # zone -> the first variant's code it matches
    zones = layer["zone"].astype(str).to_numpy()
    geoms = np.asarray(layer.geometry.values, dtype=object)
    colours = colour_by_code([str(shown.get(z, z)) for z in zones], zone_neighbours(geoms))
    broken = {str(b["zone"]) for b in r.breaks if b["tier"] == tier}
    flag = np.array([z in broken for z in zones], dtype=bool)
    classes = [f"h{c} broken" if b else f"f{c}" for c, b in zip(colours.tolist(), flag.tolist())]
    counts = [c for c in layer.columns if c in (p.results[0].tables.get(tier, pd.DataFrame()).columns)
              and c not in ("zone", "fence", "geometry") and not c.endswith("_vs_target")][:2]
    titles = []
    for i, z in enumerate(zones):
        extra = "".join(f"\n{c}: {num(layer[c].iloc[i])}" for c in counts if np.issubdtype(layer[c].dtype, np.number))
        titles.append(f"zone {z}" + extra + ("\noutside its bounds" if flag[i] else ""))
    drawn = zone_map(
        geoms,
        element_ids=[element_id(f"v{v.number}", tier, z) for z in zones],
        classes=classes,
        titles=titles,
        data={"zone": zones, "tier": [tier] * len(zones)},
        on_top=flag,
        fences=layer["fence"].astype(str).to_numpy() if "fence" in layer else None,
        label=f"tier {tier} zones, variant {p.label(v)}",
        svg_id=f"map-v{v.number}",
    )
    return drawn, int(colours.max()) + 1 if colours.size else 0


def match_codes(first: np.ndarray, here: np.ndarray) -> dict[str, str]:
    """Each zone of `here` named as the zone of `first` it shares most areas with, one to one.

    Pairs are taken greedily, largest overlap first (ties by code), so a zone two variants
    draw alike gets one code; a zone left without a partner keeps its own.
    """
    pairs = pd.DataFrame({"a": np.asarray(first, dtype=str), "b": np.asarray(here, dtype=str)})
    overlap = pairs.value_counts().reset_index(name="n").sort_values(["n", "a", "b"], ascending=[False, True, True])
    out: dict[str, str] = {}
    used: set[str] = set()
    for a, b in zip(overlap["a"], overlap["b"]):
        if b not in out and a not in used:
            out[b] = a
            used.add(a)
    taken = set(out.values())
    for b in pairs["b"].unique():
        if b not in out:
            out[b] = b if b not in taken else f"{b}~"
    return out


def _changes(p: SweepPage) -> str:
    ran = [v for v in p.variants if v.rules is not None]
    if len(ran) < 2:
        return ""
    rec = {r["variant"]: r for r in p.table.to_dict("records")}
    pairs = [f"{p.label(a)} → {p.label(b)}" for a, b in zip(ran, ran[1:])]
    per_tier = {t: [_float(rec[b.number].get(f"areas_changed_vs_before.{t}")) for b in ran[1:]] for t in p.tiers
                if f"areas_changed_vs_before.{t}" in p.table}
    if not per_tier:
        return ""
    data = change_bars(pairs, per_tier)
    p.charts["changes.svg"] = data
    rows = "".join(
        f"<tr><th scope=\"row\">{esc(pair)}</th>" + "".join(f'<td class="num">{num(per_tier[t][i])}</td>' for t in per_tier)
        + "</tr>" for i, pair in enumerate(pairs)
    )
    head = "".join(f'<th scope="col">tier {esc(t)}</th>' for t in per_tier)
    return (
        f'<figure><img class="chart" src="{_uri(data)}" alt="Areas changing zone from one variant to the next, '
        f'per tier"></figure><div class="table-wrap"><table><caption>Areas changing zone (zones matched one to one '
        f'by their areas)</caption><thead><tr><th scope="col">variants</th>{head}</tr></thead><tbody>{rows}</tbody>'
        "</table></div>"
    )


def _rules(p: SweepPage) -> str:
    items = []
    for axis in p.summary.sweep.vary if p.summary.sweep is not None else []:
        keys = ", ".join(p.key_words(k) for k in axis.keys)
        vals = ", ".join(" / ".join(g) for g in axis.values)
        items.append(f"<li>{esc(keys)}: {esc(vals)}</li>")
    return (f"<p>Varied (every combination is one variant):</p><ul>{''.join(items)}</ul>"
            f'<details><summary>Base rules</summary><pre class="rules">{esc(p.summary.rules or "")}</pre></details>')


SECTIONS = [
    ("decision", "Decision table", _decision),
    ("measures", "The figures side by side", _multiples),
    ("failing", "Fences that fail, per variant", _failing),
    ("maps", "Maps per variant", _maps),
    ("between", "Areas changing zone between variants", _changes),
    ("rules", "Rules varied", _rules),
]


def render_sweep_report(page_data: SweepPage) -> str:
    """The sweep report as one HTML string; fills `page_data.charts` on the way."""
    p = page_data
    contents, body = render_sections(SECTIONS, p)
    ran = len(p.valid)
    clean = sum(1 for v, r in zip(p.variants, p.results) if v.rules is not None and r.row.get("audit_ok"))
    lede = (f'<p class="lede">{num(len(p.variants))} variants of the rules on {num(p.summary.areas.count if p.summary.areas else None)} '
            f"areas: {num(ran)} ran, {num(clean)} meet every rule.</p>")
    caution = str(p.summary.caution or DEFAULT_CAUTION)
    return page("sweep", caution, lede, contents, body, p.n_colours, wide=True)


def write_sweep_report(folder: Path, *, summary: RunSummary, table: pd.DataFrame, variants: Sequence[Any],
                       results: Sequence[Any], layers: Mapping[int, Mapping[str, Any]]) -> None:
    """report.html and its charts under charts/ (the same SVGs the page holds inline)."""
    p = SweepPage(summary, table, variants, results, layers)
    text = render_sweep_report(p)
    (Path(folder) / "report.html").write_text(text, encoding="utf-8")
    if p.charts:
        (Path(folder) / "charts").mkdir(exist_ok=True)
        for name, data in p.charts.items():
            (Path(folder) / "charts" / name).write_bytes(data)


def _is_number(text: Any) -> bool:
    try:
        float(text)
    except (TypeError, ValueError):
        return False
    return True


def _float(x: Any) -> float:
    try:
        return float(x)
    except (TypeError, ValueError):
        return float("nan")


def _uri(data: bytes) -> str:
    import base64

    return "data:image/svg+xml;base64," + base64.b64encode(data).decode("ascii")
