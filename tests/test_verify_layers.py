"""Zone layers: a nested tier dissolved from the tier below covers exactly what its areas do.

Checked with shapely (reference library): each upper zone's polygon built from its lower
zones' polygons is topologically equal to the union of its own areas.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import shapely

from zonedesign.demo.synthetic import voronoi_tessellation
from zonedesign.dissolve import dissolve, parent_of_zones, zone_layers


def test_upper_layers_built_from_lower_zones_equal_the_union_of_their_areas():
    gdf = voronoi_tessellation(400, 3)
    x = gdf.geometry.centroid.x.to_numpy()
    y = gdf.geometry.centroid.y.to_numpy()
    # zones as cells of a square lattice over the centroids: a tier of small cells inside big ones
    small = np.array([f"s{int(a)}-{int(b)}" for a, b in zip(x // (np.ptp(x) / 8 + 1e-9), y // (np.ptp(y) / 8 + 1e-9))],
                     dtype=object)
    big = np.array([f"b{int(a)}-{int(b)}" for a, b in zip(x // (np.ptp(x) / 2 + 1e-9), y // (np.ptp(y) / 2 + 1e-9))],
                   dtype=object)
    lookup = {"tier1": small, "tier2": big}
    tables = {name: pd.DataFrame({"zone": pd.unique(labels)}) for name, labels in lookup.items()}
    layers = zone_layers(gdf.geometry, lookup, tables)
    from_areas = dissolve(gdf.geometry, big)
    assert list(layers["tier2"]["zone"]) == list(from_areas["zone"])
    for built, direct in zip(layers["tier2"].geometry, from_areas.geometry):
        assert shapely.equals(built, direct)
        assert abs(built.area - direct.area) <= 1e-6 * direct.area


def test_a_lower_zone_across_two_upper_zones_falls_back_to_the_areas():
    lower = np.array(["a", "a", "b", "b"], dtype=object)
    assert list(parent_of_zones(lower, np.array(["P", "P", "Q", "Q"], dtype=object))) == ["P", "Q"]
    assert parent_of_zones(lower, np.array(["P", "Q", "Q", "Q"], dtype=object)) is None
