"""Zone ids per tier as integer codes, the tier's bounds, and per-zone member lists."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from zonedesign.graph.components import components
from zonedesign.records import Bounds, Graph
from zonedesign.rules import TierRules


@dataclass(frozen=True)
class TierLabels:
    """One tier's zone ids as integer codes: codes[i] in 0..k-1, -1 where the area has none."""

    codes: np.ndarray
    names: np.ndarray  # zone id per code (str)

    @property
    def k(self) -> int:
        return int(self.names.shape[0])


def is_null(value: object) -> bool:
    if value is None:
        return True
    if isinstance(value, float) and math.isnan(value):
        return True
    if value is pd.NA or value is pd.NaT:
        return True
    return isinstance(value, str) and value.strip() == ""


def encode_labels(values: Sequence | np.ndarray) -> TierLabels:
    """Zone ids (any hashable, nulls allowed) to codes ordered by first appearance."""
    values = np.asarray(values, dtype=object)
    null = np.fromiter((is_null(v) for v in values), dtype=bool, count=values.shape[0])
    text = np.array([str(v) for v in values], dtype=object)
    codes = np.full(values.shape[0], -1, dtype=np.int64)
    if (~null).any():
        uniq, first, inv = np.unique(text[~null].astype(str), return_index=True, return_inverse=True)
        rank = np.empty(uniq.shape[0], dtype=np.int64)
        order = np.argsort(first, kind="stable")
        rank[order] = np.arange(uniq.shape[0])
        codes[~null] = rank[inv.reshape(-1)]
        names = np.array(uniq[order], dtype=object)
    else:
        names = np.zeros(0, dtype=object)
    return TierLabels(codes=codes, names=names)


def tier_bounds(tier: TierRules, count_names: Sequence[str]) -> Bounds:
    """The tier's min/max/target as a Bounds record aligned to `count_names`."""
    return tier.bounds(count_names)


def zone_members(codes: np.ndarray, k: int) -> list[np.ndarray]:
    """Area positions of every zone 0..k-1 (ascending)."""
    valid = np.flatnonzero(codes >= 0)
    order = valid[np.argsort(codes[valid], kind="stable")]
    cuts = np.searchsorted(codes[order], np.arange(k + 1))
    return [order[cuts[z] : cuts[z + 1]] for z in range(k)]


def zone_parts(graph: Graph, codes: np.ndarray) -> np.ndarray:
    """Component id per area on the graph keeping only edges inside one zone (-1: no zone)."""
    i, j, _ = graph.edges()
    keep = (codes[i] == codes[j]) & (codes[i] >= 0)
    _, comp = components(Graph.from_edges(codes.shape[0], i[keep], j[keep]))
    comp[codes < 0] = -1
    return comp
