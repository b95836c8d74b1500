"""Locked zones: zones fixed by agreement, kept exactly by design, redraw and audit.

A lock file (`[lock] file`, CSV) has a column `area` (area id) and one column per locked
tier holding the locked zone's code; an empty cell leaves that area free in that tier.
Every locked zone is checked before anything runs: its areas exist, lie in one fence, are
contiguous, and nest in any locked zone of an upper tier. The tier runner then leaves the
locked units out of the search, cuts the graph along the edges of upper-tier locked zones
(so that free zones below never straddle them) and gives each locked zone its own code.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from zonedesign.errors import InputError
from zonedesign.records import Areas, Graph
from zonedesign.rules import TierRules

AREA_COLUMN = "area"
LIST = 5


@dataclass(frozen=True)
class Locks:
    """Locked zone code per area for each locked tier ("" where the area is free)."""

    codes: dict[str, np.ndarray] = field(default_factory=dict)
    source: Path | None = None

    def __bool__(self) -> bool:
        return any((c != "").any() for c in self.codes.values())

    def of(self, tier: str, n: int) -> np.ndarray:
        return self.codes.get(tier, np.full(n, "", dtype=object))

    def zones(self, tier: str) -> dict[str, np.ndarray]:
        """Locked zone code -> area positions, for one tier."""
        codes = self.codes.get(tier)
        if codes is None:
            return {}
        return {str(z): np.flatnonzero(codes == z) for z in sorted(set(codes.tolist()) - {""})}


def read_locks(path: str | Path, areas: Areas, graph: Graph, tiers: Sequence[TierRules]) -> Locks:
    """Read and check a lock file; one InputError lists every problem found."""
    path = Path(path)
    where = path.name
    if not path.is_file():
        raise InputError(f"{where}: lock file not found ({path})")
    try:
        frame = pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8-sig")
    except Exception as exc:  # pandas raises many kinds
        raise InputError(f"{where}: cannot read the lock file ({str(exc).splitlines()[0]})") from exc
    names = [t.name for t in tiers]
    problems: list[str] = []
    if AREA_COLUMN not in frame:
        raise InputError(f"{where}: no column {AREA_COLUMN!r} (the area id); columns: {', '.join(frame.columns)}")
    unknown = [c for c in frame.columns if c != AREA_COLUMN and c not in names]
    if unknown:
        problems.append(f"{where}: column(s) {', '.join(map(repr, unknown))} name no tier (tiers: {', '.join(names)})")
    ids = frame[AREA_COLUMN].str.strip().to_numpy(dtype=object)
    position = {str(a): k for k, a in enumerate(areas.ids.tolist())}
    rows = np.array([position.get(str(a), -1) for a in ids], dtype=np.int64)
    missing = np.flatnonzero(rows < 0)
    if missing.size:
        problems.append(f"{where}: {missing.size} area id(s) not in the areas file: {_listed(ids[missing])}")
    dup = pd.Series(ids).duplicated(keep=False).to_numpy()
    if dup.any():
        problems.append(f"{where}: area id(s) listed twice: {_listed(np.unique(ids[dup]))}")
    codes: dict[str, np.ndarray] = {}
    ok = rows >= 0
    for name in names:
        if name not in frame:
            continue
        col = np.full(areas.n, "", dtype=object)
        col[rows[ok]] = frame[name].str.strip().to_numpy(dtype=object)[ok]
        codes[name] = col
    locks = Locks(codes=codes, source=path)
    if not problems:
        problems += lock_problems(locks, areas, graph, names, where)
    if problems:
        more = len(problems) - 1
        head = problems[0] if not more else f"{problems[0]} (and {more} more problem{'s' * (more > 1)})"
        raise InputError("\n".join([head, *problems[1:]]), problems=problems)
    return locks


def lock_problems(locks: Locks, areas: Areas, graph: Graph, tier_names: Sequence[str], where: str) -> list[str]:
    """Locked zones that cross a fence, are not contiguous, or straddle an upper lock."""
    out = []
    for t, name in enumerate(tier_names):
        fence = areas.in_tier(name).fence.astype(str)
        for code, members in locks.zones(name).items():
            fences = sorted(set(fence[members].tolist()))
            if len(fences) > 1:
                out.append(
                    f"{where}: locked zone {code!r} of tier {name!r} crosses fences {', '.join(fences)}; "
                    "a zone never crosses a fence"
                )
                continue
            pieces = components(graph, members)
            if len(pieces) > 1:
                shown = " | ".join(_listed(areas.ids[p], 3) for p in pieces[:3])
                out.append(
                    f"{where}: locked zone {code!r} of tier {name!r} is not contiguous: {len(pieces)} pieces "
                    f"({shown})"
                )
                continue
            for upper in tier_names[t + 1 :]:
                above = locks.codes.get(upper)
                if above is None:
                    continue
                held = sorted(set(above[members].tolist()))
                if len(held) > 1:
                    shown = ", ".join(repr(h) if h else "(free)" for h in held)
                    out.append(
                        f"{where}: locked zone {code!r} of tier {name!r} straddles the tier {upper!r} zones "
                        f"{shown}; a lower zone must lie inside one upper zone"
                    )
    return out


def components(graph: Graph, members: np.ndarray) -> list[np.ndarray]:
    """Connected pieces of the areas `members` in `graph` (their own edges only)."""
    inside = np.zeros(graph.n, dtype=bool)
    inside[members] = True
    seen = np.zeros(graph.n, dtype=bool)
    pieces = []
    for s in members.tolist():
        if seen[s]:
            continue
        stack, piece = [s], []
        seen[s] = True
        while stack:
            u = stack.pop()
            piece.append(u)
            for v in graph.neighbours(u).tolist():
                if inside[v] and not seen[v]:
                    seen[v] = True
                    stack.append(v)
        pieces.append(np.array(sorted(piece), dtype=np.int64))
    return sorted(pieces, key=lambda p: p[0])


def _listed(values: np.ndarray, n: int = LIST) -> str:
    vals = [repr(str(v)) for v in values[:n].tolist()]
    return ", ".join(vals) + (f" and {len(values) - n} more" if len(values) > n else "")


# ---------------------------------------------------------------- the tier runner's view


def unit_codes(area_codes: np.ndarray, of_area: np.ndarray, n_units: int) -> np.ndarray:
    """Locked zone code of each unit of a tier ("" where free); a unit's areas agree."""
    out = np.full(n_units, "", dtype=object)
    locked = area_codes != ""
    out[of_area[locked]] = area_codes[locked]
    return out


def upper_key(locks: Locks, upper: Sequence[str], of_area: np.ndarray, n_units: int) -> np.ndarray:
    """Per unit, the codes of the upper-tier locked zones holding it ("" where none)."""
    key = np.full(n_units, "", dtype=object)
    for name in upper:
        if name in locks.codes:
            key = key + "|" + unit_codes(locks.codes[name], of_area, n_units)
    return key


def cut_graph(graph: Graph, key: np.ndarray) -> Graph:
    """Drop the edges between units of different keys (the rims of upper locked zones)."""
    i, j, w = graph.edges()
    keep = key[i] == key[j]
    if keep.all():
        return graph
    return Graph.from_edges(graph.n, i[keep], j[keep], w[keep])


def lock_breaks(locks: Locks, lookup: Mapping[str, np.ndarray], areas: Areas) -> list[dict]:
    """Locked zones the lookup does not keep exactly: other members or another code."""
    out = []
    for name in locks.codes:
        if name not in lookup:
            continue
        given = np.asarray(lookup[name], dtype=object).astype(str)
        for code, members in locks.zones(name).items():
            have = np.flatnonzero(given == code)
            if np.array_equal(have, members):
                continue
            lost = np.setdiff1d(members, have)
            extra = np.setdiff1d(have, members)
            parts = []
            if lost.size:
                parts.append(f"{lost.size} of its areas elsewhere ({_listed(areas.ids[lost], 3)})")
            if extra.size:
                parts.append(f"{extra.size} other area(s) in it ({_listed(areas.ids[extra], 3)})")
            out.append(
                {
                    "kind": "lock",
                    "tier": name,
                    "zone": code,
                    "message": f"locked zone {code} of tier {name} is not kept: {'; '.join(parts)}",
                }
            )
    return out
