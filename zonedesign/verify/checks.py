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

from zonedesign import measures
from zonedesign.errors import InputError
from zonedesign.plain import plain
from zonedesign.records import Areas, Bounds, Graph
from zonedesign.rules import TierRules, fence_groups
from zonedesign.verify.labels import (
    TierLabels,
    encode_labels,
    is_null,
    tier_bounds,
    zone_members,
    zone_parts,
)
from zonedesign.verify.zonefigures import attribute_kind, tier_summary, zone_measures, zone_outliers

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
            "figures": plain(self.figures, finite=True),
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
                    "figures": json.dumps(plain(v.figures, finite=True), sort_keys=True),
                    "message": v.message,
                }
            )
        return pd.DataFrame(rows, columns=["kind", "tier", "zone", "areas", "figures", "message"])

    def to_json(self) -> dict:
        return {
            "ok": self.ok,
            "violations": [v.to_dict() for v in self.violations],
            "counts_by_kind": {k: len(self.of_kind(k)) for k in KINDS},
            "tiers": plain(self.tiers, finite=True),
            "outliers": plain(self.outliers, finite=True),
            "notes": list(self.notes),
        }


def _fence_set(codes: np.ndarray) -> tuple[str, ...]:
    return tuple(sorted({str(c) for c in codes}))


def _first(ids: np.ndarray, limit: int = LISTED) -> tuple[str, ...]:
    return tuple(str(x) for x in ids[:limit])


def _fmt(x: float) -> str:
    x = float(x)
    if math.isfinite(x) and x == round(x):
        return f"{int(round(x)):,}"
    return f"{x:,.6g}"


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
        frame = zone_measures(areas.in_tier(t.name), graph, t, encoded[t.name], upper, parts[t.name], kinds)
        zones[t.name] = frame
        summaries[t.name] = tier_summary(areas, t, encoded[t.name], kinds, frame)
        outliers += zone_outliers(t, frame, areas.count_names)
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
