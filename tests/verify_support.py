"""Builders shared by the checker's tests: grid graphs, area records and the NY8 hierarchy.

The NY8 data are Debian's r-cran-spdata shapefiles (NY8_utm18.shp: 281 census tracts of
eight New York counties). Adjacency is built here with shapely (STRtree candidates, shared
boundary length from the intersection of neighbouring polygons), independently of
zonedesign.graph.
"""

from __future__ import annotations

import functools
from pathlib import Path

import numpy as np

from zonedesign.records import Areas, Graph


def grid_graph(rows: int, cols: int) -> Graph:
    """Rook graph of a rows x cols grid of unit squares, unit shared lengths, row-major."""
    i, j = [], []
    for r in range(rows):
        for c in range(cols):
            a = r * cols + c
            if c + 1 < cols:
                i.append(a)
                j.append(a + 1)
            if r + 1 < rows:
                i.append(a)
                j.append(a + cols)
    return Graph.from_edges(rows * cols, np.array(i), np.array(j), np.ones(len(i)))


def make_areas(
    counts: np.ndarray,
    *,
    count_names: tuple[str, ...] = ("persons",),
    fence: np.ndarray | None = None,
    attrs: np.ndarray | None = None,
    attr_names: tuple[str, ...] = (),
    weight: np.ndarray | None = None,
    ids: list[str] | None = None,
) -> Areas:
    """Unit-square areas (area 1, perimeter 4) with the given counts."""
    counts = np.asarray(counts, dtype=np.float64)
    if counts.ndim == 1:
        counts = counts[:, None]
    n = counts.shape[0]
    return Areas(
        ids=np.array(ids if ids is not None else [f"a{i:03d}" for i in range(n)], dtype=object),
        count_names=count_names,
        counts=counts,
        attr_names=attr_names,
        attrs=np.zeros((n, 0)) if attrs is None else np.asarray(attrs, dtype=np.float64),
        weight=np.ones(n) if weight is None else np.asarray(weight, dtype=np.float64),
        area=np.ones(n),
        perimeter=np.full(n, 4.0),
        fence=np.array(["f"] * n if fence is None else list(fence), dtype=object),
    )


@functools.lru_cache(maxsize=1)
def _ny8_cached(path: str):
    import geopandas as gpd
    import shapely

    frame = gpd.read_file(Path(path) / "NY8_utm18.shp")
    # five NY8 polygons are invalid; the structure method keeps them polygonal
    geom = shapely.make_valid(np.asarray(frame.geometry.values), method="structure", keep_collapsed=False)
    frame = frame.set_geometry(gpd.GeoSeries(geom, crs=frame.crs))
    tree = shapely.STRtree(geom)
    a, b = tree.query(geom, predicate="intersects")
    keep = a < b
    a, b = a[keep], b[keep]
    shared = shapely.length(shapely.intersection(shapely.boundary(geom[a]), shapely.boundary(geom[b])))
    rook = shared > 0
    graph = Graph.from_edges(len(frame), a[rook], b[rook], shared[rook])
    key = frame["AREAKEY"].astype(str).to_numpy()
    pop = frame["POP8"].to_numpy(dtype=np.float64)
    areas = Areas(
        ids=np.array(key, dtype=object),
        count_names=("persons",),
        counts=pop[:, None],
        attr_names=("owner_share", "over65_share"),
        attrs=frame[["PCTOWNHOME", "PCTAGE65P"]].to_numpy(dtype=np.float64),
        weight=pop,
        area=shapely.area(geom),
        perimeter=shapely.length(shapely.boundary(geom)),
        fence=np.array([k[:5] for k in key], dtype=object),
        crs=str(frame.crs),
    )
    return frame, areas, graph


def ny8(shapes: Path):
    """(GeoDataFrame, Areas, Graph) of NY8: persons = POP8, fence = county (AREAKEY[:5]).

    `shapes` is the r-cran-spdata shapes folder (the suite's `spdata_dir` fixture).
    """
    return _ny8_cached(str(shapes))
