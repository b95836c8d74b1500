"""baseline: homogeneity of zonedesign's zones against Ward clustering with contiguity.

scikit-learn's AgglomerativeClustering(linkage="ward", connectivity=rook adjacency) is the
textbook contiguity-constrained homogeneity clustering. Within each fence it is fitted on
the same standardised attributes the design used, with the number of zones the design made
in that fence, so both partition the same areas into the same number of zones.

Measured per fence and tier, on the same Problem the hierarchy hands the search:
- weighted within-zone sum of squares (the homogeneity cost of `measures.zone_costs`,
  "ssd": sum_i w_i ||x_i - xbar_Z||^2, weights the population scaled to mean 1);
- the unweighted sum of squares (what Ward itself minimises), for reference;
- zones breaking a bound, and zones not contiguous.

Data: NY8 census tracts (open data, r-cran-spdata NY8_utm18.shp; fence = county, one tier
with POP8 bounds letting zones hold about 3-6 tracts) and the invented demo region
(`scenarios.demo_region`, its three-tier rules, fence = district).

Two designs per dataset: with the rules' own weights (size, homogeneity and compactness
all count), and with homogeneity alone (size and compactness weights 0), which asks the
engine for what Ward is asked for, within the bounds.

Goal: zonedesign's weighted sum of squares no worse than Ward's, with every bound met.
"""

from __future__ import annotations

import math
import re
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np

from benchmarks.common import md_table, read_ny8, warm_engine, write_results
from zonedesign import measures

NAME = "baseline"
TITLE = "baseline (homogeneity vs Ward clustering with contiguity)"

NY8_RULES = """\
[areas]
id = "AREAKEY"
counts = ["POP8"]
attributes = ["PCTOWNHOME", "PCTAGE65P", "PEXPOSURE"]
fence = "county"
weight = "POP8"

[[tier]]
name = "group"
min = { POP8 = 10000 }
max = { POP8 = 22000 }
target = { POP8 = 15000 }
weights = { size = 1.0, homogeneity = 1.0, compactness = 1.0, stability = 0.0 }

[search]
method = "annealing"
seed = 1
"""


def ward_labels(attrs: np.ndarray, graph, k: int) -> np.ndarray:
    """Ward clustering of one fence's units into k clusters, joining only rook neighbours."""
    from scipy.sparse import csr_matrix
    from sklearn.cluster import AgglomerativeClustering

    n = attrs.shape[0]
    if k >= n:
        return np.arange(n, dtype=np.int64)
    if k <= 1:
        return np.zeros(n, dtype=np.int64)
    conn = csr_matrix((np.ones(graph.indices.shape[0]), graph.indices, graph.indptr), shape=(n, n))
    with warnings.catch_warnings():
        # a fence in several pieces: scikit-learn completes the connectivity and says so
        warnings.simplefilter("ignore", UserWarning)
        model = AgglomerativeClustering(n_clusters=k, linkage="ward", connectivity=conn)
        return model.fit_predict(attrs).astype(np.int64)


def non_contiguous(graph, labels: np.ndarray) -> int:
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import connected_components

    n = graph.n
    rows = np.repeat(np.arange(n), np.diff(graph.indptr))
    same = labels[rows] == labels[graph.indices]
    m = csr_matrix((np.ones(int(same.sum())), (rows[same], graph.indices[same])), shape=(n, n))
    _, comp = connected_components(m, directed=False)
    k = int(labels.max()) + 1
    pieces = np.array([np.unique(comp[labels == z]).shape[0] for z in range(k)])
    return int((pieces > 1).sum())


def judge(problem, labels: np.ndarray) -> dict:
    """Sums of squares, breaks and contiguity of one labelling of one fence."""
    labels, k = measures.compact_labels(labels)
    costs = measures.zone_costs(problem, labels)
    sums = measures.zone_sums(labels, k, problem.counts)
    broken = measures.bound_breaks(sums, problem.bounds) > 0
    x = problem.attrs
    plain = 0.0
    for z in range(k):
        xz = x[labels == z]
        plain += float(((xz - xz.mean(axis=0)) ** 2).sum())
    return {
        "zones": k,
        "wss": float(costs["homogeneity"].sum()),
        "ss_unweighted": plain,
        "breaking_zones": int(broken.sum()),
        "non_contiguous": non_contiguous(problem.graph, labels),
        "objective": measures.score(problem, labels).total,
    }


HOMOGENEITY_ONLY = "weights = { size = 0.0, homogeneity = 1.0, compactness = 0.0, stability = 0.0 }"


def homogeneity_only(rules_path: Path) -> Path:
    """A copy of the rules file whose every tier weighs homogeneity alone."""
    text = rules_path.read_text(encoding="utf-8")
    text = re.sub(r"(?m)^weights\s*=\s*\{.*\}\s*$", HOMOGENEITY_ONLY, text)
    out = rules_path.with_name(rules_path.stem + "_homogeneity.toml")
    out.write_text(text, encoding="utf-8")
    return out


def compare(dataset: str, areas_path: Path, rules_path: Path, log=print) -> list[dict]:
    """Design with zonedesign, then fit Ward per fence and tier with the same zone counts."""
    from zonedesign import api
    from zonedesign.tiers.design import build_hierarchy
    from zonedesign.tiers.units import fence_order, fence_problem

    prep = api.prepare(areas_path, rules_path)
    t0 = time.perf_counter()
    result = build_hierarchy(prep.areas, prep.graph, prep.rules)
    design_s = time.perf_counter() - t0
    log(f"  {dataset}: designed {len(prep.rules.tiers)} tier(s) in {design_s:.1f} s")
    rows = []
    base = result.units[0]
    for t, tier in enumerate(prep.rules.tiers):
        res = result.tiers[t]
        area_zone = res.zone_of_unit[result.units[t].of_area]
        for fence in fence_order(prep.areas.fence):
            index = np.flatnonzero(base.fence == fence)
            problem = fence_problem(base, index, tier, prep.areas.count_names)
            ours = judge(problem, area_zone[index])
            t1 = time.perf_counter()
            ward = judge(problem, ward_labels(problem.attrs, problem.graph, ours["zones"]))
            ward_s = time.perf_counter() - t1
            rows.append(
                {
                    "dataset": dataset,
                    "tier": tier.name,
                    "fence": fence,
                    "areas": int(index.shape[0]),
                    "zones": ours["zones"],
                    "ward_zones": ward["zones"],
                    "wss": ours["wss"],
                    "ward_wss": ward["wss"],
                    "wss_ratio": ours["wss"] / ward["wss"] if ward["wss"] > 0 else math.nan,
                    "ss_unweighted": ours["ss_unweighted"],
                    "ward_ss_unweighted": ward["ss_unweighted"],
                    "breaking_zones": ours["breaking_zones"],
                    "ward_breaking_zones": ward["breaking_zones"],
                    "non_contiguous": ours["non_contiguous"],
                    "ward_non_contiguous": ward["non_contiguous"],
                    "objective": ours["objective"],
                    "ward_objective": ward["objective"],
                    "ward_s": ward_s,
                }
            )
    return rows


def totals(rows: list[dict]) -> list[dict]:
    out = []
    keys = []
    for r in rows:
        if (r["dataset"], r["weights"], r["tier"]) not in keys:
            keys.append((r["dataset"], r["weights"], r["tier"]))
    for ds, weights, tier in keys:
        rs = [r for r in rows if r["dataset"] == ds and r["tier"] == tier and r["weights"] == weights]
        wss = sum(r["wss"] for r in rs)
        wwss = sum(r["ward_wss"] for r in rs)
        out.append(
            {
                "dataset": ds,
                "weights": weights,
                "tier": tier,
                "fences": len(rs),
                "zones": sum(r["zones"] for r in rs),
                "wss": wss,
                "ward_wss": wwss,
                "wss_ratio": wss / wwss if wwss > 0 else math.nan,
                "fences_worse_than_ward": sum(r["wss"] > r["ward_wss"] * (1 + 1e-9) for r in rs),
                "ss_unweighted_ratio": sum(r["ss_unweighted"] for r in rs) / max(sum(r["ward_ss_unweighted"] for r in rs), 1e-12),
                "breaking_zones": sum(r["breaking_zones"] for r in rs),
                "ward_breaking_zones": sum(r["ward_breaking_zones"] for r in rs),
                "ward_share_breaking": sum(r["ward_breaking_zones"] for r in rs) / max(sum(r["ward_zones"] for r in rs), 1),
                "ward_non_contiguous": sum(r["ward_non_contiguous"] for r in rs),
                "goal_met": wss <= wwss * (1 + 1e-9) and sum(r["breaking_zones"] for r in rs) == 0,
            }
        )
    return out


def ny8_input(folder: Path) -> tuple[Path, Path]:
    import pyogrio

    gdf = read_ny8(repair=False)  # the reader repairs it, as it would any user's file
    path = folder / "ny8.gpkg"
    pyogrio.write_dataframe(gdf, path, layer="tracts", driver="GPKG")
    rules = folder / "ny8_rules.toml"
    rules.write_text(NY8_RULES, encoding="utf-8")
    return path, rules


def main(quick: bool = False, folder: Path | None = None, log=print) -> dict:
    from zonedesign.demo.scenarios import write_demo_input

    t0 = time.perf_counter()
    log(f"  engine warm-up (numba compile or cache load): {warm_engine():.1f} s")
    with tempfile.TemporaryDirectory(prefix="zd-baseline-") as tmp:
        tmp = Path(tmp)
        ny_path, ny_rules = ny8_input(tmp)
        demo = write_demo_input(tmp / "demo")
        rows = []
        for dataset, areas, rules in (("NY8", ny_path, ny_rules), ("demo region", demo["areas"], demo["rules"])):
            for label, path in (("rules' weights", rules), ("homogeneity only", homogeneity_only(rules))):
                got = compare(dataset, areas, path, log)
                for r in got:
                    r["weights"] = label
                rows += got
    tot = totals(rows)
    lines = []
    for s in tot:
        lines.append(
            f"- {s['dataset']}, {s['weights']}, tier {s['tier']}: weighted within-zone SS = **{s['wss_ratio']:.3f} x Ward's** "
            f"({s['fences_worse_than_ward']} of {s['fences']} fences worse than Ward); zonedesign zones breaking a bound: "
            f"{s['breaking_zones']}; Ward's: **{s['ward_breaking_zones']} of {s['zones']}** "
            f"({100 * s['ward_share_breaking']:.0f} %), {s['ward_non_contiguous']} not contiguous; goal "
            f"{'met' if s['goal_met'] else 'MISSED'}"
        )
    sections = [
        ("Goals", "Goal: zonedesign's weighted within-zone sum of squares <= Ward's at the same number of zones, with every bound met.\n\n" + "\n".join(lines)),
        ("Totals per dataset and tier", md_table(tot)),
        (
            "Per fence",
            md_table(
                rows,
                columns=["dataset", "weights", "tier", "fence", "areas", "zones", "wss", "ward_wss", "wss_ratio", "ss_unweighted",
                         "ward_ss_unweighted", "breaking_zones", "ward_breaking_zones", "ward_non_contiguous",
                         "objective", "ward_objective"],
            ),
        ),
        ("Method", __doc__.split("\n\n", 1)[1]),
    ]
    write_results(NAME, TITLE, rows, sections, quick=quick, seconds=time.perf_counter() - t0, folder=folder)
    return {"totals": tot, "rows": rows}
