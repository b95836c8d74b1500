"""The sweep report's pieces: chart scales a reader can trust, zones matched across variants."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest

from zonedesign.report.sweepcharts import y_limits
from zonedesign.report.sweepreport import match_codes


@pytest.mark.parametrize(
    "kind, values, expected",
    [
        ("count", [0, 0, 0], (0.0, 1.0)),  # zero breaks sit at the foot of the axis, not mid-way
        ("count", [3, 3, 3], (0.0, pytest.approx(3.3))),
        ("share", [0.4, 0.4], (0.0, 1.02)),  # shares always on the whole 0-100 % scale
        ("value", [0.47, 0.35], (0.0, pytest.approx(0.517))),
    ],
)
def test_every_panel_starts_at_zero_so_flat_series_read_flat(kind, values, expected):
    lo, hi = y_limits(kind, np.array(values, dtype=float))
    assert (lo, hi) == expected


def test_zones_are_matched_one_to_one_by_their_largest_shared_areas():
    first = np.array(["A", "A", "A", "B", "B", "C", "C", "C"], dtype=object)
    here = np.array(["x", "x", "y", "y", "y", "z", "z", "w"], dtype=object)
    named = match_codes(first, here)
    # overlaps: x-A 2, y-B 2, z-C 2, y-A 1, w-C 1; a maximum-weight matching over the same
    # bipartite overlaps (networkx) pairs the same zones
    g = nx.Graph()
    for a, b in zip(first, here):
        w = g.get_edge_data(("old", a), ("new", b), {"weight": 0})["weight"]
        g.add_edge(("old", a), ("new", b), weight=w + 1)
    best = {}
    for e in nx.max_weight_matching(g):
        old, new = sorted(e, key=lambda node: node[0] != "old")
        best[new[1]] = old[1]
    assert {b: a for b, a in named.items() if b in best} == best
    assert len(set(named.values())) == len(named)  # no two zones take one code
    assert named["w"] not in {"A", "B", "C"}  # left without a partner: keeps a code of its own
