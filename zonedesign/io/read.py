"""Read an areas file (GeoPackage, GeoJSON, Shapefile, GeoParquet) into an `Areas` record.

Everything the core needs is checked here, once, and every fault is reported with its file,
column and row ids before anything runs. Geographic coordinates are projected to the UTM
zone of the data's centre so that areas and lengths are in metres.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import shapely
from pyproj import CRS

from zonedesign.errors import InputError
from zonedesign.io import validate as v
from zonedesign.io.formats import MULTI_LAYER_SUFFIXES, PARQUET_SUFFIXES, read_frame
from zonedesign.io.table import ColumnSources, column_sources, read_counts_table
from zonedesign.records import Areas
from zonedesign.rules import ROW_ID, AreasRules, projected_problem


@dataclass(frozen=True)
class AreaFile:
    """An areas file as read: the record, its polygons and what was done on the way.

    geometry: polygons in the projected CRS, index 0..n-1 in the row order of `areas`.
    notes: one line per thing the user should know (reprojection, repairs).
    crs_note: which CRS areas and lengths are measured in, and why.
    """

    areas: Areas
    geometry: gpd.GeoSeries
    source: Path
    crs_note: str
    notes: list[str] = field(default_factory=list)
    overlaps_cut: list[dict] = field(default_factory=list)  # overlaps = "cut": each pair mended
    duplicates_merged: list[dict] = field(default_factory=list)  # identical polygons made one area


def read_areas(
    path: str | Path,
    areas_rules: AreasRules,
    *,
    layer: str | None = None,
    crs: str | None = None,
) -> AreaFile:
    """Read and check the areas file; raise one InputError listing every problem found.

    `layer` (else `areas_rules.layer`) picks a GeoPackage layer; `crs` (else
    `areas_rules.crs`) states the CRS of a file that carries none.
    """
    path = Path(path)
    where = path.name
    wanted = _wanted_columns(areas_rules)
    try:
        frame, present = read_frame(path, layer or areas_rules.layer, list(wanted))
    except InputError as exc:
        exc.problems = exc.problems or [str(exc)]
        raise
    table = read_counts_table(areas_rules.table) if areas_rules.table is not None else None
    sources, problems = column_sources(areas_rules, wanted, present, where, table)
    n = len(frame)
    if n == 0:
        v.raise_problems([f"{where}: no rows (empty layer)", *problems])
    notes: list[str] = []
    given = layer or areas_rules.layer
    if given and path.suffix.lower() not in (*MULTI_LAYER_SUFFIXES, *PARQUET_SUFFIXES):
        names = [str(x) for x in pyogrio.list_layers(path)[:, 0]]
        if given not in names:
            # a one-layer format: the name is not part of the data, so it is not an error
            notes.append(f"{where}: layer {given!r} ignored: a {path.suffix} file holds one layer ({names[0]!r})")

    ids = None
    if areas_rules.row_ids:
        ids = np.array([str(k + 1) for k in range(n)], dtype=object)
        notes.append(f'{where}: no id column (id = "{ROW_ID}"): areas are named by their row number, 1 to {n}')
    elif areas_rules.id in frame:
        ids, id_problems = v.check_ids(frame[areas_rules.id], areas_rules.id, where)
        problems += id_problems
    labels = v.row_labels(ids)
    columns = ColumnSources(frame, where, labels, sources)
    if table is not None and ids is not None and areas_rules.id in table.frame:
        found, join_notes = columns.join(table, areas_rules.id, ids, frame[areas_rules.id].dtype.kind)
        problems += found
        notes += join_notes

    counts = np.zeros((n, len(areas_rules.counts)))
    for k, col in enumerate(areas_rules.counts):
        counts[:, k], found = columns.numeric(col, negative_ok=False)
        problems += found
    attrs = np.zeros((n, len(areas_rules.attributes)))
    for k, col in enumerate(areas_rules.attributes):
        attrs[:, k], found = columns.numeric(col, negative_ok=True, constant_ok=False)
        problems += found
    weight = np.ones(n)
    if areas_rules.weight in areas_rules.counts:
        weight = counts[:, areas_rules.counts.index(areas_rules.weight)].copy()  # checked above
    elif areas_rules.weight is not None:
        weight, found = columns.numeric(areas_rules.weight, negative_ok=False)
        problems += found
    fence = np.full(n, "all", dtype=object)
    if areas_rules.fence is not None:
        fence, found, fence_notes = columns.fence(areas_rules)
        problems += found
        notes += fence_notes
    tier_fence: dict[str, np.ndarray] = {}
    for tier, col in areas_rules.tier_fences:
        if col is None:
            continue
        plain = AreasRules(id=areas_rules.id, counts=(), fence=col)
        tier_fence[tier], found, _ = columns.fence(plain)
        problems += found
    if tier_fence and not problems:
        problems += v.fence_nesting(fence, tier_fence, areas_rules, where, labels)

    geoms, repaired, found = v.check_polygons(frame.geometry.to_numpy(), where, labels)
    problems += found
    if repaired.size:
        notes.append(
            f"{where}: {repaired.size} invalid polygon(s) repaired with make_valid: "
            f"{v.listed(labels, repaired)}"
        )

    source_crs = frame.crs
    stated = crs or areas_rules.crs
    if source_crs is None:
        if not stated:
            problems.append(
                f"{where}: no coordinate reference system; state one with crs = \"EPSG:...\" "
                "in [areas] or --crs"
            )
        else:
            try:
                source_crs = CRS.from_user_input(stated)
            except Exception as exc:  # pyproj raises its own CRSError
                problems.append(f"{where}: stated crs {stated!r} is not a CRS pyproj knows ({exc})")
    elif stated and _try_crs(stated) != CRS.from_user_input(source_crs):
        notes.append(f"{where}: the file's own CRS is used; the stated crs {stated!r} is ignored")

    polygonal = ~(shapely.is_missing(geoms) | shapely.is_empty(geoms)) & np.isin(
        shapely.get_type_id(geoms), v.POLYGONAL
    )
    with np.errstate(invalid="ignore"):
        polygonal &= np.isfinite(shapely.bounds(geoms)).all(axis=1)  # check_polygons names the rest
    series = gpd.GeoSeries(geoms, crs=source_crs, index=pd.RangeIndex(n))
    crs_note = ""
    if source_crs is not None:
        try:
            series, crs_note = _projected(series, where, areas_rules.work_crs)
            if series.crs != source_crs:
                notes.insert(0, f"{where}: {crs_note}")
        except InputError as exc:
            problems.append(str(exc))
    mend = Mended()
    if polygonal.all():
        clipped, clip_notes = v.clip_repaired(series.to_numpy(), repaired, where, labels)
        series = gpd.GeoSeries(clipped, crs=series.crs, index=series.index)
        notes += clip_notes
        if areas_rules.overlaps == "refuse":
            problems += v.overlap_problems(clipped, where, labels, counts, tuple(areas_rules.counts))
    v.raise_problems(problems, where=where)
    repaired_ids = tuple(str(ids[k]) for k in repaired)
    if areas_rules.overlaps == "cut":
        columns = {"ids": ids, "counts": counts, "attrs": attrs, "weight": weight, "fence": fence}
        columns.update({f"tier:{k}": a for k, a in tier_fence.items()})
        mend, series, columns, found = _mend_overlaps(series, columns, areas_rules, where, labels)
        v.raise_problems(found, where=where)
        ids, counts, attrs, weight, fence = (columns[k] for k in ("ids", "counts", "attrs", "weight", "fence"))
        tier_fence = {k: columns[f"tier:{k}"] for k in tier_fence}
        notes += mend.notes(where)

    geo = series.to_numpy()
    areas = Areas(
        ids=ids,
        count_names=tuple(areas_rules.counts),
        counts=counts,
        attr_names=tuple(areas_rules.attributes),
        attrs=attrs,
        weight=weight,
        area=shapely.area(geo),
        perimeter=shapely.length(geo),
        fence=fence,
        crs=series.crs.to_string(),
        repaired=repaired_ids,
        tier_fence=tier_fence,
    )
    return AreaFile(
        areas=areas, geometry=series, source=path, crs_note=crs_note, notes=notes,
        overlaps_cut=mend.cut, duplicates_merged=mend.merged,
    )


# ---------------------------------------------------------------- overlaps = "cut"


@dataclass
class Mended:
    """What `overlaps = "cut"` did: duplicate areas merged, overlapping pairs cut."""

    merged: list[dict] = field(default_factory=list)
    cut: list[dict] = field(default_factory=list)

    def notes(self, where: str) -> list[str]:
        out = []
        if self.merged:
            shown = "; ".join(f"{d['kept']} took in {', '.join(d['merged'])}" for d in self.merged[: v.SHOW])
            more = f"; and {len(self.merged) - v.SHOW} more" if len(self.merged) > v.SHOW else ""
            out.append(
                f"{where}: {len(self.merged)} duplicate polygon(s) merged into one area each, counts summed "
                f"(overlaps = \"cut\"): {shown}{more}"
            )
        if self.cut:
            shown = ", ".join(
                f"{c['cut_from']} gave {c['overlap_m2']:.6g} m2 to {c['kept_by']}" for c in self.cut[: v.SHOW]
            )
            more = f" and {len(self.cut) - v.SHOW} more" if len(self.cut) > v.SHOW else ""
            out.append(
                f"{where}: {len(self.cut)} overlapping pair(s) cut (overlaps = \"cut\"; each overlap kept by the "
                f"polygon it is the larger share of; parts below {v.SLIVER_SHARE:g} of a polygon dropped): {shown}{more}"
            )
        return out


def _mend_overlaps(
    series: gpd.GeoSeries, columns: dict[str, np.ndarray], rules: AreasRules, where: str, labels: v.RowLabels
) -> tuple[Mended, gpd.GeoSeries, dict[str, np.ndarray], list[str]]:
    """Merge identical polygons into one area each, then cut every remaining overlap."""
    geoms = series.to_numpy()
    ids = columns["ids"]
    i, j, _ = v.overlapping_pairs(geoms)
    dup = v.duplicate_mask(geoms, i, j)
    mend = Mended()
    problems: list[str] = []
    keep = np.ones(geoms.shape[0], dtype=bool)
    if dup.any():
        # identical polygons in groups (three copies are three pairs); the first row stays
        group = np.arange(geoms.shape[0])
        for a, b in zip(i[dup].tolist(), j[dup].tolist()):
            ra, rb = _root(group, a), _root(group, b)
            group[max(ra, rb)] = min(ra, rb)
        roots = np.array([_root(group, k) for k in range(geoms.shape[0])])
        counts, attrs, weight, fence = (columns[k].copy() for k in ("counts", "attrs", "weight", "fence"))
        for r in np.unique(roots[roots != np.arange(roots.size)]).tolist():
            members = np.flatnonzero(roots == r)
            if len(set(fence[members].tolist())) > 1:
                problems.append(
                    f"{where}: geometry: identical polygons {v.listed(labels, members)} lie in different fences "
                    f"({', '.join(sorted(map(str, set(fence[members].tolist()))))}); they cannot be merged"
                )
                continue
            w = weight[members]
            share = w / w.sum() if w.sum() > 0 else np.full(members.size, 1.0 / members.size)
            mend.merged.append(
                {
                    "kept": str(ids[r]),
                    "merged": [str(ids[k]) for k in members if k != r],
                    "counts": {
                        str(ids[k]): dict(zip(rules.counts, counts[k].tolist())) for k in members
                    },
                }
            )
            counts[r] = counts[members].sum(axis=0)
            attrs[r] = share @ attrs[members]  # the merged area's attributes: weighted by its parts
            weight[r] = w.sum()
            keep[members[members != r]] = False
        columns = {**columns, "ids": ids, "counts": counts, "attrs": attrs, "weight": weight, "fence": fence}
    if problems:
        return mend, series, columns, problems
    columns = {k: a[keep] for k, a in columns.items()}
    geoms = geoms[keep]
    i, j, _ = v.overlapping_pairs(geoms)
    geoms, mend.cut = v.cut_overlaps(geoms, columns["ids"], i, j)
    gone = np.flatnonzero(shapely.is_empty(geoms) | (shapely.area(geoms) <= 0))
    if gone.size:
        problems.append(
            f"{where}: geometry, {v.rows_text(v.row_labels(columns['ids']), gone)}: nothing left once the "
            "polygons overlapping it keep their overlap (a polygon wholly covered by others)"
        )
    left = v.overlapping_pairs(geoms)[0]
    if left.size and not problems:  # a cut always leaves pairwise-disjoint interiors; checked, not assumed
        problems.append(f"{where}: geometry: {left.size} overlapping pair(s) left after the cut")
    out = gpd.GeoSeries(geoms, crs=series.crs, index=pd.RangeIndex(geoms.shape[0]))
    return mend, out, columns, problems


def _root(group: np.ndarray, k: int) -> int:
    while group[k] != k:
        k = group[k]
    return int(k)


def _wanted_columns(rules: AreasRules) -> dict[str, str]:
    wanted: dict[str, str] = {} if rules.row_ids else {rules.id: "id"}
    for col in rules.counts:
        wanted.setdefault(col, "count")
    for col in rules.attributes:
        wanted.setdefault(col, "attribute")
    if rules.fence is not None:
        wanted.setdefault(rules.fence, "fence")
    if rules.weight is not None:
        wanted.setdefault(rules.weight, "weight")
    for _, col in rules.tier_fences:
        if col is not None:
            wanted.setdefault(col, "fence")
    return wanted


def _try_crs(text: str) -> CRS | None:
    try:
        return CRS.from_user_input(text)
    except Exception:  # noqa: BLE001 - any failure means "not comparable"
        return None


def _projected(series: gpd.GeoSeries, where: str, work_crs: str | None = None) -> tuple[gpd.GeoSeries, str]:
    """The polygons in a metric projected CRS, and a note saying which and why."""
    crs = CRS.from_user_input(series.crs)
    name = crs.to_string()
    if work_crs is not None:
        problem = projected_problem(work_crs)
        if problem:
            raise InputError(f"{where}: work_crs {problem}")
        target = CRS.from_user_input(work_crs)
        if target == crs:
            return series, f"areas and lengths measured in the file's CRS {name}, the stated work_crs"
        moved = series.to_crs(target)
        if not np.isfinite(moved.total_bounds).all():
            raise InputError(f"{where}: work_crs {work_crs!r} cannot hold the data (coordinates not finite)")
        return moved, (
            f"CRS {name} reprojected to {target.to_string()} ({target.name}), the stated work_crs, "
            "to measure areas and lengths in metres"
        )
    if crs.is_projected and _metres(crs):
        return series, f"areas and lengths measured in the file's projected CRS {name}"
    try:
        utm = series.estimate_utm_crs()
    except Exception as exc:  # outside the UTM band, or no usable bounds
        raise InputError(
            f"{where}: CRS {name} is not in metres and no UTM zone fits the data ({exc}); "
            "reproject the file to a projected CRS or state work_crs in [areas]"
        ) from exc
    why = "geographic" if crs.is_geographic else "not in metres"
    note = (
        f"CRS {name} is {why}; reprojected to {utm.to_string()} ({utm.name}, the UTM zone of "
        "the data's centre) to measure areas and lengths in metres"
    )
    return series.to_crs(utm), note


def _metres(crs: CRS) -> bool:
    axes = crs.axis_info
    return bool(axes) and all(abs(a.unit_conversion_factor - 1.0) < 1e-12 for a in axes)


# ---------------------------------------------------------------- counts table


# ---------------------------------------------------------------- reading files


