"""Synthetic tessellations for tests and benchmarks, reproducible from a seed.

Every generator returns a GeoDataFrame in a metric CRS (EPSG:3857, metres) with columns
id, persons, households, attr_a, attr_b (attributes with spatial structure), fence and
geometry. Neighbouring polygons share identical vertex coordinates (clean topology).
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import shapely

CRS = "EPSG:3857"


def voronoi_cells(
    points: np.ndarray, box: tuple[float, float, float, float], grid: float | None = None
) -> np.ndarray:
    """Voronoi cells of `points` (inside `box`), one per point in input order, filling the box.

    Points are mirrored across every box side their cell reaches, so the cells end on the
    sides themselves: nothing is clipped, and every vertex two cells share is one
    circumcentre written identically into both. Vertices are then snapped to `grid`
    (default 1e-7 of the box's larger side) measured from the box's lower-left corner.
    """
    points = np.asarray(points, dtype=np.float64)
    n = points.shape[0]
    x0, y0, x1, y1 = (float(v) for v in box)
    span = max(x1 - x0, y1 - y0)
    frame = shapely.box(x0, y0, x1, y1)
    band = _near_frame(points, box)
    b = np.full((n, 4), np.nan)
    b[band] = shapely.bounds(_cells(points[band], frame))
    eps = 1e-9 * span
    mirrors = [points]
    for touches, axis, edge in (
        (b[:, 0] <= x0 + eps, 0, x0),
        (b[:, 2] >= x1 - eps, 0, x1),
        (b[:, 1] <= y0 + eps, 1, y0),
        (b[:, 3] >= y1 - eps, 1, y1),
    ):
        m = points[touches].copy()
        m[:, axis] = 2.0 * edge - m[:, axis]
        mirrors.append(m)
    outer = shapely.box(x0 - span, y0 - span, x1 + span, y1 + span)
    cells = _cells(np.concatenate(mirrors), outer)[:n]
    return snap_polygons(cells, box, grid=1e-7 * span if grid is None else grid)


def snap_polygons(cells: np.ndarray, box: tuple[float, float, float, float], grid: float) -> np.ndarray:
    """Single-ring polygons with vertices clamped to `box`, snapped to `grid`, deduplicated.

    Cocircular generators (every mirrored pair is one) give pairs of circumcentres a
    rounding error apart, which leave slivers and spikes. Clamping and snapping are
    functions of the coordinate value alone, so vertices shared before stay shared after.
    """
    x0, y0, x1, y1 = box
    xy, ring = shapely.get_coordinates(cells, return_index=True)
    lo = np.array([x0, y0])
    xy = np.clip(xy, lo, np.array([x1, y1]))
    xy = np.rint((xy - lo) / grid) * grid + lo
    # a vertex equal to its predecessor in the same ring adds nothing
    repeat = np.zeros(xy.shape[0], dtype=bool)
    repeat[1:] = (ring[1:] == ring[:-1]) & (xy[1:] == xy[:-1]).all(axis=1)
    xy, ring = xy[~repeat], ring[~repeat]
    return shapely.polygons(shapely.linearrings(xy, indices=ring))


def _near_frame(points: np.ndarray, box) -> np.ndarray:
    """Points whose cell may reach the box's sides; a superset, found without the diagram.

    Every point of the sides lies within `reach` of some generator (sampled at spacing h;
    distance to the nearest generator changes by at most h/2 between samples), so a
    generator farther than `reach` from every side owns no part of them. Cells computed
    from the near points alone only grow, so touching there is a safe test.
    """
    from scipy.spatial import cKDTree

    x0, y0, x1, y1 = box
    h = max(x1 - x0, y1 - y0) / 4096.0
    xs = np.linspace(x0, x1, int(np.ceil((x1 - x0) / h)) + 1)
    ys = np.linspace(y0, y1, int(np.ceil((y1 - y0) / h)) + 1)
    sides = np.concatenate([
        np.stack([xs, np.full_like(xs, y0)], 1), np.stack([xs, np.full_like(xs, y1)], 1),
        np.stack([np.full_like(ys, x0), ys], 1), np.stack([np.full_like(ys, x1), ys], 1),
    ])
    reach = float(cKDTree(points).query(sides)[0].max()) + h
    gap = np.minimum.reduce([points[:, 0] - x0, x1 - points[:, 0], points[:, 1] - y0, y1 - points[:, 1]])
    return gap <= reach


def _cells(points: np.ndarray, frame) -> np.ndarray:
    out = shapely.voronoi_polygons(shapely.multipoints(points), extend_to=frame, ordered=True)
    return shapely.get_parts(out)[: points.shape[0]]


def _smooth_field(xy: np.ndarray, rng: np.random.Generator, box, n_bumps: int = 6) -> np.ndarray:
    """A smooth field in [0, 1] over the box: a few Gaussian bumps of random sign."""
    x0, y0, x1, y1 = box
    span = max(x1 - x0, y1 - y0)
    centres = rng.uniform([x0, y0], [x1, y1], size=(n_bumps, 2))
    widths = rng.uniform(0.1, 0.3, size=n_bumps) * span
    signs = rng.choice([-1.0, 1.0], size=n_bumps)
    d2 = ((xy[:, None, :] - centres[None, :, :]) ** 2).sum(axis=2)
    f = (signs * np.exp(-d2 / (2 * widths**2))).sum(axis=1)
    lo, hi = f.min(), f.max()
    return (f - lo) / (hi - lo) if hi > lo else np.zeros_like(f)


def _fences(xy: np.ndarray, rng: np.random.Generator, box, n_fences: int) -> np.ndarray:
    """Fence codes F1..Fk: the nearest of k random centres."""
    x0, y0, x1, y1 = box
    centres = rng.uniform([x0, y0], [x1, y1], size=(n_fences, 2))
    d2 = ((xy[:, None, :] - centres[None, :, :]) ** 2).sum(axis=2)
    return np.array([f"F{k + 1}" for k in range(n_fences)], dtype=object)[d2.argmin(axis=1)]


def _frame(ids, geometry, xy, rng, box, n_fences, prefix) -> gpd.GeoDataFrame:
    n = xy.shape[0]
    households = rng.poisson(30.0, size=n) + 5
    persons = np.rint(households * rng.uniform(2.0, 2.8, size=n)).astype(np.int64)
    a = _smooth_field(xy, rng, box)
    b = _smooth_field(xy, rng, box)
    return gpd.GeoDataFrame(
        {
            "id": [f"{prefix}{k:06d}" for k in ids],
            "persons": persons,
            "households": households.astype(np.int64),
            "attr_a": np.round(np.clip(a + rng.normal(0, 0.05, n), 0, 1), 4),
            "attr_b": np.round(np.clip(b + rng.normal(0, 0.05, n), 0, 1), 4),
            "fence": _fences(xy, rng, box, n_fences),
        },
        geometry=gpd.GeoSeries(geometry, crs=CRS),
        crs=CRS,
    )


def voronoi_tessellation(
    n: int,
    seed: int = 0,
    *,
    clustered: bool = True,
    extent: float | None = None,
    n_fences: int = 4,
) -> gpd.GeoDataFrame:
    """`n` Voronoi cells filling a square of side `extent` metres (default 200 m * sqrt(n)).

    clustered: half the generators gather around a few centres, so cells are small there
    and large elsewhere, as in towns and countryside.
    """
    if n < 1:
        raise ValueError(f"n must be >= 1, got {n}")
    rng = np.random.default_rng(seed)
    side = float(extent) if extent is not None else 200.0 * np.sqrt(n)
    box = (0.0, 0.0, side, side)
    if clustered:
        n_near = n // 2
        k = max(1, int(np.sqrt(n) / 10))
        centres = rng.uniform(0.1 * side, 0.9 * side, size=(k, 2))
        which = rng.integers(0, k, size=n_near)
        near = centres[which] + rng.normal(0, 0.05 * side, size=(n_near, 2))
        near = near[(near > 0).all(axis=1) & (near < side).all(axis=1)]
        far = rng.uniform(0, side, size=(n - near.shape[0], 2))
        xy = np.concatenate([near, far])
    else:
        xy = rng.uniform(0, side, size=(n, 2))
    geometry = voronoi_cells(xy, box)
    return _frame(np.arange(1, n + 1), geometry, xy, rng, box, n_fences, "V")


def grid_with_holes(
    nx: int, ny: int, hole_fraction: float = 0.0, seed: int = 0, *, n_fences: int = 4
) -> gpd.GeoDataFrame:
    """Unit squares of an nx x ny grid, with about `hole_fraction` of them removed.

    Cell (col, row) spans [col, col+1] x [row, row+1] metres; ids count row by row from
    the bottom left (G000001). Fences are the quadrants of the grid (F1..F4) when
    n_fences == 4, otherwise the nearest of n_fences random centres.
    """
    if nx < 1 or ny < 1:
        raise ValueError(f"grid needs nx, ny >= 1, got {nx} x {ny}")
    if not 0.0 <= hole_fraction < 1.0:
        raise ValueError(f"hole_fraction must be in [0, 1), got {hole_fraction}")
    rng = np.random.default_rng(seed)
    col, row = np.meshgrid(np.arange(nx), np.arange(ny))
    col, row = col.ravel(), row.ravel()
    keep = rng.random(nx * ny) >= hole_fraction
    ids = np.flatnonzero(keep) + 1
    col, row = col[keep], row[keep]
    geometry = shapely.box(col, row, col + 1.0, row + 1.0)
    xy = np.stack([col + 0.5, row + 0.5], axis=1).astype(np.float64)
    box = (0.0, 0.0, float(nx), float(ny))
    gdf = _frame(ids, geometry, xy, rng, box, n_fences, "G")
    if n_fences == 4:
        quadrant = (col >= nx / 2).astype(int) + 2 * (row >= ny / 2).astype(int)
        gdf["fence"] = np.array(["F1", "F2", "F3", "F4"], dtype=object)[quadrant]
    return gdf
