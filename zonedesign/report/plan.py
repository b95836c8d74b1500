"""What the report shows, decided before any HTML is written.

Per-zone problems (bound breaks, audit findings), change kinds of a redraw, which zones are
listed, and which maps are drawn within the size budget (see html.py for the budget).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import shapely

from zonedesign.report import charts
from zonedesign.report.colouring import PALETTE, colour_by_code, zone_neighbours
from zonedesign.report.format import isnan, natural, num, pct, slug
from zonedesign.report.style import KIND_STYLE, KIND_WORDS
from zonedesign.report.svgmap import (
    MAP_BYTES,
    MAX_ZONES_PER_MAP,
    DrawnMap,
    element_id,
    frame_for,
    zone_map,
)
from zonedesign.summaryparts import TierFigures
from zonedesign.summaryrecord import RunSummary

REPORT_BYTES = 8_000_000
MAPS_BYTES = 6_000_000
ZONE_LIST_ROWS = 500
DEVIATION_ROWS = 50  # zones furthest from target listed for a tier over ZONE_LIST_ROWS
MIN_ZONE_BYTES = 120  # a drawn zone never costs less: used to skip fences that cannot fit


@dataclass
class TierMaps:
    """The maps of one tier: whole, or fence by fence, and what was left out and why."""

    tier: str
    full: DrawnMap | None = None
    per_fence: list[tuple[str, DrawnMap, int]] = field(default_factory=list)  # fence, map, breaks
    left_out: list[str] = field(default_factory=list)  # fences not drawn
    note: str = ""
    drawn: set[str] = field(default_factory=set)
    bytes: int = 0


@dataclass
class ReportPlan:
    """The run's inputs to the report and every decision taken on them (`prepare`)."""

    summary: RunSummary
    tables: dict[str, pd.DataFrame]
    layers: dict[str, Any]
    links: dict
    changes: pd.DataFrame | None
    tiers: list[str] = field(default_factory=list)
    limits: dict = field(default_factory=dict)
    counts: list[str] = field(default_factory=list)
    problems: dict[tuple[str, str], list[str]] = field(default_factory=dict)
    maps: dict[str, TierMaps] = field(default_factory=dict)
    change_maps: dict[str, tuple[DrawnMap | None, str]] = field(default_factory=dict)
    kinds: dict[str, dict[str, str]] = field(default_factory=dict)
    listed: dict[str, set[str]] = field(default_factory=dict)
    n_colours: int = len(PALETTE)

    def prepare(self) -> None:
        """Collect problems and change kinds per zone, then choose lists and maps."""
        self.tiers = list(dict.fromkeys(list(self.tables) + list(self.layers)))
        self.limits = charts.limits_from_rules(self.summary.rules, self.tiers)
        self.counts = count_columns(self.tables)
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
            df["geometry"] = np.asarray(
                geom_col.values if geom_col is not None else df.get("geometry"), dtype=object
            )
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
        for b in self.summary.bound_breaks or []:
            add(b.tier, b.zone, b.breaks or "outside its bounds")
        for v in self.summary.violations:
            add(v.tier, v.zone, v.message or v.kind)

    def _collect_kinds(self) -> None:
        for tier in self.tiers:
            table = self.tables.get(tier)
            if table is not None and "change" in table and "zone" in table:
                self.kinds[tier] = dict(zip(table["zone"].astype(str), table["change"].astype(str)))
        ch = self.changes
        if ch is None or not isinstance(ch, pd.DataFrame) or ch.empty or "kind" not in ch:
            return
        new_col = next((c for c in ("new_code", "new_zone", "new_zones") if c in ch), None)
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
                continue
            # over the cap: every zone that breaks a rule, then the zones furthest from
            # their target, so each tier is present and its extremes are in view
            broken = sorted(z for z in zones if (tier, z) in self.problems)[:ZONE_LIST_ROWS]
            devs = [c for c in table.columns if str(c).endswith("_vs_target")]
            listed = set(broken)
            if devs:
                worst = table[devs].abs().max(axis=1).fillna(0).to_numpy()
                for i in np.argsort(-worst, kind="stable")[:DEVIATION_ROWS]:
                    if len(listed) >= ZONE_LIST_ROWS + DEVIATION_ROWS:
                        break
                    listed.add(zones.iat[int(i)])
            self.listed[tier] = listed

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
                self.change_maps[tier] = (
                    None,
                    f"The change map of tier {tier} is left out: its {len(df):,} zones are more than one map can carry ({MAX_ZONES_PER_MAP:,}).",
                )
                continue
            drawn = self._draw_changes(tier, df)
            if len(drawn.svg) > min(MAP_BYTES, left):
                self.change_maps[tier] = (
                    None,
                    f"The change map of tier {tier} is left out: the report's map budget ({MAPS_BYTES / 1e6:g} MB) is spent.",
                )
                continue
            left -= len(drawn.svg)
            self.change_maps[tier] = (drawn, "")

    def _plan_tier(self, tier: str, budget: int) -> TierMaps:
        plan = TierMaps(tier=tier)
        df = self.frame(tier)
        n = len(df)
        if n == 0:
            plan.note = f"Tier {tier} has no zones to draw."
            return plan
        if n <= MAX_ZONES_PER_MAP:
            drawn = self._draw(
                tier, df, np.arange(n), f"Map of tier {tier}: {n:,} zones", f"map-{slug(tier)}"
            )
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
        breaks = {
            f: sum((tier, z) in self.problems for z in df["zone"].to_numpy()[idx])
            for f, idx in groups.items()
        }
        # fences holding rule breaks first: those are the maps a reviewer needs
        order = sorted(groups, key=lambda f: (breaks[f] == 0, natural(f)))
        spent = 0
        per_zone = MIN_ZONE_BYTES  # bytes a drawn zone costs, learnt from the maps drawn so far
        for f in order:
            idx = groups[f]
            if (
                len(groups) == 1
                or idx.shape[0] > MAX_ZONES_PER_MAP
                or idx.shape[0] * per_zone > budget - spent
            ):
                plan.left_out.append(f)
                continue
            drawn = self._draw(
                tier,
                df,
                idx,
                f"Map of tier {tier}, fence {f}: {idx.shape[0]:,} zones",
                f"map-{slug(tier)}-fence-{slug(f)}",
            )
            if spent + len(drawn.svg) > budget:
                plan.left_out.append(f)
                per_zone = max(per_zone, 0.9 * len(drawn.svg) / max(drawn.zones, 1))
                continue
            spent += len(drawn.svg)
            per_zone = max(
                MIN_ZONE_BYTES,
                0.9 * spent / sum(d.zones for _, d, _ in plan.per_fence + [(f, drawn, 0)]),
            )
            plan.per_fence.append((f, drawn, breaks[f]))
            plan.drawn.update(df["zone"].to_numpy()[idx].tolist())
        plan.bytes = spent
        if plan.per_fence:
            plan.note = f"Tier {tier} is drawn fence by fence, because {why}."
            if plan.left_out:
                names = ", ".join(plan.left_out[:30]) + (
                    " and more" if len(plan.left_out) > 30 else ""
                )
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

    def _draw(
        self, tier: str, df: pd.DataFrame, idx: np.ndarray, label: str, svg_id: str
    ) -> DrawnMap:
        part = df.iloc[idx]
        geoms = part["geometry"].to_numpy()
        zones = part["zone"].to_numpy()
        frame = frame_for(bounds(geoms))
        # fills keyed by zone code: a zone kept by a redraw looks as it did in the design
        pairs = np.concatenate([zone_neighbours(geoms, tolerance=0.5 * frame.unit), self._pairs(tier, zones)])
        colours = colour_by_code(zones.tolist(), pairs)
        self.n_colours = max(self.n_colours, int(colours.max()) + 1 if colours.size else 0)
        broken = np.array([(tier, z) in self.problems for z in zones], dtype=bool)
        classes = [
            f"h{c} broken" if b else f"f{c}" for c, b in zip(colours.tolist(), broken.tolist())
        ]
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
        kind = [k if k in KIND_STYLE else "other" for k in kind]
        broken = np.array([(tier, z) in self.problems for z in zones], dtype=bool)
        classes = [f"k-{k}" + (" broken" if b else "") for k, b in zip(kind, broken.tolist())]
        titles = [
            f"{KIND_WORDS[k]}\n{self._title(tier, row)}"
            for k, row in zip(kind, df.to_dict("records"))
        ]
        return zone_map(
            df["geometry"].to_numpy(),
            element_ids=[element_id("change", tier, z) for z in zones],
            classes=classes,
            titles=titles,
            data={"zone": zones, "tier": [tier] * len(zones), "change": kind},
            on_top=broken,
            fences=df["fence"].to_numpy() if "fence" in df else None,
            label=f"Changes in tier {tier}",
            svg_id=f"changes-map-{slug(tier)}",
        )

    def _title(self, tier: str, row: Mapping[str, Any]) -> str:
        zone = str(row.get("zone", ""))
        head = f"zone {zone} · tier {tier}"
        if row.get("fence") not in (None, ""):
            head += f" · fence {row['fence']}"
        lines = [head]
        if row.get("parent") not in (None, "") and not isnan(row.get("parent")):
            lines.append(f"within {row['parent']}")
        lim = self.limits.get(tier, {})
        for c in self.counts:
            if c not in row:
                continue
            text = f"{c} {num(row[c])}"
            dev = row.get(f"{c}_vs_target")
            target = lim.get(c, {}).get("target")
            if dev is not None and not isnan(dev):
                text += f" ({pct(dev)} vs target" + (
                    f" {num(target)})" if target is not None else ")"
                )
            lines.append(text)
        shape = []
        if "polsby_popper" in row:
            shape.append(f"Polsby-Popper {num(row['polsby_popper'])}")
        if "within_spread" in row:
            shape.append(f"within-zone spread {num(row['within_spread'])}")
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
            return f"#maps-{slug(tier)}"
        return "#violations"


def count_columns(tables: Mapping[str, pd.DataFrame]) -> list[str]:
    """Count columns: numeric columns that are neither measures nor bookkeeping."""
    known = {
        "zone",
        "fence",
        "parent",
        "polsby_popper",
        "within_spread",
        "n_areas",
        "n_units",
        "area_km2",
        "bound_break",
        "breaks",
        "change",
        "geometry",
    }
    out: list[str] = []
    for table in tables.values():
        for c in table.columns:
            c = str(c)
            if c in known or c.endswith("_vs_target") or c in out:
                continue
            if pd.api.types.is_numeric_dtype(table[c]) and not pd.api.types.is_bool_dtype(table[c]):
                out.append(c)
    return out


def tier_figures(table: pd.DataFrame | None, counts: Sequence[str]) -> TierFigures:
    """Summary figures of one tier from its zone table, for runs whose summary lacks them."""
    if table is None:
        return TierFigures()
    out: dict = {"zones": len(table)}
    if "bound_break" in table:
        out["bound_breaks"] = int(table["bound_break"].fillna(False).astype(bool).sum())
    out["counts"] = {
        c: {"mean": table[c].mean(), "min": table[c].min(), "max": table[c].max()}
        for c in counts
        if c in table
    }
    out["share_within_10pct_of_target"] = {
        c: float((table[f"{c}_vs_target"].abs() <= 0.10).mean())
        for c in counts
        if f"{c}_vs_target" in table and len(table)
    }
    for key in ("polsby_popper", "within_spread"):
        if key in table and len(table):
            x = table[key].to_numpy(dtype=float)
            out[key] = {
                "median": float(np.nanmedian(x)),
                "p10": float(np.nanquantile(x, 0.1)),
                "p90": float(np.nanquantile(x, 0.9)),
            }
    return TierFigures.of(out)


def bounds(geoms: np.ndarray) -> np.ndarray:
    return shapely.total_bounds(geoms) if len(geoms) else np.array([0.0, 0.0, 1.0, 1.0])
