"""Per-zone measures and objective costs, computed in full from a labelling.

This is the one definition of the objective. The search keeps incremental twins of these
terms (tests hold them equal to this module); the verifier, the exact solver and the report
call these functions directly.

Every term is a sum of per-zone costs divided by a constant fixed per problem, so weights in
the rules file are comparable and the exact solver can price a zone on its own:

- size:        sum_c |S_c(Z) - T_c| / T_c over counts with a target;      / K*·(#targets)
- homogeneity: "ssd": sum_i w_i ||x_i - xbar_Z||^2 (w-weighted mean);   / total SS of the fence
               "pairwise": sum_{i<j in Z} ||x_i - x_j|| (Duque, Church & Middleton 2011);
                                                                         / (sum over all pairs)/K*
- compactness: "polsby": 1 - 4 pi A_Z / P_Z^2 (Polsby & Popper 1991);     / K*
               "cut": P_Z / 2 (outer edges once, cut edges shared);      / (sum of unit perimeters)/2
- stability:   units of Z whose previous zone differs from Z's anchor;   / n

K* is the expected number of zones: the fence total of the first targeted count over its
target (or over the midpoint of its bounds), at least 1. A zone's perimeter is the sum of its
units' perimeters less twice the boundary they share with each other.

Bound breaks are measured apart from the objective and always compared first:
sum_c max(0, lo_c - S_c)/max(lo_c, 1) + max(0, S_c - hi_c)/max(hi_c, 1).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from zonedesign.records import Bounds, Graph, Problem

TERMS = ("size", "homogeneity", "compactness", "stability")


@dataclass(frozen=True)
class Score:
    """breaks first (0 when every bound holds), then total = sum_t weight_t * terms[t]."""

    breaks: float
    total: float
    terms: dict[str, float]

    def key(self) -> tuple[float, float]:
        return (self.breaks, self.total)


# ---------------------------------------------------------------- plain measures


def polsby_popper(area: np.ndarray, perimeter: np.ndarray) -> np.ndarray:
    """4 pi A / P^2 (Polsby & Popper 1991): 1 for a circle, pi/4 for a square."""
    area = np.asarray(area, dtype=np.float64)
    perimeter = np.asarray(perimeter, dtype=np.float64)
    out = np.zeros_like(area)
    ok = perimeter > 0
    out[ok] = 4.0 * np.pi * area[ok] / perimeter[ok] ** 2
    return out


def standardise(attrs: np.ndarray, weight: np.ndarray | None = None) -> np.ndarray:
    """Weighted z-scores per column; a constant column becomes zeros."""
    attrs = np.asarray(attrs, dtype=np.float64)
    if attrs.size == 0:
        return attrs.reshape(attrs.shape[0], 0)
    w = np.ones(attrs.shape[0]) if weight is None else np.asarray(weight, dtype=np.float64)
    with np.errstate(over="ignore", invalid="ignore"):
        z = _zscores(attrs, w)
    if np.isfinite(z).all() or not np.isfinite(attrs).all():
        return z
    # values near the float limit overflow the squares: z-scores do not change when a
    # column or the weights are scaled, so scale both to at most 1 and start again
    top = float(np.max(np.abs(w)))
    scale = np.max(np.abs(attrs), axis=0)
    scale[~(np.isfinite(scale) & (scale > 0))] = 1.0
    return _zscores(attrs / scale, w / top if np.isfinite(top) and top > 0 else w)


def _zscores(attrs: np.ndarray, w: np.ndarray) -> np.ndarray:
    if not w.sum() > 0:
        w = np.ones(attrs.shape[0])
    mean = (w[:, None] * attrs).sum(0) / w.sum()
    var = (w[:, None] * (attrs - mean) ** 2).sum(0) / w.sum()
    sd = np.sqrt(var)
    sd[sd == 0] = 1.0
    return (attrs - mean) / sd


def compact_labels(labels: np.ndarray) -> tuple[np.ndarray, int]:
    """Relabel to 0..k-1 in order of first appearance; returns (labels, k)."""
    labels = np.asarray(labels)
    _, first, inv = np.unique(labels, return_index=True, return_inverse=True)
    rank = np.empty(first.shape[0], dtype=np.int64)
    rank[np.argsort(first, kind="stable")] = np.arange(first.shape[0])
    return rank[inv.reshape(-1)], int(first.shape[0])


def zone_sums(labels: np.ndarray, k: int, values: np.ndarray) -> np.ndarray:
    """Per-zone sums of `values` ((n,) or (n, c)) for labels in 0..k-1."""
    values = np.asarray(values, dtype=np.float64)
    if values.ndim == 1:
        return np.bincount(labels, weights=values, minlength=k)
    out = np.zeros((k, values.shape[1]))
    np.add.at(out, labels, values)
    return out


def zone_perimeter(graph: Graph, labels: np.ndarray, k: int, perimeter: np.ndarray) -> np.ndarray:
    """Per-zone perimeter: unit perimeters summed, less twice the internal shared boundary."""
    i, j, w = graph.edges()
    inside = labels[i] == labels[j]
    internal = np.bincount(labels[i[inside]], weights=w[inside], minlength=k)
    return zone_sums(labels, k, perimeter) - 2.0 * internal


def bound_breaks(sums: np.ndarray, bounds: Bounds) -> np.ndarray:
    """Per-zone bound break amount (0 when every bound holds); sums is (k, c)."""
    lo = bounds.lo[None, :]
    hi = bounds.hi[None, :]
    with np.errstate(invalid="ignore"):
        under = np.where(np.isfinite(lo), np.maximum(0.0, lo - sums) / np.maximum(np.abs(lo), 1.0), 0.0)
        over = np.where(np.isfinite(hi), np.maximum(0.0, sums - hi) / np.maximum(np.abs(hi), 1.0), 0.0)
    return (under + over).sum(axis=1)


# ---------------------------------------------------------------- objective


def expected_zones(problem: Problem) -> float:
    """K*: fence total of the first targeted count over its target, else over the midpoint."""
    b = problem.bounds
    totals = problem.counts.sum(axis=0) if problem.counts.size else np.zeros(0)
    for c in range(len(b.count_names)):
        if np.isfinite(b.target[c]) and b.target[c] > 0:
            return max(1.0, totals[c] / b.target[c])
    for c in range(len(b.count_names)):
        lo, hi = b.lo[c], b.hi[c]
        if np.isfinite(lo) and np.isfinite(hi) and hi > 0:
            return max(1.0, totals[c] / (0.5 * (lo + hi)))
        if np.isfinite(lo) and lo > 0:
            return max(1.0, totals[c] / lo)
    return max(1.0, problem.n / 5.0)


def pairwise_distances(attrs: np.ndarray) -> np.ndarray:
    """Euclidean distances between rows of standardised attributes (n, n)."""
    diff = attrs[:, None, :] - attrs[None, :, :]
    return np.sqrt((diff**2).sum(axis=2))


def normalisers(problem: Problem) -> dict[str, float]:
    """The constant each term's zone-cost sum is divided by (fixed per problem)."""
    kstar = expected_zones(problem)
    n_targets = int(np.isfinite(problem.bounds.target).sum())
    out = {"size": kstar * max(n_targets, 1), "stability": float(max(problem.n, 1))}
    x, w = problem.attrs, problem.weight
    if problem.homogeneity == "pairwise":
        total = pairwise_distances(x).sum() / 2.0 if x.size else 0.0
        out["homogeneity"] = total / kstar if total > 0 else 1.0
    else:
        if x.size and w.sum() > 0:
            mean = (w[:, None] * x).sum(0) / w.sum()
            total = float((w[:, None] * (x - mean) ** 2).sum())
        else:
            total = 0.0
        out["homogeneity"] = total if total > 0 else 1.0
    if problem.compactness == "cut":
        total = float(problem.perimeter.sum()) / 2.0
        out["compactness"] = total if total > 0 else 1.0
    else:
        out["compactness"] = kstar
    return out


def anchors_by_overlap(previous: np.ndarray, labels: np.ndarray, k: int) -> np.ndarray:
    """Each zone's anchor: the previous zone holding most of its units (ties: smallest id)."""
    anchors = np.full(k, -1, dtype=np.int64)
    for z in range(k):
        prev = previous[labels == z]
        prev = prev[prev >= 0]
        if prev.size:
            vals, cnt = np.unique(prev, return_counts=True)
            anchors[z] = vals[np.argmax(cnt)]
    return anchors


def zone_costs(problem: Problem, labels: np.ndarray, anchors: np.ndarray | None = None) -> dict[str, np.ndarray]:
    """Raw (un-normalised) cost of every zone under each term; labels must be 0..k-1."""
    labels = np.asarray(labels, dtype=np.int64)
    k = int(labels.max()) + 1 if labels.size else 0
    b = problem.bounds
    sums = zone_sums(labels, k, problem.counts)
    has_t = np.isfinite(b.target)
    size = np.zeros(k)
    for c in np.flatnonzero(has_t):
        size += np.abs(sums[:, c] - b.target[c]) / b.target[c]

    x, w = problem.attrs, problem.weight
    if problem.homogeneity == "pairwise":
        homog = np.zeros(k)
        if x.size:
            d = pairwise_distances(x)
            same = labels[:, None] == labels[None, :]
            homog = np.bincount(labels, weights=(d * same).sum(axis=1), minlength=k) / 2.0
    else:
        W = zone_sums(labels, k, w)
        if x.size:
            S = zone_sums(labels, k, w[:, None] * x)
            Q = zone_sums(labels, k, (w[:, None] * x**2).sum(axis=1))
            with np.errstate(invalid="ignore", divide="ignore"):
                homog = np.where(W > 0, Q - (S**2).sum(axis=1) / np.where(W > 0, W, 1.0), 0.0)
            homog = np.maximum(homog, 0.0)
        else:
            homog = np.zeros(k)

    per = zone_perimeter(problem.graph, labels, k, problem.perimeter)
    if problem.compactness == "cut":
        compact = per / 2.0
    else:
        area = zone_sums(labels, k, problem.area)
        compact = 1.0 - polsby_popper(area, per)

    stab = np.zeros(k)
    if problem.previous is not None:
        prev = np.asarray(problem.previous, dtype=np.int64)
        if anchors is None:
            anchors = anchors_by_overlap(prev, labels, k)
        stab = np.bincount(labels, weights=(prev != anchors[labels]).astype(float), minlength=k)
    return {"size": size, "homogeneity": homog, "compactness": compact, "stability": stab}


def score(problem: Problem, labels: np.ndarray, anchors: np.ndarray | None = None) -> Score:
    """Breaks and weighted normalised objective of a full labelling (labels 0..k-1)."""
    labels = np.asarray(labels, dtype=np.int64)
    k = int(labels.max()) + 1 if labels.size else 0
    breaks = float(bound_breaks(zone_sums(labels, k, problem.counts), problem.bounds).sum())
    costs = zone_costs(problem, labels, anchors)
    norm = normalisers(problem)
    terms = {t: float(costs[t].sum() / norm[t]) for t in TERMS}
    total = sum(problem.term_weights.get(t, 0.0) * terms[t] for t in TERMS)
    return Score(breaks=breaks, total=float(total), terms=terms)


def zone_cost(problem: Problem, members: np.ndarray, norm: dict[str, float] | None = None) -> float:
    """Weighted normalised cost of one zone made of units `members` (for the exact solver).

    Stability uses the overlap anchor (the previous zone holding most members).
    """
    members = np.asarray(members, dtype=np.int64)
    norm = normalisers(problem) if norm is None else norm
    labels = np.full(problem.n, 1, dtype=np.int64)
    labels[members] = 0
    # price zone 0 only: the rest of the fence is one dummy zone whose cost is dropped
    costs = zone_costs(problem, labels)
    return float(sum(problem.term_weights.get(t, 0.0) * costs[t][0] / norm[t] for t in TERMS))


# ---------------------------------------------------------------- area-level measures


def intra_area_correlation(trait: np.ndarray, total: np.ndarray) -> float:
    """Intra-area correlation rho of a 0/1 trait over areas (Tranmer & Steel 1998).

    trait[i] of total[i] units in area i have the trait. rho = (F - 1) / (F + n0 - 1) from
    the one-way ANOVA F of the unit-level 0/1 data, n0 the adjusted mean group size.
    """
    trait = np.asarray(trait, dtype=np.float64)
    total = np.asarray(total, dtype=np.float64)
    keep = total > 0
    trait, total = trait[keep], total[keep]
    g = trait.shape[0]
    N = total.sum()
    if g < 2 or N <= g:
        return float("nan")
    p = trait / total
    pbar = trait.sum() / N
    ssb = float((total * (p - pbar) ** 2).sum())
    ssw = float((trait * (1 - p)).sum())  # sum of n_i p_i (1 - p_i)
    msb = ssb / (g - 1)
    msw = ssw / (N - g)
    if msw == 0:
        return 1.0
    F = msb / msw
    n0 = (N - (total**2).sum() / N) / (g - 1)
    return float((F - 1.0) / (F + n0 - 1.0))
