"""Exact adjacency by shared-segment hashing.

Neighbouring polygons of a topologically clean tessellation draw their common boundary
from the same vertices, so every shared stretch is a run of segments that appear in both
polygons with identical end points. Hashing the segments (end points snapped to a fine
grid, ordered) and pairing identical ones from different polygons gives the rook pairs
and their shared lengths without a single geometric predicate; hashing vertices gives
the queen pairs.

Limitation: a neighbour pair whose common boundary is drawn with different vertices (a
T-junction, where one side has an extra vertex on the other's edge) shares no identical
segment and is missed here. `unmatched_contacts` finds such pairs among the segments
that found no partner, and `graph.build.build_graph` runs it by default.
"""

from __future__ import annotations

import numpy as np
import shapely

from zonedesign.records import Graph

# snapping grid as a share of the data's extent: far finer than any survey precision,
# coarse enough that 2**31 cells span the extent, so a vertex packs into one int64
GRID_SHARE = 1e-9


def geometry_array(geometry) -> np.ndarray:
    """A GeoSeries, GeometryArray, list or array of shapely geometries as an object array."""
    values = getattr(geometry, "values", geometry)
    return np.asarray(values, dtype=object).reshape(-1)


def as_polygonal(geometry) -> np.ndarray:
    """Geometries as an object array of Polygon / MultiPolygon; other parts are dropped.

    Repaired polygons often come back as GeometryCollections holding stray lines or
    points; only their polygonal parts take part in adjacency. Empty or missing
    geometries become empty polygons.
    """
    geoms = geometry_array(geometry)
    out = geoms.copy()
    types = shapely.get_type_id(geoms)
    odd = np.flatnonzero(~np.isin(types, (3, 6)))
    for k in odd:
        polys = polygon_parts(np.array([geoms[k]], dtype=object))[0]
        if polys.shape[0] == 0:
            out[k] = shapely.Polygon()
        elif polys.shape[0] == 1:
            out[k] = polys[0]
        else:
            out[k] = shapely.multipolygons(polys)
    return out


def polygon_parts(geoms: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """All Polygon parts of `geoms` and the position of the geometry each came from."""
    geoms = np.asarray(geoms, dtype=object)
    owner = np.arange(geoms.shape[0], dtype=np.int64)
    types = shapely.get_type_id(geoms)
    while np.isin(types, (4, 5, 6, 7)).any():
        multi = np.isin(types, (4, 5, 6, 7))
        parts, idx = shapely.get_parts(geoms[multi], return_index=True)
        geoms = np.concatenate([geoms[~multi], parts])
        owner = np.concatenate([owner[~multi], owner[multi][idx]])
        types = shapely.get_type_id(geoms)
    keep = (types == 3) & ~shapely.is_empty(geoms)
    geoms, owner = geoms[keep], owner[keep]
    order = np.argsort(owner, kind="stable")
    return geoms[order], owner[order]


def _ring_coordinates(geoms: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Coordinates of all rings, the ring of each coordinate and the owner of each ring."""
    parts, owner = polygon_parts(geoms)
    holed = shapely.get_num_interior_rings(parts) > 0
    # a polygon without holes lists exactly its one ring: no need to split it into rings
    coords, ring = shapely.get_coordinates(parts[~holed], return_index=True)
    ring_owner = owner[~holed]
    if holed.any():
        rings, ring_part = shapely.get_rings(parts[holed], return_index=True)
        more, more_ring = shapely.get_coordinates(rings, return_index=True)
        coords = np.concatenate([coords, more])
        ring = np.concatenate([ring, more_ring + ring_owner.shape[0]])
        ring_owner = np.concatenate([ring_owner, owner[holed][ring_part]])
    return coords, ring, ring_owner


class SegmentHash:
    """Segments of a polygon set, their end points numbered by snapped position."""

    def __init__(self, geoms: np.ndarray, grid: float | None = None):
        coords, ring, ring_owner = _ring_coordinates(geoms)
        # consecutive coordinates of one ring form a segment; rings are closed, so the
        # last coordinate repeats the first and the closing segment comes for free
        seg = np.flatnonzero(ring[1:] == ring[:-1])
        self.start, self.end = coords[seg], coords[seg + 1]
        self.owner = ring_owner[ring[seg]]
        if coords.shape[0] == 0:
            self.grid = 1.0 if grid is None else float(grid)
            self.va = self.vb = np.zeros(0, dtype=np.int64)
            self.n_vertices = 0
            return
        lo = coords.min(axis=0)
        hi = coords.max(axis=0)
        extent = float(max(hi[0] - lo[0], hi[1] - lo[1], 1e-300))
        self.grid = extent * GRID_SHARE if grid is None else float(grid)
        if extent / self.grid >= 2.0**31:
            raise ValueError(f"grid {self.grid} is too fine for an extent of {extent}")
        q = np.rint((coords - lo) / self.grid).astype(np.int64)
        key = (q[:, 0] << 31) | q[:, 1]
        uniq = _sorted_unique(key)
        vertex = np.searchsorted(uniq, key)
        self.n_vertices = int(uniq.shape[0])
        self.va, self.vb = vertex[seg], vertex[seg + 1]

    def segment_groups(self) -> tuple[np.ndarray, np.ndarray]:
        """Segment positions sorted so identical segments are adjacent, and group starts."""
        keep = np.flatnonzero(self.va != self.vb)
        lo = np.minimum(self.va[keep], self.vb[keep])
        hi = np.maximum(self.va[keep], self.vb[keep])
        order, key = sorted_order(lo * self.n_vertices + hi)
        starts = np.flatnonzero(np.concatenate([[True], key[1:] != key[:-1]])) if key.size else key
        return keep[order], starts

    def lengths(self, seg: np.ndarray) -> np.ndarray:
        d = self.end[seg] - self.start[seg]
        return np.hypot(d[:, 0], d[:, 1])


def _pairs_in_groups(starts: np.ndarray, total: int) -> tuple[np.ndarray, np.ndarray]:
    """All pairs (p, q), p < q, of positions inside each group of a sorted sequence."""
    if total == 0:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    ends = np.concatenate([starts[1:], [total]])
    size = ends - starts
    group = np.repeat(np.arange(starts.shape[0]), size)
    pos = np.arange(total, dtype=np.int64)
    # each position pairs with every later position of its group
    later = ends[group] - pos - 1
    left = np.repeat(pos, later)
    offset = np.arange(left.shape[0], dtype=np.int64) - np.repeat(np.cumsum(later) - later, later)
    return left, left + 1 + offset


def sorted_order(key: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """A stable sorting permutation of non-negative int64 keys, and the sorted keys.

    When the keys leave room, each is packed with its position into one int64 and a
    plain sort replaces the (several times slower) argsort.
    """
    key = np.asarray(key, dtype=np.int64)
    m = key.shape[0]
    if m == 0:
        return np.zeros(0, dtype=np.int64), key
    bits = max(int(m - 1).bit_length(), 1)
    if int(key.min()) >= 0 and int(key.max()) < (1 << (63 - bits)):
        packed = np.sort((key << bits) | np.arange(m, dtype=np.int64))
        return packed & ((1 << bits) - 1), packed >> bits
    order = np.argsort(key, kind="stable")
    return order, key[order]


def _sorted_unique(key: np.ndarray) -> np.ndarray:
    key = np.sort(key)
    return key[np.concatenate([[True], key[1:] != key[:-1]])] if key.size else key


def sum_pairs(
    n: int, i: np.ndarray, j: np.ndarray, w: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Unordered pairs (a < b) of nodes 0..n-1 with the weights of their copies summed."""
    i = np.asarray(i, dtype=np.int64)
    j = np.asarray(j, dtype=np.int64)
    w = np.asarray(w, dtype=np.float64)
    if i.size == 0:
        return i, j, w
    order, key = sorted_order(np.minimum(i, j) * n + np.maximum(i, j))
    starts = np.flatnonzero(np.concatenate([[True], key[1:] != key[:-1]]))
    total = np.add.reduceat(w[order], starts)
    key = key[starts]
    return key // n, key % n, total


def graph_from_pairs(n: int, a: np.ndarray, b: np.ndarray, w: np.ndarray) -> Graph:
    """The Graph of distinct pairs (a[k] != b[k], each pair once), as Graph.from_edges
    builds it, without its de-duplication pass."""
    a = np.asarray(a, dtype=np.int64)
    b = np.asarray(b, dtype=np.int64)
    src = np.concatenate([a, b])
    dst = np.concatenate([b, a])
    order, _ = sorted_order(src * n + dst)
    indptr = np.zeros(n + 1, dtype=np.int64)
    indptr[1:] = np.cumsum(np.bincount(src, minlength=n))
    length = np.concatenate([w, w]).astype(np.float64)[order]
    return Graph(indptr=indptr, indices=dst[order], length=length)


def _segment_pairs(hashed: SegmentHash, n: int):
    pos, starts = hashed.segment_groups()
    p, q = _pairs_in_groups(starts, pos.shape[0])
    oi, oj = hashed.owner[pos[p]], hashed.owner[pos[q]]
    other = oi != oj
    return sum_pairs(n, oi[other], oj[other], hashed.lengths(pos[p[other]]))


def rook_graph(geometry, min_shared_length: float = 0.0, *, grid: float | None = None) -> Graph:
    """Rook adjacency: polygons sharing boundary segments longer than `min_shared_length`.

    `geometry` is a GeoSeries or an array of (Multi)Polygons in a projected CRS; the
    shared length of a pair is the summed length of the segments both draw with the same
    end points. End points are snapped to a grid of `grid` units (default: 1e-9 of the
    data's extent) before they are compared.

    >>> import shapely
    >>> squares = [shapely.box(0, 0, 1, 1), shapely.box(1, 0, 2, 1), shapely.box(2, 1, 3, 2)]
    >>> g = rook_graph(squares)
    >>> g.edges()
    (array([0]), array([1]), array([1.]))
    """
    if min_shared_length < 0:
        raise ValueError(f"min_shared_length must be >= 0, got {min_shared_length}")
    geoms = geometry_array(geometry)
    return rook_from_hash(SegmentHash(geoms, grid), geoms.shape[0], min_shared_length)


def rook_from_hash(hashed: SegmentHash, n: int, min_shared_length: float) -> Graph:
    """`rook_graph` from segments hashed once (build_graph shares them with its check)."""
    a, b, length = _segment_pairs(hashed, n)
    keep = length > min_shared_length
    return graph_from_pairs(n, a[keep], b[keep], length[keep])


def queen_graph(geometry, *, grid: float | None = None) -> Graph:
    """Queen adjacency: polygons sharing at least one vertex.

    Pairs that share boundary segments carry their shared length (as in `rook_graph`);
    pairs that meet only at a point carry length 0.
    """
    geoms = geometry_array(geometry)
    return queen_from_hash(SegmentHash(geoms, grid), geoms.shape[0])


def queen_from_hash(hashed: SegmentHash, n: int) -> Graph:
    """`queen_graph` from segments hashed once."""
    ra, rb, rlen = _segment_pairs(hashed, n)
    # each segment's start vertex covers every vertex of a closed ring
    key = _sorted_unique(hashed.va * n + hashed.owner)
    vertex, owner = key // n, key % n
    starts = np.flatnonzero(np.concatenate([[True], vertex[1:] != vertex[:-1]])) if key.size else key
    p, q = _pairs_in_groups(starts, key.shape[0])
    va, vb = owner[p], owner[q]
    other = va != vb
    pa, pb, _ = sum_pairs(n, va[other], vb[other], np.zeros(int(other.sum())))
    # vertex pairs include every rook pair; their lengths come from the segments
    a, b, w = sum_pairs(
        n,
        np.concatenate([pa, ra]),
        np.concatenate([pb, rb]),
        np.concatenate([np.zeros(pa.shape[0]), rlen]),
    )
    return graph_from_pairs(n, a, b, w)


def unmatched_contacts(
    geometry, *, tolerance: float | None = None, grid: float | None = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Neighbour pairs that segment hashing misses: (i, j, overlap length), i < j.

    Only segments without an identical partner are examined; on clean data those are the
    outer boundary (coast, holes) and nothing is found. Two such segments of different
    polygons count as shared where they run along each other: both end points of the
    overlapping stretch lie within `tolerance` (default: 100 grid steps) of the other
    segment. Stretches shorter than 10 * tolerance are taken for end-to-end contacts.
    """
    geoms = geometry_array(geometry)
    return unmatched_from_hash(SegmentHash(geoms, grid), geoms.shape[0], tolerance)


def unmatched_from_hash(
    hashed: SegmentHash, n: int, tolerance: float | None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """`unmatched_contacts` from segments hashed once."""
    eps = 100.0 * hashed.grid if tolerance is None else float(tolerance)
    empty = (np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64), np.zeros(0))
    pos, starts = hashed.segment_groups()
    if pos.shape[0] == 0:
        return empty
    owners = hashed.owner[pos]
    # a group is matched when it holds segments of at least two polygons
    lo = np.minimum.reduceat(owners, starts)
    hi = np.maximum.reduceat(owners, starts)
    lone = pos[starts[lo == hi]]
    if lone.shape[0] < 2:
        return empty
    s0, s1, own = hashed.start[lone], hashed.end[lone], hashed.owner[lone]
    lines = shapely.linestrings(np.stack([s0, s1], axis=1))
    tree = shapely.STRtree(lines)
    u, v = tree.query(lines, predicate="dwithin", distance=eps)
    keep = (u < v) & (own[u] != own[v])
    u, v = u[keep], v[keep]
    overlap = _collinear_overlap(s0[u], s1[u], s0[v], s1[v], eps)
    hit = overlap > 10.0 * eps
    return sum_pairs(n, own[u[hit]], own[v[hit]], overlap[hit])


def _collinear_overlap(a0, a1, b0, b1, eps: float) -> np.ndarray:
    """Length over which segment b runs along segment a (0 where it strays beyond eps)."""
    d = a1 - a0
    la = np.hypot(d[:, 0], d[:, 1])
    t = d / np.where(la > 0, la, 1.0)[:, None]
    r0, r1 = b0 - a0, b1 - a0
    u0 = (r0 * t).sum(axis=1)
    u1 = (r1 * t).sum(axis=1)
    # signed offsets of b's end points from a's line; linear in the position along a
    h0 = r0[:, 0] * t[:, 1] - r0[:, 1] * t[:, 0]
    h1 = r1[:, 0] * t[:, 1] - r1[:, 1] * t[:, 0]
    lo = np.maximum(np.minimum(u0, u1), 0.0)
    hi = np.minimum(np.maximum(u0, u1), la)
    du = np.where(u1 != u0, u1 - u0, 1.0)
    h_lo = h0 + (h1 - h0) * (lo - u0) / du
    h_hi = h0 + (h1 - h0) * (hi - u0) / du
    ok = (np.abs(h_lo) <= eps) & (np.abs(h_hi) <= eps) & (la > 0) & (hi > lo)
    return np.where(ok, hi - lo, 0.0)
