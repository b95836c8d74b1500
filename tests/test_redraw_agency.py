"""A redraw as an agency maintains codes, end to end: the later-count demo and NY8 tracts.

NY8 (open data: Debian's r-cran-spdata, shapes/NY8_utm18.shp): 281 census tracts of eight
New York counties with population POP8; the first five digits of AREAKEY are the county
(a fence). Counts are raised by half in one county and halved in another; a redraw must
leave the other six counties exactly as they were (census maintenance practice, Cockings,
Harfoot, Martin & Hornby 2011: keep every zone that still meets the rules).
"""

from __future__ import annotations

import json
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from zonedesign import api
from zonedesign.changelog import change_table
from zonedesign.report.svgmap import element_id
from zonedesign.rules import RedrawRules, parse_rules
from zonedesign.tiers.design import build_hierarchy
from zonedesign.tiers.naming import moved_areas
from zonedesign.tiers.redraw import redraw_hierarchy


@pytest.mark.slow
def test_moved_areas_agree_across_summary_changes_area_changes_and_the_benchmark(tmp_path):
    from benchmarks.redraw import moved_three_ways
    from zonedesign.demo.scenarios import write_demo_input

    files = write_demo_input(tmp_path / "in", later=True)  # the input of `zonedesign demo --scenario later`
    out = tmp_path / "later"
    res = api.later_scenario(tmp_path / "in", out)
    assert res.exit_code == 0
    summary = json.loads((out / "summary.json").read_text())
    changes = pd.read_csv(out / "changes.csv", dtype=str, keep_default_na=False)
    per_area = pd.read_csv(out / "area_changes.csv", dtype=str, keep_default_na=False)
    before = pd.read_csv(out / "design" / "lookup.csv", dtype=str).set_index("area")
    after = pd.read_csv(out / "lookup.csv", dtype=str).set_index("area").loc[before.index]
    prep = api.prepare(files["later"], files["rules"])
    order = prep.areas.ids
    previous = {t: before.loc[order, t].to_numpy(dtype=object) for t in summary["tier_order"]}
    now = {t: after.loc[order, t].to_numpy(dtype=object) for t in summary["tier_order"]}
    bench = moved_three_ways(prep.rules, prep.areas, previous, now)
    total = 0
    for tier in summary["tier_order"]:
        n = summary["changes"][tier]["areas_moved"]
        assert n == int(moved_areas(previous[tier], now[tier]).sum())
        assert n == changes.loc[changes["tier"] == tier, "areas_in"].astype(int).sum()
        assert n == changes.loc[changes["tier"] == tier, "areas_out"].astype(int).sum()
        assert n == int(((per_area["tier"] == tier) & (per_area["old_code"] != "")).sum())
        assert bench[tier] == {"lookup": n, "changes_csv": n, "area_changes_csv": n}
        total += n
    assert total > 0  # the later counts break some zones
    # every old code whose zone survives in any form is carried on or retired with a reason
    for tier in summary["tier_order"]:
        rows = changes[changes["tier"] == tier]
        carried = set(rows.loc[rows["kind"] != "retired", "new_code"])
        retired = rows[rows["kind"] == "retired"]
        assert set(previous[tier]) == (set(previous[tier]) & carried) | set(retired["old_codes"])
        assert (retired["successors"] != "").all() and (retired["reason"] != "").all()
    assert summary["redraw"]["code_policy"] == "successor"
    rules_weights = {t.name: t.weights["stability"] for t in prep.rules.tiers}
    assert summary["redraw"]["stability"] == rules_weights
    # a zone that kept its code has the same fill in the redraw's report as in the design's
    design_fill, redraw_fill = _fills(out / "design" / "report.html"), _fills(out / "report.html")
    kept = changes[changes["kind"] == "kept"]
    ids = [element_id("zone", t, z) for t, z in zip(kept["tier"], kept["new_code"])]
    drawn = [i for i in ids if i in design_fill and i in redraw_fill]
    assert len(drawn) > 0.9 * len(ids)
    same = sum(design_fill[i] == redraw_fill[i] for i in drawn)
    # a kept zone's fill can move only when a changed neighbour took it first
    assert same >= 0.95 * len(drawn)


def _fills(path) -> dict[str, str]:
    """Zone element id -> its class (fill) in a report's maps, read with the standard
    library's HTML parser."""
    from html.parser import HTMLParser

    out: dict[str, str] = {}

    class Fills(HTMLParser):
        def handle_starttag(self, tag, attrs):
            a = dict(attrs)
            if a.get("id", "").startswith("zone-") and "class" in a:
                out[a["id"]] = a["class"]

    Fills().feed(path.read_text(encoding="utf-8"))
    return out


NY8_RULES = """
[areas]
id = "AREAKEY"
counts = ["POP8"]
fence = "county"

[[tier]]
name = "tier1"
min = { POP8 = 6000 }
max = { POP8 = 16000 }
target = { POP8 = 10000 }

[[tier]]
name = "tier2"
min = { POP8 = 20000 }
max = { POP8 = 70000 }
target = { POP8 = 40000 }

[search]
method = "descent"
seed = 2
"""


@pytest.fixture(scope="module")
def ny8(spdata_dir, tmp_path_factory):
    import geopandas as gpd

    frame = gpd.read_file(spdata_dir / "NY8_utm18.shp")
    frame["county"] = frame["AREAKEY"].astype(str).str[:5]
    folder = tmp_path_factory.mktemp("ny8")
    frame.to_file(folder / "ny8.gpkg", layer="tracts", driver="GPKG")
    rules = parse_rules(NY8_RULES, "ny8.toml")
    prep = api.prepare(folder / "ny8.gpkg", rules)
    first = build_hierarchy(prep.areas, prep.graph, rules).lookup()
    counties = sorted(set(prep.areas.fence.tolist()))
    sizes = {c: int((prep.areas.fence == c).sum()) for c in counties}
    # the two counties with most tracts take the shock: one grows by half, one halves
    up, down = sorted(counties, key=lambda c: (-sizes[c], c))[:2]
    counts = prep.areas.counts.copy()
    counts[prep.areas.fence == up] *= 1.5
    counts[prep.areas.fence == down] *= 0.5
    shocked = replace(prep.areas, counts=np.rint(counts))
    return prep, rules, first, shocked, (up, down)


@pytest.mark.opendata
@pytest.mark.slow
def test_ny8_shock_keeps_untouched_counties_and_gives_every_change_a_reason(ny8):
    prep, rules, first, shocked, (up, down) = ny8
    result = redraw_hierarchy(shocked, prep.graph, rules, first)
    now = result.lookup()
    untouched = ~np.isin(prep.areas.fence, [up, down])
    for tier in first:
        # every zone of the six untouched counties keeps its code and its members
        assert np.array_equal(now[tier][untouched], first[tier][untouched])
    changes = change_table(list(rules.tiers), shocked.fence, shocked.counts, shocked.count_names, first, now)
    changed = changes[changes["kind"] != "kept"]
    assert len(changed) > 0
    assert set(changed["fence"]) <= {up, down}
    assert (changed["reason"].str.len() > 0).all()
    fresh = replace(rules, redraw=RedrawRules(codes="fresh"))
    now_fresh = redraw_hierarchy(shocked, prep.graph, fresh, first).lookup()
    for tier in first:
        moved = int(moved_areas(first[tier], now[tier]).sum())
        moved_fresh = int(moved_areas(first[tier], now_fresh[tier]).sum())
        assert moved <= moved_fresh


@pytest.mark.opendata
def test_ny8_redraw_with_unchanged_counts_writes_the_previous_lookup_byte_for_byte(ny8, tmp_path):
    from zonedesign.io.lookup import write_lookup

    prep, rules, first, _, _ = ny8
    write_lookup(tmp_path / "before.csv", prep.areas.ids, first, id_column="AREAKEY")
    now = redraw_hierarchy(prep.areas, prep.graph, rules, first).lookup()
    write_lookup(tmp_path / "after.csv", prep.areas.ids, now, id_column="AREAKEY")
    assert (tmp_path / "after.csv").read_bytes() == (tmp_path / "before.csv").read_bytes()
