"""Sweeping threshold rules: one design per rule variant, measured side by side.

Open data: NY8 census tracts from Debian's r-cran-spdata (NY8_utm18.shp, 281 tracts with
population POP8; the first five digits of AREAKEY are the county, used as the fence).
"""

from __future__ import annotations

import json

import geopandas as gpd
import pandas as pd
import pytest
from hierarchy_support import two_tier_rules, voronoi_instance
from report_support import NY8_TIED, ny8_inputs

from zonedesign import api
from zonedesign.cli import main
from zonedesign.errors import InputError
from zonedesign.sweep import VariantTask, expand_range, parse_vary, run_variant, variants


def test_raising_a_floor_step_by_step_never_gives_more_zones():
    areas, graph = voronoi_instance(200, seed=9, n_fences=2)
    # homogeneity alone rewards small zones, so the floor is what limits their number
    rules = two_tier_rules(target1=None, weights={"size": 0.0, "homogeneity": 1.0, "compactness": 0.2, "stability": 0.0})
    vary = parse_vary(["tier.1.min.households=40,80,160"], rules)
    rows = [run_variant(VariantTask(v, areas, graph, None)).row for v in variants(rules, vary)]
    zones = [r["zones.block"] for r in sorted(rows, key=lambda r: r["tier.1.min.households"])]
    # a property of this search, not a law: with homogeneity alone it makes zones as small
    # as the floor allows, so a higher floor gives no more zones
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


@pytest.mark.parametrize(
    "text, values",
    [
        ("30:60:10", ["30", "40", "50", "60"]),  # both ends included
        ("0.1:0.3:0.1", ["0.1", "0.2", "0.3"]),  # decimal steps without float drift
        ("45", ["45"]),
    ],
)
def test_a_range_gives_every_step_from_start_to_stop(text, values):
    assert expand_range(text, "tier.1.min.households") == values


@pytest.mark.parametrize("text", ["60:30:10", "30:60:0", "30:60", "a:b:c"])
def test_a_bad_range_is_refused_naming_the_key(text):
    with pytest.raises(InputError, match="tier.1.min.households"):
        expand_range(text, "tier.1.min.households")


def test_tied_keys_move_together_and_ranges_expand_inside_them():
    rules = two_tier_rules()
    axes = parse_vary(["tier.1.min.households,tier.1.target.households=30/100,40:60:10/130:150:10"], rules)
    assert [v.values for v in variants(rules, axes)] == [
        (("tier.1.min.households", a), ("tier.1.target.households", b))
        for a, b in [("30", "100"), ("40", "130"), ("50", "140"), ("60", "150")]
    ]
    with pytest.raises(InputError, match="one value per key"):
        parse_vary(["tier.1.min.households,tier.1.target.households=30/100/5"], rules)


def test_the_same_key_twice_is_refused_naming_it():
    rules = two_tier_rules()
    name = rules.tiers[0].name
    for items in (
        ["tier.1.min.households=30", f"tier.{name}.min.households=40"],  # by number and by name
        ["tier.1.min.households=30", "tier.1.min.households=40"],
        [f"tier.1.min.households,tier.{name}.min.households=30/40"],
    ):
        with pytest.raises(InputError) as err:
            parse_vary(items, rules)
        assert "twice" in str(err.value) and "min.households" in str(err.value)


def test_each_variant_is_checked_as_a_whole_and_an_invalid_one_says_why():
    rules = two_tier_rules()
    target = int(rules.tiers[0].target["households"])  # read from the rules, not hard-coded
    axes = parse_vary([f"tier.1.min.households={target - 10},{target + 10}"], rules)
    ok, bad = variants(rules, axes)
    assert ok.rules is not None and ok.rules.tiers[0].min["households"] == target - 10
    assert bad.rules is None and "target" in bad.error
    # the same floor is valid once its target moves with it, in either order of the items
    for items in ([f"tier.1.min.households={target + 10}", f"tier.1.target.households={target + 20}"],
                  [f"tier.1.target.households={target + 20}", f"tier.1.min.households={target + 10}"]):
        (both,) = variants(rules, parse_vary(items, rules))
        assert both.rules.tiers[0].min["households"] == target + 10


# ---------------------------------------------------------------- NY8 (open data)

TIED = NY8_TIED


@pytest.fixture(scope="module")
def ny8(spdata_dir, tmp_path_factory):
    folder = tmp_path_factory.mktemp("ny8")
    ny8_inputs(spdata_dir, folder)
    return folder


@pytest.fixture(scope="module")
def tied_sweep(ny8):
    out = ny8 / "tied"
    code = main(["sweep", str(ny8 / "ny8.gpkg"), "--rules", str(ny8 / "rules.toml"), "--vary", TIED,
                 "--out", str(out), "--quiet"])
    return out, code


@pytest.mark.opendata
@pytest.mark.parametrize("order", [0, 1])
def test_ny8_a_floor_above_the_base_target_runs_once_the_target_is_varied_too(ny8, order):
    items = ["tier.2.min.POP8=20000,40000,60000", "tier.2.target.POP8=65000"]
    if order:
        items.reverse()
    res = api.sweep(ny8 / "ny8.gpkg", ny8 / "rules.toml", items, None)
    rows = res.summary["sweep"]["variants"]
    assert len(rows) == 3 and all(r["valid"] for r in rows)
    assert sorted(r["tier.2.min.POP8"] for r in rows) == [20000, 40000, 60000]


@pytest.mark.opendata
def test_ny8_a_variant_with_a_floor_above_its_target_is_reported_and_the_others_run(ny8):
    res = api.sweep(ny8 / "ny8.gpkg", ny8 / "rules.toml", ["tier.2.min.POP8=20000,40000,60000"], None)
    rows = {r["tier.2.min.POP8"]: r for r in res.summary["sweep"]["variants"]}
    assert rows[20000]["valid"] and rows[40000]["valid"]
    assert not rows[60000]["valid"] and "target" in rows[60000]["problem"]
    assert res.summary["sweep"]["invalid"][0]["name"] == "tier2-min-POP8-60000"
    assert res.exit_code == 1  # ran, but one variant's rules are broken


@pytest.mark.opendata
def test_ny8_the_same_key_by_number_and_by_name_is_exit_2_naming_it(ny8, capsys):
    code = main(["sweep", str(ny8 / "ny8.gpkg"), "--rules", str(ny8 / "rules.toml"),
                 "--vary", "tier.1.min.POP8=3000", "--vary", "tier.tier1.min.POP8=4000", "--out", str(ny8 / "twice"),
                 "--quiet"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2
    assert len(err) == 1 and "tier.tier1.min.POP8" in err[0] and "twice" in err[0]
    assert not (ny8 / "twice").exists()


@pytest.mark.opendata
def test_ny8_tied_keys_write_three_readable_variant_folders(tied_sweep):
    out, code = tied_sweep
    assert code == 1  # the 60,000 floor cannot be met in three counties
    names = sorted(p.name for p in (out / "variants").iterdir())
    assert names == [
        "tier2-min-POP8-20000_tier2-target-POP8-30000",
        "tier2-min-POP8-40000_tier2-target-POP8-50000",
        "tier2-min-POP8-60000_tier2-target-POP8-65000",
    ]
    for name in names:
        assert {p.name for p in (out / "variants" / name).iterdir()} >= {"lookup.csv", "summary.json", "zones.gpkg"}
    assert sorted(p.name for p in (out / "charts").iterdir()) == ["changes.svg", "measures.svg"]
    assert not list(out.glob("*.png")) and not list(out.glob("*.svg"))


@pytest.mark.opendata
def test_ny8_every_variant_folder_passes_the_independent_audit_but_for_proven_fences(ny8, tied_sweep):
    out, _ = tied_sweep
    totals = gpd.read_file(ny8 / "ny8.gpkg").groupby("county")["POP8"].sum()
    for folder in sorted((out / "variants").iterdir()):
        res = api.audit(ny8 / "ny8.gpkg", folder / "rules.toml", None, lookup=folder / "lookup.csv",
                        certify=False, report=False)
        kinds = {v["kind"] for v in res.summary["audit"]["violations"]}
        assert kinds <= {"bounds"}, folder.name  # nesting, contiguity and fences hold everywhere
        summary = json.loads((folder / "summary.json").read_text())
        floor = float(summary["variant"]["values"]["tier.2.min.POP8"])
        # counties whose POP8 total (r-cran-spdata NY8) is below the floor are the only failing fences
        too_small = set(totals[totals < floor].index)
        assert {p["fence"] for p in summary["proofs"]} == too_small, folder.name
        assert all(p["status"] == "INFEASIBLE" for p in summary["proofs"])
        assert (res.exit_code == 0) == (not too_small)


@pytest.mark.opendata
def test_ny8_sweep_csv_holds_the_figures_of_each_variant_summary(tied_sweep):
    out, _ = tied_sweep
    table = pd.read_csv(out / "sweep.csv")
    assert len(table) == 3
    for rec in table.to_dict("records"):
        summary = json.loads((out / "variants" / rec["name"] / "summary.json").read_text())
        for tier, fig in summary["tiers"].items():
            assert rec[f"zones.{tier}"] == fig["zones"]
            assert rec[f"breaks.{tier}"] == fig["bound_breaks"]
            assert rec[f"smallest.{tier}.POP8"] == pytest.approx(fig["counts"]["POP8"]["min"])
            assert rec[f"within_10pct.{tier}.POP8"] == pytest.approx(fig["share_within_10pct_of_target"]["POP8"])
            assert rec[f"polsby_popper.median.{tier}"] == pytest.approx(fig["polsby_popper"]["median"])
        assert rec["bound_breaks"] == len(summary["bound_breaks"])
        assert bool(rec["audit_ok"]) == summary["audit"]["ok"]
        # the lookup in the folder is the one measured
        lookup = pd.read_csv(out / "variants" / rec["name"] / "lookup.csv", dtype=str)
        for k, tier in enumerate(summary["tier_order"]):
            assert lookup.iloc[:, k + 1].nunique() == rec[f"zones.{tier}"]


@pytest.mark.opendata
def test_ny8_a_graph_key_gives_each_variant_its_own_graph(ny8):
    res = api.sweep(ny8 / "ny8.gpkg", ny8 / "rules.toml", ["graph.contiguity=rook,queen"], ny8 / "graphs",
                    report=False)
    edges = {}
    for folder in (ny8 / "graphs" / "variants").iterdir():
        summary = json.loads((folder / "summary.json").read_text())
        kind = summary["variant"]["values"]["graph.contiguity"]
        edges[kind] = summary["graph"]["edges"]
        assert f'contiguity = "{kind}"' in summary["rules"]
    # r-cran-spdata NY8: 764 rook pairs and 48 more point-only contacts under queen (design notes)
    assert edges == {"rook": 764, "queen": 764 + 48}
    assert res.exit_code == 0


@pytest.mark.opendata
def test_ny8_a_sweep_with_no_valid_variant_is_exit_2_naming_the_key(ny8, capsys):
    code = main(["sweep", str(ny8 / "ny8.gpkg"), "--rules", str(ny8 / "rules.toml"),
                 "--vary", "tier.2.min.POP8=60000", "--out", str(ny8 / "none"), "--quiet"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1
    assert "tier.2.min.POP8" in err[0] and "target" in err[0]
    assert not (ny8 / "none").exists()


@pytest.mark.opendata
def test_ny8_show_lists_each_variant_with_its_folder(tied_sweep, capsys):
    out, _ = tied_sweep
    assert main(["show", str(out)]) == 0
    text = capsys.readouterr().out
    assert "sweep: 3 variant(s) of tier.2.min.POP8, tier.2.target.POP8" in text
    assert "(variants/tier2-min-POP8-60000_tier2-target-POP8-65000)" in text


@pytest.mark.opendata
@pytest.mark.slow
def test_ny8_a_redraw_sweep_keeps_every_zone_under_the_rules_it_was_drawn_by(ny8, tied_sweep):
    out, _ = tied_sweep
    first = out / "variants" / "tier2-min-POP8-20000_tier2-target-POP8-30000"
    res = api.sweep(ny8 / "ny8.gpkg", first / "rules.toml", ["tier.2.min.POP8,tier.2.target.POP8=20000/30000,40000/50000"],
                    None, previous=first / "lookup.csv")
    same, tighter = res.summary["sweep"]["variants"]
    # zones that still meet the rules are kept (Cockings et al. 2011: census zone maintenance)
    assert same["areas_changed_vs_previous.tier1"] == 0 and same["areas_changed_vs_previous.tier2"] == 0
    # a higher tier-2 floor must regroup tier-2 zones of 20,000 to 40,000 persons
    assert tighter["areas_changed_vs_previous.tier2"] > 0
    assert tighter["audit_ok"]
