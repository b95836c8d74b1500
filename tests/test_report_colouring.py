"""Map colouring: no two neighbouring zones share a fill.

Neighbours are found here by testing every pair of polygons with shapely's `intersects`
(no spatial index, an independent path from the report's STRtree query) and held in a
networkx graph, the reference for what "adjacent" means.
"""

from __future__ import annotations

import itertools
import re

import networkx as nx
import numpy as np
import pytest
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st
from report_support import grid_run

from zonedesign.report.colouring import (
    PALETTE,
    colour_by_code,
    colour_graph,
    colour_zones,
    palette,
    zone_neighbours,
)
from zonedesign.report.html import render_report


def reference_graph(geoms: np.ndarray) -> nx.Graph:
    """Every pair of geometries that share at least one point (shapely, pair by pair)."""
    g = nx.Graph()
    g.add_nodes_from(range(len(geoms)))
    n = len(geoms)
    i, j = np.triu_indices(n, k=1)
    hit = shapely.intersects(geoms[i], geoms[j])
    g.add_edges_from(zip(i[hit].tolist(), j[hit].tolist()))
    return g


def voronoi_cells(n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    pts = shapely.multipoints(rng.uniform(0, 1000, (n, 2)))
    frame = shapely.box(0, 0, 1000, 1000)
    cells = shapely.get_parts(shapely.voronoi_polygons(pts, extend_to=frame))
    return shapely.intersection(cells, frame)


def grid_cells(rows: int, cols: int) -> np.ndarray:
    c, r = np.meshgrid(np.arange(cols), np.arange(rows))
    return shapely.box(c.ravel(), r.ravel(), c.ravel() + 1, r.ravel() + 1)


def assert_proper(geoms: np.ndarray, colours: np.ndarray) -> nx.Graph:
    g = reference_graph(geoms)
    clashes = [(a, b) for a, b in g.edges if colours[a] == colours[b]]
    assert clashes == []
    return g


def test_grid_of_squares_meeting_at_corners_needs_four_and_gets_a_proper_colouring():
    cells = grid_cells(12, 15)
    colours = colour_zones(cells)
    g = assert_proper(cells, colours)
    # squares meeting at a corner form a 4-clique (networkx finds it), so four fills are the least
    assert max(len(c) for c in nx.find_cliques(g)) == 4
    assert 4 <= len(set(colours.tolist())) <= len(PALETTE)


@settings(max_examples=8, deadline=None)
@given(seed=st.integers(0, 10_000), n=st.integers(20, 250))
def test_voronoi_tessellation_never_gives_neighbours_one_colour(seed, n):
    cells = voronoi_cells(n, seed)
    colours = colour_zones(cells)
    g = assert_proper(cells, colours)
    # in smallest-last order each zone has at most `degeneracy` coloured neighbours when its
    # turn comes (Matula & Beck 1983), so the palette suffices whenever it is larger; the
    # degeneracy is the largest core number, computed by networkx
    degeneracy = max(nx.core_number(g).values())
    assert degeneracy < len(PALETTE)  # planar maps: at most 5 (common practice)
    assert colours.max() + 1 <= len(PALETTE)


def test_neighbour_pairs_match_the_pairwise_reference():
    cells = voronoi_cells(150, 11)
    pairs = zone_neighbours(cells)
    g = reference_graph(cells)
    assert {tuple(p) for p in pairs.tolist()} == {tuple(sorted(e)) for e in g.edges}


def test_zones_all_meeting_at_one_point_get_distinct_colours_beyond_the_palette():
    # twelve wedges around a centre: every pair touches there, a 12-clique
    angles = np.linspace(0, 2 * np.pi, 13)
    wedges = np.array(
        [
            shapely.Polygon(
                [(0, 0), (10 * np.cos(a), 10 * np.sin(a)), (10 * np.cos(b), 10 * np.sin(b))]
            )
            for a, b in zip(angles[:-1], angles[1:])
        ],
        dtype=object,
    )
    colours = colour_zones(wedges)
    assert_proper(wedges, colours)
    assert len(set(colours.tolist())) == 12
    fills = palette(12)
    assert len(set(fills)) == 12 and fills[: len(PALETTE)] == list(PALETTE)


def test_declared_links_count_as_neighbours():
    # two squares far apart joined by a link (a ferry) must still look apart
    squares = np.array([shapely.box(0, 0, 1, 1), shapely.box(5, 0, 6, 1)], dtype=object)
    colours = colour_zones(squares, extra_pairs=np.array([[0, 1]]))
    assert colours[0] != colours[1]


def test_colour_graph_is_proper_on_random_graphs():
    rng = np.random.default_rng(5)
    for _ in range(20):
        g = nx.gnp_random_graph(
            60, rng.uniform(0.02, 0.3), seed=int(rng.integers(1_000_000))
        )  # networkx reference generator
        colours = colour_graph(60, np.array(list(g.edges), dtype=np.int64).reshape(-1, 2))
        assert all(colours[a] != colours[b] for a, b in g.edges)
        # never more colours than the palette or smallest-last's bound (Matula & Beck 1983)
        degeneracy = max(nx.core_number(g).values(), default=0)
        assert colours.max() + 1 <= max(len(PALETTE), degeneracy + 1)


def test_the_report_map_gives_touching_zones_different_fills():
    run = grid_run(12, parents=(3,), fence_side=6, low_zones=0)
    text = render_report(**run)
    layer = run["layers"]["tier1"]
    fill = {}
    for classes, zone in re.findall(
        r'class="zone ([^"]+)" data-zone="([^"]+)" data-tier="tier1"', text
    ):
        fill[zone] = re.search(r"[fh](\d+)", classes).group(1)
    assert len(fill) == len(layer)
    geoms = np.asarray(layer.geometry.values, dtype=object)
    zones = layer["zone"].tolist()
    g = reference_graph(geoms)
    assert g.number_of_edges() > 0
    assert all(fill[zones[a]] != fill[zones[b]] for a, b in g.edges)


@pytest.mark.parametrize("n", [0, 1])
def test_trivial_maps(n):
    cells = grid_cells(1, n) if n else np.array([], dtype=object)
    assert colour_zones(cells).tolist() == [0] * n


def test_every_pair_of_palette_fills_is_distinguishable():
    def lab(hex_colour: str) -> np.ndarray:
        rgb = np.array([int(hex_colour[i : i + 2], 16) / 255 for i in (1, 3, 5)])
        lin = np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)
        xyz = (
            np.array([[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722], [0.0193, 0.1192, 0.9505]])
            @ lin
        )
        xyz = xyz / np.array([0.95047, 1.0, 1.08883])
        f = np.where(xyz > 216 / 24389, np.cbrt(xyz), (24389 / 27 * xyz + 16) / 116)
        return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])

    # CIE 1976 colour difference; about 10 and above reads as clearly different (common practice)
    for a, b in itertools.combinations(PALETTE, 2):
        assert np.linalg.norm(lab(a) - lab(b)) >= 10, (a, b)
    # soft fills: light enough for the dark outlines and hatching drawn over them
    assert all(lab(c)[0] >= 70 for c in PALETTE)


# ---------------------------------------------------------------- fills keyed by zone code


def test_fills_by_code_are_proper_and_do_not_depend_on_row_order():
    cells = voronoi_cells(200, 3)
    codes = [f"Z{i:03d}" for i in range(len(cells))]
    colours = colour_by_code(codes, zone_neighbours(cells))
    assert_proper(cells, colours)  # adjacency from shapely pair by pair, held in networkx
    perm = np.random.default_rng(1).permutation(len(cells))
    again = colour_by_code([codes[i] for i in perm], zone_neighbours(cells[perm]))
    assert dict(zip([codes[i] for i in perm], again.tolist())) == dict(zip(codes, colours.tolist()))


def test_a_redraw_that_changes_a_few_zones_keeps_the_fill_of_most_kept_zones():
    cells = grid_cells(20, 20)
    codes = [f"Z{i:03d}" for i in range(len(cells))]
    before = dict(zip(codes, colour_by_code(codes, zone_neighbours(cells)).tolist()))
    # a redraw merges four pairs of zones in one corner; every other zone keeps its code
    merged = np.array([shapely.union_all(cells[[i, i + 1]]) for i in (0, 2, 20, 22)], dtype=object)
    rest = [i for i in range(len(cells)) if i not in (0, 1, 2, 3, 20, 21, 22, 23)]
    geoms = np.concatenate([merged, cells[rest]])
    new_codes = ["N1", "N2", "N3", "N4"] + [codes[i] for i in rest]
    after = colour_by_code(new_codes, zone_neighbours(geoms))
    assert_proper(geoms, after)
    same = [before[c] == a for c, a in zip(new_codes[4:], after[4:].tolist())]
    # a change reaches only zones that take their turn after a changed neighbour
    assert np.mean(same) >= 0.95
    # with the previous fills handed over, every kept zone keeps its fill exactly
    exact = colour_by_code(new_codes, zone_neighbours(geoms), keep=before)
    assert_proper(geoms, exact)
    assert all(before[c] == a for c, a in zip(new_codes[4:], exact[4:].tolist()))
