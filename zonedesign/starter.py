"""`zonedesign rules init`: a commented starter rules file guessed from an areas file.

The guesses read the whole attribute table (and the polygons, for the fence):

- id: a column of unique, non-empty strings or whole numbers that is not a coordinate;
- counts: columns of non-negative whole numbers that are neither ids nor coordinates;
- attributes: shares and rates (values within 0..1, or a percentage column within 0..100);
- fence: a column (or a code prefix of the id) with few codes, each of several areas, whose
  areas form connected groups on the map;
- bounds: placeholders scaled to the data (the floor 3 times the median count of an area,
  the ceiling 5 times the floor), as many tiers as the smallest fence can hold. They are no
  disclosure rule: the user sets real bounds from their own disclosure-control rules.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from zonedesign.records import Graph
from zonedesign.rules import ROW_ID, STABILITY_DEFAULT, _toml_string, _toml_value

_ID_NAME = re.compile(r"(^id$|_id$|^id_|code|key|^fid$|geoid|fips|_$|no$|num$|^objectid$|tract|^sp_id$)", re.I)
_FENCE_NAME = re.compile(r"(district|county|region|munic|borough|parish|province|state|fence)", re.I)
_PERSONS_NAME = re.compile(r"(pop|person|people|resid|inhab)", re.I)
_HOUSEHOLDS_NAME = re.compile(r"(household|hhold|^hh|dwell)", re.I)
_PERCENT_NAME = re.compile(r"(pct|perc|share|rate|prop|ratio|frac)", re.I)
# coordinates of a point per area (centroids, county seats), never counts or ids
_COORDINATE = re.compile(
    r"^((x|y)(m|c|cen|cent|coord|shift|_.*)?|lon|lng|long|longitude|lat|latitude|"
    r"easting|northing|east|north|(centroid|cent|point)_?(x|y))$",
    re.I,
)
# sizes of the polygon itself, as GIS exports add them
_GEOMETRY_MEASURE = re.compile(r"^(area|shape_area|shape_leng|shape_length|perimeter|len|length)$", re.I)

FLOOR_TIMES_MEDIAN = 3.0  # a tier 1 zone of about three typical areas at least
CEILING_TIMES_FLOOR = 5.0
TARGET_TIMES_FLOOR = 2.0
NEXT_FLOOR_TIMES_TARGET = 4.0  # a zone of the next tier groups about four zones below
MAX_TIERS = 3
CONNECTED_SHARE = 0.9  # a fence code's largest connected piece holds this share of its areas
PLACEHOLDER = "# placeholder: set from your own disclosure-control rules"


@dataclass(frozen=True)
class FenceGuess:
    """A fence column (or a code prefix of one), its true number of codes and why it fits."""

    column: str
    prefix: int | None
    codes: np.ndarray  # the fence code of every area
    n_codes: int
    smallest: int  # areas in the smallest code
    connected: bool | None  # None: no polygons to check


def read_starter_input(path: str | Path, layer: str | None = None) -> tuple[pd.DataFrame, Graph | None, str]:
    """The attribute table of an areas file, its rook graph (None without usable polygons)
    and a note saying why there is no graph."""
    from zonedesign.graph.adjacency import rook_graph
    from zonedesign.io.formats import read_frame, read_table_columns

    columns = read_table_columns(path, layer)[0]
    frame, _ = read_frame(Path(path), layer, columns)
    table = pd.DataFrame(frame.drop(columns=frame.geometry.name))
    try:
        graph = rook_graph(frame.geometry.values)
    except Exception as exc:  # a bad polygon only costs the fence's contiguity check
        return table, None, f"the polygons could not be read into a graph ({type(exc).__name__})"
    return table, graph, ""


def starter_rules(table: pd.DataFrame, graph: Graph | None = None, *, note: str = "") -> str:
    """A commented starter rules file for the areas in `table` (one row per area).

    `graph` (the rook graph of the rows, in order) lets the fence guess check that each
    code's areas form a connected group. The result parses; the user edits names and
    numbers, and must replace the placeholder bounds.
    """
    columns = [str(c) for c in table.columns]
    table = table.set_axis(columns, axis=1)
    n = len(table)
    ids = _id_candidates(table)
    id_col = ids[0] if ids else None
    counts = _counts(table, id_col)
    persons = next((c for c in counts if _PERSONS_NAME.search(c)), None)
    households = next((c for c in counts if _HOUSEHOLDS_NAME.search(c)), None)
    bounded = [c for c in (households, persons) if c is not None]
    if not bounded and counts:
        bounded = [max(counts, key=lambda c: (float(table[c].sum()), -columns.index(c)))]
    primary = bounded[0] if bounded else None
    attributes = _attributes(table, {id_col, *counts})
    fence = _guess_fence(table, graph, id_col)

    q = _toml_string
    out = [
        "# zonedesign rules: tiers, bounds, targets, weights and search settings.",
        f"# Started from {n} areas with columns: {', '.join(columns)}.",
        "# Check every guessed name. The bounds are placeholders scaled to these data",
        f"# (floor = {FLOOR_TIMES_MEDIAN:g} x the median count of an area, ceiling = {CEILING_TIMES_FLOOR:g} x the floor):",
        "# zonedesign does not choose thresholds for you; set them from your own",
        "# statistical-disclosure-control rules before any result is used.",
        "",
        "[areas]",
    ]
    if id_col is None:
        near = _nearest_unique(table)
        out.append("# no column holds a unique, non-empty value per area: add one (a code per area)")
        if near is not None:
            out.append(f"# ({near[0]!r} comes closest: {near[1]} areas share a value with another),")
        out.append('# or keep "@row" to name the areas by their row number')
        out.append(f"id = {q(ROW_ID)}")
    else:
        others = f"   # unique per area; also unique: {', '.join(ids[1:4])}" if len(ids) > 1 else "   # unique per area"
        out.append(f"id = {q(id_col)}{others}")
    if counts:
        out.append(f"counts = [{', '.join(q(c) for c in counts)}]   # non-negative whole numbers")
    else:
        out.append("# no column of non-negative whole numbers was found; name the count columns here")
        out.append('counts = ["set-me"]')
    out.append(f"attributes = [{', '.join(q(c) for c in attributes)}]   # shares and rates, for homogeneity")
    if fence is not None:
        where = f"{{ column = {q(fence.column)}, prefix = {fence.prefix} }}" if fence.prefix else q(fence.column)
        how = f"the first {fence.prefix} characters of {fence.column}" if fence.prefix else fence.column
        shape = {True: "each a connected group", False: "not all connected", None: "not checked on the map"}
        out.append(
            f"fence = {where}   # {fence.n_codes} codes ({how}), {shape[fence.connected]}, "
            f"the smallest of {fence.smallest} areas; zones never cross it"
        )
    else:
        out.append('# fence = "district"   # no column of a few connected groups was found; zones never cross a fence')
    if note:
        out.append(f"# {note}, so the fence was not checked for connected groups")
    if primary is not None:
        out.append(f"weight = {q(persons or primary)}   # homogeneity weight per area")
    out += [
        "",
        "[graph]",
        'contiguity = "rook"   # "rook" (shared edge) or "queen" (a shared corner is enough)',
        "min_shared_length = 0.0",
        "tolerance = 0.0   # metres; > 0 for boundaries that do not meet exactly",
    ]
    out += _tiers(table, bounded, primary, fence)
    out += [
        "",
        "[search]",
        'method = "annealing"   # "descent", "annealing" or "tabu"',
        'effort = "default"   # "quick", "default" or "thorough" (about 0.4, 1 and 34 times the moves)',
        "seed = 1",
        "constructions = 4",
        "time_limit_fence = 10.0   # seconds per fence and tier",
        "time_limit_total = 600.0   # seconds for the whole run",
        "",
        "[redraw]",
        'codes = "successor"   # an old code passes to the new zone holding most of it; "fresh": changed zones get new codes',
    ]
    return "\n".join(out) + "\n"


# ---------------------------------------------------------------- tiers


def _round2(x: float) -> float:
    """x rounded to two significant figures (at least 1)."""
    if x <= 1:
        return 1.0
    scale = 10.0 ** (math.floor(math.log10(x)) - 1)
    return float(round(x / scale) * scale)


def _tiers(table: pd.DataFrame, bounded: list[str], primary: str | None, fence: FenceGuess | None) -> list[str]:
    """[[tier]] tables with placeholder bounds, as many as the smallest fence can hold."""
    medians = {c: float(np.median(table[c].to_numpy(dtype=np.float64))) for c in bounded}
    if fence is not None:
        totals = table[bounded].groupby(fence.codes).sum()
        smallest = {c: float(totals[c].min()) for c in bounded}
        holder = "the smallest fence"
    else:
        smallest = {c: float(table[c].sum()) for c in bounded}
        holder = "all areas together"
    out = []
    for c in bounded:
        out.append(f"# {c} per area: median {medians[c]:g}; {holder} holds {smallest[c]:g}")
    floors = {c: _round2(FLOOR_TIMES_MEDIAN * max(medians[c], 1.0)) for c in bounded}
    for k in range(1, MAX_TIERS + 1):
        if k > 1 and any(floors[c] > smallest[c] for c in bounded):
            need = ", ".join(f"{floors[c]:g} {c}" for c in bounded)
            out += ["", f"# no tier {k}: its floor ({need}) would be more than {holder} holds"]
            break
        lo = {c: floors[c] for c in bounded}
        hi = {c: _round2(CEILING_TIMES_FLOOR * floors[c]) for c in bounded}
        aim = {primary: _round2(TARGET_TIMES_FLOOR * floors[primary])} if primary else {}
        out += ["", "[[tier]]   # bottom tier first" if k == 1 else "[[tier]]", f'name = "tier{k}"']
        for key, values in (("min", lo), ("max", hi), ("target", aim)):
            if values:
                out.append(f"{key} = {_toml_value(values)}   {PLACEHOLDER}")
        out += [
            f"weights = {{ size = 1.0, homogeneity = 1.0, compactness = 1.0, stability = {STABILITY_DEFAULT:g}.0 }}",
            f"# stability counts only in a redraw ({STABILITY_DEFAULT:g} when left out; 0 switches it off, and",
            "# then the redraw mends broken zones by these weights alone, without seeking the fewest moves)",
            'homogeneity = "ssd"   # or "pairwise"',
            'compactness = "polsby"   # or "cut"',
        ]
        if primary is None:
            break
        floors = {c: _round2(NEXT_FLOOR_TIMES_TARGET * TARGET_TIMES_FLOOR * floors[c]) for c in bounded}
    return out


# ---------------------------------------------------------------- columns


def _numeric(s: pd.Series) -> bool:
    return pd.api.types.is_numeric_dtype(s) and not pd.api.types.is_bool_dtype(s)


def _whole(s: pd.Series) -> bool:
    v = s.to_numpy(dtype=np.float64)
    return bool(np.isfinite(v).all()) and bool((v == np.round(v)).all())


def _stringy(s: pd.Series) -> bool:
    return pd.api.types.is_object_dtype(s) or pd.api.types.is_string_dtype(s)


def _id_candidates(table: pd.DataFrame) -> list[str]:
    """Columns of unique, non-empty strings or whole numbers, likeliest id first."""
    found = []
    for c in table.columns:
        s = table[c]
        if _COORDINATE.match(c) or _GEOMETRY_MEASURE.match(c) or not len(s) or s.isna().any():
            continue
        if _stringy(s):
            if (s.astype(str).str.strip() == "").any():
                continue
        elif not (_numeric(s) and _whole(s)):
            continue
        if s.is_unique:
            found.append(c)
    cols = list(table.columns)
    return sorted(found, key=lambda c: (not _ID_NAME.search(c), not _stringy(table[c]), cols.index(c)))


def _nearest_unique(table: pd.DataFrame) -> tuple[str, int] | None:
    """The column with the fewest areas sharing a value with another, and that number."""
    best = None
    for c in table.columns:
        s = table[c]
        if _COORDINATE.match(c) or _GEOMETRY_MEASURE.match(c) or (_numeric(s) and not _whole(s.dropna())):
            continue
        shared = int(s.duplicated(keep=False).sum() + s.isna().sum())
        if best is None or shared < best[1]:
            best = (c, shared)
    return best


def _id_like(table: pd.DataFrame, c: str) -> bool:
    """Named like an id, or a run of distinct consecutive whole numbers (a row number)."""
    if _ID_NAME.search(c):
        return True
    s = table[c]
    if not (_numeric(s) and _whole(s)) or not s.is_unique:
        return False
    v = np.sort(s.to_numpy(dtype=np.float64))
    return len(v) > 2 and bool((np.diff(v) == 1).all())


def _counts(table: pd.DataFrame, id_col: str | None) -> list[str]:
    out = []
    for c in table.columns:
        s = table[c]
        if c == id_col or not _numeric(s) or _COORDINATE.match(c) or _GEOMETRY_MEASURE.match(c):
            continue
        if _id_like(table, c) or not _whole(s) or (s < 0).any():
            continue
        if s.nunique() <= 2 and set(s.unique()) <= {0, 1}:
            continue  # a 0/1 flag, not a count
        out.append(c)
    return out


def _attributes(table: pd.DataFrame, taken: set) -> list[str]:
    out = []
    for c in table.columns:
        s = table[c]
        if c in taken or not _numeric(s) or _COORDINATE.match(c) or _GEOMETRY_MEASURE.match(c):
            continue
        if _id_like(table, c) or s.isna().all() or s.nunique(dropna=True) <= 1:
            continue
        lo, hi = float(s.min()), float(s.max())
        if lo >= 0 and (hi <= 1 or (_PERCENT_NAME.search(c) and hi <= 100)):
            out.append(c)
    return out


# ---------------------------------------------------------------- fence


def _guess_fence(table: pd.DataFrame, graph: Graph | None, id_col: str | None) -> FenceGuess | None:
    """The likeliest fence: a named district-like column, any other column, then an id prefix."""
    n = len(table)
    found: list[tuple[tuple, FenceGuess]] = []
    cols = list(table.columns)
    for c in cols:
        s = table[c]
        if c == id_col or s.isna().any() or not (_stringy(s) or (_numeric(s) and _whole(s))):
            continue
        if _numeric(s) and not _ID_NAME.search(c) and not _FENCE_NAME.search(c):
            continue  # a whole-number column is a code only when named like one
        guess = _fence_guess(c, None, s.astype(str).to_numpy(dtype=object), n, graph)
        if guess is not None:
            found.append(((0 if _FENCE_NAME.search(c) else 1, cols.index(c)), guess))
    if not found and id_col is not None and _stringy(table[id_col]):
        guess = _prefix_guess(id_col, table[id_col].astype(str), n, graph)
        if guess is not None:
            found.append(((2, 0), guess))
    found.sort(key=lambda item: item[0])
    return found[0][1] if found else None


def _fence_guess(column: str, prefix: int | None, codes: np.ndarray, n: int, graph: Graph | None) -> FenceGuess | None:
    values, sizes = np.unique(codes, return_counts=True)
    if not 2 <= values.shape[0] <= max(2, n // 5) or sizes.min() < 3:
        return None
    connected = None if graph is None else _connected_groups(graph, codes)
    if connected is False:
        return None
    return FenceGuess(column, prefix, codes, int(values.shape[0]), int(sizes.min()), connected)


def _prefix_guess(column: str, ids: pd.Series, n: int, graph: Graph | None) -> FenceGuess | None:
    """A leading code field of fixed-width ids: the shortest prefix after which the next
    character adds no new group (the field ends there), with few connected groups."""
    width = ids.str.len()
    if width.nunique() != 1 or int(width.iloc[0]) < 3:
        return None
    w = int(width.iloc[0])
    groups = [ids.str[:k].nunique() for k in range(w + 1)]
    for k in range(1, w - 1):
        if groups[k] == groups[k + 1] and groups[k] >= 2:
            guess = _fence_guess(column, k, ids.str[:k].to_numpy(dtype=object), n, graph)
            if guess is not None:
                return guess
    return None


def _connected_groups(graph: Graph, codes: np.ndarray) -> bool:
    """Whether each code's areas form one connected group (an offshore island allowed)."""
    from zonedesign.graph.components import fence_components

    parts = fence_components(graph, codes)
    return all(max(p.sizes) >= CONNECTED_SHARE * sum(p.sizes) for p in parts)
