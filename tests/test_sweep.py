"""Sweeping threshold rules: one design per rule variant, measured side by side."""

from __future__ import annotations

import pytest
from hierarchy_support import two_tier_rules, voronoi_instance

from zonedesign.errors import InputError
from zonedesign.sweep import VariantTask, parse_vary, run_variant, variants


def test_raising_a_floor_step_by_step_never_gives_more_zones():
    areas, graph = voronoi_instance(200, seed=9, n_fences=2)
    # homogeneity alone rewards small zones, so the floor is what limits their number
    rules = two_tier_rules(target1=None, weights={"size": 0.0, "homogeneity": 1.0, "compactness": 0.2, "stability": 0.0})
    vary = parse_vary(["tier.1.min.households=40,80,160"], rules)
    rows = [run_variant(VariantTask(v, areas, graph, None)) for v in variants(rules, vary)]
    zones = [r["zones.block"] for r in sorted(rows, key=lambda r: r["tier.1.min.households"])]
    # more households per zone at least means fewer zones (common practice)
    assert zones == sorted(zones, reverse=True), zones
    assert zones[0] > zones[-1]
    for r in rows:
        assert r["audit_ok"] or r["bound_breaks"] == r["fences_infeasible"] > 0


def test_every_combination_of_two_keys_is_one_variant():
    areas, graph = voronoi_instance(60, seed=2, n_fences=1)
    rules = two_tier_rules()
    vary = parse_vary(["tier.1.min.households=30,40", "tier.block.target.households=100,125,150"], rules)
    vs = variants(rules, vary)
    assert len(vs) == 6
    assert {v.values for v in vs} == {
        (("tier.1.min.households", a), ("tier.block.target.households", b))
        for a in ("30", "40") for b in ("100", "125", "150")
    }
    assert vs[-1].rules.tiers[0].min["households"] == 40


@pytest.mark.parametrize(
    "item, word",
    [
        ("tier.9.min.households=1,2", "tier.9"),
        ("tier.1.min.nosuchcount=1", "nosuchcount"),
        ("tier.1.min.households", "KEY=V1,V2"),
        ("=1,2", "empty"),
        ("tier.1.min.households=", "no values"),
    ],
)
def test_a_bad_vary_item_is_refused_naming_the_key(item, word):
    rules = two_tier_rules()
    with pytest.raises(InputError) as err:
        parse_vary([item], rules)
    assert word in str(err.value)
