"""Checks on input tables and polygons; each problem is one located line.

Every check returns problem lines instead of raising, so a file with several faults is
reported in one go: `areas.gpkg: column 'persons', rows 'A12', 'A13': not a number ('x', '')`.
Rows are named by their id; where the id itself is unusable, by `#k`, the k-th row counted
from 1.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
import shapely

from zonedesign.errors import InputError

if TYPE_CHECKING:
    from zonedesign.rules import AreasRules

SHOW = 5  # offenders listed per problem
POLYGONAL = (3, 6)  # shapely type ids of Polygon and MultiPolygon
TYPE_NAMES = {
    0: "point",
    1: "line",
    2: "ring",
    3: "polygon",
    4: "multipoint",
    5: "multiline",
    6: "multipolygon",
    7: "collection",
}
OVERLAP_SHARE = 1e-6  # overlap tolerated, as a share of the smaller polygon's area


def raise_problems(problems: list[str], cls: type[InputError] = InputError, where: str = "") -> None:
    """Raise one error: the first problem (and how many more) on line one, then the rest."""
    if not problems:
        return
    more = len(problems) - 1
    head = problems[0] if not more else f"{problems[0]} (and {more} more problem{'s' * (more > 1)})"
    err = cls("\n".join([head, *problems[1:]]), problems=problems)
    err.where = where
    raise err


class RowLabels:
    """Display label per row, made on demand: the quoted id, or `#k` where it has none."""

    def __init__(self, ids: np.ndarray | None):
        self.ids = ids

    def __getitem__(self, rows: int | np.ndarray) -> object:
        if np.ndim(rows) == 0:
            return self._one(int(rows))
        return np.array([self._one(int(r)) for r in np.asarray(rows)], dtype=object)

    def _one(self, row: int) -> str:
        value = None if self.ids is None else self.ids[row]
        return repr(value) if isinstance(value, str) else f"#{row + 1}"


def row_labels(ids: np.ndarray | None) -> RowLabels:
    return RowLabels(ids)


def rows_text(labels: RowLabels, rows: np.ndarray) -> str:
    """`row 'A1'` or `rows 'A1', 'A2', ... and 7 more` for positions `rows`."""
    rows = np.asarray(rows)
    return f"{'row' if rows.size == 1 else 'rows'} {listed(labels, rows)}"


def listed(labels: RowLabels, rows: np.ndarray) -> str:
    """The first few labels at positions `rows`, and how many more there are."""
    rows = np.asarray(rows)
    shown = ", ".join(str(x) for x in labels[rows[:SHOW]])
    return shown + (f" and {rows.size - SHOW} more" if rows.size > SHOW else "")


def values_text(values: object) -> str:
    vals = list(values)[:SHOW]
    return "(" + ", ".join(repr(v if isinstance(v, str) else _plain(v)) for v in vals) + ")"


def _plain(v: object) -> object:
    if isinstance(v, np.generic):
        return v.item()
    return v


# ---------------------------------------------------------------- columns


def missing_columns(present: list[str], wanted: dict[str, str], where: str) -> list[str]:
    """`wanted` maps column -> role (e.g. 'count'); a problem per absent column."""
    import difflib

    out = []
    lower = {c.lower(): c for c in present}
    for col, role in wanted.items():
        if col in present:
            continue
        near = lower.get(col.lower()) or next(iter(difflib.get_close_matches(col, present, 1)), None)
        hint = f"; did you mean {near!r}?" if near else ""
        out.append(f"{where}: {role} column {col!r} not found{hint} (columns: {', '.join(map(repr, present))})")
    return out


def id_strings(values: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Ids (or codes) as str, and a mask of missing ones; integral floats lose their '.0'."""
    missing = np.array(pd.isna(values), dtype=bool)
    if values.dtype.kind == "f":
        vals = values.to_numpy(dtype=np.float64)
        integral = ~missing & np.isfinite(vals) & (vals == np.round(vals))
        out = vals.astype(str).astype(object)
        out[integral] = vals[integral].astype(np.int64).astype(str)
    elif values.dtype.kind in "iub":
        out = values.to_numpy().astype(str).astype(object)
    else:
        text = values.astype(object).where(~missing, "").astype(str)
        out = text.to_numpy(dtype=object)
        # an empty code is as good as no code
        missing |= (text.str.strip() == "").to_numpy()
    out[missing] = None
    return out, missing


def check_ids(values: pd.Series, column: str, where: str) -> tuple[np.ndarray, list[str]]:
    """Area ids as str (None where missing) and the problems: missing or duplicate ids."""
    ids, missing = id_strings(values)
    problems = []
    if missing.any():
        rows = np.flatnonzero(missing)
        problems.append(f"{where}: column {column!r}, {rows_text(row_labels(None), rows)}: no id")
    problems += duplicate_problems(ids, column, where)
    return ids, problems


def duplicate_problems(ids: np.ndarray, column: str, where: str) -> list[str]:
    """One problem naming the first duplicated ids with the rows they sit on."""
    valid = ~np.asarray(pd.isna(ids), dtype=bool)
    frame = pd.DataFrame({"id": ids[valid], "row": np.flatnonzero(valid) + 1})
    dup = frame[frame.duplicated("id", keep=False)]
    if dup.empty:
        return []
    groups = dup.groupby("id", sort=False)["row"].apply(list)
    shown = "; ".join(f"{k!r} (rows {', '.join(map(str, v))})" for k, v in list(groups.items())[:SHOW])
    more = f"; and {len(groups) - SHOW} more" if len(groups) > SHOW else ""
    return [f"{where}: column {column!r}: {len(groups)} duplicate id(s): {shown}{more}"]


def numeric_column(
    values: pd.Series,
    column: str,
    where: str,
    labels: RowLabels,
    *,
    negative_ok: bool,
    constant_ok: bool = True,
) -> tuple[np.ndarray, list[str]]:
    """A column as float64 with problems: not a number, missing, infinite, negative, constant."""
    problems = []
    n = values.shape[0]
    if values.dtype.kind in "iufb":
        nums = values.to_numpy(dtype=np.float64, na_value=np.nan)
        bad = np.zeros(n, dtype=bool)
    else:
        coerced = pd.to_numeric(values, errors="coerce")
        nums = np.asarray(coerced, dtype=np.float64)
        bad = np.asarray(coerced.isna() & values.notna(), dtype=bool)
        if bad.any():
            rows = np.flatnonzero(bad)
            problems.append(
                f"{where}: column {column!r}, {rows_text(labels, rows)}: not a number "
                f"{values_text(values.to_numpy()[rows])}"
            )
    gap = np.isnan(nums) & ~bad
    if gap.any():
        problems.append(f"{where}: column {column!r}, {rows_text(labels, np.flatnonzero(gap))}: missing value")
    inf = np.isinf(nums)
    if inf.any():
        rows = np.flatnonzero(inf)
        problems.append(f"{where}: column {column!r}, {rows_text(labels, rows)}: not finite {values_text(nums[rows])}")
    if not negative_ok:
        neg = nums < 0
        if neg.any():
            rows = np.flatnonzero(neg)
            problems.append(f"{where}: column {column!r}, {rows_text(labels, rows)}: negative {values_text(nums[rows])}")
    if not constant_ok and not problems and n > 1 and np.ptp(nums) == 0:
        problems.append(
            f"{where}: column {column!r}: the same value ({_plain(nums[0])!r}) in every row, so it "
            "cannot tell zones apart; drop it from [areas].attributes"
        )
    return nums, problems


def fence_codes(values: pd.Series, column: str, where: str, labels: RowLabels) -> tuple[np.ndarray, list[str]]:
    codes, missing = id_strings(values)
    if missing.any():
        rows = np.flatnonzero(missing)
        return codes, [f"{where}: fence column {column!r}, {rows_text(labels, rows)}: no fence code"]
    return codes, []


def cut_codes(
    codes: np.ndarray, column: str, where: str, labels: RowLabels, *, prefix: int | None, suffix: int | None
) -> tuple[np.ndarray, list[str]]:
    """Fence codes cut from a longer code: its first `prefix` or last `suffix` characters.

    A code shorter than the cut is an error rather than a fence of its own: it almost
    always means a lost leading zero or a wrong column.
    """
    n = prefix or suffix or 0
    text = [str(c) for c in codes.tolist()]
    short = np.array([len(c) < n for c in text], dtype=bool)
    if short.any():
        rows = np.flatnonzero(short)
        side = "prefix" if prefix else "suffix"
        return codes, [
            f"{where}: fence column {column!r}, {rows_text(labels, rows)}: shorter than the {side} of {n} "
            f"characters {values_text(codes[rows])}"
        ]
    cut = [c[:n] for c in text] if prefix else [c[-n:] for c in text]
    return np.array(cut, dtype=object), []


def fence_nesting(
    fence: np.ndarray, tier_fence: dict[str, np.ndarray], rules: AreasRules, where: str, labels: RowLabels
) -> list[str]:
    """Each tier's fence nests in the next tier's: one code below, one code above.

    `rules.tier_fences` lists every tier (bottom first) with its own fence column or None;
    `tier_fence` holds the codes of those with one, the others keep to `fence`. A problem
    names an area on each side of the split.
    """
    out = []
    chain = [(t, tier_fence.get(t, fence), col or rules.fence or "(none)") for t, col in rules.tier_fences]
    for (lower, low, lcol), (upper, up, ucol) in zip(chain, chain[1:]):
        frame = pd.DataFrame({"low": low, "up": up})
        spread = frame.groupby("low", sort=True)["up"].nunique()
        for code in spread.index[spread > 1][:SHOW]:
            rows = np.flatnonzero(low == code)
            ups = pd.unique(up[rows])
            a = rows[up[rows] == ups[0]][0]
            b = rows[up[rows] == ups[1]][0]
            out.append(
                f"{where}: fence {lcol!r} of tier {lower!r}: code {code!r} is split between fences {ucol!r} "
                f"{ups[0]!r} (area {labels[a]}) and {ups[1]!r} (area {labels[b]}) of tier {upper!r}; "
                "a lower tier's fence must nest in the upper one's"
            )
    return out


# ---------------------------------------------------------------- geometry


def check_polygons(
    geoms: np.ndarray, where: str, labels: RowLabels
) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """Polygons with invalid ones repaired, the repaired positions, and the problems.

    Empty and non-polygonal geometries are errors. Invalid polygons are repaired with
    shapely.make_valid, keeping the polygonal part; one that keeps no area is an error.
    """
    problems = []
    geoms = np.asarray(geoms, dtype=object).copy()
    empty = shapely.is_missing(geoms) | shapely.is_empty(geoms)
    if empty.any():
        problems.append(f"{where}: geometry, {rows_text(labels, np.flatnonzero(empty))}: empty or missing")
    kind = shapely.get_type_id(geoms)
    other = ~empty & ~np.isin(kind, POLYGONAL)
    if other.any():
        rows = np.flatnonzero(other)
        found = sorted({TYPE_NAMES.get(int(k), str(k)) for k in kind[rows]})
        problems.append(
            f"{where}: geometry, {rows_text(labels, rows)}: not a polygon ({', '.join(found)})"
        )
    polygonal = ~empty & ~other
    # GEOS cannot work with NaN or infinite coordinates: a located error, not a crash later
    counts = shapely.get_num_coordinates(geoms)
    xy = shapely.get_coordinates(geoms)
    bad_xy = ~np.isfinite(xy).all(axis=1)
    if bad_xy.any():
        owner = np.repeat(np.arange(geoms.shape[0]), counts)
        rows = np.unique(owner[bad_xy])
        problems.append(f"{where}: geometry, {rows_text(labels, rows)}: coordinates that are not finite (NaN or infinite)")
        polygonal[rows] = False
    invalid = np.zeros(geoms.shape[0], dtype=bool)
    invalid[polygonal] = ~shapely.is_valid(geoms[polygonal])
    repaired = np.flatnonzero(invalid)
    if repaired.size:
        fixed = np.array([polygonal_part(g) for g in shapely.make_valid(geoms[repaired])], dtype=object)
        lost = shapely.is_empty(fixed)
        if lost.any():
            problems.append(
                f"{where}: geometry, {rows_text(labels, repaired[lost])}: invalid polygon with no area "
                "left after repair"
            )
        geoms[repaired] = fixed
    return geoms, repaired, problems


def polygonal_part(geom: shapely.Geometry) -> shapely.Geometry:
    """The polygons of a repaired geometry (make_valid may add stray lines and points)."""
    kind = shapely.get_type_id(geom)
    if kind in POLYGONAL:
        return geom
    parts = shapely.get_parts(geom)
    polys = parts[np.isin(shapely.get_type_id(parts), POLYGONAL)]
    if polys.size == 0:
        return shapely.Polygon()
    return shapely.union_all(polys)


def clip_repaired(
    geoms: np.ndarray, repaired: np.ndarray, where: str, labels: RowLabels
) -> tuple[np.ndarray, list[str]]:
    """Cut from each repaired polygon what it covers of valid neighbours.

    A self-intersecting ring often loops over the next polygon; after make_valid that loop
    is a real overlap. The valid neighbour is the better witness of where the line runs, so
    the repaired polygon gives way. Overlaps between two valid polygons stay errors.
    """
    if repaired.size == 0:
        return geoms, []
    geoms = geoms.copy()
    fixed = np.zeros(geoms.shape[0], dtype=bool)
    fixed[repaired] = True
    tree = shapely.STRtree(geoms)
    src, dst = tree.query(geoms[repaired], predicate="intersects")
    src = repaired[src]
    keep = ~fixed[dst]
    src, dst = src[keep], dst[keep]
    common = shapely.area(shapely.intersection(geoms[src], geoms[dst]))
    over = common > OVERLAP_SHARE * np.minimum(shapely.area(geoms[src]), shapely.area(geoms[dst]))
    notes = []
    for i in np.unique(src[over]):
        others = dst[over & (src == i)]
        before = shapely.area(geoms[i])
        geoms[i] = polygonal_part(shapely.difference(geoms[i], shapely.union_all(geoms[others])))
        notes.append(
            f"{where}: repaired polygon {labels[i]} overlapped {listed(labels, others)}; "
            f"{before - shapely.area(geoms[i]):.6g} m2 cut from it"
        )
    return geoms, notes


def overlapping_pairs(geoms: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Pairs (i < j) of polygons whose common area exceeds OVERLAP_SHARE of the smaller one,
    with that common area.

    An exact segment count settles the usual case (a coverage whose neighbours share
    vertices) without any pairwise overlay; otherwise every pair of intersecting polygons
    is overlaid.
    """
    none = np.zeros(0, dtype=np.int64)
    if geoms.shape[0] < 2 or disjoint_interiors(geoms):
        return none, none, np.zeros(0)
    tree = shapely.STRtree(geoms)
    i, j = tree.query(geoms, predicate="intersects")
    keep = i < j
    i, j = i[keep], j[keep]
    if i.size == 0:
        return none, none, np.zeros(0)
    common = shapely.area(shapely.intersection(geoms[i], geoms[j]))
    area = shapely.area(geoms)
    over = common > OVERLAP_SHARE * np.minimum(area[i], area[j])
    order = np.lexsort((j[over], i[over]))
    return i[over][order], j[over][order], common[over][order]


def duplicate_mask(geoms: np.ndarray, i: np.ndarray, j: np.ndarray) -> np.ndarray:
    """Which overlapping pairs are the same polygon twice (equal point sets)."""
    if i.size == 0:
        return np.zeros(0, dtype=bool)
    return np.asarray(shapely.equals(geoms[i], geoms[j]), dtype=bool)


def overlap_problems(
    geoms: np.ndarray,
    where: str,
    labels: RowLabels,
    counts: np.ndarray | None = None,
    count_names: tuple[str, ...] = (),
) -> list[str]:
    """Overlapping pairs of polygons, and identical polygons named as duplicates."""
    i, j, common = overlapping_pairs(geoms)
    if i.size == 0:
        return []
    dup = duplicate_mask(geoms, i, j)
    out = []
    hint = '; overlaps = "cut" in [areas] mends them'
    if dup.any():
        pairs = np.flatnonzero(dup)
        shown = "; ".join(
            f"{labels[i[k]]} and {labels[j[k]]}{_counts_text(counts, count_names, i[k], j[k])}" for k in pairs[:SHOW]
        )
        more = f"; and {pairs.size - SHOW} more" if pairs.size > SHOW else ""
        out.append(
            f"{where}: geometry: {pairs.size} pair(s) of identical polygons (duplicate areas): {shown}{more}"
            '; overlaps = "cut" in [areas] merges each pair into one area'
        )
    rest = np.flatnonzero(~dup)
    if rest.size:
        shown = ", ".join(f"{labels[i[k]]} and {labels[j[k]]} ({common[k]:.6g} m2)" for k in rest[:SHOW])
        more = f" and {rest.size - SHOW} more" if rest.size > SHOW else ""
        out.append(f"{where}: geometry: {rest.size} overlapping pair(s) of polygons: {shown}{more}{hint}")
    return out


def _counts_text(counts: np.ndarray | None, names: tuple[str, ...], a: int, b: int) -> str:
    if counts is None or not names:
        return ""
    return " (" + ", ".join(f"{n} {_plain(counts[a, k]):g} and {_plain(counts[b, k]):g}" for k, n in enumerate(names)) + ")"


SLIVER_SHARE = 1e-6  # polygon parts below this share of their polygon's area are dropped after a cut


def cut_overlaps(
    geoms: np.ndarray, ids: np.ndarray, i: np.ndarray, j: np.ndarray
) -> tuple[np.ndarray, list[dict]]:
    """Each overlap removed from all but one polygon of its pair.

    The overlap stays with the polygon of which it is the larger share (the smaller
    polygon, which a cut would hurt more), ties to the smaller id; the other polygon gives
    it up. Parts left below SLIVER_SHARE of a polygon's area are dropped. Pairs are taken in
    order, each against the polygons as already cut, so a point covered three times ends
    in one polygon. Returns the polygons and one record per mended pair.
    """
    geoms = geoms.copy()
    mended = []
    for a, b in zip(i.tolist(), j.tolist()):
        common = shapely.intersection(geoms[a], geoms[b])
        size = float(shapely.area(common))
        if size <= OVERLAP_SHARE * min(shapely.area(geoms[a]), shapely.area(geoms[b])):
            continue  # an earlier cut already took it
        share_a, share_b = size / shapely.area(geoms[a]), size / shapely.area(geoms[b])
        keeper, loser = (a, b) if (share_a, str(ids[b])) > (share_b, str(ids[a])) else (b, a)
        geoms[loser] = drop_slivers(polygonal_part(shapely.difference(geoms[loser], geoms[keeper])))
        mended.append(
            {
                "ids": [str(ids[a]), str(ids[b])],
                "overlap_m2": size,
                "kept_by": str(ids[keeper]),
                "cut_from": str(ids[loser]),
            }
        )
    return geoms, mended


def drop_slivers(geom: shapely.Geometry) -> shapely.Geometry:
    parts = shapely.get_parts(geom)
    if parts.size <= 1:
        return geom
    area = shapely.area(parts)
    keep = area >= SLIVER_SHARE * area.sum()
    return shapely.union_all(parts[keep]) if keep.sum() > 1 else parts[keep][0]


# ---------------------------------------------------------------- exact coverage test


def disjoint_interiors(geoms: np.ndarray) -> bool:
    """True when the (valid) polygons provably have pairwise disjoint interiors.

    Each ring is oriented (shells counter-clockwise, holes clockwise) and cut into
    segments; a segment met once in each direction is a shared edge and cancels. What
    remains bounds the union. The number of polygons covering a point is the winding number
    of the remaining segments around it, so the interiors are disjoint exactly when that
    number is 0 or 1 everywhere: the remaining segments must not cross or repeat, and each
    face they enclose must lie on the same side of all its segments. False means "not
    shown", not "overlapping".
    """
    xy, pk, s, e, _ = oriented_segments(geoms)
    if s.size == 0:
        return True
    ka, kb = pk[s], pk[e]
    und = directed_keys(np.minimum(ka, kb), np.maximum(ka, kb))
    order = np.argsort(und)
    su = und[order]
    start = np.r_[True, su[1:] != su[:-1]]
    group = np.cumsum(start) - 1
    size = np.bincount(group)
    if np.any(size > 2):
        return False  # an edge used thrice: covered twice nearby
    # a cancelled pair must be one segment run both ways (keys alone could collide)
    second = np.flatnonzero(~start)
    p, q = order[second - 1], order[second]
    if not (_same_points(xy, s[p], e[q]) and _same_points(xy, e[p], s[q])):
        return False
    rest = order[(size == 1)[group]]
    if rest.size == 0:
        return True
    rs, re = s[rest], e[rest]
    lines = shapely.linestrings(np.stack([np.take(xy, rs, axis=0), np.take(xy, re, axis=0)], axis=1))
    if not shapely.is_simple(shapely.multilinestrings(lines)):
        return False  # remaining segments cross or touch mid-segment
    faces = shapely.get_parts(shapely.polygonize(lines))
    if faces.size == 0:
        return False
    fxy, fpk, fs, fe, face_of = oriented_segments(faces)
    take = np.take
    remaining = (take(xy, rs, axis=0), take(xy, re, axis=0), directed_keys(pk[rs], pk[re]))
    fa, fb = take(fxy, fs, axis=0), take(fxy, fe, axis=0)
    along = _find_segments(fa, fb, directed_keys(fpk[fs], fpk[fe]), *remaining)
    against = _find_segments(fb, fa, directed_keys(fpk[fe], fpk[fs]), *remaining)
    if np.any((along >= 0) == (against >= 0)):
        return False  # a face edge that is not exactly one remaining segment
    used = np.zeros(rest.size, dtype=bool)
    used[np.maximum(along, against)] = True
    if not used.all():
        return False  # a remaining segment that bounds no face
    inside = np.bincount(face_of, weights=along >= 0, minlength=faces.size)
    total = np.bincount(face_of, minlength=faces.size)
    # each face wholly on the left of its edges (covered once) or wholly on the right (not covered)
    return bool(np.all((inside == 0) | (inside == total)))


def _same_points(xy: np.ndarray, i: np.ndarray, j: np.ndarray) -> bool:
    x, y = xy[:, 0], xy[:, 1]
    return bool(np.array_equal(x[i], x[j]) and np.array_equal(y[i], y[j]))


def _find_segments(
    a: np.ndarray, b: np.ndarray, keys: np.ndarray, ra: np.ndarray, rb: np.ndarray, rkeys: np.ndarray
) -> np.ndarray:
    """Position of each directed segment a->b among the directed segments ra->rb, or -1."""
    order = np.argsort(rkeys)
    sk = rkeys[order]
    at = np.minimum(np.searchsorted(sk, keys), sk.size - 1)
    hit = order[at]
    found = (sk[at] == keys) & np.all(np.take(ra, hit, axis=0) == a, axis=1)
    found &= np.all(np.take(rb, hit, axis=0) == b, axis=1)
    return np.where(found, hit, -1)


def oriented_segments(geoms: np.ndarray) -> tuple[np.ndarray, ...]:
    """Every ring segment of non-zero length, shells counter-clockwise, holes clockwise.

    Returns (xy, point keys, start index, end index, geometry index): segment k runs from
    xy[start[k]] to xy[end[k]].
    """
    xy, ring, shell, owner = ring_coordinates(geoms)
    s = np.flatnonzero(ring[1:] == ring[:-1])
    e = s + 1
    seg_ring = ring[s]
    x, y = xy[:, 0], xy[:, 1]
    twice_area = np.bincount(seg_ring, weights=x[s] * y[e] - x[e] * y[s], minlength=shell.size)
    flip = np.where(shell, twice_area < 0, twice_area > 0)[seg_ring]
    s, e = np.where(flip, e, s), np.where(flip, s, e)
    keep = (x[s] != x[e]) | (y[s] != y[e])
    return xy, point_keys(xy), s[keep], e[keep], owner[seg_ring[keep]]


def ring_coordinates(geoms: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Ring coordinates (xy, ring index per point) with, per ring, shell flag and owner.

    Plain polygons without holes, the bulk of any real file, skip building ring objects.
    """
    plain = (shapely.get_type_id(geoms) == 3) & (shapely.get_num_interior_rings(geoms) == 0)
    at_plain = np.flatnonzero(plain)
    xy1, ring1 = shapely.get_coordinates(geoms[plain], return_index=True)
    parts, part_owner = shapely.get_parts(geoms[~plain], return_index=True)
    rings, ring_part = shapely.get_rings(parts, return_index=True)
    xy2, ring2 = shapely.get_coordinates(rings, return_index=True)
    first = np.r_[True, ring_part[1:] != ring_part[:-1]] if ring_part.size else np.zeros(0, dtype=bool)
    xy = np.concatenate([xy1, xy2])
    ring = np.concatenate([ring1, ring2 + at_plain.size])
    shell = np.concatenate([np.ones(at_plain.size, dtype=bool), first])
    owner = np.concatenate([at_plain, np.flatnonzero(~plain)[part_owner[ring_part]]])
    return xy, ring, shell, owner


_S1 = np.uint64(0xBF58476D1CE4E5B9)
_S2 = np.uint64(0x94D049BB133111EB)


def _mix(z: np.ndarray) -> np.ndarray:
    """splitmix64's finaliser: every input bit moves every output bit."""
    z = (z ^ (z >> np.uint64(30))) * _S1
    z = (z ^ (z >> np.uint64(27))) * _S2
    return z ^ (z >> np.uint64(31))


def point_keys(xy: np.ndarray) -> np.ndarray:
    """A 64-bit key per point from its exact coordinates (+0.0 and -0.0 alike)."""
    xy = np.ascontiguousarray(xy, dtype=np.float64) + 0.0
    bits = xy.view(np.uint64).reshape(-1, 2)
    return _mix(_mix(bits[:, 0] + _C[0]) + bits[:, 1] + _C[1])


def directed_keys(ka: np.ndarray, kb: np.ndarray) -> np.ndarray:
    """A key per segment ka -> kb; other constants than point_keys, so no key is another's."""
    return _mix(_mix(ka + _C[2]) + kb + _C[3])


_C = np.array([0x9E3779B97F4A7C15, 0x632BE59BD9B4E019, 0xD6E8FEB86659FD93, 0xA0761D6478BD642F], dtype=np.uint64)
