"""A redraw's start: previous zones per unit and the labelling the search starts from.

A previous zone split by a fence or no longer contiguous keeps its largest part; the other
parts, and areas new since the previous lookup, join the neighbouring zone they share most
boundary with, or stand alone when they meet the floors on their own.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from zonedesign.graph.components import components
from zonedesign.records import Graph


def _components(graph: Graph, members: np.ndarray) -> np.ndarray:
    """Component label of each unit in `members` on the induced subgraph."""
    return components(graph.subgraph(members))[1]


def start_labels(
    graph: Graph, prev: np.ndarray, counts: np.ndarray, lo: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """A contiguous labelling that keeps previous zones wherever they are still whole.

    prev: previous zone code per unit (-1 for units new since the previous lookup).
    Returns (labels 0..k-1, anchor previous code per zone, -1 for a new zone).
    """
    n = prev.shape[0]
    labels = np.full(n, -1, dtype=np.int64)
    anchors: list[int] = []
    loose: list[np.ndarray] = []
    for code in np.unique(prev[prev >= 0]):
        members = np.flatnonzero(prev == code)
        comp = _components(graph, members)
        sizes = np.bincount(comp)
        # the part with most units keeps the zone; ties go to the part of the smallest unit
        keep = int(np.argmax(sizes))
        labels[members[comp == keep]] = len(anchors)
        anchors.append(int(code))
        for c in range(sizes.shape[0]):
            if c != keep:
                loose.append(members[comp == c])
    new = np.flatnonzero(prev < 0)
    if new.size:
        comp = _components(graph, new)
        for c in range(int(comp.max()) + 1):
            loose.append(new[comp == c])
    # parts that meet every floor alone become zones; the rest join a neighbour
    pending = []
    for part in loose:
        if np.all(counts[part].sum(axis=0) >= np.where(np.isfinite(lo), lo, 0.0)):
            labels[part] = len(anchors)
            anchors.append(-1)
        else:
            pending.append(part)
    while pending:
        progressed = False
        rest = []
        for part in pending:
            best, best_len = -1, -1.0
            for u in part:
                for p in range(graph.indptr[u], graph.indptr[u + 1]):
                    v = graph.indices[p]
                    z = labels[v]
                    if z >= 0 and labels[u] < 0 and graph.length[p] > best_len:
                        best, best_len = int(z), float(graph.length[p])
            if best >= 0:
                labels[part] = best
                progressed = True
            else:
                rest.append(part)
        pending = rest
        if not progressed:
            # no assigned neighbour at all (an island of new units): a zone of its own
            for part in pending:
                labels[part] = len(anchors)
                anchors.append(-1)
            pending = []
    return labels, np.array(anchors, dtype=np.int64)


def zone_neighbours(graph: Graph, labels: np.ndarray, zones: np.ndarray) -> np.ndarray:
    """Zones adjacent to any zone in `zones`."""
    i, j, _ = graph.edges()
    inz = np.isin(labels, zones)
    a = labels[j[inz[i]]]
    b = labels[i[inz[j]]]
    return np.unique(np.concatenate([a, b, zones]))


def previous_codes(ids: np.ndarray) -> np.ndarray:
    """Previous zone ids as codes 0..k-1 in sorted id order; -1 for "" (no previous zone)."""
    codes, _ = pd.factorize(pd.Series(np.asarray(ids, dtype=object)).replace("", np.nan), sort=True)
    return codes.astype(np.int64)


def unit_previous(prev_area: np.ndarray, of_area: np.ndarray, n_units: int) -> np.ndarray:
    """Previous zone id of each unit: the id most of its areas had ("" for none)."""
    frame = pd.DataFrame({"u": of_area, "p": np.asarray(prev_area, dtype=object)})
    frame = frame[frame["p"] != ""]
    out = np.full(n_units, "", dtype=object)
    if len(frame):
        counts = frame.groupby(["u", "p"], sort=True).size().reset_index(name="c")
        counts = counts.sort_values(["u", "c", "p"], ascending=[True, False, True], kind="stable")
        top = counts.drop_duplicates("u")
        out[top["u"].to_numpy()] = top["p"].to_numpy()
    return out


def locked_old(old: np.ndarray, locked_area: np.ndarray, lock_codes: list[str]) -> np.ndarray:
    """Old codes as code assignment sees them with locks: a locked zone's areas carry its
    code, and no free area does, so the locked zone alone carries it on."""
    if not lock_codes:
        return old
    out = old.copy()
    out[(locked_area == "") & np.isin(out, lock_codes)] = ""
    out[locked_area != ""] = locked_area[locked_area != ""]
    return out
