"""Counts tables joined to the areas by id: reading, the columns each source gives, and type-tolerant id matching."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd

from zonedesign.errors import InputError
from zonedesign.io import validate as v
from zonedesign.io.formats import first_line, read_table_columns
from zonedesign.rules import AreasRules

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
        raise InputError(f"{where}: cannot read the counts table ({first_line(exc)})") from exc
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


def column_sources(
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


class ColumnSources:
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
