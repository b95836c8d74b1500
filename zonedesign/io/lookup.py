"""Lookups: the table area id -> zone id per tier (CSV or Parquet).

The first column holds area ids, then one column per tier named after the tier; every
cell is read as text. A strict read refuses a faulty lookup; a lenient one (for audits)
returns what it could align plus the list of problems, so they are reported as
violations instead.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Literal, overload

import numpy as np
import pandas as pd

from zonedesign.errors import InputError
from zonedesign.io import validate as v

PARQUET_SUFFIXES = (".parquet", ".geoparquet")


@overload
def read_lookup(
    path: str | Path,
    area_ids: np.ndarray | None = ...,
    tier_names: Sequence[str] | None = ...,
    *,
    strict: Literal[True] = ...,
) -> pd.DataFrame: ...


@overload
def read_lookup(
    path: str | Path,
    area_ids: np.ndarray | None = ...,
    tier_names: Sequence[str] | None = ...,
    *,
    strict: Literal[False],
) -> tuple[pd.DataFrame, list[str]]: ...


def read_lookup(
    path: str | Path,
    area_ids: np.ndarray | None = None,
    tier_names: Sequence[str] | None = None,
    *,
    strict: bool = True,
) -> pd.DataFrame | tuple[pd.DataFrame, list[str]]:
    """The lookup indexed by area id (index named after the id column), one str column per tier.

    With `tier_names` the columns must be exactly those tiers (returned in that order);
    with `area_ids` the rows must be exactly those areas (returned in that order). A header that does not
    match the tiers, or no rows at all, always raises (see `check_header`). Strict: any
    problem raises one InputError listing them all. Not strict: returns (frame, problems);
    extra rows are dropped, missing ones filled with None, the first of duplicated ids kept.
    """
    path = Path(path)
    where = path.name
    try:
        header, rows, lines, unit = _read_cells(path)
        id_name, body, tiers = check_header(header, tier_names, where)
        if rows.shape[0] == 0:
            raise InputError(f"{where}: no rows below the header row; a lookup needs one row per area")
    except InputError as exc:
        exc.problems = exc.problems or [str(exc)]
        raise
    problems: list[str] = []

    ids = rows[:, 0]
    no_id = np.asarray(pd.isna(ids), dtype=bool)
    if no_id.any():
        problems.append(f"{where}: column {id_name!r}, {_lines_text(lines[no_id], unit)}: no area id")
    problems += _duplicates(ids, lines, id_name, where, unit)

    cols = {}
    for t in tiers:
        k = body.index(t) + 1 if t in body else None
        cols[t] = rows[:, k] if k is not None else np.full(rows.shape[0], None, dtype=object)
        if k is None:
            continue
        gap = np.asarray(pd.isna(cols[t]), dtype=bool) & ~no_id
        if gap.any():
            labels = np.array([repr(x) for x in ids], dtype=object)
            problems.append(f"{where}: column {t!r}, {v.rows_text(labels, np.flatnonzero(gap))}: no zone id")

    frame = pd.DataFrame(cols, index=pd.Index(ids, name=id_name, dtype=object), dtype=object)
    frame = frame[~no_id]
    frame = frame[~frame.index.duplicated(keep="first")]
    if area_ids is not None:
        wanted = pd.Index(np.asarray(area_ids).astype(str), dtype=object, name=id_name)
        unknown = frame.index.difference(wanted, sort=False)
        if len(unknown):
            problems.append(
                f"{where}: column {id_name!r}: {len(unknown)} area id(s) not in the areas file: "
                f"{_quoted(unknown)}"
            )
        absent = wanted.difference(frame.index, sort=False)
        if len(absent):
            problems.append(
                f"{where}: {len(absent)} area(s) of the areas file have no row: {_quoted(absent)}"
            )
        frame = frame.reindex(wanted)
        frame = frame.astype(object).where(frame.notna(), None)
    if strict:
        v.raise_problems(problems, where=where)
        return frame
    return frame, problems


def check_header(
    header: Sequence[str], tier_names: Sequence[str] | None, where: str
) -> tuple[str, list[str], list[str]]:
    """(id column, tier columns as found, tiers to read) or one InputError naming the header fault.

    The one reader of a lookup's header for audit, redraw and repair, strict or not: a
    header that does not match the tiers is never a violation to report, it is bad input.
    """
    header = list(header)
    sep = next((c for c in (";", "\t", "|") if len(header) == 1 and c in header[0]), None)
    hint = f" (the header holds {sep!r}: a lookup is comma-separated)" if sep else ""
    if len(header) < 2:
        raise InputError(
            f"{where}: header row has {len(header)} column(s); need the area id column, then one per tier{hint}"
        )
    id_name, body = header[0], header[1:]
    doubled = sorted({h for h in body if body.count(h) > 1 or h == id_name})
    if doubled:
        raise InputError(f"{where}: header row: column(s) {', '.join(map(repr, doubled))} appear more than once")
    if tier_names is None:
        return id_name, body, list(body)
    tiers = list(tier_names)
    missing = [t for t in tiers if t not in body]
    extra = [h for h in body if h not in tiers]
    if missing or extra:
        parts = []
        if missing:
            parts.append(f"no column for tier(s) {', '.join(map(repr, missing))}")
        if extra:
            parts.append(f"column(s) {', '.join(map(repr, extra))} are not tiers")
        raise InputError(
            f"{where}: header row: {'; '.join(parts)} (header: {', '.join(map(repr, header))}; "
            f"expected the area id column, then {', '.join(map(repr, tiers))}){hint}"
        )
    return id_name, body, tiers


def _quoted(values: pd.Index) -> str:
    return v.listed(np.array([repr(x) for x in values[: v.SHOW]], dtype=object), np.arange(len(values)))


def _duplicates(ids: np.ndarray, lines: np.ndarray, column: str, where: str, unit: str) -> list[str]:
    valid = ~np.asarray(pd.isna(ids), dtype=bool)
    frame = pd.DataFrame({"id": ids[valid], "line": lines[valid]})
    dup = frame[frame.duplicated("id", keep=False)]
    if dup.empty:
        return []
    groups = dup.groupby("id", sort=False)["line"].apply(list)
    shown = "; ".join(f"{k!r} ({unit}s {', '.join(map(str, g))})" for k, g in list(groups.items())[: v.SHOW])
    more = f"; and {len(groups) - v.SHOW} more" if len(groups) > v.SHOW else ""
    return [f"{where}: column {column!r}: {len(groups)} area id(s) on more than one row: {shown}{more}"]


def _lines_text(lines: np.ndarray, unit: str) -> str:
    shown = ", ".join(map(str, lines[: v.SHOW]))
    more = f" and {lines.size - v.SHOW} more" if lines.size > v.SHOW else ""
    return f"{unit}{'s' * (lines.size > 1)} {shown}{more}"


def _read_cells(path: Path) -> tuple[list[str], np.ndarray, np.ndarray, str]:
    """(header, cells with None for empty ones, line (or row) number per row, "line" or "row")."""
    where = path.name
    if not path.is_file():
        raise InputError(f"{where}: lookup file not found ({path})")
    if path.suffix.lower() in PARQUET_SUFFIXES:
        return _read_parquet_cells(path)
    data = path.read_bytes()
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise InputError(f"{where}: line {line}: not UTF-8 text (byte {data[exc.start]:#04x})") from exc
    if "\x00" in text:
        line = text[: text.index("\x00")].count("\n") + 1
        raise InputError(f"{where}: line {line}: a NUL byte; not a CSV text file")
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    try:
        header = next(reader, None)
        if header is None or not any(h.strip() for h in header):
            raise InputError(f"{where}: no header row (the file is empty); expected the area id column, then one per tier")
        rows, lines = [], []
        width = len(header)
        bad = []
        for row in reader:
            if not row:
                continue  # blank line
            if len(row) != width:
                bad.append((reader.line_num, len(row)))
                continue
            rows.append(row)
            lines.append(reader.line_num)
    except csv.Error as exc:
        raise InputError(f"{where}: line {reader.line_num}: not valid CSV ({exc})") from exc
    if bad:
        shown = ", ".join(f"line {ln} has {k}" for ln, k in bad[: v.SHOW])
        more = f" and {len(bad) - v.SHOW} more" if len(bad) > v.SHOW else ""
        raise InputError(f"{where}: rows must have {width} cells like the header row: {shown}{more}")
    cells = np.array(rows, dtype=object).reshape(len(rows), width)
    cells[cells == ""] = None
    return [h.strip() for h in header], cells, np.array(lines, dtype=np.int64), "line"


def _read_parquet_cells(path: Path) -> tuple[list[str], np.ndarray, np.ndarray, str]:
    where = path.name
    try:
        frame = pd.read_parquet(path)
    except Exception as exc:  # pyarrow raises many kinds
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise InputError(f"{where}: cannot read as Parquet ({first})") from exc
    header = [str(c) for c in frame.columns]
    if not header:
        raise InputError(f"{where}: no columns; expected the area id column, then one per tier")
    cells = np.empty((len(frame), len(header)), dtype=object)
    for k, col in enumerate(frame.columns):
        text, missing = v.id_strings(frame[col])
        text[missing] = None
        cells[:, k] = text
    return header, cells, np.arange(1, len(frame) + 1, dtype=np.int64), "row"


def write_lookup(
    path: str | Path,
    ids: np.ndarray,
    tiers: Mapping[str, np.ndarray],
    *,
    id_column: str = "area",
) -> None:
    """Write a lookup CSV: LF line ends, no index, ids and zone ids as given, tiers in order."""
    n = len(ids)
    for name, zones in tiers.items():
        if len(zones) != n:
            raise ValueError(f"tier {name!r}: {len(zones)} zone ids for {n} areas")
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow([id_column, *tiers])
    columns = [np.asarray(ids).astype(str)] + [_zone_text(np.asarray(z)) for z in tiers.values()]
    writer.writerows(zip(*columns))
    Path(path).write_bytes(buf.getvalue().encode("utf-8"))


def _zone_text(zones: np.ndarray) -> np.ndarray:
    if zones.dtype.kind == "f" and np.all(np.isfinite(zones)) and np.all(zones == np.round(zones)):
        return zones.astype(np.int64).astype(str)
    return zones.astype(str)
