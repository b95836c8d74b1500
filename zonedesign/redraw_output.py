"""The tables a redraw or a repair writes: changes.csv, area_changes.csv and the summary's
change figures, and the published totals read from `--previous-counts`."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from zonedesign.changelog import area_changes, change_figures, change_table
from zonedesign.errors import InputError


def read_counts_table(path: str | Path, id_column: str, count_names: Sequence[str]) -> pd.DataFrame:
    """Counts per area id from a table (CSV, Parquet) or any areas file: indexed by id (str),
    one float column per count. Errors name the file, the column and the row."""
    path = Path(path)
    where = path.name
    if not path.exists():
        raise InputError(f"{where}: file not found ({path})")
    suffix = path.suffix.lower()
    try:
        if suffix in (".csv", ".txt"):
            frame = pd.read_csv(path, dtype={id_column: str})
        elif suffix == ".parquet":
            frame = pd.read_parquet(path)
        else:
            import pyogrio

            frame = pyogrio.read_dataframe(path, read_geometry=False)
    except (OSError, ValueError, pd.errors.ParserError) as exc:
        raise InputError(f"{where}: cannot read previous counts ({str(exc).splitlines()[0]})") from exc
    missing = [c for c in (id_column, *count_names) if c not in frame.columns]
    if missing:
        raise InputError(f"{where}: previous counts lack column(s) {', '.join(missing)} (columns: {', '.join(map(str, frame.columns))})")
    ids = frame[id_column].astype(str)
    dup = ids[ids.duplicated()]
    if len(dup):
        raise InputError(f"{where}: area id {dup.iloc[0]!r} appears more than once in column {id_column}")
    out = pd.DataFrame(index=pd.Index(ids.to_numpy(), name=id_column))
    for c in count_names:
        values = pd.to_numeric(frame[c], errors="coerce")
        bad = values.isna() | ~np.isfinite(values.to_numpy(dtype=float, na_value=np.nan))
        if bad.any():
            i = int(np.flatnonzero(bad.to_numpy())[0])
            raise InputError(f"{where}: column {c}, row {ids.iloc[i]!r}: {frame[c].iloc[i]!r} is not a number")
        out[c] = values.to_numpy(dtype=np.float64)
    return out


def published_counts(
    counts_path: str | Path,
    previous_path: str | Path,
    area_ids: np.ndarray,
    id_column: str,
    count_names: Sequence[str],
    tier_names: Sequence[str],
) -> tuple[np.ndarray, dict[str, pd.DataFrame]]:
    """(published first count per current area, 0 where it has none; published totals per
    old code and tier). Totals come from every area of the previous lookup, gone ones too."""
    from zonedesign.io.lookup import read_lookup

    table = read_counts_table(counts_path, id_column, count_names)
    frame = read_lookup(previous_path, None, list(tier_names))
    ids = frame.index.astype(str)
    lacking = [a for a in ids if a not in table.index]
    if lacking:
        raise InputError(
            f"{Path(counts_path).name}: {len(lacking)} area(s) of the previous lookup have no previous counts "
            f"(first: {', '.join(lacking[:5])})"
        )
    values = table.loc[ids]
    totals = {t: values.groupby(frame[t].astype(str).to_numpy()).sum() for t in tier_names}
    first = table[count_names[0]]
    per_area = np.array([float(first.get(str(a), 0.0)) for a in area_ids], dtype=np.float64)
    return per_area, totals


def redraw_tables(
    prep: Any,
    previous: Mapping[str, np.ndarray],
    lookup: Mapping[str, np.ndarray],
    *,
    policy: str,
    before_totals: Mapping[str, pd.DataFrame] | None = None,
    retired: Mapping[str, Mapping[str, list[str]]] | None = None,
) -> tuple[pd.DataFrame, pd.DataFrame, dict]:
    """(changes.csv, area_changes.csv, the summary's per-tier change figures); zones locked
    by the rules' [lock] file get the reason "locked"."""
    names = [t.name for t in prep.rules.tiers]
    locks = getattr(prep, "locks", None)
    locked = {n: set(locks.zones(n)) for n in names} if locks else None
    prev = {n: np.array(["" if v is None else str(v) for v in previous[n]], dtype=object) for n in names}
    changes = change_table(
        list(prep.rules.tiers), prep.areas.fence, prep.areas.counts, prep.areas.count_names, prev, lookup,
        before_totals=before_totals, retired=retired, locked=locked,
    )
    per_area = area_changes(prep.areas.ids, names, prev, lookup)
    figures = change_figures(changes, names, prev, lookup, policy)
    return changes, per_area, figures
