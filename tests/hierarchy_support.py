"""In-memory instances for hierarchy, redraw and sweep tests: no files, no CLI."""

from __future__ import annotations

from dataclasses import replace

import geopandas as gpd
import networkx as nx
import numpy as np
import shapely

from zonedesign.demo.synthetic import grid_with_holes, voronoi_tessellation
from zonedesign.graph.adjacency import rook_graph
from zonedesign.records import Areas, Graph
from zonedesign.rules import AreasRules, Rules, SearchRules, TierRules


def areas_from_frame(gdf: gpd.GeoDataFrame, counts=("households", "persons"), attrs=("attr_a", "attr_b"),
                     fence: str | None = "fence", weight: str | None = "persons") -> tuple[Areas, Graph]:
    geoms = np.asarray(gdf.geometry.values)
    areas = Areas(
        ids=gdf["id"].astype(str).to_numpy(dtype=object),
        count_names=tuple(counts),
        counts=gdf[list(counts)].to_numpy(dtype=np.float64),
        attr_names=tuple(attrs),
        attrs=gdf[list(attrs)].to_numpy(dtype=np.float64),
        weight=gdf[weight].to_numpy(dtype=np.float64) if weight else np.ones(len(gdf)),
        area=shapely.area(geoms),
        perimeter=shapely.length(geoms),
        fence=(gdf[fence].astype(str).to_numpy(dtype=object) if fence else np.full(len(gdf), "all", dtype=object)),
        crs="EPSG:3857",
    )
    return areas, rook_graph(gdf.geometry)


def with_counts(areas: Areas, counts: np.ndarray) -> Areas:
    return replace(areas, counts=np.asarray(counts, dtype=np.float64))


def two_tier_rules(method: str = "descent", seed: int = 3, *, floor1=(40, 100), ceil1=(250, 625), target1=125.0,
                   floor2=(300, 750), ceil2=(1500, 3750), weights=None) -> Rules:
    w = weights or {"size": 1.0, "homogeneity": 1.0, "compactness": 1.0, "stability": 0.0}
    t1 = TierRules(
        name="block",
        min={"households": floor1[0], "persons": floor1[1]},
        max={"households": ceil1[0], "persons": ceil1[1]},
        target={} if target1 is None else {"households": target1},
        weights=dict(w),
    )
    t2 = TierRules(
        name="ward",
        min={"households": floor2[0], "persons": floor2[1]},
        max={"households": ceil2[0], "persons": ceil2[1]},
        target={},
        weights=dict(w),
    )
    return Rules(
        areas=AreasRules(id="id", counts=("households", "persons"), attributes=("attr_a", "attr_b"), fence="fence"),
        tiers=(t1, t2),
        search=SearchRules(method=method, seed=seed, constructions=2, time_limit_fence=20.0),
    )


def voronoi_instance(n: int = 240, seed: int = 5, n_fences: int = 2) -> tuple[Areas, Graph]:
    return areas_from_frame(voronoi_tessellation(n, seed, clustered=False, n_fences=n_fences))


def grid_instance(nx_: int = 16, ny: int = 12, seed: int = 1) -> tuple[Areas, Graph]:
    return areas_from_frame(grid_with_holes(nx_, ny, 0.0, seed))


def nx_graph(graph: Graph) -> nx.Graph:
    """The graph as networkx (reference library) for independent contiguity checks."""
    g = nx.Graph()
    g.add_nodes_from(range(graph.n))
    i, j, _ = graph.edges()
    g.add_edges_from(zip(i.tolist(), j.tolist()))
    return g


def zone_members(labels: np.ndarray) -> dict[str, set[int]]:
    out: dict[str, set[int]] = {}
    for i, z in enumerate(np.asarray(labels, dtype=object)):
        out.setdefault(str(z), set()).add(i)
    return out
