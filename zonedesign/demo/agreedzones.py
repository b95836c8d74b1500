"""The demo's agreed zones: small zones fixed by agreement that meet their bounds now and ten years on (the lock file)."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd

from zonedesign.graph.adjacency import rook_graph
from zonedesign.graph.components import components

# the small tier's bounds in the demo rules (scenarios.RULES_TEXT), which each agreed zone meets now and ten years on
_SMALL = {"households": (50, 280, 140), "persons": (120, 700)}


def agreed_zones(gdf: gpd.GeoDataFrame, later: list[gpd.GeoDataFrame] = (), n_zones: int = 2) -> pd.DataFrame:
    """The demo's lock file: `n_zones` small zones fixed by agreement (columns area, small).

    Each grows breadth-first from the first area (by code) of a district, town districts
    first, until it holds the small tier's target of households; it is kept only when it
    meets the small tier's bounds with these counts and the later ones, and the rest of its
    district stays in one piece, so the zones around it can still be designed.
    """
    graph = rook_graph(gdf.geometry.values)
    codes = gdf["code"].to_numpy(dtype=object)
    district = gdf["district"].to_numpy(dtype=object)
    counts = [gdf] + list(later)
    density = gdf.groupby("district")["households"].sum() / gdf.groupby("district").geometry.apply(
        lambda g: g.area.sum()
    )
    rows = []
    for d in density.sort_values(ascending=False).index:
        if len(rows) >= n_zones:
            break
        inside = np.flatnonzero(district == d)
        start = int(inside[np.argmin(codes[inside])])
        zone = _grow(graph, start, district, gdf["households"].to_numpy(dtype=float))
        if zone is None or not all(_fits(c, zone) for c in counts):
            continue
        rest = np.setdiff1d(inside, zone)
        n_before = components(graph.subgraph(inside))[0]
        if components(graph.subgraph(rest))[0] > n_before:
            continue
        rows.append((d, zone))
    out = [
        {"area": str(codes[a]), "small": f"{d}-agreed-{k + 1}"}
        for k, (d, zone) in enumerate(rows)
        for a in sorted(zone.tolist(), key=lambda a: codes[a])
    ]
    return pd.DataFrame(out, columns=["area", "small"])


def _grow(graph, start: int, district: np.ndarray, households: np.ndarray) -> np.ndarray | None:
    """Areas reached breadth-first from `start` inside its district until the target."""
    target = _SMALL["households"][2]
    seen, order, total = {start}, [start], households[start]
    frontier = [start]
    while frontier and total < target:
        nxt = []
        for u in frontier:
            for v in graph.neighbours(u).tolist():
                if v not in seen and district[v] == district[start] and total < target:
                    seen.add(v)
                    order.append(v)
                    total += households[v]
                    nxt.append(v)
        frontier = nxt
    return np.array(sorted(order), dtype=np.int64) if total >= target else None


def _fits(gdf: gpd.GeoDataFrame, zone: np.ndarray) -> bool:
    for col, (lo, hi, *_) in _SMALL.items():
        total = float(gdf[col].to_numpy(dtype=float)[zone].sum())
        if not lo <= total <= hi:
            return False
    return True
