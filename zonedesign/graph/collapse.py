"""Collapse a tier into the graph its zones form for the tier above."""

from __future__ import annotations

import numpy as np

from zonedesign.graph.adjacency import graph_from_pairs, sum_pairs
from zonedesign.measures import zone_perimeter, zone_sums
from zonedesign.records import Graph


def _check(labels: np.ndarray, k: int, n: int) -> np.ndarray:
    labels = np.asarray(labels, dtype=np.int64)
    if labels.shape[0] != n:
        raise ValueError(f"{labels.shape[0]} labels for {n} units")
    if labels.size and (labels.min() < 0 or labels.max() >= k):
        raise ValueError(f"labels must lie in 0..{k - 1}")
    return labels


def collapse(graph: Graph, labels: np.ndarray, k: int) -> Graph:
    """The zone graph: zones 0..k-1 joined where any of their units are.

    An edge's length is the total boundary its zones share. Zones joined only by links or
    point contacts (length 0) stay joined, with length 0.

    >>> from zonedesign.records import Graph
    >>> path = Graph.from_edges(4, [0, 1, 2], [1, 2, 3], [1.0, 2.0, 3.0])
    >>> collapse(path, [0, 0, 1, 1], 2).edges()
    (array([0]), array([1]), array([2.]))
    """
    labels = _check(labels, k, graph.n)
    i, j, w = graph.edges()
    zi, zj = labels[i], labels[j]
    cross = zi != zj
    a, b, total = sum_pairs(k, zi[cross], zj[cross], w[cross])
    return graph_from_pairs(k, a, b, total)


def collapse_values(labels: np.ndarray, k: int, values: np.ndarray) -> np.ndarray:
    """Per-zone sums of unit values ((n,) or (n, c)): counts, weights, areas."""
    values = np.asarray(values)
    labels = _check(labels, k, values.shape[0])
    return zone_sums(labels, k, values)


def collapse_perimeter(graph: Graph, labels: np.ndarray, k: int, perimeter: np.ndarray) -> np.ndarray:
    """Per-zone perimeter: member perimeters summed, less twice their internal boundary."""
    labels = _check(labels, k, graph.n)
    return zone_perimeter(graph, labels, k, np.asarray(perimeter, dtype=np.float64))
