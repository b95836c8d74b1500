"""Per-zone and per-tier measures the audit reports (reported, not judged).

Counts, deviation from target, Polsby-Popper, and homogeneity per attribute: intra-area
correlation (Tranmer & Steel 1998) for count-like attributes, weighted within-zone
variance otherwise, computed for all zones of a tier at once.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from zonedesign import measures
from zonedesign.errors import InputError
from zonedesign.records import Areas, Graph
from zonedesign.rules import TierRules
from zonedesign.verify.labels import TierLabels, tier_bounds


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


def zone_measures(
    areas: Areas,
    graph: Graph,
    tier: TierRules,
    tl: TierLabels,
    upper: TierLabels | None,
    comp: np.ndarray,
    kinds: dict[str, str],
) -> pd.DataFrame:
    """One row per zone: areas, fences, parent, parts, counts, deviations, shape and
    homogeneity, every column computed for all zones at once."""
    k = tl.k
    # areas without a zone go to a dummy zone k so the per-zone sums stay aligned
    lab = np.where(tl.codes >= 0, tl.codes, k)
    valid = tl.codes >= 0
    bounds = tier_bounds(tier, areas.count_names)
    frame = pd.DataFrame({"zone": tl.names.astype(str)})
    frame["areas"] = np.bincount(lab, minlength=k + 1)[:k]
    frame["fences"] = _joined(tl.codes[valid], areas.fence.astype(str)[valid], k)
    if upper is not None:
        has = valid & (upper.codes >= 0)
        frame["parent"] = _joined(tl.codes[has], upper.names[upper.codes[has]].astype(str), k)
    pairs = np.unique(np.stack([tl.codes[valid], comp[valid]], axis=1), axis=0)
    frame["parts"] = np.bincount(pairs[:, 0], minlength=k)[:k] if pairs.size else np.zeros(k, dtype=np.int64)
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
            frame[f"var_{name}"] = weighted_variance(x, areas.weight.astype(np.float64), lab, k)
        else:
            trait, total = _traits(areas, name, kind)
            frame[f"rho_{name}"] = intra_area_correlation_by_zone(trait, total, lab, k)
    return frame


def _joined(codes: np.ndarray, values: np.ndarray, k: int) -> list[str]:
    """Per zone 0..k-1: its distinct values, sorted and joined by ";" ("" for none)."""
    if codes.size == 0:
        return [""] * k
    pairs = pd.DataFrame({"z": codes, "v": values}).drop_duplicates().sort_values(["z", "v"], kind="stable")
    joined = pairs.groupby("z", sort=True)["v"].agg(";".join)
    return joined.reindex(np.arange(k), fill_value="").tolist()


def weighted_variance(x: np.ndarray, w: np.ndarray, lab: np.ndarray, k: int) -> np.ndarray:
    """Weighted within-zone variance of x per zone 0..k-1 (NaN where a zone weighs nothing);
    lab may hold k for areas without a zone."""
    W = np.bincount(lab, weights=w, minlength=k + 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.bincount(lab, weights=w * x, minlength=k + 1) / W
        var = np.bincount(lab, weights=w * (x - mean[lab]) ** 2, minlength=k + 1) / W
    return np.where(W > 0, var, np.nan)[:k]


def intra_area_correlation_by_zone(trait: np.ndarray, total: np.ndarray, lab: np.ndarray, k: int) -> np.ndarray:
    """`measures.intra_area_correlation` of every zone's areas at once (Tranmer & Steel 1998).

    Per zone z the groups are its areas with a positive total: rho = (F - 1) / (F + n0 - 1)
    from the one-way ANOVA F of the unit-level 0/1 data, n0 the adjusted mean group size;
    NaN for fewer than two groups or no more units than groups, 1 where no unit varies
    inside its group.
    """
    trait = np.asarray(trait, dtype=np.float64)
    total = np.asarray(total, dtype=np.float64)
    keep = total > 0
    z, trait, total = lab[keep], trait[keep], total[keep]
    size = k + 1

    def per_zone(values: np.ndarray) -> np.ndarray:
        return np.bincount(z, weights=values, minlength=size)

    g = np.bincount(z, minlength=size).astype(np.float64)
    N = per_zone(total)
    p = trait / total
    with np.errstate(invalid="ignore", divide="ignore"):
        pbar = per_zone(trait) / N
        ssb = per_zone(total * (p - pbar[z]) ** 2)
        ssw = per_zone(trait * (1 - p))
        msb = ssb / (g - 1)
        msw = ssw / (N - g)
        F = msb / msw
        n0 = (N - per_zone(total**2) / N) / (g - 1)
        rho = (F - 1.0) / (F + n0 - 1.0)
    rho = np.where(msw == 0, 1.0, rho)
    rho = np.where((g < 2) | (N <= g), np.nan, rho)
    return rho[:k]


def tier_summary(
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


def zone_outliers(tier: TierRules, frame: pd.DataFrame, count_names: Sequence[str]) -> list[dict]:
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
