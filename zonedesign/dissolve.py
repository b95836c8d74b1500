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
    """One layer per tier: dissolved polygon plus the zone table's figures."""
    layers = {}
    for name, labels in lookup.items():
        shapes = dissolve(geometry, labels)
        table = tables[name]
        merged = shapes.merge(table, on="zone", how="left", validate="one_to_one")
        layers[name] = gpd.GeoDataFrame(merged, geometry="geometry", crs=geometry.crs)
    return layers
