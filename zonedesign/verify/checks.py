"""Plain checks of a zone hierarchy against the rules, on the checker's own code path.

`audit(areas, graph, labels, tiers)` re-derives every rule from the input arrays and reports
each break as a `Violation` in plain words:

- coverage:   every area in exactly one zone of every tier: no null zone id, no duplicated
              or unknown area id, no empty zone, at most as many zones as units (Duque, Ramos
              & Surinach 2007);
- nesting:    every tier-k zone lies wholly in one tier-(k+1) zone;
- contiguity: every zone is one connected piece of the graph (rook adjacency plus links);
- fence:      no zone crosses a fence;
- bounds:     every zone's counts lie within the tier's min and max.

Measures are reported, not judged: counts, deviation from target, Polsby-Popper, and
homogeneity per attribute (intra-area correlation, Tranmer & Steel 1998, for count-like
attributes; weighted within-zone variance otherwise). Unusual zones are listed as outliers.

Labels are given per tier, bottom tier first, as arrays of zone ids aligned to `areas.ids`;
None, NaN and "" mean "no zone".
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from zonedesign import measures
from zonedesign.errors import InputError
from zonedesign.records import Areas, Bounds, Graph
from zonedesign.rules import TierRules, fence_groups

KINDS = ("coverage", "nesting", "contiguity", "fence", "bounds")
# the rules the CP-SAT certificate encodes, per fence and tier
MODEL_KINDS = ("nesting", "contiguity", "fence", "bounds", "coverage")
LISTED = 10  # area ids listed per violation; the full number is in n_areas
SHARE_NOTE = (
    "share attributes are treated as share*weight trait counts out of weight totals "
    "for the intra-area correlation"
)


@dataclass(frozen=True)
class Violation:
    """One broken rule: what, where (tier, zone, areas) and the figures behind it."""

    kind: str
    tier: str
    zone: str
    areas: tuple[str, ...]
    n_areas: int
    figures: dict
    message: str
    fences: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        return {
            "kind": self.kind,
            "tier": self.tier,
            "zone": self.zone,
            "areas": list(self.areas),
            "n_areas": self.n_areas,
            "fences": list(self.fences),
            "figures": _plain(self.figures),
            "message": self.message,
        }


@dataclass
class AuditResult:
    """Violations, per-zone measures (one DataFrame per tier), outliers and tier summaries."""

    violations: list[Violation]
    zones: dict[str, pd.DataFrame]
    outliers: list[dict] = field(default_factory=list)
    tiers: dict[str, dict] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.violations

    def of_kind(self, kind: str) -> list[Violation]:
        return [v for v in self.violations if v.kind == kind]

    def faults(self) -> set[tuple[str, str, str]]:
        """(kind, tier, zone) of every violation."""
        return {(v.kind, v.tier, v.zone) for v in self.violations}

    def broken_cells(self) -> set[tuple[str, str]]:
        """(fence, tier) pairs holding a break the CP-SAT certificate can see.

        Area-id problems (duplicated or unknown ids) are left out: the certificate works
        on the label arrays, where they do not show.
        """
        cells = set()
        for v in self.violations:
            if v.kind in MODEL_KINDS and v.tier:
                cells.update((f, v.tier) for f in v.fences)
        return cells

    def violations_frame(self) -> pd.DataFrame:
        """One row per violation: kind, tier, zone, areas, figures, message (violations.csv)."""
        rows = []
        for v in self.violations:
            listed = "; ".join(v.areas)
            if v.n_areas > len(v.areas):
                listed += f" (+{v.n_areas - len(v.areas)} more)"
            rows.append(
                {
                    "kind": v.kind,
                    "tier": v.tier,
                    "zone": v.zone,
                    "areas": listed,
                    "figures": json.dumps(_plain(v.figures), sort_keys=True),
                    "message": v.message,
                }
            )
        return pd.DataFrame(rows, columns=["kind", "tier", "zone", "areas", "figures", "message"])

    def to_json(self) -> dict:
        return {
            "ok": self.ok,
            "violations": [v.to_dict() for v in self.violations],
            "counts_by_kind": {k: len(self.of_kind(k)) for k in KINDS},
            "tiers": _plain(self.tiers),
            "outliers": _plain(self.outliers),
            "notes": list(self.notes),
        }


# ---------------------------------------------------------------- label helpers


@dataclass(frozen=True)
class TierLabels:
    """One tier's zone ids as integer codes: codes[i] in 0..k-1, -1 where the area has none."""

    codes: np.ndarray
    names: np.ndarray  # zone id per code (str)

    @property
    def k(self) -> int:
        return int(self.names.shape[0])


def is_null(value: object) -> bool:
    if value is None:
        return True
    if isinstance(value, float) and math.isnan(value):
        return True
    if value is pd.NA or value is pd.NaT:
        return True
    return isinstance(value, str) and value.strip() == ""


def encode_labels(values: Sequence | np.ndarray) -> TierLabels:
    """Zone ids (any hashable, nulls allowed) to codes ordered by first appearance."""
    values = np.asarray(values, dtype=object)
    null = np.fromiter((is_null(v) for v in values), dtype=bool, count=values.shape[0])
    text = np.array([str(v) for v in values], dtype=object)
    codes = np.full(values.shape[0], -1, dtype=np.int64)
    if (~null).any():
        uniq, first, inv = np.unique(text[~null].astype(str), return_index=True, return_inverse=True)
        rank = np.empty(uniq.shape[0], dtype=np.int64)
        order = np.argsort(first, kind="stable")
        rank[order] = np.arange(uniq.shape[0])
        codes[~null] = rank[inv.reshape(-1)]
        names = np.array(uniq[order], dtype=object)
    else:
        names = np.zeros(0, dtype=object)
    return TierLabels(codes=codes, names=names)


def tier_bounds(tier: TierRules, count_names: Sequence[str]) -> Bounds:
    """The tier's min/max/target as a Bounds record aligned to `count_names`."""
    count_names = tuple(count_names)
    c = len(count_names)
    lo, hi, target = np.full(c, -np.inf), np.full(c, np.inf), np.full(c, np.nan)
    for key, table, out in (("min", tier.min, lo), ("max", tier.max, hi), ("target", tier.target, target)):
        for name, value in table.items():
            if name not in count_names:
                raise InputError(
                    f"{key}.{name} names no count column (counts are {', '.join(count_names) or 'none'})",
                    where=f"tier {tier.name!r}",
                )
            out[count_names.index(name)] = float(value)
    return Bounds(count_names=count_names, lo=lo, hi=hi, target=target)


def zone_members(codes: np.ndarray, k: int) -> list[np.ndarray]:
    """Area positions of every zone 0..k-1 (ascending)."""
    valid = np.flatnonzero(codes >= 0)
    order = valid[np.argsort(codes[valid], kind="stable")]
    cuts = np.searchsorted(codes[order], np.arange(k + 1))
    return [order[cuts[z] : cuts[z + 1]] for z in range(k)]


def zone_parts(graph: Graph, codes: np.ndarray) -> np.ndarray:
    """Component id per area on the graph keeping only edges inside one zone (-1: no zone)."""
    i, j, _ = graph.edges()
    keep = (codes[i] == codes[j]) & (codes[i] >= 0)
    n = codes.shape[0]
    adj = coo_matrix((np.ones(int(keep.sum())), (i[keep], j[keep])), shape=(n, n))
    _, comp = connected_components(adj, directed=False)
    comp = comp.astype(np.int64)
    comp[codes < 0] = -1
    return comp


def _fence_set(codes: np.ndarray) -> tuple[str, ...]:
    return tuple(sorted({str(c) for c in codes}))


def _first(ids: np.ndarray, limit: int = LISTED) -> tuple[str, ...]:
    return tuple(str(x) for x in ids[:limit])


def _fmt(x: float) -> str:
    x = float(x)
    if math.isfinite(x) and x == round(x):
        return f"{int(round(x)):,}"
    return f"{x:,.6g}"


def _plain(obj: object) -> object:
    """JSON-safe copy: numpy scalars to Python, non-finite floats to None."""
    if isinstance(obj, Mapping):
        return {str(k): _plain(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple | np.ndarray):
        return [_plain(v) for v in obj]
    if isinstance(obj, np.integer | np.bool_):
        return obj.item()
    if isinstance(obj, float | np.floating):
        v = float(obj)
        return v if math.isfinite(v) else None
    return obj


def _plural(n: int, word: str) -> str:
    return f"{n} {word}" if n == 1 else f"{n} {word}s"


# ---------------------------------------------------------------- the audit


def audit(
    areas: Areas,
    graph: Graph,
    labels: Mapping[str, Sequence | np.ndarray],
    tiers: Sequence[TierRules],
    *,
    lookup_problems: Iterable[object] = (),
    zone_lists: Mapping[str, Iterable[object]] | None = None,
    attribute_kinds: Mapping[str, str] | None = None,
) -> AuditResult:
    """Check a hierarchy against every rule and measure its zones.

    areas, graph: the base areas and their adjacency (rook pairs plus declared links).
    labels: zone id per area for each tier, bottom tier first (keys are tier names).
    tiers: the tier rules, bottom first; their names must match `labels`.
    lookup_problems: problems the lookup reader found (unknown, missing or duplicated ids),
        each a string or a mapping with "message" and optionally "kind", "id", "tier", "zone";
        reported as coverage violations.
    zone_lists: optional named zones per tier; a named zone holding no area is reported.
    attribute_kinds: "count", "share" or "value" per attribute; detected when not given
        (see `attribute_kind`).

    >>> result = audit(areas, graph, {"small": lookup}, [TierRules("small", min={"persons": 120})])
    >>> result.ok, result.violations_frame()
    """
    tiers = list(tiers)
    names = [t.name for t in tiers]
    if list(labels.keys()) != names:
        raise InputError(
            f"lookup tiers {list(labels.keys())} do not match the rules' tiers {names} (bottom first)",
            where="lookup",
        )
    if graph.n != areas.n:
        raise InputError(f"graph has {graph.n} units but there are {areas.n} areas", where="graph")
    encoded: dict[str, TierLabels] = {}
    for t in tiers:
        values = np.asarray(labels[t.name], dtype=object)
        if values.shape[0] != areas.n:
            raise InputError(
                f"{values.shape[0]} zone ids given for {areas.n} areas", where=f"lookup tier {t.name!r}"
            )
        encoded[t.name] = encode_labels(values)

    violations: list[Violation] = []
    violations += _coverage(areas, tiers, encoded, lookup_problems, zone_lists)
    parts: dict[str, np.ndarray] = {}
    for k, t in enumerate(tiers):
        tl = encoded[t.name]
        members = zone_members(tl.codes, tl.k)
        parts[t.name] = zone_parts(graph, tl.codes)
        if k + 1 < len(tiers):
            violations += _nesting(areas, graph, t.name, tl, members, tiers[k + 1].name, encoded[tiers[k + 1].name])
        violations += _contiguity(areas, t.name, tl, members, parts[t.name])
        violations += _fences(areas.in_tier(t.name), t.name, tl, members)  # the tier's own fence
        for here, applies in fence_groups(t):  # each fence's own bounds ([[tier.override]])
            found = _bounds(areas.in_tier(t.name), t.name, tl, members, tier_bounds(here, areas.count_names))
            violations += [v for v in found if applies(v.fences)]

    kinds = {a: attribute_kind(areas, a, attribute_kinds) for a in areas.attr_names}
    zones, summaries, outliers = {}, {}, []
    for k, t in enumerate(tiers):
        upper = encoded[tiers[k + 1].name] if k + 1 < len(tiers) else None
        frame = _zone_measures(areas.in_tier(t.name), graph, t, encoded[t.name], upper, parts[t.name], kinds)
        zones[t.name] = frame
        summaries[t.name] = _tier_summary(areas, t, encoded[t.name], kinds, frame)
        outliers += _outliers(t, frame, areas.count_names)
    notes = []
    if any(v == "share" for v in kinds.values()):
        notes.append(SHARE_NOTE)
    return AuditResult(violations=violations, zones=zones, outliers=outliers, tiers=summaries, notes=notes)


# ---------------------------------------------------------------- rule by rule


def _coverage(
    areas: Areas,
    tiers: list[TierRules],
    encoded: dict[str, TierLabels],
    lookup_problems: Iterable[object],
    zone_lists: Mapping[str, Iterable[object]] | None,
) -> list[Violation]:
    out: list[Violation] = []
    ids = np.asarray(areas.ids, dtype=object).astype(str)
    uniq, inv, cnt = np.unique(ids, return_inverse=True, return_counts=True)
    for u in np.flatnonzero(cnt > 1):
        rows = np.flatnonzero(inv.reshape(-1) == u)
        out.append(
            Violation(
                kind="coverage",
                tier="",
                zone="",
                areas=(str(uniq[u]),),
                n_areas=1,
                figures={"duplicated_id": str(uniq[u]), "rows": rows.tolist()},
                message=f"area id {uniq[u]} appears {cnt[u]} times (rows {', '.join(map(str, rows[:LISTED]))}); "
                "each area must be listed once",
                fences=_fence_set(areas.fence[rows]),
            )
        )
    for p in lookup_problems:
        out.append(_lookup_problem(p))
    for t in tiers:
        tl = encoded[t.name]
        null = np.flatnonzero(tl.codes < 0)
        if null.size:
            out.append(
                Violation(
                    kind="coverage",
                    tier=t.name,
                    zone="",
                    areas=_first(ids[null]),
                    n_areas=int(null.size),
                    figures={"areas_without_zone": int(null.size)},
                    message=f"{_plural(int(null.size), 'area')} of tier {t.name} "
                    f"{'belongs' if null.size == 1 else 'belong'} to no zone "
                    f"(first: {', '.join(_first(ids[null], 5))})",
                    fences=_fence_set(areas.fence[null]),
                )
            )
    if zone_lists is not None:
        for t in tiers:
            if t.name not in zone_lists:
                continue
            named = [str(z) for z in zone_lists[t.name] if not is_null(z)]
            used = set(encoded[t.name].names.tolist())
            for z in sorted(set(named) - used):
                out.append(_zone_list_fault(t.name, z, "empty_zone", "is named but holds no area"))
            for z in sorted(used - set(named)):
                out.append(
                    _zone_list_fault(t.name, z, "unknown_zone", "holds areas but is not in the tier's zone list")
                )
    # Duque, Ramos & Surinach 2007: no more regions than the units they are built from
    units = areas.n
    unit_word = "areas"
    for t in tiers:
        k = encoded[t.name].k
        if zone_lists is not None and t.name in zone_lists:
            k = max(k, len({str(z) for z in zone_lists[t.name] if not is_null(z)}))
        if k > units:
            out.append(
                Violation(
                    kind="coverage",
                    tier=t.name,
                    zone="",
                    areas=(),
                    n_areas=0,
                    figures={"zones": k, "units": units},
                    message=f"tier {t.name} has {k} zones but only {units} {unit_word} to build them from",
                )
            )
        units, unit_word = encoded[t.name].k, f"zones of tier {t.name}"
    return out


def _zone_list_fault(tier: str, zone: str, key: str, what: str) -> Violation:
    """A zone named in the tier's zone list but empty, or holding areas but not named."""
    return Violation(
        kind="coverage", tier=tier, zone=zone, areas=(), n_areas=0,
        figures={key: zone}, message=f"zone {zone} of tier {tier} {what}",
    )


def _lookup_problem(p: object) -> Violation:
    if isinstance(p, str):
        return Violation("coverage", "", "", (), 0, {"lookup": p}, p)
    get = p.get if isinstance(p, Mapping) else (lambda key, default=None: getattr(p, key, default))
    area = get("id", None) or get("area", None)
    kind = str(get("kind", "") or get("problem", "") or "lookup")
    message = str(get("message", "") or f"lookup problem ({kind})" + (f": area id {area}" if area else ""))
    return Violation(
        kind="coverage",
        tier=str(get("tier", "") or ""),
        zone=str(get("zone", "") or ""),
        areas=(str(area),) if area is not None else (),
        n_areas=1 if area is not None else 0,
        figures={"lookup": kind},
        message=message,
    )


def _nesting(
    areas: Areas,
    graph: Graph,
    tier: str,
    tl: TierLabels,
    members: list[np.ndarray],
    upper: str,
    ul: TierLabels,
) -> list[Violation]:
    out: list[Violation] = []
    ids = areas.ids
    for z, m in enumerate(members):
        pc = ul.codes[m]
        parents = np.unique(pc[pc >= 0])
        if parents.size <= 1:
            continue
        by_parent = {str(ul.names[p]): m[pc == p] for p in parents}
        by_parent = dict(sorted(by_parent.items(), key=lambda kv: -kv[1].size))
        listed = ", ".join(f"{p} ({_plural(v.size, 'area')})" for p, v in by_parent.items())
        # parts under different parents that never touch: the same id names separate zones
        touching = False
        inside = np.zeros(areas.n, dtype=bool)
        inside[m] = True
        parent_of = np.full(areas.n, -1, dtype=np.int64)
        parent_of[m] = ul.codes[m]
        for a in m:
            nb = graph.neighbours(a)
            nb = nb[inside[nb]]
            if np.any(parent_of[nb] != parent_of[a]):
                touching = True
                break
        name = str(tl.names[z])
        minority = np.concatenate(list(by_parent.values())[1:])
        if touching:
            message = f"zone {name} of tier {tier} spans {parents.size} zones of tier {upper}: {listed}"
        else:
            message = (
                f"zone id {name} of tier {tier} is used under {parents.size} zones of tier {upper} for "
                f"groups of areas that do not touch: {listed}; one id names separate zones, or areas "
                f"were put under the wrong {upper}"
            )
        out.append(
            Violation(
                kind="nesting",
                tier=tier,
                zone=name,
                areas=_first(ids[minority]),
                n_areas=int(minority.size),
                figures={
                    "upper_tier": upper,
                    "parents": {p: int(v.size) for p, v in by_parent.items()},
                    "areas_by_parent": {p: _first(ids[v]) for p, v in by_parent.items()},
                    "id_reused": not touching,
                },
                message=message,
                fences=_fence_set(areas.fence[m]),
            )
        )
    return out


def _contiguity(
    areas: Areas, tier: str, tl: TierLabels, members: list[np.ndarray], comp: np.ndarray
) -> list[Violation]:
    out: list[Violation] = []
    for z, m in enumerate(members):
        cz = comp[m]
        uniq, inv = np.unique(cz, return_inverse=True)
        if uniq.size <= 1:
            continue
        inv = inv.reshape(-1)
        sizes = np.bincount(inv)
        order = np.argsort(-sizes, kind="stable")
        pieces = [m[inv == p] for p in order]
        counts = {
            name: [float(areas.counts[piece, c].sum()) for piece in pieces]
            for c, name in enumerate(areas.count_names)
        }
        detached = np.concatenate(pieces[1:])
        first_count = areas.count_names[0] if areas.count_names else None
        sizes_txt = ", ".join(str(p.size) for p in pieces)
        counts_txt = (
            f" ({first_count} {', '.join(_fmt(v) for v in counts[first_count])})" if first_count else ""
        )
        out.append(
            Violation(
                kind="contiguity",
                tier=tier,
                zone=str(tl.names[z]),
                areas=_first(areas.ids[detached]),
                n_areas=int(detached.size),
                figures={
                    "parts": int(len(pieces)),
                    "part_sizes": [int(p.size) for p in pieces],
                    "part_counts": counts,
                    "part_areas": [_first(areas.ids[p]) for p in pieces],
                },
                message=f"zone {tl.names[z]} of tier {tier} falls into {len(pieces)} separate parts of "
                f"{sizes_txt} areas{counts_txt}",
                fences=_fence_set(areas.fence[m]),
            )
        )
    return out


def _fences(areas: Areas, tier: str, tl: TierLabels, members: list[np.ndarray]) -> list[Violation]:
    out: list[Violation] = []
    fence = areas.fence.astype(str)
    for z, m in enumerate(members):
        codes, cnt = np.unique(fence[m], return_counts=True)
        if codes.size <= 1:
            continue
        order = np.argsort(-cnt, kind="stable")
        by_fence = {str(codes[o]): int(cnt[o]) for o in order}
        minority = m[fence[m] != codes[order[0]]]
        listed = ", ".join(f"{f} ({_plural(n, 'area')})" for f, n in by_fence.items())
        out.append(
            Violation(
                kind="fence",
                tier=tier,
                zone=str(tl.names[z]),
                areas=_first(areas.ids[minority]),
                n_areas=int(minority.size),
                figures={"fences": by_fence},
                message=f"zone {tl.names[z]} of tier {tier} crosses a fence: it holds areas of {listed}",
                fences=tuple(sorted(by_fence)),
            )
        )
    return out


def _bounds(
    areas: Areas, tier: str, tl: TierLabels, members: list[np.ndarray], bounds: Bounds
) -> list[Violation]:
    out: list[Violation] = []
    sums = measures.zone_sums(np.maximum(tl.codes, 0), tl.k, np.where(tl.codes[:, None] >= 0, areas.counts, 0.0))
    fence = areas.fence.astype(str)
    for c, name in enumerate(bounds.count_names):
        lo, hi = bounds.lo[c], bounds.hi[c]
        for z in range(tl.k):
            v = float(sums[z, c])
            for side, bound, broken, word in (
                ("min", lo, v < lo, "below the floor"),
                ("max", hi, v > hi, "above the ceiling"),
            ):
                if not broken:
                    continue
                excess = v - bound
                m = members[z]
                out.append(
                    Violation(
                        kind="bounds",
                        tier=tier,
                        zone=str(tl.names[z]),
                        areas=_first(areas.ids[m]),
                        n_areas=int(m.size),
                        figures={"count": name, "value": v, "side": side, "bound": float(bound), "excess": excess},
                        message=f"zone {tl.names[z]} of tier {tier} has {_fmt(v)} {name}, {word} of "
                        f"{_fmt(bound)} by {_fmt(abs(excess))}",
                        fences=_fence_set(fence[m]),
                    )
                )
    return out


# ---------------------------------------------------------------- measures


def attribute_kind(areas: Areas, name: str, given: Mapping[str, str] | None = None) -> str:
    """How an attribute's homogeneity is measured: "count", "share" or "value".

    count: whole numbers between 0 and the area's weight (people with a trait out of the
           weight's total) -> intra-area correlation;
    share: values in [0, 1] with weights above 1 -> intra-area correlation of share*weight
           trait counts out of weight totals;
    value: anything else -> weighted within-zone variance.
    """
    if given and name in given:
        kind = given[name]
        if kind not in ("count", "share", "value"):
            raise InputError(f"attribute kind {kind!r} is not one of count, share, value", where=f"attribute {name!r}")
        return kind
    x = areas.attrs[:, areas.attr_names.index(name)]
    w = areas.weight
    finite = np.isfinite(x)
    if not finite.all() or x.size == 0 or not (w > 1).any():
        return "value"
    if np.all(x == np.round(x)) and np.all(x >= 0) and np.all(x <= w) and x.max() > 1:
        return "count"
    if np.all((x >= 0) & (x <= 1)):
        return "share"
    return "value"


def _traits(areas: Areas, name: str, kind: str) -> tuple[np.ndarray, np.ndarray]:
    x = areas.attrs[:, areas.attr_names.index(name)].astype(np.float64)
    w = areas.weight.astype(np.float64)
    return (x * w, w) if kind == "share" else (x, w)


def _zone_measures(
    areas: Areas,
    graph: Graph,
    tier: TierRules,
    tl: TierLabels,
    upper: TierLabels | None,
    comp: np.ndarray,
    kinds: dict[str, str],
) -> pd.DataFrame:
    k = tl.k
    # areas without a zone go to a dummy zone k so the per-zone sums stay aligned
    lab = np.where(tl.codes >= 0, tl.codes, k)
    members = zone_members(tl.codes, k)
    bounds = tier_bounds(tier, areas.count_names)
    frame = pd.DataFrame({"zone": tl.names.astype(str)})
    frame["areas"] = np.bincount(lab, minlength=k + 1)[:k]
    fence = areas.fence.astype(str)
    frame["fences"] = [";".join(sorted(set(fence[m]))) for m in members]
    if upper is not None:
        frame["parent"] = [
            ";".join(sorted({str(upper.names[p]) for p in upper.codes[m] if p >= 0})) for m in members
        ]
    frame["parts"] = [int(np.unique(comp[m]).size) for m in members]
    sums = measures.zone_sums(lab, k + 1, areas.counts)[:k]
    for c, name in enumerate(areas.count_names):
        frame[name] = sums[:, c]
    for c, name in enumerate(areas.count_names):
        t = bounds.target[c]
        if np.isfinite(t) and t != 0:
            # (zone - target) / target, named as in the zone tables
            frame[f"{name}_vs_target"] = (sums[:, c] - t) / t
    area = measures.zone_sums(lab, k + 1, areas.area)[:k]
    perimeter = measures.zone_perimeter(graph, lab, k + 1, areas.perimeter)[:k]
    frame["area"] = area
    frame["perimeter"] = perimeter
    frame["polsby_popper"] = measures.polsby_popper(area, perimeter)
    for a, name in enumerate(areas.attr_names):
        kind = kinds[name]
        if kind == "value":
            x = areas.attrs[:, a].astype(np.float64)
            w = areas.weight.astype(np.float64)
            var = np.full(k, np.nan)
            for z, m in enumerate(members):
                wz, xz = w[m], x[m]
                if wz.sum() > 0:
                    mean = (wz * xz).sum() / wz.sum()
                    var[z] = (wz * (xz - mean) ** 2).sum() / wz.sum()
            frame[f"var_{name}"] = var
        else:
            trait, total = _traits(areas, name, kind)
            frame[f"rho_{name}"] = [measures.intra_area_correlation(trait[m], total[m]) for m in members]
    return frame


def _tier_summary(
    areas: Areas, tier: TierRules, tl: TierLabels, kinds: dict[str, str], frame: pd.DataFrame
) -> dict:
    """Tier figures; rho here takes the tier's zones as the groups (Tranmer & Steel 1998)."""
    k = tl.k
    lab = np.where(tl.codes >= 0, tl.codes, k)
    rho = {}
    for name in areas.attr_names:
        if kinds[name] == "value":
            continue
        trait, total = _traits(areas, name, kinds[name])
        rho[name] = measures.intra_area_correlation(
            np.bincount(lab, weights=trait, minlength=k + 1)[:k],
            np.bincount(lab, weights=total, minlength=k + 1)[:k],
        )
    pp = frame["polsby_popper"].to_numpy()
    return {
        "zones": k,
        "areas": int((tl.codes >= 0).sum()),
        "attribute_kinds": dict(kinds),
        "rho": rho,
        "polsby_popper_median": float(np.median(pp)) if pp.size else float("nan"),
    }


def _outliers(tier: TierRules, frame: pd.DataFrame, count_names: Sequence[str]) -> list[dict]:
    out: list[dict] = []
    if frame.empty:
        return out
    pp = frame["polsby_popper"].to_numpy()
    cut = float(np.percentile(pp, 5))
    for z, v in zip(frame["zone"], pp):
        if v < cut:
            out.append(
                {
                    "tier": tier.name,
                    "zone": z,
                    "measure": "polsby_popper",
                    "value": float(v),
                    "threshold": cut,
                    "message": f"zone {z} of tier {tier.name} has Polsby-Popper {v:.3f}, below the tier's "
                    f"5th percentile {cut:.3f}",
                }
            )
    for name in count_names:
        col = f"{name}_vs_target"
        if col not in frame:
            continue
        for z, v in zip(frame["zone"], frame[col]):
            if abs(v) > 0.5:
                out.append(
                    {
                        "tier": tier.name,
                        "zone": z,
                        "measure": col,
                        "value": float(v),
                        "threshold": 0.5,
                        "message": f"zone {z} of tier {tier.name} is {abs(v):.0%} "
                        f"{'above' if v > 0 else 'below'} the {name} target",
                    }
                )
    return out
