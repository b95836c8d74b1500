"""The incremental zone state of one problem, as a plain-Python object over the kernels.

`ZoneState` is what the engine drives and what tests use to check that the incremental
sums agree with `measures.score` after any sequence of moves, merges and splits.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from zonedesign import measures
from zonedesign.errors import InputError
from zonedesign.measures import TERMS, Score
from zonedesign.records import Problem
from zonedesign.search import kernels as K
from zonedesign.search import mergesplit as MS
from zonedesign.search import moves as KM

# above this many units measures' dense pairwise matrices get too large; the search
# computes the pairwise normaliser and final term itself (same definition, summed by pairs)
PAIRWISE_DENSE_LIMIT = 1500


def search_normalisers(problem: Problem) -> dict[str, float]:
    """measures.normalisers, without a dense n x n matrix for large pairwise problems."""
    if problem.homogeneity == "pairwise" and problem.n > PAIRWISE_DENSE_LIMIT:
        out = measures.normalisers(replace(problem, homogeneity="ssd"))
        x = unit_attrs(problem)
        total = float(K.pair_total(x)) if x.size else 0.0
        kstar = measures.expected_zones(problem)
        out["homogeneity"] = total / kstar if total > 0 else 1.0
        return out
    return measures.normalisers(problem)


def check_problem(problem: Problem) -> None:
    """Raise InputError when a problem's arrays do not fit its units, or a kind is unknown."""
    n = problem.n
    c = len(problem.bounds.count_names)
    counts = np.asarray(problem.counts)
    if counts.size != n * c or (counts.ndim == 2 and counts.shape[0] != n):
        raise InputError(f"counts have shape {counts.shape}, expected ({n}, {c})", where="problem.counts")
    for name in ("weight", "area", "perimeter"):
        arr = np.asarray(getattr(problem, name))
        if arr.shape != (n,):
            raise InputError(f"{name} has shape {arr.shape}, expected ({n},)", where=f"problem.{name}")
    if problem.previous is not None and np.asarray(problem.previous).shape != (n,):
        raise InputError(f"previous has shape {np.asarray(problem.previous).shape}, expected ({n},)", where="problem.previous")
    if problem.homogeneity not in ("ssd", "pairwise"):
        raise InputError(f"homogeneity {problem.homogeneity!r} is not 'ssd' or 'pairwise'", where="problem.homogeneity")
    if problem.compactness not in ("polsby", "cut"):
        raise InputError(f"compactness {problem.compactness!r} is not 'polsby' or 'cut'", where="problem.compactness")


def unit_attrs(problem: Problem) -> np.ndarray:
    """The standardised attributes as a C-ordered (n, a) float array (a may be 0)."""
    x = np.asarray(problem.attrs, dtype=np.float64)
    if x.size == 0:
        return np.zeros((problem.n, 0))
    return np.ascontiguousarray(x.reshape(problem.n, -1))


def problem_data(problem: Problem, norm: dict[str, float] | None = None) -> K.Data:
    """The kernels' view of a problem: flat arrays and per-term weight / normaliser."""
    n = problem.n
    g = problem.graph
    norm = search_normalisers(problem) if norm is None else norm
    tw = problem.term_weights
    coef = np.array([float(tw.get(t, 0.0)) / norm[t] for t in TERMS])
    stability = problem.previous is not None and coef[3] != 0.0
    prev = (
        np.asarray(problem.previous, dtype=np.int64)
        if problem.previous is not None
        else np.full(n, -1, dtype=np.int64)
    )
    counts = np.asarray(problem.counts, dtype=np.float64).reshape(n, -1)
    b = problem.bounds
    kind = np.array(
        [int(problem.homogeneity == "pairwise"), int(problem.compactness == "cut"), int(stability)]
    )
    return K.make_data(
        g.indptr,
        g.indices,
        g.length,
        counts,
        np.asarray(b.lo, dtype=np.float64),
        np.asarray(b.hi, dtype=np.float64),
        np.asarray(b.target, dtype=np.float64),
        unit_attrs(problem),
        np.asarray(problem.weight, dtype=np.float64).reshape(n),
        np.asarray(problem.area, dtype=np.float64).reshape(n),
        np.asarray(problem.perimeter, dtype=np.float64).reshape(n),
        prev,
        coef,
        kind,
    )


class ZoneState:
    """Zones of one problem with incrementally kept sums.

    Zones live in slots 0..n-1; `labels()` gives each unit's slot, `compact()` renumbers
    them 0..k-1 in order of first appearance, with the anchors in the same order.
    """

    def __init__(
        self,
        problem: Problem,
        labels: np.ndarray | None = None,
        anchors: np.ndarray | None = None,
        norm: dict[str, float] | None = None,
    ):
        self.problem = problem
        # a coarse level is priced with its fine problem's normalisers (search.multilevel)
        self.norm = search_normalisers(problem) if norm is None else norm
        self.data = problem_data(problem, self.norm)
        n = problem.n
        self.zones = K.make_zones(n, self.data.counts.shape[1], self.data.x.shape[1])
        self.st = K.new_state(self.data, self.zones)
        if labels is not None:
            self.load(labels, anchors)

    # ------------------------------------------------------------ whole-state operations

    def load(self, labels: np.ndarray, anchors: np.ndarray | None = None) -> None:
        """Set the labelling (slots, -1 for unassigned) and the anchor of each slot."""
        labels = np.ascontiguousarray(labels, dtype=np.int64)
        anchors = np.zeros(0, dtype=np.int64) if anchors is None else np.ascontiguousarray(anchors, dtype=np.int64)
        KM.build_state(self.st, labels, anchors)

    def restore(self, labels: np.ndarray, anchors: np.ndarray) -> None:
        """Go back to an earlier labelling (slots) and anchors, touching only what changed."""
        labels = np.ascontiguousarray(labels, dtype=np.int64)
        anchors = np.ascontiguousarray(anchors, dtype=np.int64)
        changed = np.flatnonzero(self.zones.labels != labels)
        # a zone may have kept its members but not its anchor
        moved_anchor = np.flatnonzero(self.zones.anchor != anchors)
        KM.relabel(self.st, changed, labels, anchors, moved_anchor)

    def resync(self) -> None:
        """Recompute every zone's sums from its members (drops float drift)."""
        self.load(self.zones.labels.copy(), self.zones.anchor.copy())

    def labels(self) -> np.ndarray:
        return self.zones.labels.copy()

    def live(self) -> np.ndarray:
        """Slots of the zones that have members."""
        return np.flatnonzero(self.zones.size > 0)

    def compact(self) -> tuple[np.ndarray, np.ndarray]:
        """(labels 0..k-1 in order of first appearance, anchors (k,) in that order)."""
        lab = self.zones.labels
        if lab.size == 0:
            return lab.copy(), np.zeros(0, dtype=np.int64)
        out, k = measures.compact_labels(lab)
        anchors = np.full(k, -1, dtype=np.int64)
        anchors[out] = self.zones.anchor[lab]
        return out, anchors

    def key(self) -> tuple[float, float]:
        """(breaks, total) summed afresh over the zones' kept costs."""
        tot, brk = K.exact_totals(self.st)
        return float(brk), float(tot)

    def running_key(self) -> tuple[float, float]:
        """(breaks, total) as accumulated move by move."""
        return float(self.zones.fv[K.FV_BRK]), float(self.zones.fv[K.FV_TOTAL])

    def boundary(self) -> np.ndarray:
        """Units with a neighbour in another zone."""
        return self.zones.blist[: self.zones.iv[K.IV_NB]].copy()

    # ------------------------------------------------------------ single moves

    def can_move(self, i: int) -> bool:
        """Taking unit i out of its zone leaves that zone non-empty and connected."""
        return bool(KM.donor_ok(self.st, int(i)))

    def neighbour_zones(self, i: int) -> np.ndarray:
        """Zones other than i's own that hold a neighbour of i."""
        _, _, nt = KM.unit_links(self.st, int(i), int(self.zones.labels[i]))
        return np.sort(self.zones.ztouch[:nt].copy())

    def move_delta(self, i: int, b: int) -> tuple[float, float]:
        """(break change, objective change) of moving unit i into zone b."""
        db, do = KM.move_delta(self.st, int(i), int(b))
        return float(db), float(do)

    def move(self, i: int, b: int) -> None:
        KM.move_unit(self.st, int(i), int(b))

    # ------------------------------------------------------------ merges and splits

    def merge_delta(self, a: int, b: int) -> tuple[float, float, int]:
        """(break change, objective change, anchor kept) of merging zones a and b."""
        db, do, anc = MS.merge_delta(self.st, int(a), int(b))
        return float(db), float(do), int(anc)

    def merge(self, a: int, b: int) -> int:
        """Merge zone b into zone a (keeping the better anchor); returns a."""
        _, _, anc = MS.merge_delta(self.st, int(a), int(b))
        MS.merge_zones(self.st, int(a), int(b), int(anc))
        return int(a)

    def split(self, zone: int, seed: int = 0, force: bool = True, trees: int = MS.N_TREES) -> int:
        """Cut zone in two along the best random-tree cut; returns the new slot or -1.

        With force the cut is made even when it does not improve (breaks, objective).
        """
        loc = np.empty(self.problem.n, dtype=np.int64)
        K.seed_rng(int(seed) % (2**31 - 1))
        return int(MS.try_split(self.st, int(zone), int(trees), loc, int(bool(force))))


def full_score(problem: Problem, labels: np.ndarray, anchors: np.ndarray | None = None) -> Score:
    """measures.score, or for large pairwise problems the same definition summed by pairs."""
    if problem.homogeneity != "pairwise" or problem.n <= PAIRWISE_DENSE_LIMIT:
        return measures.score(problem, labels, anchors)
    labels = np.asarray(labels, dtype=np.int64)
    k = int(labels.max()) + 1 if labels.size else 0
    breaks = float(measures.bound_breaks(measures.zone_sums(labels, k, problem.counts), problem.bounds).sum())
    costs = measures.zone_costs(replace(problem, homogeneity="ssd"), labels, anchors)
    x = unit_attrs(problem)
    costs["homogeneity"] = np.array([_within_pairs(x, labels, k)]) if x.size else np.zeros(1)
    norm = search_normalisers(problem)
    terms = {t: float(np.sum(costs[t]) / norm[t]) for t in TERMS}
    total = sum(problem.term_weights.get(t, 0.0) * terms[t] for t in TERMS)
    return Score(breaks=breaks, total=float(total), terms=terms)


def _within_pairs(x: np.ndarray, labels: np.ndarray, k: int) -> float:
    order = np.argsort(labels, kind="stable")
    bounds = np.searchsorted(labels[order], np.arange(k + 1))
    total = 0.0
    for z in range(k):
        idx = order[bounds[z] : bounds[z + 1]]
        if idx.size > 1:
            total += float(K.pair_total(np.ascontiguousarray(x[idx])))
    return total
