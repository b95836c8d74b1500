"""Zone polygons as inline SVG: simplified, rounded to whole viewBox units, y flipped.

Geometry is simplified as a coverage (shapely.coverage_simplify), so an edge two zones
share is simplified once and stays shared: no slivers or gaps open between neighbours.
The tolerance is a fraction of one viewBox unit, finer detail than a screen can show.
Coordinates are then rounded to integers and written as relative moves, which keeps a
zone of a few dozen vertices to a few dozen bytes.

Size limits of one map (the report decides what to do past them): at most
`MAX_ZONES_PER_MAP` zones and `MAP_BYTES` bytes of SVG.
"""

from __future__ import annotations

import html
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import shapely

MAP_SIZE = 1000  # viewBox units along the longer side of the map
MARGIN = 6  # viewBox units left blank around the drawing, room for heavy outlines
MAX_ZONES_PER_MAP = 3000
MAP_BYTES = 2_500_000

_POLYGON = 3
_COLLECTIONS = (4, 5, 6, 7)  # multi-point, multi-line, multi-polygon, collection


@dataclass(frozen=True)
class Frame:
    """Affine map from projected coordinates (metres) to viewBox units, y pointing down."""

    minx: float
    maxy: float
    scale: float  # viewBox units per metre
    width: int
    height: int

    @property
    def unit(self) -> float:
        """Length in metres of one viewBox unit."""
        return 1.0 / self.scale

    def apply(self, xy: np.ndarray) -> np.ndarray:
        out = np.empty(xy.shape, dtype=np.int64)
        out[:, 0] = np.rint((xy[:, 0] - self.minx) * self.scale) + MARGIN
        out[:, 1] = np.rint((self.maxy - xy[:, 1]) * self.scale) + MARGIN
        return out


def frame_for(bounds: Sequence[float], size: int = MAP_SIZE) -> Frame:
    """The frame that fits `bounds` (minx, miny, maxx, maxy) into `size` units."""
    minx, miny, maxx, maxy = (float(b) for b in bounds)
    if not np.all(np.isfinite([minx, miny, maxx, maxy])):
        minx = miny = 0.0
        maxx = maxy = 1.0
    span = max(maxx - minx, maxy - miny)
    if span <= 0:
        span = 1.0
    scale = (size - 2 * MARGIN) / span
    width = int(np.ceil((maxx - minx) * scale)) + 2 * MARGIN
    height = int(np.ceil((maxy - miny) * scale)) + 2 * MARGIN
    return Frame(
        minx=minx,
        maxy=maxy,
        scale=scale,
        width=max(width, 2 * MARGIN + 1),
        height=max(height, 2 * MARGIN + 1),
    )


def simplify(geoms: np.ndarray, tolerance: float) -> np.ndarray:
    """Coverage-preserving simplification; falls back to per-polygon topology-preserving."""
    geoms = np.asarray(geoms, dtype=object)
    if tolerance <= 0 or geoms.shape[0] == 0:
        return geoms
    try:
        out = shapely.coverage_simplify(geoms, tolerance)
    except (shapely.errors.GEOSException, ValueError, TypeError):
        out = shapely.simplify(geoms, tolerance, preserve_topology=True)
    # a collapsed result is useless for drawing; keep the original shape instead
    bad = shapely.is_empty(out) | shapely.is_missing(out)
    if bad.any():
        out = np.where(bad, geoms, out)
    return out


def _polygons(geoms: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Every polygon in `geoms` with the index of the geometry it came from."""
    parts, idx = shapely.get_parts(geoms, return_index=True)
    for _ in range(3):  # collections nested in collections (make_valid can produce them)
        nested = np.isin(shapely.get_type_id(parts), _COLLECTIONS)
        if not nested.any():
            break
        sub, sidx = shapely.get_parts(parts[nested], return_index=True)
        parts = np.concatenate([parts[~nested], sub])
        idx = np.concatenate([idx[~nested], idx[nested][sidx]])
    keep = shapely.get_type_id(parts) == _POLYGON
    return parts[keep], idx[keep]


def path_data(geoms: np.ndarray, frame: Frame) -> list[str]:
    """SVG path data per geometry: one closed subpath per ring, whole units, relative moves.

    A geometry too small to keep a ring after rounding gets "" (see `marker_path`).
    """
    geoms = np.asarray(geoms, dtype=object)
    n = geoms.shape[0]
    out = [""] * n
    if n == 0:
        return out
    polys, pidx = _polygons(geoms)
    if polys.shape[0] == 0:
        return out
    rings, ridx = shapely.get_rings(polys, return_index=True)
    owner = pidx[ridx]
    coords, cidx = shapely.get_coordinates(rings, return_index=True)
    if coords.shape[0] == 0:
        return out
    xy = frame.apply(coords)
    same_ring = np.r_[False, cidx[1:] == cidx[:-1]]
    repeat = np.r_[False, np.all(xy[1:] == xy[:-1], axis=1)]
    keep = ~(same_ring & repeat)
    xy, cidx = xy[keep], cidx[keep]
    starts = np.flatnonzero(np.r_[True, cidx[1:] != cidx[:-1]])
    ends = np.r_[starts[1:], cidx.shape[0]]
    pieces: dict[int, list[str]] = {}
    for s, e in zip(starts.tolist(), ends.tolist()):
        ring = xy[s:e]
        if ring.shape[0] > 1 and ring[0, 0] == ring[-1, 0] and ring[0, 1] == ring[-1, 1]:
            ring = ring[:-1]
        if ring.shape[0] < 3:
            continue
        steps = np.diff(ring, axis=0).ravel().tolist()
        text = f"M{ring[0, 0]} {ring[0, 1]}l" + " ".join(map(str, steps)) + "z"
        pieces.setdefault(int(owner[cidx[s]]), []).append(text.replace(" -", "-"))
    for g, texts in pieces.items():
        out[g] = "".join(texts)
    return out


def marker_path(geom: object, frame: Frame) -> str:
    """A one-unit square at the zone's inner point, for zones smaller than a unit."""
    if geom is None or shapely.is_empty(geom):
        return f"M{MARGIN} {MARGIN}l0 0z"
    p = shapely.get_coordinates(shapely.point_on_surface(geom))
    x, y = frame.apply(p)[0].tolist()
    return f"M{x} {y}l1 0 0 1-1 0z"


_UNSAFE = re.compile(r"[^A-Za-z0-9-]")
_UNSAFE_STRICT = re.compile(r"[^A-Za-z0-9]")


def _escape(pattern: re.Pattern, s: str) -> str:
    # fixed-width escapes keep the mapping one-to-one
    return pattern.sub(
        lambda m: (
            f"_{ord(m.group()):04x}" if ord(m.group()) < 0x10000 else f"_u{ord(m.group()):06x}"
        ),
        s,
    )


def element_id(prefix: str, tier: str, zone: str) -> str:
    """The HTML id `<prefix>-<tier>-<zone>` of one zone; distinct zones get distinct ids.

    Characters outside [A-Za-z0-9-] become `_` plus their code point in hex; in the tier
    name `-` is escaped too, so the first `-` after the prefix always ends the tier.
    """
    return f"{prefix}-{_escape(_UNSAFE_STRICT, str(tier))}-{_escape(_UNSAFE, str(zone))}"


@dataclass
class DrawnMap:
    svg: str
    zones: int
    frame: Frame


def zone_map(
    geoms: np.ndarray,
    *,
    element_ids: Sequence[str],
    classes: Sequence[str],
    titles: Sequence[str],
    data: Mapping[str, Sequence[str]] | None = None,
    on_top: np.ndarray | None = None,
    fences: Sequence[str] | None = None,
    label: str,
    svg_id: str | None = None,
) -> DrawnMap:
    """One inline SVG map with a <path class="zone"> per geometry.

    `classes` adds CSS classes (fill, hatching) to each zone; `titles` becomes each zone's
    <title> (the native tooltip); `data` adds data-<key> attributes. Zones flagged in
    `on_top` are drawn after the fence lines, so their warning outline stays visible.
    When `fences` is given, the outline of each fence's zones is drawn as a heavier line.
    """
    geoms = np.asarray(geoms, dtype=object)
    n = geoms.shape[0]
    bounds = shapely.total_bounds(geoms) if n else np.array([0.0, 0.0, 1.0, 1.0])
    frame = frame_for(bounds)
    drawn = simplify(geoms, 0.6 * frame.unit)
    paths = path_data(drawn, frame)
    top = np.zeros(n, dtype=bool) if on_top is None else np.asarray(on_top, dtype=bool)
    data = data or {}
    lower: list[str] = []
    upper: list[str] = []
    for i in range(n):
        d = paths[i] or marker_path(geoms[i], frame)
        attrs = "".join(
            f' data-{k}="{html.escape(str(v[i]), quote=True)}"' for k, v in data.items()
        )
        text = (
            f'<path id="{element_ids[i]}" class="zone {classes[i]}"{attrs} d="{d}">'
            f"<title>{html.escape(titles[i], quote=False)}</title></path>"
        )
        (upper if top[i] else lower).append(text)
    fence_line = ""
    if fences is not None and n:
        fence_line = _fence_outline(drawn, np.asarray(fences, dtype=object), frame)
    name = html.escape(label, quote=True)
    ident = f' id="{svg_id}"' if svg_id else ""
    svg = (
        f'<svg{ident} class="zonemap" viewBox="0 0 {frame.width} {frame.height}" role="img" '
        f'aria-label="{name}" xmlns="http://www.w3.org/2000/svg">'
        f'<g class="zones">{"".join(lower)}</g>'
        f"{fence_line}"
        f'<g class="zones on-top">{"".join(upper)}</g></svg>'
    )
    return DrawnMap(svg=svg, zones=n, frame=frame)


def _fence_outline(drawn: np.ndarray, fences: np.ndarray, frame: Frame) -> str:
    """Boundaries of each fence's part, dissolved from the simplified zones."""
    outlines = []
    for f in dict.fromkeys(fences.tolist()):
        part = drawn[fences == f]
        try:
            merged = shapely.coverage_union_all(part)
        except shapely.errors.GEOSException:
            merged = shapely.union_all(part)
        if merged is None or merged.is_empty or not merged.is_valid:
            merged = shapely.union_all(shapely.make_valid(part))
        outlines.append(merged)
    # dissolving leaves the zones' corners along straight fence lines; drop them
    lines = shapely.simplify(
        np.asarray(outlines, dtype=object), 0.1 * frame.unit, preserve_topology=True
    )
    d = "".join(path_data(lines, frame))
    return f'<path class="fence" d="{d}"/>' if d else ""
