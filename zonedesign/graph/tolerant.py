"""Tolerant adjacency by geometric predicates, for data whose neighbours do not share vertices.

Candidate pairs come from an STRtree query; the shared length of a pair is measured on
the boundaries themselves. With `tolerance == 0` this is the exact intersection of the
two boundaries and agrees with segment hashing on clean data. With `tolerance > 0` gaps
and overlaps up to `tolerance` are bridged: the length of A's boundary lying within
`tolerance` of B's boundary, averaged with the same measured from B. Such lengths run long by up to
about a tolerance at each end of a shared stretch, and polygons meeting at a corner show
a contact of a few tolerances; contacts up to `POINT_CONTACT * tolerance` are therefore
taken for point contacts (length 0, queen only).
"""

from __future__ import annotations

import numpy as np
import shapely

from zonedesign.graph.adjacency import as_polygonal, graph_from_pairs
from zonedesign.records import Graph

POINT_CONTACT = 4.0


def candidate_pairs(polys: np.ndarray, tolerance: float) -> tuple[np.ndarray, np.ndarray]:
    """Pairs (i < j) of polygons that intersect or lie within `tolerance` of each other."""
    tree = shapely.STRtree(polys)
    if tolerance > 0:
        i, j = tree.query(polys, predicate="dwithin", distance=tolerance)
    else:
        i, j = tree.query(polys, predicate="intersects")
    keep = i < j
    return i[keep].astype(np.int64), j[keep].astype(np.int64)


def shared_lengths(polys: np.ndarray, i: np.ndarray, j: np.ndarray, tolerance: float) -> np.ndarray:
    """Shared boundary length of each pair (i, j) measured as the module text describes."""
    bound = shapely.boundary(polys)
    if tolerance <= 0:
        return shapely.length(shapely.intersection(bound[i], bound[j]))
    used = np.unique(np.concatenate([i, j]))
    halo = np.empty(polys.shape[0], dtype=object)
    # a band around the other's boundary, not its whole polygon: where two polygons
    # overlap, the part of A's boundary deep inside B is not shared boundary
    halo[used] = shapely.buffer(bound[used], tolerance)
    one_way = shapely.length(shapely.intersection(bound[i], halo[j]))
    other_way = shapely.length(shapely.intersection(bound[j], halo[i]))
    return 0.5 * (one_way + other_way)


def tolerant_graph(
    geometry, tolerance: float = 0.0, min_shared_length: float = 0.0, queen: bool = False
) -> Graph:
    """Adjacency from geometric predicates, bridging gaps and overlaps up to `tolerance`.

    Rook (default): pairs whose shared length exceeds `min_shared_length` (and, when
    tolerance > 0, the point-contact allowance). Queen: every pair that touches or lies
    within `tolerance`; pairs below the allowance carry length 0.

    >>> import shapely
    >>> squares = [shapely.box(0, 0, 1, 1), shapely.box(1.01, 0, 2, 1)]
    >>> tolerant_graph(squares, tolerance=0.05).edges()[2].round(2)
    array([1.08])
    """
    if tolerance < 0:
        raise ValueError(f"tolerance must be >= 0, got {tolerance}")
    if min_shared_length < 0:
        raise ValueError(f"min_shared_length must be >= 0, got {min_shared_length}")
    polys = as_polygonal(geometry)
    n = polys.shape[0]
    i, j = candidate_pairs(polys, tolerance)
    length = shared_lengths(polys, i, j, tolerance)
    length = np.nan_to_num(length, nan=0.0)
    point = length <= POINT_CONTACT * tolerance
    length = np.where(point, 0.0, length)
    if queen:
        return graph_from_pairs(n, i, j, length)
    keep = ~point & (length > min_shared_length)
    return graph_from_pairs(n, i[keep], j[keep], length[keep])
