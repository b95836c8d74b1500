"""Builders shared by the search tests: planar test graphs, problems and reference checks.

Adjacency of polygons is built here with shapely (STRtree candidates, shared boundary
length from the intersection of the two boundaries) and contiguity is checked with
networkx, so the checks do not go through zonedesign.graph or the search's own code.
"""

from __future__ import annotations

import networkx as nx
import numpy as np
import shapely

from zonedesign.measures import standardise
from zonedesign.records import Bounds, Graph, Problem

INF = float("inf")


# ---------------------------------------------------------------- graphs


def grid_graph(keep: np.ndarray) -> Graph:
    """Rook adjacency of the unit squares where keep (rows x cols, bool) is True.

    Squares are numbered row by row over the kept cells; every shared side has length 1.
    """
    rows, cols = keep.shape
    idx = -np.ones(keep.shape, dtype=np.int64)
    idx[keep] = np.arange(int(keep.sum()))
    i, j = [], []
    for r in range(rows):
        for c in range(cols):
            if not keep[r, c]:
                continue
            if r + 1 < rows and keep[r + 1, c]:
                i.append(idx[r, c])
                j.append(idx[r + 1, c])
            if c + 1 < cols and keep[r, c + 1]:
                i.append(idx[r, c])
                j.append(idx[r, c + 1])
    n = int(keep.sum())
    return Graph.from_edges(n, np.array(i, dtype=np.int64), np.array(j, dtype=np.int64), np.ones(len(i)))


def rook_graph(polygons) -> Graph:
    """Rook adjacency of polygons: pairs whose boundaries share a line of positive length."""
    polys = np.asarray(polygons, dtype=object)
    tree = shapely.STRtree(polys)
    a, b = tree.query(polys, predicate="intersects")
    keep = a < b
    a, b = a[keep], b[keep]
    bnd = shapely.boundary(polys)
    shared = shapely.length(shapely.intersection(bnd[a], bnd[b]))
    ok = shared > 1e-9 * np.sqrt(np.maximum(shapely.area(polys[a]), 1e-12))
    return Graph.from_edges(len(polys), a[ok], b[ok], shared[ok])


def voronoi_cells(points: np.ndarray, size: float = 1000.0) -> np.ndarray:
    """Voronoi cells of points in the square [0, size]^2, clipped to it, in point order."""
    box = shapely.box(0.0, 0.0, size, size)
    cells = shapely.voronoi_polygons(shapely.multipoints(points), extend_to=box, ordered=True)
    parts = np.asarray(shapely.get_parts(cells), dtype=object)
    return shapely.intersection(parts, box)


def nx_graph(graph: Graph) -> nx.Graph:
    g = nx.Graph()
    g.add_nodes_from(range(graph.n))
    i, j, _ = graph.edges()
    g.add_edges_from(zip(i.tolist(), j.tolist()))
    return g


# ---------------------------------------------------------------- problems


def make_problem(
    graph: Graph,
    counts: np.ndarray,
    lo: float,
    hi: float,
    target: float = float("nan"),
    *,
    attrs: np.ndarray | None = None,
    area: np.ndarray | None = None,
    perimeter: np.ndarray | None = None,
    weights: dict[str, float] | None = None,
    homogeneity: str = "ssd",
    compactness: str = "polsby",
    previous: np.ndarray | None = None,
    rng: np.random.Generator | None = None,
) -> Problem:
    """A one-count problem ("persons") with two random standardised attributes by default."""
    n = graph.n
    rng = np.random.default_rng(0) if rng is None else rng
    if attrs is None:
        attrs = standardise(rng.normal(size=(n, 2)))
    bounds = Bounds(("persons",), np.array([lo], dtype=float), np.array([hi], dtype=float), np.array([target], dtype=float))
    kw = {}
    if weights is not None:
        kw["term_weights"] = weights
    return Problem(
        graph=graph,
        counts=np.asarray(counts, dtype=float).reshape(n, 1),
        bounds=bounds,
        attrs=attrs,
        weight=np.ones(n),
        area=np.ones(n) if area is None else np.asarray(area, dtype=float),
        perimeter=np.full(n, 4.0) if perimeter is None else np.asarray(perimeter, dtype=float),
        homogeneity=homogeneity,
        compactness=compactness,
        previous=previous,
        **kw,
    )


def voronoi_problem(n: int, seed: int, **kw) -> Problem:
    """Voronoi cells of n random points, rook adjacency and shapely area / perimeter."""
    rng = np.random.default_rng(seed)
    cells = voronoi_cells(rng.uniform(0, 1000.0, size=(n, 2)))
    graph = rook_graph(cells)
    counts = kw.pop("counts", None)
    if counts is None:
        counts = rng.integers(1, 20, size=n)
    return make_problem(
        graph, counts, area=shapely.area(cells), perimeter=shapely.length(cells), rng=rng, **kw
    )


def feasible_voronoi_problem(n: int, seed: int, lo: float) -> Problem:
    """A Voronoi problem with floor lo and a ceiling every connected fence can meet.

    By the spanning-tree argument of test_search_properties (common practice): with
    hi >= (f + 1) * lo + the largest unit, f the fan-out of a depth-first spanning tree,
    every connected fence whose total reaches the floor can meet both bounds.
    """
    p = voronoi_problem(n, seed=seed, lo=lo, hi=np.inf)
    hi = (tree_fan_out(p.graph) + 1) * lo + float(p.counts.max())
    assert p.counts.sum() >= lo
    return voronoi_problem(n, seed=seed, lo=lo, hi=hi, target=0.5 * (lo + hi))


# ---------------------------------------------------------------- reference checks


def regionalization_faults(graph: Graph, labels: np.ndarray) -> list[str]:
    """Broken formal conditions of a regionalization (Duque, Ramos & Surinach 2007).

    Every unit in exactly one region, no empty region, regions contiguous (networkx), and
    no more regions than units. An empty list means the labelling is a regionalization.
    """
    faults = []
    labels = np.asarray(labels)
    n = graph.n
    if labels.shape != (n,) or not np.issubdtype(labels.dtype, np.integer):
        return [f"labels have shape {labels.shape} and dtype {labels.dtype}"]
    if n == 0:
        return faults
    k = int(labels.max()) + 1
    if labels.min() < 0:
        faults.append("a unit has no region")
    used = np.unique(labels)
    if used.size != k:
        faults.append(f"empty regions among 0..{k - 1}")
    if k > n:
        faults.append(f"{k} regions for {n} units")
    g = nx_graph(graph)
    for z in used:
        members = np.flatnonzero(labels == z).tolist()
        if not nx.is_connected(g.subgraph(members)):
            faults.append(f"region {z} is not connected")
    return faults


def component_of(graph: Graph) -> np.ndarray:
    """Connected component id of every unit (networkx)."""
    out = np.zeros(graph.n, dtype=np.int64)
    for c, comp in enumerate(nx.connected_components(nx_graph(graph))):
        out[list(comp)] = c
    return out


def tree_fan_out(graph: Graph) -> int:
    """Most children of one node in depth-first spanning trees of the components (networkx)."""
    g = nx_graph(graph)
    most = 0
    for comp in nx.connected_components(g):
        root = min(comp)
        tree = nx.dfs_tree(g.subgraph(comp), root)
        most = max(most, max((tree.out_degree(v) for v in tree.nodes), default=0))
    return most
