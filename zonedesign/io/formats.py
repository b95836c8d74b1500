"""One reader per file format (GeoPackage, GeoJSON, Shapefile, GeoParquet, CSV): frames, layers and column lists."""

from __future__ import annotations

import json
from pathlib import Path

import geopandas as gpd
import pandas as pd
import pyogrio
from pyproj import CRS

from zonedesign.errors import InputError

PARQUET_SUFFIXES = (".parquet", ".geoparquet")


MULTI_LAYER_SUFFIXES = (".gpkg",)


def read_frame(path: Path, layer: str | None, wanted: list[str]) -> tuple[gpd.GeoDataFrame, list[str]]:
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
            raise InputError(f"{where}: cannot read as GeoParquet ({first_line(exc)})") from exc
        return frame.reset_index(drop=True), present
    layer = _pick_layer(path, layer)
    try:
        info = pyogrio.read_info(path, layer=layer)
        present = [str(c) for c in info["fields"]]
        cols = [c for c in wanted if c in present]
        frame = _read_ogr(path, layer, cols)
    except (pyogrio.errors.DataSourceError, pyogrio.errors.DataLayerError, OSError) as exc:
        raise InputError(f"{where}: cannot read ({first_line(exc)})") from exc
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
        raise InputError(f"{where}: cannot read ({first_line(exc)})") from exc
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
        raise InputError(f"{where}: cannot read as Parquet ({first_line(exc)})") from exc
    meta = schema.metadata or {}
    if b"geo" not in meta:
        raise InputError(f"{where}: a Parquet file without GeoParquet metadata (no geometry column)")
    try:
        geometry = json.loads(meta[b"geo"])["primary_column"]
    except (ValueError, KeyError, TypeError) as exc:
        raise InputError(f"{where}: unreadable GeoParquet metadata ({exc})") from exc
    names = [n for n in schema.names if n != geometry and not n.startswith("__index_level_")]
    return names, geometry


def first_line(exc: BaseException) -> str:
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
        raise InputError(f"{where}: cannot read ({first_line(exc)})") from exc
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
        raise InputError(f"{where}: cannot read ({first_line(exc)})") from exc
