"""Map colours: neighbouring zones never share a fill.

Zones are coloured on their adjacency graph (any shared boundary or corner counts, so
that two zones drawn touching always look apart). The order is smallest-last: a zone is
coloured after every zone with fewer uncoloured neighbours, so when its turn comes it has
at most `degeneracy` coloured neighbours and the palette always has a free fill when it is
larger than that (a map whose zones meet only along edges is planar: degeneracy at most
five). Among the free fills the least used one is taken, so the palette is spread evenly
over the map instead of piling onto its first entry. Only a graph of higher degeneracy
(many zones meeting at one point) gets fills beyond the palette.

Report maps use `colour_by_code`: each zone prefers the fill its code hashes to and zones
take turns in an order fixed by their codes, so the same zone code gets the same fill in a
design and in its redraw (pass `keep` to carry a previous run's fills over exactly).
"""

from __future__ import annotations

import colorsys
import zlib
from collections.abc import Iterable, Mapping, Sequence

import numpy as np
import shapely

# Soft fills that stay apart from one another in hue and lightness, light enough for the
# dark outlines and hatching drawn over them, and calm on paper.
PALETTE: tuple[str, ...] = (
    "#a9c8e8",  # pale cornflower
    "#f2c48d",  # apricot
    "#b5d6a7",  # sage
    "#d9b8e0",  # lilac
    "#f4e29a",  # butter
    "#9fd4cf",  # sea glass
    "#e8aeb3",  # rose clay
    "#cfc3a8",  # sandstone
)

# Outline of a zone that breaks a rule; always paired with hatching, never alone.
WARNING = "#a3241b"


def palette(n: int) -> list[str]:
    """`n` fills: the palette first, then further soft hues spaced by the golden angle."""
    out = list(PALETTE[: max(n, 0)])
    k = 0
    while len(out) < n:
        hue = (0.11 + 0.381966 * k) % 1.0
        r, g, b = colorsys.hls_to_rgb(hue, 0.78, 0.45)
        out.append(f"#{round(r * 255):02x}{round(g * 255):02x}{round(b * 255):02x}")
        k += 1
    return out


def zone_neighbours(geometries: Sequence | np.ndarray, *, tolerance: float = 0.0) -> np.ndarray:
    """Index pairs (i < j) of geometries that touch, overlap or lie within `tolerance`.

    Returns an (m, 2) int64 array. A small tolerance makes zones separated by a sliver
    gap (common in digitised boundaries) count as neighbours, as they look on a map.
    """
    geoms = np.asarray(geometries, dtype=object)
    if geoms.shape[0] < 2:
        return np.zeros((0, 2), dtype=np.int64)
    tree = shapely.STRtree(geoms)
    if tolerance > 0:
        left, right = tree.query(geoms, predicate="dwithin", distance=tolerance)
    else:
        left, right = tree.query(geoms, predicate="intersects")
    keep = left < right
    pairs = np.column_stack([left[keep], right[keep]]).astype(np.int64)
    return np.unique(pairs, axis=0) if pairs.size else pairs.reshape(0, 2)


def colour_graph(
    n: int, pairs: np.ndarray | Iterable[tuple[int, int]], *, colours: int = len(PALETTE)
) -> np.ndarray:
    """A proper colouring of nodes 0..n-1: adjacent nodes get different colour indices.

    Tries to stay within `colours` indices; a graph that needs more (a clique of zones all
    meeting at one point) gets further indices rather than a clash.

    >>> colour_graph(3, [(0, 1), (1, 2), (0, 2)]).tolist()
    [2, 1, 0]
    """
    pairs = np.asarray(list(pairs) if not isinstance(pairs, np.ndarray) else pairs, dtype=np.int64)
    pairs = pairs.reshape(-1, 2)
    pairs = pairs[pairs[:, 0] != pairs[:, 1]]
    if n == 0:
        return np.zeros(0, dtype=np.int64)
    both = np.concatenate([pairs, pairs[:, ::-1]]) if pairs.size else pairs
    order = np.argsort(both[:, 0], kind="stable") if both.size else np.zeros(0, dtype=np.int64)
    src = both[order, 0] if both.size else np.zeros(0, dtype=np.int64)
    dst = both[order, 1] if both.size else np.zeros(0, dtype=np.int64)
    indptr = np.zeros(n + 1, dtype=np.int64)
    np.add.at(indptr, src + 1, 1)
    indptr = np.cumsum(indptr)
    nbrs = [dst[indptr[i] : indptr[i + 1]].tolist() for i in range(n)]
    sequence = _smallest_last(nbrs)
    colour = np.full(n, -1, dtype=np.int64)
    used = [0] * max(colours, 1)
    for v in sequence:
        taken = {int(colour[u]) for u in nbrs[v] if colour[u] >= 0}
        free = [c for c in range(len(used)) if c not in taken]
        if free:
            c = min(free, key=lambda c: (used[c], c))
        else:
            c = len(used)
            used.append(0)
        colour[v] = c
        used[c] += 1
    return colour


def _smallest_last(nbrs: list[list[int]]) -> list[int]:
    """Nodes in colouring order: reverse of repeatedly removing a node of least degree."""
    n = len(nbrs)
    degree = [len(set(x)) for x in nbrs]
    nbrs = [list(set(x)) for x in nbrs]
    top = max(degree, default=0)
    buckets: list[set[int]] = [set() for _ in range(top + 1)]
    for v, d in enumerate(degree):
        buckets[d].add(v)
    removed = [False] * n
    out: list[int] = []
    low = 0
    for _ in range(n):
        low = max(low - 1, 0)
        while not buckets[low]:
            low += 1
        v = buckets[low].pop()
        removed[v] = True
        out.append(v)
        for u in nbrs[v]:
            if not removed[u]:
                d = degree[u]
                buckets[d].discard(u)
                degree[u] = d - 1
                buckets[d - 1].add(u)
    out.reverse()
    return out


def colour_zones(
    geometries: Sequence | np.ndarray,
    *,
    tolerance: float = 0.0,
    extra_pairs: np.ndarray | None = None,
    colours: int = len(PALETTE),
) -> np.ndarray:
    """Colour index per zone so that no two neighbouring zones share one.

    `extra_pairs` adds declared adjacencies (index pairs), e.g. zones joined by a link.
    """
    geoms = np.asarray(geometries, dtype=object)
    pairs = zone_neighbours(geoms, tolerance=tolerance)
    if extra_pairs is not None and len(extra_pairs):
        pairs = np.concatenate([pairs, np.asarray(extra_pairs, dtype=np.int64).reshape(-1, 2)])
    return colour_graph(geoms.shape[0], pairs, colours=colours)


def _preference(code: str, colours: int) -> tuple[int, int]:
    """A zone's own fill and its turn, both from its code alone (crc32: same in every run)."""
    h = zlib.crc32(code.encode("utf-8"))
    return h % colours, zlib.crc32(code.encode("utf-8"), 0x5EED)


def colour_by_code(
    codes: Sequence[str],
    pairs: np.ndarray | Iterable[tuple[int, int]],
    *,
    keep: Mapping[str, int] | None = None,
    colours: int = len(PALETTE),
) -> np.ndarray:
    """Colour index per zone, chosen from its code, so a zone keeps its fill across runs.

    A design and its redraw colour a kept zone alike: each zone prefers the fill its code
    hashes to (or its fill in `keep`, e.g. the previous run's colours by code), and zones
    take their turn in an order fixed by their codes, so a zone's fill depends only on the
    codes and adjacency around it, never on row order or on far-away changes. A
    neighbour that took the preferred fill first makes the zone take the next free fill;
    adjacent zones never share one (past the palette when every fill is taken).

    >>> a = colour_by_code(["A", "B", "C"], [(0, 1), (1, 2)])
    >>> b = colour_by_code(["C", "A", "B"], [(1, 2), (2, 0)])
    >>> a.tolist() == [b[1], b[2], b[0]]
    True
    """
    codes = [str(c) for c in codes]
    n = len(codes)
    colours = max(int(colours), 1)
    pairs = np.asarray(list(pairs) if not isinstance(pairs, np.ndarray) else pairs, dtype=np.int64)
    pairs = pairs.reshape(-1, 2)
    nbrs: list[set[int]] = [set() for _ in range(n)]
    for a, b in pairs.tolist():
        if a != b:
            nbrs[a].add(b)
            nbrs[b].add(a)
    keep = keep or {}
    prefs = [_preference(c, colours) for c in codes]
    want = [int(keep[c]) if c in keep else prefs[i][0] for i, c in enumerate(codes)]
    # kept fills claim first, so a new zone never pushes a kept zone off its fill
    order = sorted(range(n), key=lambda i: (codes[i] not in keep, prefs[i][1], codes[i]))
    colour = np.full(n, -1, dtype=np.int64)
    for v in order:
        taken = {int(colour[u]) for u in nbrs[v] if colour[u] >= 0}
        # the next free fill after the preferred one: a choice that looks only at the
        # neighbours, so a change far away never shifts this zone's fill
        start = want[v] % colours
        free = [(start + k) % colours for k in range(colours) if (start + k) % colours not in taken]
        if want[v] not in taken:
            c = want[v]
        elif free:
            c = free[0]
        else:
            c = next(c for c in range(colours, colours + len(taken) + 1) if c not in taken)
        colour[v] = c
    return colour
