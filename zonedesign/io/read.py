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
from zonedesign.rules import AreasRules

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
    problems = v.missing_columns(present, wanted, where)
    n = len(frame)
    if n == 0:
        v.raise_problems([f"{where}: no rows (empty layer)", *problems])

    ids = None
    if areas_rules.id in frame:
        ids, id_problems = v.check_ids(frame[areas_rules.id], areas_rules.id, where)
        problems += id_problems
    labels = v.row_labels(ids)

    counts = np.zeros((n, len(areas_rules.counts)))
    for k, col in enumerate(areas_rules.counts):
        if col in frame:
            counts[:, k], found = v.numeric_column(frame[col], col, where, labels, negative_ok=False)
            problems += found
    attrs = np.zeros((n, len(areas_rules.attributes)))
    for k, col in enumerate(areas_rules.attributes):
        if col in frame:
            attrs[:, k], found = v.numeric_column(
                frame[col], col, where, labels, negative_ok=True, constant_ok=False
            )
            problems += found
    weight = np.ones(n)
    if areas_rules.weight in areas_rules.counts:
        weight = counts[:, areas_rules.counts.index(areas_rules.weight)].copy()  # checked above
    elif areas_rules.weight is not None and areas_rules.weight in frame:
        weight, found = v.numeric_column(
            frame[areas_rules.weight], areas_rules.weight, where, labels, negative_ok=False
        )
        problems += found
    fence = np.full(n, "all", dtype=object)
    if areas_rules.fence is not None and areas_rules.fence in frame:
        fence, found = v.fence_codes(frame[areas_rules.fence], areas_rules.fence, where, labels)
        problems += found

    geoms, repaired, found = v.check_polygons(frame.geometry.to_numpy(), where, labels)
    problems += found
    notes: list[str] = []
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
    series = gpd.GeoSeries(geoms, crs=source_crs, index=pd.RangeIndex(n))
    crs_note = ""
    if source_crs is not None:
        try:
            series, crs_note = _projected(series, where)
            if series.crs != source_crs:
                notes.insert(0, f"{where}: {crs_note}")
        except InputError as exc:
            problems.append(str(exc))
    if polygonal.all():
        clipped, clip_notes = v.clip_repaired(series.to_numpy(), repaired, where, labels)
        series = gpd.GeoSeries(clipped, crs=series.crs, index=series.index)
        notes += clip_notes
        problems += v.overlap_problems(clipped, where, labels)
    v.raise_problems(problems, where=where)

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
        repaired=tuple(str(ids[k]) for k in repaired),
    )
    return AreaFile(areas=areas, geometry=series, source=path, crs_note=crs_note, notes=notes)


def _wanted_columns(rules: AreasRules) -> dict[str, str]:
    wanted: dict[str, str] = {rules.id: "id"}
    for col in rules.counts:
        wanted.setdefault(col, "count")
    for col in rules.attributes:
        wanted.setdefault(col, "attribute")
    if rules.fence is not None:
        wanted.setdefault(rules.fence, "fence")
    if rules.weight is not None:
        wanted.setdefault(rules.weight, "weight")
    return wanted


def _try_crs(text: str) -> CRS | None:
    try:
        return CRS.from_user_input(text)
    except Exception:  # noqa: BLE001 - any failure means "not comparable"
        return None


def _projected(series: gpd.GeoSeries, where: str) -> tuple[gpd.GeoSeries, str]:
    """The polygons in a metric projected CRS, and a note saying which and why."""
    crs = CRS.from_user_input(series.crs)
    name = crs.to_string()
    if crs.is_projected and _metres(crs):
        return series, f"areas and lengths measured in the file's projected CRS {name}"
    try:
        utm = series.estimate_utm_crs()
    except Exception as exc:  # outside the UTM band, or no usable bounds
        raise InputError(
            f"{where}: CRS {name} is not in metres and no UTM zone fits the data ({exc}); "
            "reproject the file to a projected CRS"
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
