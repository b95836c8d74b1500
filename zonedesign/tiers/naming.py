"""The naming of zones: a design's zone ids, and codes through a redraw (which new zone
carries an old code on, the readable codes of new zones, the one count of moved areas, and
the kind of each change).

A design names each zone fence-tier-number (`zone_id`), numbered per fence in the order
the fence's labelling first meets its zones; a locked zone keeps its code, and no other
zone is given it (`design_ids`).

Code policies (`[redraw] codes`):
- "successor" (the default): each old code passes to the one new zone holding the largest
  share of the old zone's published count (ties: most areas, then the lowest new zone);
  a new zone claimed by several old codes takes the one whose share inside it is largest
  (ties: most areas, then the lowest code); the other claimants retire;
- "fresh": only a zone holding exactly the areas of an old zone keeps that code.
Every other zone gets a new code: the next free number in its fence and tier, after every
code the previous lookup holds there, so a retired code is never handed out again.

An area moved is an area whose zone's code changed (areas new since the previous lookup
are counted apart, never as moved): `moved_areas` is the one definition every figure uses.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

POLICIES = ("successor", "fresh")
KINDS = ("kept", "reshaped", "split", "merged", "merged-and-split", "new", "retired")
_NUMBERED = re.compile(r"^(.*?)(\d+)$")


@dataclass
class Succession:
    codes: np.ndarray  # code of each new zone (object array of str)
    heir: dict[str, int]  # old code -> the new zone carrying it on
    retired: dict[str, list[str]]  # old code -> codes of the new zones its areas went to, largest share first


def zone_id(fence: str, tier: str, number: int) -> str:
    return f"{fence}-{tier}-{number:04d}"


def design_ids(tier: str, zone_fence: np.ndarray, locked_codes: list[str]) -> np.ndarray:
    """Ids of a design's zones: zone_fence lists each zone's fence, the searched zones of
    each fence together in fence order, then the locked zones (one per code of
    `locked_codes`, in that order), which keep their codes."""
    taken = set(locked_codes)
    ids: list[str] = []
    free = len(zone_fence) - len(locked_codes)
    number = 0
    for z in range(free):
        fence = str(zone_fence[z])
        if z == 0 or fence != str(zone_fence[z - 1]):
            number = 0
        number += 1
        while zone_id(fence, tier, number) in taken:  # a locked zone holds that code
            number += 1
        ids.append(zone_id(fence, tier, number))
    ids.extend(locked_codes)
    return np.array(ids, dtype=object)


def overlaps(old: np.ndarray, zone: np.ndarray, weight: np.ndarray, size: np.ndarray | None = None) -> pd.DataFrame:
    """Rows (old, zone, weight, areas) for every pair of an old code and a new zone that
    share items; items without an old code ("") are left out."""
    old = np.asarray(old, dtype=object)
    size = np.ones(old.shape[0]) if size is None else np.asarray(size, dtype=np.float64)
    frame = pd.DataFrame({"old": old, "zone": np.asarray(zone, dtype=np.int64), "weight": weight, "areas": size})
    frame = frame[frame["old"] != ""]
    return frame.groupby(["old", "zone"], sort=True, as_index=False)[["weight", "areas"]].sum()


def heirs(
    old: np.ndarray, zone: np.ndarray, weight: np.ndarray, policy: str, size: np.ndarray | None = None
) -> dict[str, int]:
    """Old code -> the new zone that carries it on, under `policy`.

    old: old code per item ("" for none); zone: new zone index per item; weight: the
    item's published count (the share that decides); size: areas per item (1 each when
    None). Each new zone carries at most one old code.
    """
    if policy not in POLICIES:
        raise ValueError(f"code policy must be one of {', '.join(POLICIES)}, not {policy!r}")
    ov = overlaps(old, zone, weight, size)
    if ov.empty:
        return {}
    if policy == "fresh":
        return _exact(ov)
    # each old code's candidate: the new zone holding most of its published count
    cand = ov.sort_values(["old", "weight", "areas", "zone"], ascending=[True, False, False, True], kind="stable")
    cand = cand.drop_duplicates("old")
    # a new zone claimed by several old codes takes the one with the largest share in it
    win = cand.sort_values(["zone", "weight", "areas", "old"], ascending=[True, False, False, True], kind="stable")
    win = win.drop_duplicates("zone")
    return {str(o): int(z) for o, z in zip(win["old"], win["zone"])}


def _exact(ov: pd.DataFrame) -> dict[str, int]:
    """Old codes whose new zone holds exactly the old zone's items and nothing else."""
    per_old = ov.groupby("old")["zone"].nunique()
    per_zone = ov.groupby("zone")["old"].nunique()
    whole = ov[ov["old"].map(per_old).eq(1) & ov["zone"].map(per_zone).eq(1)]
    return {str(o): int(z) for o, z in zip(whole["old"], whole["zone"])}


def exact_only(heir: dict[str, int], old: np.ndarray, zone: np.ndarray) -> dict[str, int]:
    """Drop heirs whose zone also holds items new since the previous lookup ("fresh": such a
    zone changed)."""
    old = np.asarray(old, dtype=object)
    zone = np.asarray(zone, dtype=np.int64)
    with_new = set(zone[old == ""].tolist())
    return {q: z for q, z in heir.items() if z not in with_new}


def assign_codes(
    old: np.ndarray,
    zone: np.ndarray,
    zone_fence: np.ndarray,
    tier: str,
    weight: np.ndarray,
    policy: str,
    *,
    known: set[str] | None = None,
) -> Succession:
    """Codes of the new zones of one tier, from the areas' old codes.

    old: old code per area ("" for areas new since the previous lookup); zone: new zone
    index per area (0..k-1); zone_fence: fence of each new zone; weight: published count
    per area; known: every code the previous lookup holds in this tier (never reused).
    """
    old = np.asarray(old, dtype=object)
    zone = np.asarray(zone, dtype=np.int64)
    k = int(np.asarray(zone_fence).shape[0])
    heir = heirs(old, zone, weight, policy)
    if policy == "fresh":
        heir = exact_only(heir, old, zone)
    codes = np.full(k, "", dtype=object)
    for q, z in heir.items():
        codes[z] = q
    taken = set(known or ()) | set(old[old != ""].tolist())
    fence_of_area = np.asarray(zone_fence, dtype=object)[zone]
    patterns: dict[str, tuple[str, int] | None] = {}
    last: dict[str, int] = {}  # the number given last in each fence: the next search starts after it
    for z in range(k):
        if codes[z] == "":
            f = str(zone_fence[z])
            if f not in patterns:
                patterns[f] = code_pattern(old[(fence_of_area == zone_fence[z]) & (old != "")])
            codes[z], last[f] = next_code(f, tier, patterns[f], taken, after=last.get(f))
            taken.add(codes[z])
    retired: dict[str, list[str]] = {}
    ov = overlaps(old, zone, weight)
    for q, part in ov.groupby("old", sort=True):
        if q in heir:
            continue
        part = part.sort_values(["weight", "areas", "zone"], ascending=[False, False, True], kind="stable")
        retired[str(q)] = [str(codes[z]) for z in part["zone"]]
    return Succession(codes=codes, heir=heir, retired=retired)


def code_pattern(fence_codes: np.ndarray) -> tuple[str, int] | None:
    """The readable pattern of a fence's old codes: (prefix, digits) of the most common
    prefix followed by a number, or None when no code ends in a number."""
    vals, counts = np.unique(np.asarray(fence_codes, dtype=object).astype(str), return_counts=True)
    per_prefix: dict[str, list[int]] = {}
    for c, n in zip(vals.tolist(), counts.tolist()):
        m = _NUMBERED.match(c)
        if m:
            entry = per_prefix.setdefault(m.group(1), [0, 0])
            entry[0] += n
            entry[1] = max(entry[1], len(m.group(2)))
    if not per_prefix:
        return None
    prefix = max(sorted(per_prefix), key=lambda q: per_prefix[q][0])
    return prefix, per_prefix[prefix][1]


def next_code(
    fence: str, tier: str, pattern: tuple[str, int] | None, taken: set[str], *, after: int | None = None
) -> tuple[str, int]:
    """A readable new code and its number: the fence's pattern (`code_pattern`) with the
    next free number after the highest any taken code of that pattern holds (or after
    `after`, the number this fence was given last), else fence-tier-0001 onwards."""
    if pattern is not None:
        prefix, width = pattern

        def make(n: int) -> str:
            return f"{prefix}{n:0{width}d}"
    else:
        prefix = zone_id(fence, tier, 0)[:-4]

        def make(n: int) -> str:
            return zone_id(fence, tier, n)
    if after is None:
        after = 0
        for c in taken:
            if c.startswith(prefix) and c[len(prefix):].isdigit():
                after = max(after, int(c[len(prefix):]))
    n = after + 1
    while make(n) in taken:
        n += 1
    return make(n), n


def moved_areas(old: np.ndarray, new: np.ndarray) -> np.ndarray:
    """Areas moved: an old code ("" = none) and a different code now. The one definition
    behind every count of moved areas (summary, changes.csv, report, benchmark, bound)."""
    old = np.asarray(old, dtype=object)
    new = np.asarray(new, dtype=object)
    return (old != "") & (old != new)


def unit_moves(
    previous: np.ndarray, labels: np.ndarray, weight: np.ndarray, size: np.ndarray, policy: str
) -> int:
    """Areas a fence's labelling moves under `policy`, counted on its units: previous code
    per unit (-1: none), new label per unit, published count and areas per unit."""
    prev = np.asarray(previous, dtype=np.int64)
    old = np.where(prev >= 0, prev.astype(str), "").astype(object)
    labels = np.asarray(labels, dtype=np.int64)
    heir = heirs(old, labels, weight, policy, size)
    if policy == "fresh":
        heir = exact_only(heir, old, labels)
    carried = np.full(int(labels.max()) + 1 if labels.size else 0, "", dtype=object)
    for q, z in heir.items():
        carried[z] = q
    moved = (old != "") & (carried[labels] != old)
    return int(np.asarray(size, dtype=np.float64)[moved].sum())


def zone_kinds(old: np.ndarray, new: np.ndarray) -> dict[str, str]:
    """Kind of change of each new zone (by code) from its areas' old and new codes.

    kept: exactly the areas of one old zone; new: no area had an old zone; merged: holds
    most of two or more old zones, each whole; merged-and-split: holds most of two or more
    old zones, some only in part, or is built from parts of two or more old zones (each
    giving at least a quarter of its areas) without most of any; split: holds a part (less
    than half) of its main old zone, or the main part of an old zone that is the main
    source of another new zone too; reshaped: the rest (most of one old zone, with areas
    moved in or out).
    """
    old = np.asarray(old, dtype=object)
    new = np.asarray(new, dtype=object)
    frame = pd.DataFrame({"old": old, "new": new})
    size_old = frame[frame["old"] != ""].groupby("old").size()
    size_new = frame.groupby("new").size()
    pairs = frame[frame["old"] != ""].groupby(["new", "old"]).size().rename("n").reset_index()
    # the old zone giving each new zone most of its areas, and which old zones are divided
    base = pairs.sort_values(["new", "n", "old"], ascending=[True, False, True]).drop_duplicates("new")
    base_of = dict(zip(base["new"], base["old"]))
    divided = base["old"].value_counts()
    out: dict[str, str] = {}
    by_new = {z: part for z, part in pairs.groupby("new")}
    for z in size_new.index:
        part = by_new.get(z)
        if part is None or part.empty:
            out[str(z)] = "new"
            continue
        n_old_areas = int(part["n"].sum())
        if len(part) == 1 and n_old_areas == size_new[z] and size_old[part["old"].iloc[0]] == n_old_areas:
            out[str(z)] = "kept"
            continue
        most = part[part["n"] * 2 > part["old"].map(size_old)]
        if len(most) >= 2:
            whole = (most["n"].to_numpy() == most["old"].map(size_old).to_numpy()).all()
            out[str(z)] = "merged" if whole else "merged-and-split"
        elif len(most) == 0 and int((part["n"] * 4 >= n_old_areas).sum()) >= 2:
            out[str(z)] = "merged-and-split"
        elif len(most) == 0 or divided.get(base_of[z], 0) >= 2:
            # a piece of its main old zone, or that zone's main part where it was divided
            out[str(z)] = "split"
        else:
            out[str(z)] = "reshaped"
    return out
