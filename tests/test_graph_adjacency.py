"""Adjacency from polygons: exact segment hashing, the tolerant method and build_graph.

Open data: NY8 census tracts from Debian's r-cran-spdata (NY8_utm18.shp). Reference
library: shapely (touches / intersects predicates and boundary intersection lengths).
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pytest
import shapely

from zonedesign.demo.synthetic import grid_with_holes, voronoi_tessellation
from zonedesign.graph import (
    build_graph,
    queen_graph,
    rook_graph,
    tolerant_graph,
    unmatched_contacts,
)
from zonedesign.rules import GraphRules


def edge_dict(graph) -> dict[tuple[int, int], float]:
    i, j, w = graph.edges()
    return {(int(a), int(b)): float(c) for a, b, c in zip(i, j, w)}


# ---------------------------------------------------------------- NY8 (open data)


@pytest.fixture(scope="module")
def ny8(spdata_dir):
    gdf = gpd.read_file(spdata_dir / "NY8_utm18.shp", engine="pyogrio")
    raw = gdf.geometry.values
    repaired = np.flatnonzero(~shapely.is_valid(raw))
    geoms = shapely.make_valid(raw, method="structure", keep_collapsed=False)
    tree = shapely.STRtree(geoms)
    i, j = tree.query(geoms, predicate="intersects")
    keep = i < j
    i, j = i[keep], j[keep]
    bound = shapely.boundary(geoms)
    shared = shapely.length(shapely.intersection(bound[i], bound[j]))
    return {
        "geoms": geoms,
        "ids": gdf["AREAKEY"].to_numpy(dtype=object),
        "repaired": set(repaired.tolist()),
        "touching": {(int(a), int(b)): float(s) for a, b, s in zip(i, j, shared)},
        "touches": set(zip(i[shapely.touches(geoms[i], geoms[j])].tolist(),
                           j[shapely.touches(geoms[i], geoms[j])].tolist())),
    }


@pytest.mark.opendata
def test_ny8_rook_pairs_are_the_pairs_sharing_boundary_length(ny8):
    rook = edge_dict(rook_graph(ny8["geoms"]))
    reference = {p for p, s in ny8["touching"].items() if s > 0}
    # shapely: pairs whose boundaries intersect along a positive length (reference library)
    assert set(rook) == reference
    # regression value: 764 unordered pairs of NY8_utm18.shp tracts (r-cran-spdata) that
    # share boundary length, counted by this rook graph and equal to the shapely set above
    assert len(rook) == 764


@pytest.mark.opendata
def test_ny8_queen_adds_the_point_contacts(ny8):
    queen = edge_dict(queen_graph(ny8["geoms"]))
    rook = edge_dict(rook_graph(ny8["geoms"]))
    # shapely intersects: every pair of tracts that meet at all (reference library)
    assert set(queen) == set(ny8["touching"])
    # regression value: 48 unordered tract pairs of NY8_utm18.shp (r-cran-spdata) that meet
    # at points only, counted as queen pairs minus rook pairs (shapely agrees on both sets)
    point_only = set(queen) - set(rook)
    assert len(point_only) == 48
    assert all(queen[p] == 0.0 and ny8["touching"][p] == 0.0 for p in point_only)
    # shapely touches holds for every pair but those whose repaired interiors overlap
    overlapping = set(queen) - ny8["touches"]
    assert overlapping and all(set(p) & ny8["repaired"] for p in overlapping)


@pytest.mark.opendata
def test_ny8_hashing_and_tolerant_method_agree(ny8):
    rook = edge_dict(rook_graph(ny8["geoms"]))
    tolerant = edge_dict(tolerant_graph(ny8["geoms"]))
    assert set(rook) == set(tolerant)
    for pair, length in rook.items():
        if set(pair) & ny8["repaired"]:
            continue  # checked below: repair moved their vertices
        # shapely boundary intersection length (reference library)
        assert length == pytest.approx(ny8["touching"][pair], rel=1e-6)
        assert length == pytest.approx(tolerant[pair], rel=1e-6)


@pytest.mark.opendata
def test_ny8_check_recovers_boundary_moved_by_repair(ny8):
    """make_valid re-draws the repaired tracts with vertices their neighbours lack; the
    check in build_graph measures those stretches as a 5 cm tolerant method does."""
    i, j, _ = unmatched_contacts(ny8["geoms"])
    assert len(i) > 0
    assert all({int(a), int(b)} & ny8["repaired"] for a, b in zip(i, j))
    notes: list[str] = []
    built = edge_dict(build_graph(ny8["geoms"], GraphRules(), ids=ny8["ids"], notes=notes))
    near = edge_dict(tolerant_graph(ny8["geoms"], tolerance=0.05))
    assert set(built) == set(near)
    for pair, length in built.items():
        # within 5 cm of each other's boundary, measured by shapely buffers (reference library)
        assert length == pytest.approx(near[pair], rel=1e-3, abs=1.0)
    assert len(notes) == 1 and str(ny8["ids"][i[0]]) in notes[0]


# ---------------------------------------------------------------- grids


@pytest.mark.parametrize("nx, ny", [(1, 1), (1, 7), (5, 4), (13, 9)])
def test_rook_and_queen_counts_of_a_full_grid(nx, ny):
    geoms = grid_with_holes(nx, ny).geometry
    rook = rook_graph(geoms)
    queen = queen_graph(geoms)
    # common practice: a grid has nx(ny-1) + ny(nx-1) rook pairs of unit length ...
    assert rook.n_edges == nx * (ny - 1) + ny * (nx - 1)
    assert np.all(rook.length == 1.0)
    # ... and queen adds the 2(nx-1)(ny-1) diagonal corner contacts, of length 0
    assert queen.n_edges - rook.n_edges == 2 * (nx - 1) * (ny - 1)
    qd, rd = edge_dict(queen), edge_dict(rook)
    assert all(qd[p] == (rd[p] if p in rd else 0.0) for p in qd)


def test_grid_with_holes_neighbours_are_cells_one_step_apart():
    gdf = grid_with_holes(20, 15, 0.3, seed=3)
    cell = np.array([int(s[1:]) - 1 for s in gdf["id"]])
    col, row = cell % 20, cell // 20
    expected = {
        (a, b)
        for a in range(len(cell))
        for b in range(a + 1, len(cell))
        if abs(col[a] - col[b]) + abs(row[a] - row[b]) == 1
    }
    assert set(edge_dict(rook_graph(gdf.geometry))) == expected
    assert set(edge_dict(tolerant_graph(gdf.geometry))) == expected


def test_rings_of_holes_and_parts_of_multipolygons_count():
    donut = shapely.box(0, 0, 5, 5).difference(shapely.box(2, 2, 3, 3))
    core = shapely.box(2, 2, 3, 3)
    twin = shapely.MultiPolygon([shapely.box(6, 0, 7, 1), shapely.box(6, 2, 7, 3)])
    right = shapely.Polygon([(7, 0), (8, 0), (8, 3), (7, 3), (7, 2), (7, 1)])
    graph = edge_dict(rook_graph([donut, core, twin, right]))
    assert graph == {(0, 1): 4.0, (2, 3): 2.0}
    assert edge_dict(tolerant_graph([donut, core, twin, right])) == graph


def test_min_shared_length_drops_short_contacts():
    geoms = [
        shapely.Polygon([(0, 0), (1, 0), (1, 0.9), (1, 1), (0, 1)]),
        shapely.Polygon([(1, 0.9), (2, 0.9), (2, 2), (1, 2), (1, 1)]),  # 0.1 along the first
        shapely.box(0, 1, 1, 2),
    ]
    assert set(edge_dict(rook_graph(geoms))) == {(0, 1), (0, 2), (1, 2)}
    assert set(edge_dict(rook_graph(geoms, min_shared_length=0.5))) == {(0, 2), (1, 2)}
    assert set(edge_dict(tolerant_graph(geoms, min_shared_length=0.5))) == {(0, 2), (1, 2)}
    rules = GraphRules(min_shared_length=0.5)
    assert set(edge_dict(build_graph(geoms, rules))) == {(0, 2), (1, 2)}


def test_t_junction_is_missed_by_hashing_but_found_by_the_check():
    left = shapely.Polygon([(0, 0), (1, 0), (1, 0.25), (1, 1), (0, 1)])  # extra vertex
    right = shapely.box(1, 0, 2, 1)
    assert rook_graph([left, right]).n_edges == 0  # the documented limitation
    i, j, w = unmatched_contacts([left, right])
    assert (i.tolist(), j.tolist()) == ([0], [1]) and w[0] == pytest.approx(1.0)
    notes: list[str] = []
    built = build_graph([left, right], GraphRules(), notes=notes)
    assert edge_dict(built) == {(0, 1): pytest.approx(1.0)}
    assert notes and "different vertices" in notes[0]
    assert edge_dict(build_graph([left, right], GraphRules(contiguity="queen"))) == {
        (0, 1): pytest.approx(1.0)
    }


def test_vertex_off_the_line_by_rounding_needs_a_tolerance():
    # the extra vertex lies a rounding error off the neighbour's edge
    left = shapely.Polygon([(0, 0), (1, 0), (1 + 1e-12, 1 / 3), (1, 1), (0, 1)])
    right = shapely.box(1, 0, 2, 1)
    assert edge_dict(build_graph([left, right], GraphRules())) == {(0, 1): pytest.approx(1.0)}
    near = edge_dict(build_graph([left, right], GraphRules(tolerance=1e-6)))
    assert near == {(0, 1): pytest.approx(1.0, abs=1e-5)}


def test_tolerant_method_bridges_gaps_but_not_corner_contacts():
    a = shapely.box(0, 0, 1, 1)
    b = shapely.box(1.01, 0, 2, 1)  # a 1 cm gap
    c = shapely.box(2.005, 1.005, 3, 2)  # meets b only near a corner
    rook = edge_dict(tolerant_graph([a, b, c], tolerance=0.02))
    assert set(rook) == {(0, 1)}
    assert rook[(0, 1)] == pytest.approx(1.0, abs=0.1)
    queen = edge_dict(tolerant_graph([a, b, c], tolerance=0.02, queen=True))
    assert queen[(1, 2)] == 0.0 and set(queen) == {(0, 1), (1, 2)}
    assert tolerant_graph([a, b, c]).n_edges == 0


def test_hashing_and_tolerant_agree_on_voronoi_cells():
    geoms = voronoi_tessellation(3000, seed=5).geometry
    for exact, tolerant in (
        (rook_graph(geoms), tolerant_graph(geoms)),
        (queen_graph(geoms), tolerant_graph(geoms, queen=True)),
    ):
        e, t = edge_dict(exact), edge_dict(tolerant)
        assert set(e) == set(t)
        assert all(e[p] == pytest.approx(t[p], rel=1e-6, abs=1e-9) for p in e)


def test_build_graph_refuses_unknown_contiguity():
    with pytest.raises(ValueError, match="contiguity"):
        build_graph([shapely.box(0, 0, 1, 1)], GraphRules(contiguity="bishop"))


def test_a_tolerance_that_parts_exact_neighbours_says_so():
    # b touches a along 5 mm of a's edge; snapping at 2 cm takes that contact away
    a, b, c = shapely.box(0, 0, 1, 1), shapely.box(1, 0.995, 2, 1.995), shapely.box(0, 1, 1, 2)
    notes: list[str] = []
    graph = build_graph([a, b, c], GraphRules(tolerance=0.02), notes=notes)
    assert (0, 1) not in edge_dict(graph)
    assert len(notes) == 1 and "1 pair(s)" in notes[0] and "tolerance 0.02" in notes[0]
    quiet: list[str] = []
    kept = build_graph([a, b, c], GraphRules(tolerance=0.001), notes=quiet)
    assert (0, 1) in edge_dict(kept) and quiet == []
