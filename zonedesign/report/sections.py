"""The report's sections, each a function of the plan returning HTML ("" to leave it out)."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pandas as pd

from zonedesign.report import charts
from zonedesign.report.changelist import change_list, policy_note, repair_section
from zonedesign.report.checksections import certificate, violations
from zonedesign.report.format import (
    Raw,
    esc,
    get,
    html_table,
    isnan,
    natural,
    num,
    pct,
    pct_plain,
    slug,
    text_of,
)
from zonedesign.report.plan import ZONE_LIST_ROWS, ReportPlan, tier_figures
from zonedesign.report.runsections import input_section, rules_section, run_details
from zonedesign.report.style import CHANGE_KINDS, KIND_WORDS
from zonedesign.report.svgmap import element_id
from zonedesign.summaryparts import FenceRow


def headline(run: ReportPlan) -> str:
    """One line under the title: areas, fences and zones per tier."""
    s = run.summary
    parts = []
    n_areas = s.areas.count if s.areas else None
    if n_areas is not None:
        parts.append(f"{num(n_areas)} areas")
    if s.areas and s.areas.fences is not None:
        parts.append(s.areas.fences_said())
    for t in run.tiers:
        figures = (s.tiers or {}).get(t)
        n = len(run.tables[t]) if t in run.tables else figures.zones if figures else None
        if n is not None:
            parts.append(f"tier {t}: {num(n)} zones")
    return f'<p class="lede">{esc(" · ".join(parts))}</p>' if parts else ""


def _overview(run: ReportPlan) -> str:
    s = run.summary
    items = []
    if s.command is not None:
        items.append(("Command", str(s.command)))
    rc = s.exit_code
    if rc is not None:
        meaning = {
            0: "every rule holds",
            1: "ran, but a rule is broken",
            2: "bad input or usage",
        }.get(rc, "")
        items.append(("Exit code", f"{rc} ({meaning})" if meaning else str(rc)))
    audit = s.audit
    if audit is not None:
        n = len(audit.violations)
        ok = audit.ok
        items.append(
            (
                "Independent audit",
                "passed" if ok else f"found {n:,} problem(s)" if n else "did not pass",
            )
        )
    if s.bound_breaks is not None:
        items.append(("Zones outside their bounds", f"{len(s.bound_breaks):,}"))
    if s.fence_failures is not None:
        items.append(("Fences that failed", f"{len(s.fence_failures):,}"))
    seconds = s.seconds
    if isinstance(seconds, dict) and "total" in seconds:
        items.append(("Run time", f"{num(seconds['total'])} s"))
    if not items:
        return ""
    rows = "".join(f"<dt>{esc(k)}</dt><dd>{esc(v)}</dd>" for k, v in items)
    return f'<dl class="facts">{rows}</dl>'


def _maps(run: ReportPlan) -> str:
    if not run.maps:
        return ""
    out = [_map_legend()]
    for tier in run.tiers:
        plan = run.maps.get(tier)
        if plan is None:
            continue
        sid = f"maps-{slug(tier)}"
        out.append(
            f'<section id="{sid}" aria-labelledby="{sid}-h"><h3 id="{sid}-h">Tier {esc(tier)}</h3>'
        )
        if plan.note:
            out.append(f'<p class="note" id="{sid}-note">{esc(plan.note)}</p>')
        if plan.full is not None:
            out.append(
                _figure(
                    plan.full.svg,
                    f"Tier {tier}: {plan.full.zones:,} zones; hover a zone for its figures.",
                )
            )
        for i, (fence, drawn, n_breaks) in enumerate(plan.per_fence):
            flag = f", {n_breaks:,} breaking a rule" if n_breaks else ""
            opened = " open" if i == 0 else ""
            out.append(
                f"<details{opened}><summary>Fence {esc(fence)} ({drawn.zones:,} zones{flag})</summary>"
                f"{_figure(drawn.svg, f'Tier {tier}, fence {fence}')}</details>"
            )
        out.append("</section>")
    return "".join(out)


def _map_legend() -> str:
    sw = '<svg class="swatch" viewBox="0 0 24 16" aria-hidden="true">{}</svg>'
    fills = "".join(
        f'<rect class="zone f{i}" x="{i * 3}" y="0" width="3" height="16"/>' for i in range(8)
    )
    items = [
        (
            sw.format(fills),
            "zone fills only tell neighbours apart: no two neighbouring zones share one",
        ),
        (
            sw.format('<rect class="zone h0 broken" x="1" y="1" width="22" height="14"/>'),
            "hatched with a dark red outline: the zone breaks a rule (hover it, or see Rule breaks)",
        ),
        (
            sw.format('<path class="fence" d="M0 8H24"/>'),
            "heavy line: fence boundary, never crossed",
        ),
    ]
    lis = "".join(f"<li>{s}<span>{esc(t)}</span></li>" for s, t in items)
    return f'<ul class="legend" aria-label="Map legend">{lis}</ul>'


def _figure(svg: str, caption: str) -> str:
    return f'<figure class="map">{svg}<figcaption>{esc(caption)}</figcaption></figure>'


def _changes(run: ReportPlan) -> str:
    shares = run.summary.changes or {}
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
        sid = f"changes-{slug(tier)}"
        out.append(
            f'<section id="{sid}" aria-labelledby="{sid}-h"><h3 id="{sid}-h">Tier {esc(tier)}: what changed</h3>'
        )
        if note:
            out.append(f'<p class="note">{esc(note)}</p>')
        if drawn is not None:
            out.append(_figure(drawn.svg, f"Tier {tier}: each zone by its kind of change"))
        out.append("</section>")
    unchanged = {}
    for tier in run.tiers:
        if tier in shares and shares[tier].share_unchanged is not None:
            unchanged[tier] = float(shares[tier].share_unchanged)
        elif tier in run.kinds and run.kinds[tier]:
            ks = list(run.kinds[tier].values())
            unchanged[tier] = ks.count("kept") / len(ks)
    if unchanged:
        out.append('<h3 id="changes-share">Share of zones unchanged</h3>')
        uri = charts.share_bars(unchanged, "share of zones unchanged")
        if uri:
            alt = "; ".join(f"tier {t}: {100 * v:.1f}% unchanged" for t, v in unchanged.items())
            out.append(f'<img class="chart" src="{uri}" alt="{esc(alt)}">')
    rows = []
    kinds_seen: list[str] = []
    per_tier: dict[str, dict[str, int]] = {}
    for tier in run.tiers:
        counts: dict[str, int] = {}
        if tier in shares and shares[tier].kinds is not None:
            counts = {str(k): int(v) for k, v in shares[tier].kinds.items()}
        elif ch is not None and not ch.empty and "tier" in ch and "kind" in ch:
            counts = ch[ch["tier"].astype(str) == tier]["kind"].astype(str).value_counts().to_dict()
        elif tier in run.kinds:
            counts = (
                pd.Series(list(run.kinds[tier].values()), dtype=object).value_counts().to_dict()
            )
        per_tier[tier] = counts
        for k in counts:
            if k not in kinds_seen:
                kinds_seen.append(k)
    order = [k for k in (*CHANGE_KINDS, "retired") if k in kinds_seen] + [
        k for k in kinds_seen if k not in CHANGE_KINDS and k != "retired"
    ]
    if order:
        for tier in run.tiers:
            moved = shares[tier].areas_moved if tier in shares else None
            rows.append(
                [tier]
                + [per_tier[tier].get(k, 0) for k in order]
                + [
                    pct_plain(unchanged[tier]) if tier in unchanged else "–",
                    "–" if moved is None else moved,
                ]
            )
        out.append(
            html_table(
                "Zones by kind of change, per tier",
                ["tier", *order, "unchanged", "areas moved"],
                rows,
            )
        )
    out.append(policy_note(run.summary))
    out.append(change_list(ch))
    return "".join(out)


def _kind_legend() -> str:
    items = []
    for k in (*CHANGE_KINDS, "other"):
        sw = f'<svg class="swatch" viewBox="0 0 24 16" aria-hidden="true"><rect class="zone k-{k}" x="1" y="1" width="22" height="14"/></svg>'
        items.append(f"<li>{sw}<span>{esc(KIND_WORDS[k])}</span></li>")
    return f'<ul class="legend" aria-label="Change map legend">{"".join(items)}</ul>'


def _distributions(run: ReportPlan) -> str:
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
                f"{c}: zones from {num(np.nanmin(v))} to {num(np.nanmax(v))}"
                + "".join(
                    f", {k} {num(lim[c][k])}"
                    for k in ("min", "target", "max")
                    if k in lim.get(c, {})
                )
                for c, v in values.items()
                if v.size
            )
            out.append(f'<h3 id="dist-{slug(tier)}">Tier {esc(tier)}: zone sizes</h3>')
            out.append(
                f'<img class="chart" src="{uri}" alt="{esc(f"Histograms of zone sizes in tier {tier}. {desc}")}">'
            )
    series: dict[str, dict[str, np.ndarray]] = {}
    for col, name in (
        ("polsby_popper", "Polsby-Popper (1 = circle)"),
        ("within_spread", "within-zone spread (variance of the attributes, 0 = alike)"),
    ):
        per = {
            t: run.tables[t][col].to_numpy(dtype=float)
            for t in run.tiers
            if t in run.tables and col in run.tables[t]
        }
        if per:
            series[name] = per
    uri = charts.shape_boxplots(series)
    if uri:
        desc = "; ".join(
            f"{m} median in tier {t} {num(np.nanmedian(v))}"
            for m, per in series.items()
            for t, v in per.items()
            if v.size
        )
        out.append('<h3 id="dist-shape">Shape and within-zone spread</h3>')
        out.append(f'<img class="chart" src="{uri}" alt="{esc(f"Box plots per tier. {desc}")}">')
    return "".join(out)


def _tiers(run: ReportPlan) -> str:
    figures = run.summary.tiers or {}
    names = [t for t in run.tiers] or list(figures)
    if not names:
        return ""
    cols = ["tier", "zones", "outside bounds"]
    for c in run.counts:
        cols += [f"{c} mean (min–max)", f"{c} within 10% of target"]
    cols += ["Polsby-Popper median (p10–p90)", "within-zone spread median (p10–p90)"]
    rows = []
    for t in names:
        f = figures.get(t) or tier_figures(run.tables.get(t), run.counts)
        row = [t, num(f.zones), num(f.bound_breaks)]
        for c in run.counts:
            cf = get(f.counts or {}, c) or {}
            row.append(
                f"{num(cf.get('mean'))} ({num(cf.get('min'))}–{num(cf.get('max'))})" if cf else "–"
            )
            share = get(f.share_within_10pct_of_target or {}, c)
            row.append(pct_plain(share) if share is not None else "no target")
        for q in (f.polsby_popper or {}, f.within_spread or {}):
            row.append(
                f"{num(q.get('median'))} ({num(q.get('p10'))}–{num(q.get('p90'))})" if q else "–"
            )
        rows.append(row)
    out = [html_table("Figures per tier", cols, rows, row_headers=True)]
    obj = run.summary.objective
    if obj:
        orows = []
        for t, o in obj.items():
            w = o.weights if isinstance(o.weights, dict) else {}
            orows.append(
                [
                    t,
                    o.homogeneity or "–",
                    o.compactness or "–",
                    ", ".join(f"{k} {num(v)}" for k, v in w.items()) or "–",
                ]
            )
        if orows:
            out.append(
                html_table(
                    "Objective per tier",
                    ["tier", "homogeneity measure", "compactness measure", "weights"],
                    orows,
                    row_headers=True,
                )
            )
    return "".join(out)


def _zones(run: ReportPlan) -> str:
    from zonedesign.glossary import WORDS

    # the zone tables' own column names, defined where they are read (the README has the same)
    defined = [(w, m) for w, m in WORDS if "_" in w]
    out = [
        '<p class="note">Columns: '
        + "; ".join(f"<strong>{esc(w.replace('_', ' '))}</strong>: {esc(m.removeprefix('in a zone table: '))}"
                    for w, m in defined)
        + ".</p>"
    ] if run.tables else []
    for tier in run.tiers:
        table = run.tables.get(tier)
        listed = run.listed.get(tier)
        if table is None:
            continue
        if not listed:
            out.append(
                f'<p class="note">Tier {esc(tier)}: {len(table):,} zones, none of them breaks a rule or has a target '
                f"to deviate from; every zone is in zones.gpkg, layer {esc(tier)}.</p>"
            )
            continue
        sub = table[table["zone"].astype(str).isin(listed)]
        sub = sub.assign(zone=sub["zone"].astype(str))
        sub = sub.iloc[sorted(range(len(sub)), key=lambda i: natural(sub["zone"].iat[i]))]
        cols = ["zone"] + [c for c in ("fence", "parent") if c in sub]
        cols += [c for c in run.counts if c in sub] + [
            f"{c}_vs_target" for c in run.counts if f"{c}_vs_target" in sub
        ]
        cols += [
            c
            for c in ("polsby_popper", "within_spread", "n_units", "n_areas", "area_km2", "breaks")
            if c in sub
        ]
        rows = []
        ids = []
        plan = run.maps.get(tier)
        for rec in sub.to_dict("records"):
            z = str(rec["zone"])
            cell = esc(z)
            if plan is not None and z in plan.drawn:
                cell = f'<a href="#{element_id("zone", tier, z)}">{cell}</a>'
            row = [Raw(cell)]
            for c in cols[1:]:
                v = rec.get(c)
                row.append(pct(v) if c.endswith("_vs_target") and not isnan(v) else text_of(v))
            rows.append(row)
            ids.append(element_id("row", tier, z))
        if len(table) <= ZONE_LIST_ROWS:
            caption = f"Every zone of tier {tier} ({len(table):,})"
        else:
            caption = (
                f"Tier {tier} has {len(table):,} zones, more than the report lists: shown are the zones that break "
                f"a rule and those furthest from their target ({len(sub):,} in all); every zone is in zones.gpkg, "
                f"layer {tier}"
            )
        out.append(
            f"<details><summary>Tier {esc(tier)}: {len(sub):,} zone(s) listed</summary>"
            f"{html_table(caption, [c.replace('_', ' ') for c in cols], rows, row_ids=ids, row_headers=True)}</details>"
        )
    return "".join(out)


def _fences(run: ReportPlan) -> str:
    fences = run.summary.fences or []
    failures = run.summary.fence_failures or []
    out = []
    if fences:
        cols = [
            "tier",
            "fence",
            "zones",
            "units",
            "breaks",
            "objective",
            "terms",
            "seconds",
            "proof",
            "bound",
            "error",
        ]
        rows = []
        for f in fences:
            terms = f.terms
            terms = (
                ", ".join(f"{k} {num(v)}" for k, v in terms.items())
                if isinstance(terms, dict)
                else text_of(terms)
            )
            rows.append(
                [
                    f.tier,
                    f.fence,
                    num(f.zones),
                    num(f.units),
                    num(f.breaks),
                    num(f.objective),
                    terms,
                    num(f.seconds),
                    _proof(f),
                    num(f.bound) if f.bound is not None else "",
                    f.error or "",
                ]
            )
        proven = sum(1 for f in fences if f.proof == "optimal")
        out.append(
            f"<p>{proven:,} of {len(fences):,} fence-tiers solved exactly and proven optimal (proof "
            "optimal; bound: the solver's lower bound on the objective, equal to it when proven); "
            "the others keep the search's zoning (proof none, with the reason).</p>"
        )
        out.append(html_table("Figures per fence and tier", cols, rows))
    if failures:
        rows = [[f.tier, f.fence, f.error] for f in failures]
        out.append(
            html_table(
                "Fences that failed (no zoning written for them)", ["tier", "fence", "error"], rows
            )
        )
    return "".join(out)


def _proof(f: FenceRow) -> str:
    """"optimal" (proven by the exact step), or "none" with the reason."""
    proof = text_of(f.proof or "none")
    reason = text_of(f.proof_reason or "")
    return proof if proof == "optimal" or not reason else f"{proof}: {reason}"


# (anchor id, heading, maker) in page order
SECTIONS: list[tuple[str, str, Callable[[ReportPlan], str]]] = [
    ("overview", "At a glance", _overview),
    ("maps", "Maps", _maps),
    ("changes", "Changes since the previous zones", _changes),
    ("distributions", "Distributions", _distributions),
    ("tiers", "Tiers", _tiers),
    ("zones", "Zones", _zones),
    ("fences", "Fences", _fences),
    ("violations", "Rule breaks", violations),
    ("repair", "Repair", repair_section),
    ("certificate", "Certificate and proofs", certificate),
    ("input", "Input", input_section),
    ("rules", "Rules used", rules_section),
    ("run", "Run", run_details),
]
