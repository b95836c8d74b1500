"""Declared links (bridges, ferries) and fences applied to an adjacency graph."""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np

from zonedesign.errors import InputError
from zonedesign.graph.adjacency import graph_from_pairs
from zonedesign.records import Graph


def read_links(path: str | Path, ids: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Read a CSV of area id pairs and return their positions in `ids` as (i, j).

    Two columns per row, one link per row. A first row naming neither column as a known
    id is taken for a header (e.g. ``from,to``). Rows are numbered as in a spreadsheet:
    the file's first line is row 1. Blank rows are skipped; an unknown id, a row without
    exactly two values, or a link from an area to itself is an InputError naming the
    file, the row and the id.
    """
    path = Path(path)
    where = {str(v): k for k, v in enumerate(np.asarray(ids, dtype=object))}
    try:
        with path.open(newline="", encoding="utf-8-sig") as fh:
            rows = list(csv.reader(fh))
    except FileNotFoundError:
        raise InputError("links file not found", where=str(path)) from None
    except (OSError, UnicodeDecodeError, csv.Error) as err:
        raise InputError(f"cannot read links file: {err}", where=str(path)) from None
    first_i, first_j = [], []
    for row_no, row in enumerate(rows, start=1):
        values = [v.strip() for v in row]
        if not any(values):
            continue
        if len(values) != 2 or not all(values):
            raise InputError(
                f"expected two area ids, found {len(values)} value(s): {','.join(row)!r}",
                where=f"{path}, row {row_no}",
            )
        if row_no == 1 and values[0] not in where and values[1] not in where:
            continue  # header
        for v in values:
            if v not in where:
                raise InputError(f"unknown area id {v!r} in link", where=f"{path}, row {row_no}")
        if values[0] == values[1]:
            raise InputError(
                f"link from area {values[0]!r} to itself", where=f"{path}, row {row_no}"
            )
        first_i.append(where[values[0]])
        first_j.append(where[values[1]])
    return np.asarray(first_i, dtype=np.int64), np.asarray(first_j, dtype=np.int64)


def add_links(graph: Graph, i: np.ndarray, j: np.ndarray) -> Graph:
    """The graph with links (i[k], j[k]) added as edges of length 0.

    A link between areas that already share a boundary keeps that boundary's length.
    """
    i = np.asarray(i, dtype=np.int64)
    j = np.asarray(j, dtype=np.int64)
    if i.shape != j.shape:
        raise ValueError(f"link ends differ in number: {i.shape[0]} and {j.shape[0]}")
    if i.size and (min(i.min(), j.min()) < 0 or max(i.max(), j.max()) >= graph.n):
        raise ValueError(f"link ends must be positions 0..{graph.n - 1}")
    a, b, w = graph.edges()
    # from_edges keeps the larger length of a pair given twice, so 0 never overrides
    return Graph.from_edges(
        graph.n, np.concatenate([a, i]), np.concatenate([b, j]), np.concatenate([w, np.zeros(i.shape[0])])
    )


def fence_graph(graph: Graph, fence: np.ndarray) -> Graph:
    """The graph without the edges that join areas of different fences."""
    fence = np.asarray(fence)
    if fence.shape[0] != graph.n:
        raise ValueError(f"fence has {fence.shape[0]} codes for a graph of {graph.n} areas")
    a, b, w = graph.edges()
    keep = fence[a] == fence[b]
    return graph_from_pairs(graph.n, a[keep], b[keep], w[keep])
