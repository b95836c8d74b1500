"""Zones from zone polygons: derive a lookup by overlay and flag what does not fit.

A hierarchy handed over as polygon layers (one per tier) instead of a lookup is turned into
one: each area goes to the zone holding the largest share of its area. Two things are
flagged, with the tolerance stated in every flag:

- area-split: an area of which zones other than its own hold more than the tolerance
  share, or of which more than the tolerance lies in no zone (area id, zones, shares);
- zone-boundary: a zone whose boundary does not follow area boundaries, seen from the zone
  side: it holds more than the tolerance share of an area but not all of it (the areas it
  cuts, with the share of each inside the zone), or more than the tolerance share of the
  zone lies outside every area.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd
import shapely

from zonedesign.errors import InputError


def _valid(geoms: np.ndarray) -> np.ndarray:
    bad = ~shapely.is_valid(geoms)
    if bad.any():
        geoms = geoms.copy()
        geoms[bad] = shapely.make_valid(geoms[bad], method="structure", keep_collapsed=False)
    return geoms


def zones_from_layers(
    area_geometry,
    area_ids: Sequence | np.ndarray,
    layers: Mapping[str, object],
    id_column: str,
    tolerance_share: float = 0.01,
) -> tuple[dict[str, np.ndarray], list[dict]]:
    """Each area's zone per tier by overlay, and flags for everything that does not nest.

    area_geometry: GeoSeries of the areas (projected CRS), in the order of `area_ids`.
    layers: GeoDataFrame per tier (bottom first) with the zone id in `id_column`; a layer in
        another CRS is reprojected to the areas' CRS.
    tolerance_share: share of an area (or zone) that may lie across a boundary unflagged.

    Returns (labels, flags): labels[tier] is an object array of zone ids (None where no zone
    covers the area); each flag is a dict with kind, tier, area or zone, the zones or areas
    involved, their shares, tolerance_share and a message.

    >>> labels, flags = zones_from_layers(areas.geometry, areas["code"], {"small": small_zones}, "zone")
    """
    if not 0 <= tolerance_share < 0.5:
        raise InputError(f"tolerance_share must be in [0, 0.5), got {tolerance_share}", where="overlay")
    ids = np.asarray(area_ids).astype(str)
    geoms = _valid(np.asarray(getattr(area_geometry, "values", area_geometry), dtype=object))
    if geoms.shape[0] != ids.shape[0]:
        raise InputError(f"{geoms.shape[0]} area geometries for {ids.shape[0]} area ids", where="overlay")
    crs = getattr(area_geometry, "crs", None)
    a_area = shapely.area(geoms)
    tol = float(tolerance_share)
    labels: dict[str, np.ndarray] = {}
    flags: list[dict] = []
    for tier, layer in layers.items():
        if id_column not in layer.columns:
            raise InputError(f"no column {id_column!r} (columns: {', '.join(map(str, layer.columns))})",
                             where=f"zone layer {tier!r}")
        if crs is not None and getattr(layer, "crs", None) is not None and layer.crs != crs:
            layer = layer.to_crs(crs)
        zgeom = _valid(np.asarray(layer.geometry.values, dtype=object))
        zid = layer[id_column].astype(str).to_numpy()
        pairs = _overlaps(geoms, a_area, zgeom, zid)
        best = pairs.drop_duplicates("area")
        lab = np.full(ids.shape[0], None, dtype=object)
        lab[best["area"].to_numpy()] = best["zone"].to_numpy()
        labels[tier] = lab
        flags.extend(_area_flags(pairs, lab, ids, tier, tol))
        z_area = pd.Series(shapely.area(zgeom)).groupby(zid).sum()
        flags.extend(_zone_flags(pairs, z_area, ids, tier, tol))
    return labels, flags


def _overlaps(geoms: np.ndarray, a_area: np.ndarray, zgeom: np.ndarray, zid: np.ndarray) -> pd.DataFrame:
    """Rows (area, zone, overlap, share of the area) for every area and zone that overlap,
    each area's largest share first."""
    ai, zi = shapely.STRtree(zgeom).query(geoms, predicate="intersects")
    inter = shapely.area(shapely.intersection(geoms[ai], zgeom[zi]))
    pairs = pd.DataFrame({"area": ai, "zone": zid[zi], "overlap": inter})
    pairs = pairs[pairs["overlap"] > 0].groupby(["area", "zone"], as_index=False)["overlap"].sum()
    pairs["share"] = pairs["overlap"] / a_area[pairs["area"].to_numpy()]
    return pairs.sort_values(["area", "share"], ascending=[True, False], kind="stable")


def _area_flags(pairs: pd.DataFrame, lab: np.ndarray, ids: np.ndarray, tier: str, tol: float) -> list[dict]:
    """The area side: an area split between zones, or partly or wholly in no zone."""
    flags: list[dict] = []
    for a, group in pairs.groupby("area", sort=True):
        shares = group["share"].to_numpy()
        zones = group["zone"].tolist()
        outside = 1.0 - shares.sum()
        if shares[1:].sum() > tol or outside > tol:
            flags.append(
                {
                    "kind": "area-split",
                    "tier": tier,
                    "area": ids[a],
                    "zones": zones,
                    "shares": [round(float(s), 6) for s in shares],
                    "uncovered_share": round(max(float(outside), 0.0), 6),
                    "tolerance_share": tol,
                    "message": f"area {ids[a]} is split between zones of tier {tier}: "
                    + ", ".join(f"{z} {s:.1%}" for z, s in zip(zones, shares))
                    + (f", none {outside:.1%}" if outside > tol else "")
                    + f" (tolerance {tol:.1%}); it goes to {zones[0]}",
                }
            )
    for a in np.flatnonzero(np.array([v is None for v in lab])):
        flags.append(
            {
                "kind": "area-split",
                "tier": tier,
                "area": ids[a],
                "zones": [],
                "shares": [],
                "uncovered_share": 1.0,
                "tolerance_share": tol,
                "message": f"area {ids[a]} lies in no zone of tier {tier}",
            }
        )
    return flags


def _zone_flags(pairs: pd.DataFrame, z_area: pd.Series, ids: np.ndarray, tier: str, tol: float) -> list[dict]:
    """The zone side: a zone cuts an area when it holds more than the tolerance of it but
    not all of it; a zone may also reach beyond every area."""
    flags: list[dict] = []
    for z, group in pairs.groupby("zone", sort=True):
        total = float(z_area[z])
        if total <= 0:
            continue
        cut = group[(group["share"] > tol) & (group["share"] < 1.0 - tol)]
        cut = cut.sort_values("share", ascending=False, kind="stable")
        outside_share = max(total - float(group["overlap"].sum()), 0.0) / total
        if len(cut) or outside_share > tol:
            listed = ", ".join(f"{ids[a]} {s:.1%}" for a, s in zip(cut["area"][:5], cut["share"][:5]))
            flags.append(
                {
                    "kind": "zone-boundary",
                    "tier": tier,
                    "zone": z,
                    "areas": [ids[a] for a in cut["area"]],
                    "shares": [round(float(s), 6) for s in cut["share"]],
                    "outside_share": round(outside_share, 6),
                    "tolerance_share": tol,
                    "message": f"zone {z} of tier {tier} does not follow area boundaries"
                    + (f": it cuts {len(cut)} area{'s' if len(cut) > 1 else ''} ({listed})" if len(cut) else "")
                    + (f"; {outside_share:.1%} of it lies outside every area" if outside_share > tol else "")
                    + f" (tolerance {tol:.1%})",
                }
            )
    return flags
