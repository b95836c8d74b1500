"""Plain array records shared by every layer.

The core never sees a GeoDataFrame: `io/` turns files into an `Areas` record and
`graph/` turns polygons into a `Graph` (CSR arrays). A `Problem` is one fence of one
tier, handed to the search and to the exact solver.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, replace

import numpy as np


@dataclass(frozen=True)
class Areas:
    """Base areas as arrays, one row per area, in file order.

    ids: area ids as strings (object array), unique.
    count_names / counts: count columns (persons, households, ...), float64 (n, c).
    attr_names / attrs: attribute columns for homogeneity, float64 (n, a), raw values.
    weight: homogeneity weight per area (population), float64 (n,); ones when unset.
    area / perimeter: polygon area (m^2) and perimeter (m) in the projected CRS.
    fence: fence code per area as strings (object array); one code when no fence column.
    crs: the projected CRS used for measures (an authority string or WKT).
    repaired: ids of polygons that were invalid and repaired on reading.
    tier_fence: tier name -> fence code per area, for tiers with a fence of their own
    ([[tier]] fence); every other tier uses `fence`.
    """

    ids: np.ndarray
    count_names: tuple[str, ...]
    counts: np.ndarray
    attr_names: tuple[str, ...]
    attrs: np.ndarray
    weight: np.ndarray
    area: np.ndarray
    perimeter: np.ndarray
    fence: np.ndarray
    crs: str = ""
    repaired: tuple[str, ...] = ()
    tier_fence: Mapping[str, np.ndarray] = field(default_factory=dict)

    @property
    def n(self) -> int:
        return int(self.ids.shape[0])

    def in_tier(self, tier: str) -> Areas:
        """The areas with the fence that tier `tier` keeps to as their fence."""
        if tier not in self.tier_fence:
            return self
        return replace(self, fence=self.tier_fence[tier])

    def count(self, name: str) -> np.ndarray:
        return self.counts[:, self.count_names.index(name)]

    def subset(self, index: np.ndarray) -> Areas:
        """The areas at positions `index`, in that order."""
        return Areas(
            ids=self.ids[index],
            count_names=self.count_names,
            counts=self.counts[index],
            attr_names=self.attr_names,
            attrs=self.attrs[index],
            weight=self.weight[index],
            area=self.area[index],
            perimeter=self.perimeter[index],
            fence=self.fence[index],
            crs=self.crs,
            repaired=self.repaired,
            tier_fence={k: v[index] for k, v in self.tier_fence.items()},
        )


@dataclass(frozen=True)
class Graph:
    """Undirected adjacency in CSR form; every edge is stored in both directions.

    indptr (n+1,) int64, indices (2m,) int64 sorted within each row,
    length (2m,) float64: shared boundary length in metres (0 for declared links and
    point-only queen contacts).
    """

    indptr: np.ndarray
    indices: np.ndarray
    length: np.ndarray

    @property
    def n(self) -> int:
        return int(self.indptr.shape[0] - 1)

    @property
    def n_edges(self) -> int:
        return int(self.indices.shape[0] // 2)

    def neighbours(self, i: int) -> np.ndarray:
        return self.indices[self.indptr[i] : self.indptr[i + 1]]

    def edges(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Each undirected edge once as (i, j, length) with i < j."""
        rows = np.repeat(np.arange(self.n), np.diff(self.indptr))
        keep = rows < self.indices
        return rows[keep], self.indices[keep], self.length[keep]

    def subgraph(self, index: np.ndarray) -> Graph:
        """The graph induced on positions `index`, renumbered 0..len(index)-1 in that order."""
        return induced_subgraph(self, index)

    @staticmethod
    def from_edges(n: int, i: np.ndarray, j: np.ndarray, length: np.ndarray | None = None) -> Graph:
        """Build from undirected edges (each once or twice; duplicates are summed once)."""
        i = np.asarray(i, dtype=np.int64)
        j = np.asarray(j, dtype=np.int64)
        w = np.zeros(i.shape[0]) if length is None else np.asarray(length, dtype=np.float64)
        keep = i != j
        i, j, w = i[keep], j[keep], w[keep]
        a = np.minimum(i, j)
        b = np.maximum(i, j)
        key = a * n + b
        order = np.argsort(key, kind="stable")
        key, w = key[order], w[order]
        uniq, first = np.unique(key, return_index=True)
        # a pair given twice (as (i, j) and (j, i)) keeps one length, not the sum
        wu = np.maximum.reduceat(w, first) if w.size else w
        a = uniq // n
        b = uniq % n
        src = np.concatenate([a, b])
        dst = np.concatenate([b, a])
        ww = np.concatenate([wu, wu])
        order = np.lexsort((dst, src))
        src, dst, ww = src[order], dst[order], ww[order]
        indptr = np.zeros(n + 1, dtype=np.int64)
        np.add.at(indptr, src + 1, 1)
        indptr = np.cumsum(indptr)
        return Graph(indptr=indptr, indices=dst.astype(np.int64), length=ww.astype(np.float64))


def induced_subgraph(graph: Graph, index: np.ndarray) -> Graph:
    index = np.asarray(index, dtype=np.int64)
    pos = np.full(graph.n, -1, dtype=np.int64)
    pos[index] = np.arange(index.shape[0])
    i, j, w = graph.edges()
    keep = (pos[i] >= 0) & (pos[j] >= 0)
    return Graph.from_edges(index.shape[0], pos[i[keep]], pos[j[keep]], w[keep])


@dataclass(frozen=True)
class Bounds:
    """Hard bounds and targets of one tier over the count columns, aligned to count_names.

    lo/hi are -inf/+inf where a count has no bound; target is nan where it has none.
    """

    count_names: tuple[str, ...]
    lo: np.ndarray
    hi: np.ndarray
    target: np.ndarray


@dataclass(frozen=True)
class Problem:
    """One fence of one tier: partition `graph`'s units into contiguous zones.

    Units are areas on tier 1 and tier-(k-1) zones on tier k. All arrays are per unit.
    attrs are already standardised (z-scores over the whole input, so every fence uses one
    scale). `previous` holds each unit's previous zone index (-1 for none) for stability.
    """

    graph: Graph
    counts: np.ndarray
    bounds: Bounds
    attrs: np.ndarray
    weight: np.ndarray
    area: np.ndarray
    perimeter: np.ndarray
    term_weights: dict[str, float] = field(
        default_factory=lambda: {"size": 1.0, "homogeneity": 1.0, "compactness": 1.0, "stability": 0.0}
    )
    homogeneity: str = "ssd"  # "ssd" (weighted within-zone sum of squares) or "pairwise"
    compactness: str = "polsby"  # "polsby" (1 - Polsby-Popper) or "cut" (boundary length)
    previous: np.ndarray | None = None

    @property
    def n(self) -> int:
        return self.graph.n
