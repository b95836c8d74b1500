"""Synthetic tessellations: reproducible, clean, filling their frame, ready for the core.

Reference libraries: shapely (validity, union area), pyproj (CRS units).
"""

from __future__ import annotations

import numpy as np
import pytest
import shapely

from zonedesign.demo.synthetic import grid_with_holes, voronoi_cells, voronoi_tessellation
from zonedesign.graph import rook_graph, tolerant_graph, unmatched_contacts

COLUMNS = {"id", "persons", "households", "attr_a", "attr_b", "fence", "geometry"}


@pytest.mark.parametrize("clustered", [True, False])
def test_voronoi_tessellation_fills_its_square_with_valid_cells(clustered):
    gdf = voronoi_tessellation(1500, seed=3, clustered=clustered, extent=10_000.0)
    assert len(gdf) == 1500 and set(gdf.columns) == COLUMNS
    assert gdf["id"].is_unique
    geoms = gdf.geometry.values
    # shapely validity and areas (reference library): no gaps, no overlaps
    assert shapely.is_valid(geoms).all()
    assert shapely.area(geoms).sum() == pytest.approx(1e8, rel=1e-9)
    assert shapely.union_all(geoms).area == pytest.approx(1e8, rel=1e-9)
    assert tuple(gdf.total_bounds) == (0.0, 0.0, 10_000.0, 10_000.0)


def test_voronoi_tessellation_is_reproducible_from_its_seed():
    a = voronoi_tessellation(800, seed=11)
    b = voronoi_tessellation(800, seed=11)
    c = voronoi_tessellation(800, seed=12)
    assert shapely.equals_exact(a.geometry.values, b.geometry.values, tolerance=0).all()
    assert a.drop(columns="geometry").equals(b.drop(columns="geometry"))
    assert not shapely.equals_exact(a.geometry.values, c.geometry.values, tolerance=0).all()


def test_voronoi_neighbours_share_identical_vertices():
    gdf = voronoi_tessellation(2000, seed=1)
    i, _, _ = unmatched_contacts(gdf.geometry)
    assert len(i) == 0
    exact = rook_graph(gdf.geometry)
    tolerant = tolerant_graph(gdf.geometry)
    assert np.array_equal(exact.indptr, tolerant.indptr)
    assert np.array_equal(exact.indices, tolerant.indices)
    # a planar tessellation has at most 3n - 6 neighbour pairs (Euler; common practice)
    assert exact.n_edges <= 3 * exact.n - 6


def test_voronoi_cells_hold_their_generators():
    rng = np.random.default_rng(0)
    pts = rng.uniform(0, 50, (300, 2))
    cells = voronoi_cells(pts, (0, 0, 50, 50))
    assert shapely.contains(cells, shapely.points(pts)).all()


def test_grid_with_holes_is_unit_squares_with_cells_removed():
    gdf = grid_with_holes(30, 20, 0.25, seed=4)
    assert set(gdf.columns) == COLUMNS
    assert 0.15 * 600 < 600 - len(gdf) < 0.35 * 600
    assert np.all(shapely.area(gdf.geometry.values) == 1.0)
    cell = np.array([int(s[1:]) - 1 for s in gdf["id"]])
    lower_left = shapely.bounds(gdf.geometry.values)[:, :2]
    assert np.array_equal(lower_left, np.stack([cell % 30, cell // 30], axis=1))
    assert set(gdf["fence"]) == {"F1", "F2", "F3", "F4"}
    right = lower_left[:, 0] >= 15
    top = lower_left[:, 1] >= 10
    assert set(gdf["fence"][right & top]) == {"F4"} and set(gdf["fence"][~right & ~top]) == {"F1"}


def test_counts_and_attributes_are_usable():
    gdf = voronoi_tessellation(1000, seed=2)
    assert (gdf["households"] > 0).all()
    ratio = gdf["persons"] / gdf["households"]
    assert ratio.between(1.9, 2.9).all()
    assert gdf[["attr_a", "attr_b"]].stack().between(0, 1).all()
    # the attributes vary smoothly: neighbours are more alike than random pairs
    graph = rook_graph(gdf.geometry)
    i, j, _ = graph.edges()
    a = gdf["attr_a"].to_numpy()
    rng = np.random.default_rng(0)
    assert np.abs(a[i] - a[j]).mean() < 0.5 * np.abs(a - rng.permutation(a)).mean()


def test_crs_is_metric():
    gdf = voronoi_tessellation(50, seed=0)
    # pyproj (reference library): a projected CRS measured in metres
    assert gdf.crs.is_projected
    assert gdf.crs.axis_info[0].unit_name == "metre"
