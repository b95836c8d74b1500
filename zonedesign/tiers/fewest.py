"""Counting a redraw's moves: a lower bound on the areas any valid redraw moves, the
moves under the best one-to-one matching of zones, and the share of zones kept whole.

The one definition of an area moved is `naming.moved_areas` (and `naming.unit_moves` on a
fence's units); `matched_moves` is only a lower bound used where no code policy applies.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from zonedesign.measures import zone_sums


def _matching(before: np.ndarray, after: np.ndarray):
    """The one-to-one matching of new zones to old ones that keeps most units in place:
    (old names, new names, matched rows (old), matched columns (new), overlap counts)."""
    from scipy.optimize import linear_sum_assignment

    bn, b = np.unique(np.asarray(before, dtype=str), return_inverse=True)
    an, a = np.unique(np.asarray(after, dtype=str), return_inverse=True)
    overlap = np.zeros((bn.shape[0], an.shape[0]))
    np.add.at(overlap, (b, a), 1.0)
    rows, cols = linear_sum_assignment(-overlap)
    return bn, an, rows, cols, overlap


def matched_moves(before: np.ndarray, after: np.ndarray) -> int:
    """Units that changed zone under the best one-to-one matching of new zones to old ones
    (so a zone that only changed its number is not counted as moved)."""
    _, _, rows, cols, overlap = _matching(before, after)
    return int(np.asarray(before).shape[0] - overlap[rows, cols].sum())


def fewest_moves_bound(previous: np.ndarray, counts: np.ndarray, bounds, size: np.ndarray | None = None) -> int:
    """A lower bound on the areas any valid redraw moves, under either code policy.

    previous: previous zone code per unit (-1: new); size: areas per unit (1 each when
    None). Any code policy hands each old code to at most one new zone, so the moves are at
    least those of the best one-to-one matching of new zones to old ones. A zone above a
    ceiling keeps at most a ceiling's worth of its units in its matched zone, so it loses
    at least as many units as its largest units take to cover the excess; these losses are
    different units for different zones. A zone below a floor either gains units (at least
    as many as the largest other units take to cover the shortfall) or is taken apart (all
    its units move). A count of units becomes areas by the smallest units of that many.
    """
    prev = np.asarray(previous, dtype=np.int64)
    if not (prev >= 0).any():
        return 0
    size = np.ones(prev.shape[0]) if size is None else np.asarray(size, dtype=np.float64)
    k = int(prev.max()) + 1
    sums = zone_sums(np.where(prev >= 0, prev, 0), k, np.where((prev >= 0)[:, None], counts, 0.0))
    leaving = 0
    shortfall = 0
    for z in range(k):
        members = prev == z
        if not members.any():
            continue
        need_out, need_in = 0, 0
        for c in range(counts.shape[1]):
            excess = sums[z, c] - bounds.hi[c]
            if excess > 1e-9:
                need_out = max(need_out, _units_to_cover(counts[members, c], excess))
            lack = bounds.lo[c] - sums[z, c]
            if lack > 1e-9:
                need_in = max(need_in, _units_to_cover(counts[~members, c], lack))
        leaving += int(np.sort(size[members])[:need_out].sum())
        if need_in:
            smallest_in = np.sort(size[~members])[:need_in].sum()
            shortfall = max(shortfall, int(min(smallest_in, size[members].sum())))
    return max(leaving, shortfall)


def _units_to_cover(values: np.ndarray, amount: float) -> int:
    """The fewest of `values` whose sum reaches `amount` (all of them when none do)."""
    top = np.cumsum(np.sort(values)[::-1])
    return int(min(np.searchsorted(top, amount - 1e-9) + 1, values.shape[0]))


def unchanged_share(previous: np.ndarray, now: np.ndarray) -> float:
    """Share of previous zones whose id now holds exactly the same areas."""
    prev = pd.Series(np.asarray(previous, dtype=object))
    cur = pd.Series(np.asarray(now, dtype=object))
    have = prev != ""
    if not have.any():
        return 1.0
    same = (prev == cur)[have].groupby(prev[have]).all()
    size_prev = prev[have].value_counts()
    size_now = cur.value_counts().reindex(size_prev.index, fill_value=0)
    kept = same & (size_now == size_prev).reindex(same.index)
    return float(kept.mean())
