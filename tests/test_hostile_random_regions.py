"""End to end on random regions: every design passes the independent audit, and every bound
break it leaves is explained by a proof (INFEASIBLE) or a stated failure to decide (UNKNOWN).

The checker (zonedesign.verify.checks.audit) re-derives coverage, nesting, contiguity and
fences on its own code path; the proofs come from arithmetic or a CP-SAT model of the
fence. A break with neither is the search missing a zoning that exists.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import geopandas as gpd
import numpy as np
import pyogrio
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from zonedesign import api
from zonedesign.demo.synthetic import grid_with_holes, voronoi_tessellation
from zonedesign.rules import parse_rules
from zonedesign.verify.checks import audit


def rules_text(
    block: tuple[int, int], ward: tuple[int, int], method: str, *, seed: int = 3, more: str = 'weight = "persons"'
) -> str:
    attributes = '["attr_a", "attr_b"]' if more else '["attr_a"]'
    return f"""
[areas]
id = "id"
counts = ["households", "persons"]
attributes = {attributes}
fence = "fence"
{more}

[[tier]]
name = "block"
min = {{ households = {block[0]} }}
max = {{ households = {block[1]} }}

[[tier]]
name = "ward"
min = {{ households = {ward[0]} }}
max = {{ households = {ward[1]} }}

[search]
method = "{method}"
seed = {seed}
constructions = 2
time_limit_fence = 600.0
"""


def check_design(gdf: gpd.GeoDataFrame, text: str) -> None:
    """Design `gdf` under the rules `text`; assert the audit and the proofs properties."""
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "areas.gpkg"
        pyogrio.write_dataframe(gdf, path, layer="areas", driver="GPKG")
        rules = parse_rules(text)
        res = api.design(path, rules, None, certify=False, report=False)
        prep = api.prepare(path, rules)
    checked = audit(prep.areas, prep.graph, res.lookup, list(rules.tiers))
    # coverage, nesting, contiguity and fences hold whatever the bounds
    assert [v.message for v in checked.violations if v.kind != "bounds"] == []
    proofs = {(p["tier"], p["fence"]): p for p in res.summary["proofs"]}
    for b in res.summary["bound_breaks"]:
        proof = proofs.get((b["tier"], b["fence"]))
        assert proof is not None and proof["status"] in ("INFEASIBLE", "UNKNOWN"), (
            f"tier {b['tier']} fence {b['fence']}: break {b['breaks']} without a proof: {proof}"
        )
        assert proof["text"]
    # the breaks the summary lists are exactly the zones the checker finds out of bounds
    assert {(b["tier"], b["zone"]) for b in res.summary["bound_breaks"]} == {
        (v.tier, v.zone) for v in checked.violations if v.kind == "bounds"
    }


@st.composite
def regions(draw) -> tuple[gpd.GeoDataFrame, str]:
    """A tessellation of 40-150 cells in 1-3 fences, random counts and random bounds."""
    seed = draw(st.integers(0, 10_000))
    fences = draw(st.integers(1, 3))
    if draw(st.booleans()):
        nx, ny = draw(st.integers(7, 12)), draw(st.integers(6, 12))
        gdf = grid_with_holes(nx, ny, hole_fraction=draw(st.floats(0.0, 0.2)), seed=seed, n_fences=fences)
    else:
        gdf = voronoi_tessellation(draw(st.integers(40, 150)), seed=seed, n_fences=fences)
    rng = np.random.default_rng(draw(st.integers(0, 10_000)))
    gdf["households"] = rng.integers(0, 60, len(gdf))
    gdf["persons"] = gdf["households"] * 2 + rng.integers(0, 3, len(gdf))
    lo = draw(st.integers(20, 150))
    block = (lo, lo + draw(st.integers(0, 300)))
    lo2 = draw(st.integers(lo, 600))
    ward = (lo2, lo2 + draw(st.integers(0, 1500)))
    method = draw(st.sampled_from(["annealing", "tabu"]))
    return gdf, rules_text(block, ward, method)


@settings(max_examples=6, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow])
@given(regions())
@pytest.mark.slow
def test_random_designs_pass_the_audit_and_explain_every_break(region: tuple[gpd.GeoDataFrame, str]) -> None:
    check_design(*region)


def test_a_tight_window_that_a_valid_zoning_meets_is_met_or_explained() -> None:
    # a case the property found where every search method left fence F2 (17 cells, 447
    # households) below the floor, although it has a valid zoning into four blocks of 114,
    # 111, 111 and 111 households (zonedesign.verify.exact.solve_exact proves it optimal;
    # CP-SAT in the proofs finds it too): a break there would be unexplained
    gdf = voronoi_tessellation(41, seed=522, n_fences=3)
    gdf["households"] = [38, 43, 2, 54, 29, 37, 1, 26, 54, 6, 29, 44, 28, 27, 4, 29, 47, 2, 15, 45, 28,
                         45, 43, 47, 47, 37, 23, 4, 3, 17, 59, 6, 15, 56, 2, 10, 37, 35, 52, 32, 5]
    check_design(gdf, rules_text((110, 123), (191, 1206), "annealing"))


def test_a_window_that_tabu_meets_is_met_by_annealing_or_explained() -> None:
    # a case the property found (one attribute, no weight, seed 2) where annealing left one
    # block of fence F1 (18 cells, 512 households) at 120 households, although tabu and the
    # CP-SAT model in the proofs both find valid zonings into blocks of 123-166
    gdf = voronoi_tessellation(45, seed=742, n_fences=2)
    gdf["households"] = [12, 46, 45, 51, 47, 31, 5, 42, 31, 36, 4, 6, 41, 41, 54, 49, 24, 12, 28, 39, 37, 25, 12,
                         29, 40, 38, 48, 7, 26, 57, 6, 0, 37, 56, 27, 34, 32, 23, 15, 37, 52, 30, 6, 24, 58]
    check_design(gdf, rules_text((123, 166), (141, 764), "annealing", seed=2, more=""))
