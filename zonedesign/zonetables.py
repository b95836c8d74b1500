"""Per-zone figures of a hierarchy, computed from the base areas.

One row per zone and tier: counts, deviation from target, Polsby-Popper, homogeneity,
number of units and areas, parent zone, fence, bound breaks. The same table feeds
`zones.gpkg`, `summary.json` and the report.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from zonedesign.measures import (
    bound_breaks,
    compact_labels,
    polsby_popper,
    standardise,
    zone_perimeter,
    zone_sums,
)
from zonedesign.records import Areas, Bounds, Graph
from zonedesign.rules import TierRules, tier_in_fence


def zone_table(
    areas: Areas,
    graph: Graph,
    labels: np.ndarray,
    tier: TierRules,
    *,
    parent: np.ndarray | None = None,
    units_per_zone: np.ndarray | None = None,
) -> pd.DataFrame:
    """Figures of every zone of one tier; `labels` holds each area's zone id."""
    areas = areas.in_tier(tier.name)  # zones keep to their tier's own fence
    labels = np.asarray(labels, dtype=object)
    codes, k = compact_labels(labels)
    first = np.zeros(k, dtype=np.int64)
    first[codes[::-1]] = np.arange(labels.shape[0])[::-1]
    zone_ids = labels[first]
    sums = zone_sums(codes, k, areas.counts)
    zone_fence = areas.fence[first].astype(str)
    # each zone is held to the bounds of its fence ([[tier.override]])
    in_fence = {f: tier_in_fence(tier, f).bounds(areas.count_names) for f in set(zone_fence.tolist())}
    zone_bounds = [in_fence[f] for f in zone_fence.tolist()]
    target = np.array([b.target for b in zone_bounds]).reshape(k, len(areas.count_names))
    area = zone_sums(codes, k, areas.area)
    per = zone_perimeter(graph, codes, k, areas.perimeter)
    df = pd.DataFrame({"zone": zone_ids.astype(str), "fence": areas.fence[first].astype(str)})
    for c, name in enumerate(areas.count_names):
        df[name] = sums[:, c]
    for c, name in enumerate(areas.count_names):
        aim = target[:, c]
        if (np.isfinite(aim) & (aim > 0)).any():
            with np.errstate(invalid="ignore", divide="ignore"):
                df[f"{name}_vs_target"] = np.where(aim > 0, (sums[:, c] - aim) / aim, np.nan)
    df["polsby_popper"] = polsby_popper(area, per)
    # a spread, 0 when a zone's areas are alike: named for what it is, not for the aim
    df["within_spread"] = within_variance(areas, codes, k)
    df["n_areas"] = np.bincount(codes, minlength=k)
    df["n_units"] = df["n_areas"] if units_per_zone is None else units_per_zone
    df["area_km2"] = area / 1e6
    # zones of one fence share its bounds: one call per fence, not per zone
    breaks = np.zeros(k)
    for f, b in in_fence.items():
        at = zone_fence == f
        breaks[at] = bound_breaks(sums[at], b)
    df["bound_break"] = breaks > 0
    df["breaks"] = [describe_breaks(sums[z], zone_bounds[z]) if breaks[z] > 0 else "" for z in range(k)]
    if parent is not None:
        df["parent"] = np.asarray(parent, dtype=object)[first].astype(str)
    return df


def within_variance(areas: Areas, codes: np.ndarray, k: int) -> np.ndarray:
    """Mean over attributes of the weighted within-zone variance of standardised values.

    0 means every area of the zone is alike; 1 is the spread of the whole input.
    """
    if areas.attrs.shape[1] == 0:
        return np.zeros(k)
    w = areas.weight.astype(float)
    if w.sum() <= 0:
        w = np.ones_like(w)
    x = standardise(areas.attrs, w)
    W = zone_sums(codes, k, w)
    S = zone_sums(codes, k, w[:, None] * x)
    Q = zone_sums(codes, k, w[:, None] * x**2)
    with np.errstate(invalid="ignore", divide="ignore"):
        var = np.where(W[:, None] > 0, Q / W[:, None] - (S / W[:, None]) ** 2, 0.0)
    return np.maximum(var, 0.0).mean(axis=1)


def describe_breaks(sums: np.ndarray, b: Bounds) -> str:
    parts = []
    for c, name in enumerate(b.count_names):
        if sums[c] < b.lo[c]:
            parts.append(f"{name} {sums[c]:g} < min {b.lo[c]:g}")
        elif sums[c] > b.hi[c]:
            parts.append(f"{name} {sums[c]:g} > max {b.hi[c]:g}")
    return "; ".join(parts)


def tier_figures(df: pd.DataFrame, tier: TierRules, count_names: Sequence[str]) -> dict:
    """Summary figures of one tier's zone table."""
    out: dict = {"zones": int(len(df)), "bound_breaks": int(df["bound_break"].sum())}
    counts = {}
    for name in count_names:
        col = df[name]
        counts[name] = {
            "mean": float(col.mean()) if len(col) else 0.0,
            "min": float(col.min()) if len(col) else 0.0,
            "max": float(col.max()) if len(col) else 0.0,
        }
    out["counts"] = counts
    within = {}
    for name in count_names:
        key = f"{name}_vs_target"
        if key in df:
            within[name] = float((df[key].abs() <= 0.10).mean()) if len(df) else 0.0
    out["share_within_10pct_of_target"] = within
    pp = df["polsby_popper"].to_numpy()
    hom = df["within_spread"].to_numpy()
    out["polsby_popper"] = _quantiles(pp)
    out["within_spread"] = _quantiles(hom)
    return out


def _quantiles(x: np.ndarray) -> dict:
    if x.size == 0:
        return {"median": None, "p10": None, "p90": None}
    return {
        "median": float(np.median(x)),
        "p10": float(np.quantile(x, 0.1)),
        "p90": float(np.quantile(x, 0.9)),
    }


def all_tables(
    areas: Areas, graph: Graph, lookup: Mapping[str, np.ndarray], tiers: Sequence[TierRules]
) -> dict[str, pd.DataFrame]:
    """Zone tables of every tier, each with its parent zone in the tier above."""
    names = [t.name for t in tiers]
    out = {}
    for t, tier in enumerate(tiers):
        parent = lookup[names[t + 1]] if t + 1 < len(tiers) else None
        units = None
        if t > 0:
            below = np.asarray(lookup[names[t - 1]], dtype=object)
            here = np.asarray(lookup[tier.name], dtype=object)
            pairs = pd.DataFrame({"z": here, "u": below}).drop_duplicates()
            per = pairs.groupby("z", sort=False).size()
            codes, k = compact_labels(here)
            first = np.zeros(k, dtype=np.int64)
            first[codes[::-1]] = np.arange(here.shape[0])[::-1]
            units = per.reindex(here[first]).to_numpy()
        out[tier.name] = zone_table(areas, graph, lookup[tier.name], tier, parent=parent, units_per_zone=units)
    return out


def table_breaks(tiers: Sequence[TierRules], tables: Mapping[str, pd.DataFrame]) -> list[dict]:
    """One entry per zone that breaks a bound, from the zone tables."""
    breaks = []
    for t in tiers:
        df = tables[t.name]
        for _, row in df[df["bound_break"]].iterrows():
            breaks.append({"tier": t.name, "zone": row["zone"], "fence": row["fence"], "breaks": row["breaks"]})
    return breaks
