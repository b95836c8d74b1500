"""Zone outlines as drawn: simplified as a coverage, so neighbours still meet exactly.

The drawn paths are parsed back into polygons and measured with shapely, the reference for
area, overlap and validity.
"""

from __future__ import annotations

import re

import numpy as np
import shapely

from zonedesign.report.svgmap import (
    MAP_SIZE,
    MARGIN,
    element_id,
    frame_for,
    path_data,
    simplify,
    zone_map,
)


def polygons_of(d: str) -> shapely.Geometry:
    """The polygon(s) a path draws under the even-odd rule, in viewBox units."""
    rings = []
    for x, y, steps in re.findall(r"M(-?\d+) (-?\d+)l([^z]*)z", d):
        moves = np.array([int(v) for v in re.findall(r"-?\d+", steps)]).reshape(-1, 2)
        start = np.array([int(x), int(y)])
        pts = np.vstack([start, start + np.cumsum(moves, axis=0)])
        rings.append(shapely.Polygon(pts))
    out = rings[0]
    for r in rings[1:]:
        out = shapely.symmetric_difference(out, r)
    return out


def wiggly_cells(n: int, seed: int) -> np.ndarray:
    """A coverage of Voronoi cells whose shared edges wiggle finely (digitised boundaries).

    The edges are noded and densified once as a network, then every vertex is displaced
    by the same smooth field, so both sides of a shared edge keep identical vertices.
    """
    rng = np.random.default_rng(seed)
    pts = shapely.multipoints(rng.uniform(0, 50_000, (n, 2)))
    frame = shapely.box(0, 0, 50_000, 50_000)
    cells = shapely.intersection(
        shapely.get_parts(shapely.voronoi_polygons(pts, extend_to=frame)), frame
    )
    edges = shapely.segmentize(shapely.get_parts(shapely.union_all(shapely.boundary(cells))), 10.0)
    faces = shapely.get_parts(shapely.polygonize(edges))

    def wiggle(xy: np.ndarray) -> np.ndarray:
        # 8 m wiggles every few tens of metres: far finer than one viewBox unit (50 m)
        return xy + 8.0 * np.column_stack([np.sin(xy[:, 1] / 7.0), np.sin(xy[:, 0] / 9.0)])

    return shapely.transform(faces, wiggle)


def test_simplified_neighbours_neither_overlap_nor_open_gaps():
    cells = wiggly_cells(80, 4)
    frame = frame_for(shapely.total_bounds(cells))
    drawn = [polygons_of(d) for d in path_data(simplify(cells, 0.6 * frame.unit), frame)]
    # rounding to whole units may pinch a ring at a point (invisible at one unit), rarely
    assert sum(not p.is_valid for p in drawn) <= 2
    drawn = [shapely.make_valid(p) for p in drawn]
    assert all(p.area > 0 for p in drawn)
    union = shapely.union_all(drawn)
    # shared edges are simplified once and rounded alike: areas add up, less than a unit apart
    assert sum(p.area for p in drawn) - union.area < 1.0
    assert union.geom_type == "Polygon" and len(union.interiors) == 0
    # the outline still covers the map's extent, up to a unit along its edge
    side = MAP_SIZE - 2 * MARGIN
    assert union.area > (side - 2) ** 2


def test_simplification_shrinks_dense_boundaries():
    cells = wiggly_cells(40, 9)
    frame = frame_for(shapely.total_bounds(cells))
    raw = sum(len(d) for d in path_data(cells, frame))
    small = sum(len(d) for d in path_data(simplify(cells, 0.6 * frame.unit), frame))
    assert small < raw / 2


def test_each_zone_is_one_titled_path_even_when_smaller_than_a_unit():
    big = shapely.box(0, 0, 10_000, 10_000)
    speck = shapely.box(20_000, 20_000, 20_001, 20_001)  # 1 m: far below one unit (20 m)
    drawn = zone_map(
        np.array([big, speck, None], dtype=object),
        element_ids=["zone-t-a", "zone-t-b", "zone-t-c"],
        classes=["f0", "f1", "f2"],
        titles=["zone a", "zone b <&>", "zone c"],
        label="test map",
    )
    paths = re.findall(
        r'<path id="([^"]+)" class="zone [^"]+" d="([^"]+)"><title>([^<]*)</title></path>',
        drawn.svg,
    )
    assert [p[0] for p in paths] == ["zone-t-a", "zone-t-b", "zone-t-c"]
    assert paths[1][2] == "zone b &lt;&amp;&gt;"
    assert polygons_of(paths[1][1]).area == 1  # a one-unit marker keeps the speck hoverable


def test_y_points_up_on_the_map():
    north = shapely.box(0, 1000, 100, 1100)
    south = shapely.box(0, 0, 100, 100)
    frame = frame_for(shapely.total_bounds(np.array([north, south])))
    d_north, d_south = path_data(np.array([north, south], dtype=object), frame)
    assert (
        polygons_of(d_north).centroid.y < polygons_of(d_south).centroid.y
    )  # SVG y grows downwards


def test_element_ids_are_one_to_one_and_safe():
    names = ["a b", "a_b", "a-b", "a_0020b", "é", "x/y", "D1-t1-n0001", "", "-", "--"]
    ids = {(t, z): element_id("zone", t, z) for t in ("tier1", "blo-ck", "blo ck") for z in names}
    assert len(set(ids.values())) == len(ids)
    assert all(re.fullmatch(r"[A-Za-z0-9_-]+", i) for i in ids.values())
