"""Connected components per fence, and islands: parts of a fence no zone can reach.

A fence whose areas fall into several components cannot be covered by contiguous zones
that span them. The user decides for each island: declare a link (a bridge or ferry),
or let it stand alone as its own zones.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import shapely
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import connected_components

from zonedesign.graph.adjacency import as_polygonal
from zonedesign.graph.links import fence_graph
from zonedesign.records import Graph


@dataclass(frozen=True)
class FenceComponents:
    """One fence: its number of areas and the sizes (areas) of its components, largest first."""

    fence: str
    n_areas: int
    n_components: int
    sizes: tuple[int, ...]


@dataclass(frozen=True)
class Island:
    """A component of a fence other than its main one.

    ids: the island's area ids. nearest: the closest area of the same fence outside the
    island, `via` the island's area closest to it, `distance` the gap between the two in
    metres (CRS units). (via, nearest) is the natural pair to declare as a link.
    """

    fence: str
    ids: tuple[str, ...]
    nearest: str
    via: str
    distance: float


def components(graph: Graph) -> tuple[int, np.ndarray]:
    """Connected components: (number, label per node in 0..number-1)."""
    n = graph.n
    if n == 0:
        return 0, np.zeros(0, dtype=np.int64)
    matrix = csr_matrix((np.ones(graph.indices.shape[0]), graph.indices, graph.indptr), shape=(n, n))
    count, labels = connected_components(matrix, directed=False)
    return int(count), labels.astype(np.int64)


def pieces(graph: Graph, labels: np.ndarray) -> tuple[int, np.ndarray]:
    """Connected pieces of the zones `labels` draws: components over the edges that join
    two nodes of the same label (a contiguous zone is one piece)."""
    n = graph.n
    labels = np.asarray(labels)
    rows = np.repeat(np.arange(n), np.diff(graph.indptr))
    same = labels[rows] == labels[graph.indices]
    matrix = csr_matrix((np.ones(int(same.sum())), (rows[same], graph.indices[same])), shape=(n, n))
    count, piece = connected_components(matrix, directed=False)
    return int(count), piece.astype(np.int64)


def _fence_parts(graph: Graph, fence: np.ndarray):
    """Per fence code (sorted): its positions and their component labels."""
    fence = np.asarray(fence).astype(str)
    _, labels = components(fence_graph(graph, fence))
    for code in np.unique(fence):
        pos = np.flatnonzero(fence == code)
        yield str(code), pos, labels[pos]


def fence_components(graph: Graph, fence: np.ndarray) -> list[FenceComponents]:
    """Components of every fence (edges across fences do not count), by fence code."""
    out = []
    for code, pos, lab in _fence_parts(graph, fence):
        sizes = np.sort(np.unique(lab, return_counts=True)[1])[::-1]
        out.append(FenceComponents(code, int(pos.shape[0]), int(sizes.shape[0]), tuple(int(s) for s in sizes)))
    return out


def islands(graph: Graph, fence: np.ndarray, geometry, ids: np.ndarray) -> list[Island]:
    """Every component of a fence except its largest, with the nearest area beyond it.

    The largest component is the one with most areas (ties: the one holding the earliest
    row); all others are islands. Distances are between polygons, in CRS units.
    """
    polys = as_polygonal(geometry)
    ids = np.asarray(ids, dtype=object)
    out = []
    for code, pos, lab in _fence_parts(graph, fence):
        comps, first, sizes = np.unique(lab, return_index=True, return_counts=True)
        if comps.shape[0] < 2:
            continue
        # largest first, ties to the component met first in row order
        main = comps[np.lexsort((first, -sizes))[0]]
        tree = shapely.STRtree(polys[pos])
        for c in comps[np.argsort(first, kind="stable")]:
            if c == main:
                continue
            inside = lab == c
            near, via, gap = _nearest_outside(tree, polys[pos], inside)
            out.append(
                Island(
                    fence=code,
                    ids=tuple(str(v) for v in ids[pos[inside]]),
                    nearest=str(ids[pos[near]]),
                    via=str(ids[pos[via]]),
                    distance=gap,
                )
            )
    return out


def _nearest_outside(tree: shapely.STRtree, polys: np.ndarray, inside: np.ndarray) -> tuple[int, int, float]:
    """(outside position, inside position, distance) of the closest pair across `inside`."""
    members = np.flatnonzero(inside)
    box = shapely.total_bounds(polys[members])
    radius = max(box[2] - box[0], box[3] - box[1], 1.0) / 4.0
    extent = shapely.total_bounds(polys)
    span = max(extent[2] - extent[0], extent[3] - extent[1], 1.0)
    while True:
        # every outside area within `radius` is a candidate; the closest of them is
        # the closest overall once at least one is found
        q, t = tree.query(polys[members], predicate="dwithin", distance=radius)
        out = ~inside[t]
        if out.any():
            q, t = q[out], t[out]
            gap = shapely.distance(polys[members[q]], polys[t])
            k = int(np.lexsort((t, members[q], gap))[0])
            return int(t[k]), int(members[q[k]]), float(gap[k])
        if radius > 2.0 * span:
            raise ValueError("island has no area of its fence outside it")
        radius *= 2.0
