"""Build the area graph the rules ask for: contiguity, method, threshold, links."""

from __future__ import annotations

import numpy as np

from zonedesign.graph.adjacency import (
    SegmentHash,
    geometry_array,
    graph_from_pairs,
    queen_from_hash,
    rook_from_hash,
    sum_pairs,
    unmatched_from_hash,
)
from zonedesign.graph.links import add_links, read_links
from zonedesign.graph.tolerant import tolerant_graph
from zonedesign.records import Graph
from zonedesign.rules import GraphRules

CONTIGUITY = ("rook", "queen")


def build_graph(
    geometry,
    graph_rules: GraphRules,
    *,
    ids: np.ndarray | None = None,
    check: bool = True,
    notes: list[str] | None = None,
) -> Graph:
    """Adjacency of the areas in `geometry` (projected CRS) as `graph_rules` state.

    tolerance == 0: exact segment hashing (rook or queen). With `check`, segments that
    found no identical partner are examined for boundaries drawn with different vertices
    (T-junctions); pairs found there are added with their overlap length and a line
    saying so is appended to `notes`. tolerance > 0: the tolerant method.
    `min_shared_length` thins rook pairs only; queen keeps every contact.
    When `ids` are given and the rules name a links file, its links are added (length 0).
    """
    if graph_rules.contiguity not in CONTIGUITY:
        raise ValueError(f"contiguity must be one of {CONTIGUITY}, got {graph_rules.contiguity!r}")
    geoms = geometry_array(geometry)
    queen = graph_rules.contiguity == "queen"
    if graph_rules.tolerance > 0:
        graph = tolerant_graph(
            geoms, graph_rules.tolerance, graph_rules.min_shared_length, queen=queen
        )
        if notes is not None:
            # snapping can also part areas the exact boundaries join: say how many
            hashed = SegmentHash(geoms)
            exact = queen_from_hash(hashed, geoms.shape[0]) if queen else rook_from_hash(hashed, geoms.shape[0], 0.0)
            exact = _add_unmatched(exact, hashed, ids, None)
            a, b, _ = exact.edges()
            i, j, _ = graph.edges()
            n = geoms.shape[0]
            lost = np.setdiff1d(a * n + b, i * n + j).shape[0]
            if lost:
                notes.append(
                    f"tolerance {graph_rules.tolerance:g} m: {lost} pair(s) of areas that share a boundary "
                    "exactly are not neighbours after snapping"
                    + (f" (they share {graph_rules.min_shared_length:g} m or less)" if graph_rules.min_shared_length > 0 else "")
                )
    else:
        # one hashing pass serves the graph and the check
        hashed = SegmentHash(geoms)
        n = geoms.shape[0]
        graph = queen_from_hash(hashed, n) if queen else rook_from_hash(hashed, n, 0.0)
        if check:
            graph = _add_unmatched(graph, hashed, ids, notes)
        if not queen and graph_rules.min_shared_length > 0:
            a, b, w = graph.edges()
            keep = w > graph_rules.min_shared_length
            graph = graph_from_pairs(graph.n, a[keep], b[keep], w[keep])
    if ids is not None and graph_rules.links is not None:
        i, j = read_links(graph_rules.links, ids)
        graph = add_links(graph, i, j)
    return graph


def _add_unmatched(graph: Graph, hashed: SegmentHash, ids, notes: list[str] | None) -> Graph:
    ui, uj, uw = unmatched_from_hash(hashed, graph.n, None)
    if ui.shape[0] == 0:
        return graph
    a, b, w = graph.edges()
    known = set(zip(a.tolist(), b.tolist(), strict=True))
    new = [(x, y) for x, y in zip(ui.tolist(), uj.tolist(), strict=True) if (x, y) not in known]
    if notes is not None:
        name = (lambda k: str(ids[k])) if ids is not None else str
        shown = ", ".join(f"{name(x)}-{name(y)}" for x, y in (new or list(zip(ui, uj)))[:5])
        notes.append(
            f"{ui.shape[0]} neighbour pair(s) share boundary drawn with different vertices "
            f"({len(new)} found only this way), e.g. {shown}; their shared length is "
            "measured along the overlapping segments"
        )
    a, b, w = sum_pairs(
        graph.n, np.concatenate([a, ui]), np.concatenate([b, uj]), np.concatenate([w, uw])
    )
    return graph_from_pairs(graph.n, a, b, w)
