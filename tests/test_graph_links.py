"""Links, fences, components, islands and collapsing a tier into the next tier's graph.

Reference libraries: networkx (connected components, quotient graphs), shapely (polygon
distance, perimeter of a union).
"""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
import shapely

from zonedesign.demo.synthetic import grid_with_holes
from zonedesign.errors import InputError
from zonedesign.graph import (
    add_links,
    collapse,
    collapse_perimeter,
    collapse_values,
    components,
    fence_components,
    fence_graph,
    islands,
    read_links,
    rook_graph,
)
from zonedesign.records import Graph

IDS = np.array(["a1", "a2", "a3", "a4", "a5"], dtype=object)


def edge_dict(graph) -> dict[tuple[int, int], float]:
    i, j, w = graph.edges()
    return {(int(a), int(b)): float(c) for a, b, c in zip(i, j, w)}


def to_networkx(graph: Graph) -> nx.Graph:
    g = nx.Graph()
    g.add_nodes_from(range(graph.n))
    for a, b, w in zip(*graph.edges()):
        g.add_edge(int(a), int(b), length=float(w))
    return g


# ---------------------------------------------------------------- links file


def test_read_links_with_and_without_a_header(tmp_path):
    with_header = tmp_path / "links.csv"
    with_header.write_text("from,to\na1,a4\n\n a5 , a2\n", encoding="utf-8")
    i, j = read_links(with_header, IDS)
    assert i.tolist() == [0, 4] and j.tolist() == [3, 1]
    bare = tmp_path / "bare.csv"
    bare.write_text("a1,a4\n", encoding="utf-8")
    i, j = read_links(bare, IDS)
    assert i.tolist() == [0] and j.tolist() == [3]


def test_unknown_id_names_file_row_and_id(tmp_path):
    path = tmp_path / "links.csv"
    path.write_text("from,to\na1,a2\na3,ferry9\n", encoding="utf-8")
    with pytest.raises(InputError) as err:
        read_links(path, IDS)
    text = str(err.value)
    assert "links.csv" in text and "row 3" in text and "'ferry9'" in text


def test_self_links_and_ragged_rows_are_refused(tmp_path):
    path = tmp_path / "links.csv"
    path.write_text("from,to\na2,a2\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"row 2.*itself"):
        read_links(path, IDS)
    path.write_text("from,to\na1,a2,a3\n", encoding="utf-8")
    with pytest.raises(InputError, match="row 2"):
        read_links(path, IDS)
    with pytest.raises(InputError, match="not found"):
        read_links(tmp_path / "missing.csv", IDS)


def test_links_join_with_length_zero_and_keep_existing_lengths():
    graph = Graph.from_edges(5, [0, 1], [1, 2], [3.5, 2.0])
    linked = add_links(graph, np.array([1, 4]), np.array([0, 3]))
    assert edge_dict(linked) == {(0, 1): 3.5, (1, 2): 2.0, (3, 4): 0.0}
    # both directions stored, rows sorted (the Graph contract)
    for v in range(linked.n):
        row = linked.neighbours(v)
        assert np.all(np.diff(row) > 0)
        assert all(v in linked.neighbours(int(u)) for u in row)


def test_fence_graph_drops_edges_between_fences():
    graph = Graph.from_edges(4, [0, 1, 2], [1, 2, 3], [1.0, 1.0, 1.0])
    fenced = fence_graph(graph, np.array(["x", "x", "y", "y"], dtype=object))
    assert edge_dict(fenced) == {(0, 1): 1.0, (2, 3): 1.0}


# ---------------------------------------------------------------- components and islands


def test_components_match_networkx():
    rng = np.random.default_rng(4)
    i = rng.integers(0, 60, 50)
    j = rng.integers(0, 60, 50)
    graph = Graph.from_edges(60, i, j)
    count, labels = components(graph)
    # networkx connected_components (reference library)
    reference = list(nx.connected_components(to_networkx(graph)))
    assert count == len(reference)
    for comp in reference:
        assert len({int(labels[v]) for v in comp}) == 1


def island_layout():
    """Fence F: a row of four squares and one square two metres off; fence G beside it."""
    squares = [shapely.box(x, 0, x + 1, 1) for x in range(4)]
    squares.append(shapely.box(6, 0, 7, 1))  # island of F
    squares += [shapely.box(x, 1, x + 1, 2) for x in range(4)]  # fence G on top
    fence = np.array(["F"] * 5 + ["G"] * 4, dtype=object)
    ids = np.array([f"s{k}" for k in range(9)], dtype=object)
    return squares, fence, ids


def test_fence_components_count_parts_inside_each_fence():
    squares, fence, ids = island_layout()
    graph = rook_graph(squares)
    found = {f.fence: f for f in fence_components(graph, fence)}
    assert (found["F"].n_components, found["F"].sizes) == (2, (4, 1))
    assert (found["G"].n_components, found["G"].sizes) == (1, (4,))


def test_islands_name_the_nearest_area_outside_and_vanish_once_linked():
    squares, fence, ids = island_layout()
    graph = rook_graph(squares)
    found = islands(graph, fence, squares, ids)
    assert len(found) == 1
    isl = found[0]
    assert (isl.fence, isl.ids, isl.nearest, isl.via) == ("F", ("s4",), "s3", "s4")
    # shapely distance between the two polygons (reference library)
    assert isl.distance == pytest.approx(shapely.distance(squares[3], squares[4]))
    where = {v: k for k, v in enumerate(ids)}
    linked = add_links(graph, np.array([where[isl.via]]), np.array([where[isl.nearest]]))
    assert islands(linked, fence, squares, ids) == []


def test_a_link_across_fences_does_not_join_an_island():
    squares, fence, ids = island_layout()
    graph = add_links(rook_graph(squares), np.array([4]), np.array([8]))  # F island to G
    assert [isl.ids for isl in islands(graph, fence, squares, ids)] == [("s4",)]


def test_islands_far_away_are_found_too():
    squares, fence, ids = island_layout()
    squares[4] = shapely.box(5000, 0, 5001, 1)
    found = islands(rook_graph(squares), fence, squares, ids)
    assert found[0].nearest == "s3" and found[0].distance == pytest.approx(4996.0)


# ---------------------------------------------------------------- collapse


def test_collapse_sums_shared_lengths_like_a_networkx_quotient_graph():
    gdf = grid_with_holes(12, 9, 0.1, seed=2)
    graph = rook_graph(gdf.geometry)
    rng = np.random.default_rng(8)
    k = 7
    labels = rng.integers(0, k, graph.n)
    labels[:k] = np.arange(k)
    zones = edge_dict(collapse(graph, labels, k))
    g = to_networkx(graph)
    blocks = [set(np.flatnonzero(labels == z).tolist()) for z in range(k)]

    def total_length(b1, b2):
        return sum(g[u][v]["length"] for u in b1 for v in b2 if g.has_edge(u, v))

    # networkx quotient_graph with summed cut lengths (reference library)
    q = nx.quotient_graph(g, blocks, edge_data=lambda b1, b2: {"length": total_length(b1, b2)})
    index = {frozenset(b): z for z, b in enumerate(blocks)}
    reference = {
        tuple(sorted((index[a], index[b]))): d["length"] for a, b, d in q.edges(data=True)
    }
    assert set(zones) == set(reference)
    assert all(zones[p] == pytest.approx(reference[p]) for p in zones)


def test_collapse_keeps_links_between_zones_with_length_zero():
    graph = Graph.from_edges(4, [0, 2], [1, 3], [2.0, 5.0])
    linked = add_links(graph, np.array([1]), np.array([2]))
    assert edge_dict(collapse(linked, np.array([0, 0, 1, 1]), 2)) == {(0, 1): 0.0}


def test_collapse_values_and_zone_perimeters():
    gdf = grid_with_holes(8, 6, 0.15, seed=9)
    geoms = gdf.geometry.values
    graph = rook_graph(geoms)
    labels = (shapely.get_coordinates(shapely.centroid(geoms))[:, 0] // 3).astype(int)
    k = int(labels.max()) + 1
    counts = gdf[["households", "persons"]].to_numpy()
    sums = collapse_values(labels, k, counts)
    assert np.array_equal(sums, np.stack([counts[labels == z].sum(axis=0) for z in range(k)]))
    perimeter = collapse_perimeter(graph, labels, k, shapely.length(geoms))
    # shapely: perimeter of the dissolved zone (reference library)
    dissolved = [shapely.union_all(geoms[labels == z]).length for z in range(k)]
    assert perimeter == pytest.approx(dissolved)


def test_graphs_from_hashing_follow_the_graph_record_contract():
    """rook_graph builds its CSR arrays directly; they equal Graph.from_edges' own."""
    gdf = grid_with_holes(15, 11, 0.2, seed=6)
    graph = rook_graph(gdf.geometry)
    i, j, w = graph.edges()
    rng = np.random.default_rng(1)
    flip = rng.random(i.shape[0]) < 0.5
    shuffled = rng.permutation(i.shape[0])
    a = np.where(flip, j, i)[shuffled]
    b = np.where(flip, i, j)[shuffled]
    reference = Graph.from_edges(graph.n, a, b, w[shuffled])
    assert np.array_equal(graph.indptr, reference.indptr)
    assert np.array_equal(graph.indices, reference.indices)
    assert np.array_equal(graph.length, reference.length)
    assert graph.indices.dtype == np.int64 and graph.length.dtype == np.float64
