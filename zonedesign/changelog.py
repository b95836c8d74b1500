"""What a redraw (or a repair) changed, and why: changes.csv, area_changes.csv and the
summary's change figures, all from the old and new code of every area.

changes.csv has one row per new zone and one per retired code: its kind (see
`naming.zone_kinds`), the old codes behind it, areas in and out (moved areas, as
`naming.moved_areas` counts them), a reason, and published and new totals in columns
that say which is which.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from zonedesign.rules import TierRules, tier_in_fence
from zonedesign.tiers.naming import moved_areas, zone_kinds


def published_column(name: str, published: bool) -> str:
    """The 'before' column of a count: the published total, or (without previous counts)
    the old zone's total under the new counts, and named so."""
    return f"{name}_published" if published else f"{name}_old_zone_new_counts"


def _num(v: float) -> str:
    return f"{v:,.0f}" if abs(v - round(v)) < 1e-9 else f"{v:,.2f}"


def broken_rules(
    old: np.ndarray, counts: np.ndarray, count_names: Sequence[str], tier: TierRules, area_fence: np.ndarray
) -> dict[str, str]:
    """Old code -> the bounds its zone breaks under the new counts (the tier's bounds in the
    zone's fence), with figures ("households 31 below floor 50"); old zones meeting every
    bound are left out."""
    old = np.asarray(old, dtype=object)
    have = old != ""
    if not have.any():
        return {}
    sums = pd.DataFrame(counts[have], columns=list(count_names)).groupby(old[have]).sum()
    fence_of = pd.Series(np.asarray(area_fence, dtype=object)[have]).groupby(old[have]).first()
    out: dict[str, str] = {}
    for code, row in sums.iterrows():
        here = tier_in_fence(tier, str(fence_of[code]))
        parts = []
        for c in count_names:
            v = float(row[c])
            if c in here.min and v < here.min[c] - 1e-9:
                parts.append(f"{c} {_num(v)} below floor {_num(here.min[c])}")
            if c in here.max and v > here.max[c] + 1e-9:
                parts.append(f"{c} {_num(v)} above ceiling {_num(here.max[c])}")
        if parts:
            out[str(code)] = "; ".join(parts)
    return out


def _below_floor(text: str) -> bool:
    return "below floor" in text


def change_table(
    tiers: Sequence[TierRules],
    area_fence: np.ndarray,
    counts: np.ndarray,
    count_names: Sequence[str],
    previous: Mapping[str, np.ndarray],
    lookup: Mapping[str, np.ndarray],
    *,
    before_totals: Mapping[str, pd.DataFrame] | None = None,
    retired: Mapping[str, Mapping[str, list[str]]] | None = None,
    locked: Mapping[str, set[str]] | None = None,
) -> pd.DataFrame:
    """changes.csv: one row per new zone and per retired code, tier by tier.

    before_totals[tier]: published totals per old code (index) and count column; when
    None, the old zones are summed under the new counts and the columns say so.
    retired[tier]: old code -> successor codes, largest share first (from the code
    assignment); worked out from the areas when not given. locked[tier]: codes kept by
    agreement, whose reason is "locked".
    """
    published = before_totals is not None
    rows: list[dict] = []
    area_fence = np.asarray(area_fence, dtype=object)
    for tier in tiers:
        old = np.asarray(previous[tier.name], dtype=object)
        new = np.asarray(lookup[tier.name], dtype=object)
        moved = moved_areas(old, new)
        broken = broken_rules(old, counts, count_names, tier, area_fence)
        kinds = zone_kinds(old, new)
        frame = pd.DataFrame({"old": old, "new": new, "fence": area_fence, "moved": moved})
        if published:
            before = before_totals[tier.name]
        else:
            have = old != ""
            before = pd.DataFrame(counts[have], columns=list(count_names)).groupby(old[have]).sum()
        after = pd.DataFrame(counts, columns=list(count_names)).groupby(new).sum()
        flows = frame[frame["old"] != ""].groupby(["old", "new"]).size().rename("n").reset_index()
        into = {z: part for z, part in flows.groupby("new")}
        out_of = {q: part for q, part in flows.groupby("old")}
        fence_of = frame.groupby("new")["fence"].first()
        fence_of_old = frame[frame["old"] != ""].groupby("old")["fence"].first()
        n_new_areas = frame[frame["old"] == ""].groupby("new").size()
        old_codes = set(frame.loc[frame["old"] != "", "old"].tolist())
        new_codes = set(new.tolist())
        heir_of = {z: z for z in new_codes if z in old_codes}
        locked_here = set((locked or {}).get(tier.name, set()))
        for z in sorted(new_codes):
            part = into.get(z, pd.DataFrame(columns=["old", "new", "n"]))
            kind = kinds.get(z, "new")
            areas_in = int(part.loc[part["old"] != z, "n"].sum())
            areas_out = int(out_of[z].loc[out_of[z]["new"] != z, "n"].sum()) if z in out_of else 0
            reason = _zone_reason(z, kind, part, out_of.get(z), broken, heir_of, int(n_new_areas.get(z, 0)),
                                  locked_here, tier_index=list(tiers).index(tier), tiers=tiers)
            row = {
                "tier": tier.name, "fence": str(fence_of.get(z, "")), "kind": kind,
                "old_codes": ";".join(sorted(part["old"].astype(str))), "new_code": z,
                "areas_in": areas_in, "areas_out": areas_out, "areas_new": int(n_new_areas.get(z, 0)),
                "successors": "", "reason": reason,
            }
            for c in count_names:
                row[published_column(c, published)] = float(before[c].get(z, np.nan)) if z in old_codes else np.nan
                row[f"{c}_new"] = float(after[c].get(z, 0.0))
            rows.append(row)
        gone = sorted(old_codes - new_codes)
        for q in gone:
            dest = out_of[q].sort_values(["n", "new"], ascending=[False, True])
            succ = list((retired or {}).get(tier.name, {}).get(q, [])) or dest["new"].astype(str).tolist()
            spread = ", ".join(f"{d} ({int(n)})" for d, n in zip(dest["new"], dest["n"]))
            if q in broken:
                reason = f"{broken[q]}; its areas went to {spread}"
            else:
                causes = sorted({str(d) for d in dest["new"] if d in broken})
                reason = f"its areas went to {spread}"
                if causes:
                    reason = f"joined with broken zone {', '.join(causes)}; " + reason
            row = {
                "tier": tier.name, "fence": str(fence_of_old.get(q, "")), "kind": "retired",
                "old_codes": q, "new_code": "", "areas_in": 0, "areas_out": int(dest["n"].sum()),
                "areas_new": 0, "successors": ";".join(succ), "reason": reason,
            }
            for c in count_names:
                row[published_column(c, published)] = float(before[c].get(q, np.nan))
                row[f"{c}_new"] = np.nan
            rows.append(row)
    return pd.DataFrame(rows)


def _zone_reason(
    z: str,
    kind: str,
    part: pd.DataFrame,
    gave: pd.DataFrame | None,
    broken: Mapping[str, str],
    heir_of: Mapping[str, str],
    n_new: int,
    locked: set[str],
    *,
    tier_index: int,
    tiers: Sequence[TierRules],
) -> str:
    """Why a new zone is as it is, in words with figures."""
    if z in locked:
        # a zone fixed by agreement: kept exactly, whatever its counts
        return "locked"
    if kind == "kept":
        return "meets every bound; unchanged" if z not in broken else f"kept although {broken[z]}"
    parts: list[str] = []
    own = z if z in heir_of else None
    if own is not None and own in broken:
        parts.append(broken[own])
    for q, n in sorted(zip(part["old"].astype(str), part["n"].astype(int)), key=lambda x: (-x[1], x[0])):
        if q == own:
            continue
        if own is None and q == _base(part):
            parts.append(f"part of {q}" + (f", which broke: {broken[q]}" if q in broken else ""))
        elif q in broken:
            parts.append(f"neighbour of broken zone {q}, took {n} area{'s' * (n != 1)}")
        else:
            parts.append(f"took {n} area{'s' * (n != 1)} from {q}")
    if n_new:
        parts.append(f"took {n_new} area{'s' * (n_new != 1)} new since the previous lookup")
    if gave is not None and own is not None:
        for d, n in sorted(zip(gave["new"].astype(str), gave["n"].astype(int)), key=lambda x: (-x[1], x[0])):
            if d == own:
                continue
            if d in broken and _below_floor(broken[d]):
                parts.append(f"rebalanced: moved {n} area{'s' * (n != 1)} to meet floors of {d}")
            else:
                parts.append(f"gave {n} area{'s' * (n != 1)} to {d}")
    if not parts or all(p.startswith(("took", "gave")) for p in parts):
        cause = (
            f"its {tiers[tier_index - 1].name} zones changed"
            if tier_index > 0
            else "reshaped while mending broken zones nearby"
        )
        parts.insert(0, cause)
    return "; ".join(parts)


def _base(part: pd.DataFrame) -> str:
    top = part.sort_values(["n", "old"], ascending=[False, True])
    return str(top["old"].iloc[0]) if len(top) else ""


def area_changes(ids: np.ndarray, tiers: Sequence[str], previous: Mapping[str, np.ndarray],
                 lookup: Mapping[str, np.ndarray]) -> pd.DataFrame:
    """area_changes.csv: area, tier, old code, new code for every area whose code changed
    in a tier (old code empty for an area new since the previous lookup)."""
    frames = []
    ids = np.asarray(ids, dtype=object)
    for name in tiers:
        old = np.asarray(previous[name], dtype=object)
        old = np.array(["" if v is None else str(v) for v in old], dtype=object)
        new = np.asarray(lookup[name], dtype=object)
        hit = old != new
        frames.append(pd.DataFrame({"area": ids[hit], "tier": name, "old_code": old[hit], "new_code": new[hit]}))
    cols = ["area", "tier", "old_code", "new_code"]
    return pd.concat(frames, ignore_index=True)[cols] if frames else pd.DataFrame(columns=cols)


def change_figures(changes: pd.DataFrame, tiers: Sequence[str], previous: Mapping[str, np.ndarray],
                   lookup: Mapping[str, np.ndarray], policy: str) -> dict:
    """Per tier: previous zones, zones kept, areas moved (`naming.moved_areas`), areas
    new, codes retired, and zones by kind of change."""
    out = {}
    for name in tiers:
        c = changes[changes["tier"] == name] if len(changes) else changes
        prev = np.asarray(previous[name], dtype=object)
        n_prev = len(set(prev[prev != ""].tolist()))
        kept = int((c["kind"] == "kept").sum()) if len(c) else 0
        out[name] = {
            "code_policy": policy,
            "previous_zones": n_prev,
            "kept": kept,
            "share_unchanged": kept / n_prev if n_prev else 1.0,
            "share_changed": 1 - kept / n_prev if n_prev else 0.0,
            "areas_moved": int(moved_areas(prev, lookup[name]).sum()),
            "areas_new": int((prev == "").sum()),
            "codes_retired": int((c["kind"] == "retired").sum()) if len(c) else 0,
            "kinds": {k: int(v) for k, v in c["kind"].value_counts().sort_index().items()} if len(c) else {},
        }
    return out
