"""Zone polygons: base areas dissolved per zone, joined to the zone figures."""

from __future__ import annotations

from collections.abc import Mapping

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely


def dissolve(geometry: gpd.GeoSeries, labels: np.ndarray) -> gpd.GeoDataFrame:
    """One polygon per zone id, in order of first appearance.

    Official boundaries form a clean coverage, so the coverage union (which only drops
    shared edges) is used; it is much faster than a general overlay union.
    """
    labels = np.asarray(labels, dtype=object)
    codes, uniques = pd.factorize(labels, sort=False)
    order = np.argsort(codes, kind="stable")
    geoms = np.asarray(geometry.values)[order]
    bounds = np.flatnonzero(np.r_[True, np.diff(codes[order]) != 0, True])
    parts = []
    for a, b in zip(bounds[:-1], bounds[1:]):
        chunk = geoms[a:b]
        if chunk.shape[0] == 1:
            parts.append(chunk[0])
            continue
        try:
            merged = shapely.coverage_union_all(chunk)
        except shapely.errors.GEOSException:
            merged = shapely.union_all(chunk)
        if merged.is_empty or not merged.is_valid:
            merged = shapely.make_valid(shapely.union_all(chunk))
        parts.append(merged)
    return gpd.GeoDataFrame({"zone": np.asarray(uniques, dtype=object)}, geometry=parts, crs=geometry.crs)


def zone_layers(
    geometry: gpd.GeoSeries, lookup: Mapping[str, np.ndarray], tables: Mapping[str, pd.DataFrame]
) -> dict[str, gpd.GeoDataFrame]:
    """One layer per tier: dissolved polygon plus the zone table's figures.

    Tiers come bottom first; a nested tier is dissolved from the tier below's polygons
    (far fewer pieces than its areas), a tier whose lower zones straddle two of its zones
    from the areas again.
    """
    layers = {}
    below: tuple[np.ndarray, gpd.GeoDataFrame] | None = None
    for name, labels in lookup.items():
        labels = np.asarray(labels, dtype=object)
        parents = None if below is None else parent_of_zones(below[0], labels)
        if parents is None:
            shapes = dissolve(geometry, labels)
        else:
            shapes = dissolve(below[1].geometry, parents)
        below = (labels, shapes)
        table = tables[name]
        merged = shapes.merge(table, on="zone", how="left", validate="one_to_one")
        layers[name] = gpd.GeoDataFrame(merged, geometry="geometry", crs=geometry.crs)
    return layers


def parent_of_zones(lower: np.ndarray, upper: np.ndarray) -> np.ndarray | None:
    """The upper zone id of every lower zone, in the lower zones' order of first appearance,
    or None when some lower zone lies in two upper zones (then nothing can be built on it)."""
    codes, _ = pd.factorize(np.asarray(lower, dtype=object), sort=False)
    pairs = pd.DataFrame({"z": codes, "p": pd.factorize(np.asarray(upper, dtype=object), sort=False)[0]})
    pairs = pairs.drop_duplicates()
    if pairs["z"].duplicated().any() or (pairs["z"] < 0).any():
        return None
    _, first = np.unique(codes, return_index=True)
    return np.asarray(upper, dtype=object)[first]
