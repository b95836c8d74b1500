"""Read an areas file (GeoPackage, GeoJSON, Shapefile, GeoParquet) into an `Areas` record.

Everything the core needs is checked here, once, and every fault is reported with its file,
column and row ids before anything runs. Geographic coordinates are projected to the UTM
zone of the data's centre so that areas and lengths are in metres.
"""

from __future__ import annotations

import json
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
from zonedesign.records import Areas
from zonedesign.rules import ROW_ID, AreasRules, projected_problem

PARQUET_SUFFIXES = (".parquet", ".geoparquet")
MULTI_LAYER_SUFFIXES = (".gpkg",)


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
        frame, present = _read_frame(path, layer or areas_rules.layer, list(wanted))
    except InputError as exc:
        exc.problems = exc.problems or [str(exc)]
        raise
    table = read_counts_table(areas_rules.table) if areas_rules.table is not None else None
    sources, problems = _column_sources(areas_rules, wanted, present, where, table)
    n = len(frame)
    if n == 0:
        v.raise_problems([f"{where}: no rows (empty layer)", *problems])
    notes: list[str] = []

    ids = None
    if areas_rules.row_ids:
        ids = np.array([str(k + 1) for k in range(n)], dtype=object)
        notes.append(f'{where}: no id column (id = "{ROW_ID}"): areas are named by their row number, 1 to {n}')
    elif areas_rules.id in frame:
        ids, id_problems = v.check_ids(frame[areas_rules.id], areas_rules.id, where)
        problems += id_problems
    labels = v.row_labels(ids)
    columns = _Columns(frame, where, labels, sources)
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

TABLE_SUFFIXES = (".csv", ".parquet")
LIST_IDS = 10  # unmatched ids listed per problem


@dataclass(frozen=True)
class CountsTable:
    """A counts table as read: every column as found (CSV columns as text)."""

    frame: pd.DataFrame
    where: str


def read_counts_table(path: str | Path) -> CountsTable:
    """A CSV or Parquet table of counts and attributes, one row per area id.

    CSV cells are read as text, so ids keep their leading zeros; numbers are parsed per
    column later, with every cell that is not one named.
    """
    path = Path(path)
    where = path.name
    if not path.is_file():
        raise InputError(f"{where}: counts table not found ({path})")
    suffix = path.suffix.lower()
    try:
        if suffix == ".parquet":
            frame = pd.read_parquet(path)
        elif suffix == ".csv":
            frame = pd.read_csv(path, dtype=str, keep_default_na=False, na_values=[""], encoding="utf-8-sig")
        else:
            raise InputError(f"{where}: a counts table must be .csv or .parquet, not {path.suffix or 'no suffix'!r}")
    except InputError:
        raise
    except UnicodeDecodeError as exc:
        raise InputError(f"{where}: not UTF-8 text (byte {exc.start})") from exc
    except Exception as exc:  # pandas and pyarrow raise many kinds
        raise InputError(f"{where}: cannot read the counts table ({_first_line(exc)})") from exc
    frame.columns = [str(c) for c in frame.columns]
    dup = sorted({c for c in frame.columns if list(frame.columns).count(c) > 1})
    if dup:
        raise InputError(f"{where}: column(s) {', '.join(map(repr, dup))} appear more than once")
    if frame.empty:
        raise InputError(f"{where}: the counts table has no rows")
    return CountsTable(frame=frame.reset_index(drop=True), where=where)


def rule_columns(
    path: str | Path, areas_rules: AreasRules, layer: str | None = None
) -> tuple[list[str], list[str] | None]:
    """The columns of the areas file and, with `[areas] table`, of the counts table."""
    columns = read_table_columns(path, layer=layer)[0]
    if areas_rules.table is None:
        return columns, None
    return columns, list(read_counts_table(areas_rules.table).frame.columns)


def _column_sources(
    rules: AreasRules, wanted: dict[str, str], present: list[str], where: str, table: CountsTable | None
) -> tuple[dict[str, str], list[str]]:
    """Where each wanted column is read from ("file" or "table"), and the problems."""
    tcols = list(table.frame.columns) if table is not None else []
    sources: dict[str, str] = {}
    problems: list[str] = []
    absent: dict[str, str] = {}
    for col, role in wanted.items():
        if role == "id":
            if col not in present:
                absent[col] = role
            elif table is not None and col not in tcols:
                problems.append(f"{table.where}: id column {col!r} not found, so the table cannot be joined "
                                f"(columns: {', '.join(map(repr, tcols))})")
            continue
        in_file, in_table = col in present, col in tcols
        if in_file and in_table:
            if rules.prefer is None:
                problems.append(
                    f"{where}: {role} column {col!r} is also in {table.where}; say which to use with "
                    'prefer = "table" or prefer = "file" in [areas]'
                )
            sources[col] = rules.prefer or "file"
        elif in_table:
            sources[col] = "table"
        elif in_file:
            sources[col] = "file"
        else:
            absent[col] = role
    shown = where if table is None else f"{where} or {table.where}"
    problems += v.missing_columns(present + [c for c in tcols if c not in present], absent, shown)
    return sources, problems


class _Columns:
    """The wanted columns in the areas file's row order, from the file or the joined table."""

    def __init__(self, frame: gpd.GeoDataFrame, where: str, labels: v.RowLabels, sources: dict[str, str]):
        self.frame, self.where, self.labels, self.sources = frame, where, labels, sources
        self.table: CountsTable | None = None
        self.rows: np.ndarray | None = None  # table row of each area, -1 where none
        self.table_labels: v.RowLabels | None = None

    def join(self, table: CountsTable, id_col: str, ids: np.ndarray, file_kind: str) -> tuple[list[str], list[str]]:
        """Match the table's rows to the areas by id; problems for ids on one side only."""
        tids, problems = v.check_ids(table.frame[id_col], id_col, table.where)
        rows, zero_matched = match_ids(ids, tids, tolerant=file_kind in "iuf" or table.frame[id_col].dtype.kind in "iuf")
        self.table, self.rows, self.table_labels = table, rows, v.row_labels(tids)
        missing = np.flatnonzero(rows < 0)
        if missing.size:
            problems.append(f"{self.where}: {missing.size} area id(s) have no row in {table.where}: {_ids_text(ids[missing])}")
        used = np.zeros(len(tids), dtype=bool)
        used[rows[rows >= 0]] = True
        extra = np.flatnonzero(~used & ~np.asarray(pd.isna(tids), dtype=bool))
        if extra.size:
            problems.append(f"{table.where}: {extra.size} id(s) match no area in {self.where}: {_ids_text(tids[extra])}")
        notes = []
        if zero_matched:
            notes.append(
                f"{table.where}: {zero_matched} id(s) matched to {self.where} once leading zeros were set aside "
                "(one side stores ids as numbers)"
            )
        taken = [c for c, s in self.sources.items() if s == "table"]
        if taken:
            notes.append(f"{table.where}: {', '.join(map(repr, taken))} joined on {id_col!r}")
        return problems, notes

    def _source(self, col: str) -> tuple[pd.Series, str, v.RowLabels, bool] | None:
        if self.sources.get(col) == "table":
            if self.table is None:
                return None
            return self.table.frame[col], self.table.where, self.table_labels, True
        if col not in self.frame:
            return None
        return self.frame[col], self.where, self.labels, False

    def _in_file_order(self, values: np.ndarray, fill: object) -> np.ndarray:
        out = np.full(self.rows.shape[0], fill, dtype=values.dtype)
        ok = self.rows >= 0
        out[ok] = values[self.rows[ok]]
        return out

    def numeric(self, col: str, **kw: bool) -> tuple[np.ndarray, list[str]]:
        got = self._source(col)
        n = self.frame.shape[0]
        if got is None:
            return np.zeros(n), []
        values, where, labels, joined = got
        nums, problems = v.numeric_column(values, col, where, labels, **kw)
        return (self._in_file_order(nums, np.nan) if joined else nums), problems

    def fence(self, rules: AreasRules) -> tuple[np.ndarray, list[str], list[str]]:
        col = rules.fence
        got = self._source(col)
        n = self.frame.shape[0]
        if got is None:
            return np.full(n, "all", dtype=object), [], []
        values, where, labels, joined = got
        codes, problems = v.fence_codes(values, col, where, labels)
        notes: list[str] = []
        cut = rules.fence_prefix or rules.fence_suffix
        if cut and not problems:
            codes, problems = v.cut_codes(codes, col, where, labels, prefix=rules.fence_prefix, suffix=rules.fence_suffix)
            if not problems:
                found = sorted(set(codes.tolist()))
                side = "first" if rules.fence_prefix else "last"
                shown = ", ".join(found[:LIST_IDS]) + (f" and {len(found) - LIST_IDS} more" if len(found) > LIST_IDS else "")
                notes.append(f"{where}: fence codes are the {side} {cut} characters of {col!r}: {len(found)} fences ({shown})")
        return (self._in_file_order(codes, None) if joined else codes), problems, notes


def match_ids(ids: np.ndarray, tids: np.ndarray, *, tolerant: bool) -> tuple[np.ndarray, int]:
    """The row of `tids` holding each of `ids` (-1 where none), and how many matched only
    once leading zeros were set aside.

    Ids are compared as text, so '007' and '7' differ; but when one side stores ids as
    numbers (which drops leading zeros), an id left without a partner is matched to the one
    unpartnered id that reads the same without its leading zeros.
    """
    first: dict[str, int] = {}
    for k, t in enumerate(tids.tolist()):
        if t is not None:
            first.setdefault(t, k)
    rows = np.array([first.get(i, -1) if i is not None else -1 for i in ids.tolist()], dtype=np.int64)
    if not tolerant or not (rows < 0).any():
        return rows, 0
    used = set(rows[rows >= 0].tolist())
    spare: dict[str, list[int]] = {}
    for t, k in first.items():
        if k not in used:
            spare.setdefault(t.lstrip("0") or "0", []).append(k)
    wanting: dict[str, list[int]] = {}
    for r in np.flatnonzero(rows < 0):
        if ids[r] is not None:
            wanting.setdefault(ids[r].lstrip("0") or "0", []).append(int(r))
    matched = 0
    for key, areas in wanting.items():
        if len(areas) == 1 and len(spare.get(key, ())) == 1:
            rows[areas[0]] = spare[key][0]
            matched += 1
    return rows, matched


def _ids_text(ids: np.ndarray) -> str:
    shown = ", ".join(repr(x) for x in ids[:LIST_IDS].tolist())
    return shown + (f" (first {LIST_IDS} of {ids.size})" if ids.size > LIST_IDS else "")


# ---------------------------------------------------------------- reading files


def _read_frame(path: Path, layer: str | None, wanted: list[str]) -> tuple[gpd.GeoDataFrame, list[str]]:
    """The wanted columns that exist (plus geometry), and every column the source has."""
    where = path.name
    if not path.exists():
        raise InputError(f"{where}: file not found ({path})")
    if path.suffix.lower() in PARQUET_SUFFIXES:
        present, geometry = _parquet_columns(path)
        cols = [c for c in wanted if c in present]
        try:
            frame = gpd.read_parquet(path, columns=[*cols, geometry])
        except Exception as exc:  # pyarrow raises many kinds
            raise InputError(f"{where}: cannot read as GeoParquet ({_first_line(exc)})") from exc
        return frame.reset_index(drop=True), present
    layer = _pick_layer(path, layer)
    try:
        info = pyogrio.read_info(path, layer=layer)
        present = [str(c) for c in info["fields"]]
        cols = [c for c in wanted if c in present]
        frame = _read_ogr(path, layer, cols)
    except (pyogrio.errors.DataSourceError, pyogrio.errors.DataLayerError, OSError) as exc:
        raise InputError(f"{where}: cannot read ({_first_line(exc)})") from exc
    if not isinstance(frame, gpd.GeoDataFrame) or frame.geometry.name not in frame:
        raise InputError(f"{where}: layer {layer!r} has no geometry column")
    return frame, present


def _read_ogr(path: Path, layer: str | None, cols: list[str]) -> gpd.GeoDataFrame:
    try:
        return pyogrio.read_dataframe(path, layer=layer, columns=cols, use_arrow=True)
    except (ImportError, RuntimeError):
        # arrow reading needs GDAL >= 3.6 with pyarrow; the plain path reads the same data
        return pyogrio.read_dataframe(path, layer=layer, columns=cols)


def _pick_layer(path: Path, layer: str | None) -> str | None:
    where = path.name
    try:
        layers = [str(x) for x in pyogrio.list_layers(path)[:, 0]]
    except (pyogrio.errors.DataSourceError, OSError) as exc:
        raise InputError(f"{where}: cannot read ({_first_line(exc)})") from exc
    if not layers:
        raise InputError(f"{where}: no layers")
    listed = ", ".join(map(repr, layers))
    multi = path.suffix.lower() in MULTI_LAYER_SUFFIXES or len(layers) > 1
    if layer is None:
        if len(layers) > 1:
            raise InputError(f"{where}: {len(layers)} layers ({listed}); say which with --layer or [areas] layer")
        return layers[0]
    if layer not in layers:
        if multi:
            raise InputError(f"{where}: no layer {layer!r} (layers: {listed})")
        return layers[0]  # one-layer formats: the layer name is not part of the data
    return layer


def _parquet_columns(path: Path) -> tuple[list[str], str]:
    import pyarrow.parquet as pq

    where = path.name
    try:
        schema = pq.read_schema(path)
    except Exception as exc:  # pyarrow raises many kinds
        raise InputError(f"{where}: cannot read as Parquet ({_first_line(exc)})") from exc
    meta = schema.metadata or {}
    if b"geo" not in meta:
        raise InputError(f"{where}: a Parquet file without GeoParquet metadata (no geometry column)")
    try:
        geometry = json.loads(meta[b"geo"])["primary_column"]
    except (ValueError, KeyError, TypeError) as exc:
        raise InputError(f"{where}: unreadable GeoParquet metadata ({exc})") from exc
    names = [n for n in schema.names if n != geometry and not n.startswith("__index_level_")]
    return names, geometry


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


def read_table_columns(
    path: str | Path, layer: str | None = None
) -> tuple[list[str], list[str], int, str | None]:
    """The attribute columns of an areas file without reading its rows.

    Returns (columns, dtypes as numpy names, number of rows, CRS as a string or None);
    used by `rules check` and `rules init`.
    """
    path = Path(path)
    where = path.name
    if not path.exists():
        raise InputError(f"{where}: file not found ({path})")
    if path.suffix.lower() in PARQUET_SUFFIXES:
        import pyarrow.parquet as pq

        names, geometry = _parquet_columns(path)
        schema = pq.read_schema(path)
        empty = schema.empty_table().to_pandas()
        dtypes = [str(empty[c].dtype) for c in names]
        n_rows = pq.ParquetFile(path).metadata.num_rows
        geo = json.loads(schema.metadata[b"geo"])
        crs_json = geo.get("columns", {}).get(geometry, {}).get("crs", "OGC:CRS84")
        crs = None if crs_json is None else CRS.from_user_input(crs_json).to_string()
        return names, dtypes, int(n_rows), crs
    layer = _pick_layer(path, layer)
    try:
        info = pyogrio.read_info(path, layer=layer, force_feature_count=True)
    except (pyogrio.errors.DataSourceError, pyogrio.errors.DataLayerError, OSError) as exc:
        raise InputError(f"{where}: cannot read ({_first_line(exc)})") from exc
    return (
        [str(c) for c in info["fields"]],
        [str(d) for d in info["dtypes"]],
        int(info["features"]),
        info["crs"],
    )


def read_table_sample(path: str | Path, layer: str | None = None, n_rows: int = 1000) -> pd.DataFrame:
    """The first rows of an areas file without geometry (for `rules init`)."""
    path = Path(path)
    where = path.name
    if not path.exists():
        raise InputError(f"{where}: file not found ({path})")
    if path.suffix.lower() in PARQUET_SUFFIXES:
        import pyarrow.parquet as pq

        names, _ = _parquet_columns(path)
        table = pq.ParquetFile(path).iter_batches(batch_size=n_rows, columns=names)
        batch = next(table, None)
        return pd.DataFrame(columns=names) if batch is None else batch.to_pandas()
    layer = _pick_layer(path, layer)
    try:
        return pyogrio.read_dataframe(path, layer=layer, read_geometry=False, max_features=n_rows)
    except (pyogrio.errors.DataSourceError, pyogrio.errors.DataLayerError, OSError) as exc:
        raise InputError(f"{where}: cannot read ({_first_line(exc)})") from exc
