"""The report of a national-scale run stays within its size budget and says what it left out.

The run is invented: 57,600 bottom-tier zones (the scale of about 200,000 areas grouped by
three or four), 14,400 tier-2 zones and 900 tier-3 zones, in 36 fences.
"""

from __future__ import annotations

import re

import pytest
from report_support import Page, grid_run

from zonedesign.report.html import REPORT_BYTES, write_report
from zonedesign.report.svgmap import MAX_ZONES_PER_MAP, element_id


@pytest.fixture(scope="module")
def large(tmp_path_factory):
    run = grid_run(240, parents=(2, 8), fence_side=40, low_zones=300)
    path = tmp_path_factory.mktemp("large") / "report.html"
    write_report(path, **run)
    text = path.read_text(encoding="utf-8")
    return run, path, text, Page(text)


def test_report_stays_under_the_size_budget(large):
    _, path, _, _ = large
    assert path.stat().st_size <= REPORT_BYTES


def test_upper_tiers_are_drawn_whole_and_large_tiers_fence_by_fence(large):
    run, _, text, page = large
    drawn = {}
    for p in page.zone_paths:
        drawn.setdefault(p["data-tier"], set()).add(p["data-zone"])
    top = run["tables"]["tier3"]
    assert len(top) <= MAX_ZONES_PER_MAP
    assert drawn["tier3"] == set(top["zone"])
    for tier in ("tier1", "tier2"):
        n = len(run["tables"][tier])
        assert n > MAX_ZONES_PER_MAP
        assert 0 < len(drawn[tier]) < n
        # each fence drawn is drawn whole, in its own collapsible section
        fences = run["tables"][tier].groupby("fence")["zone"].apply(set)
        shown = [f for f, zones in fences.items() if zones & drawn[tier]]
        assert all(fences[f] <= drawn[tier] for f in shown)
        assert len(re.findall(rf'<svg id="map-{tier}-fence-', text)) == len(shown)
        note = re.search(rf'<p class="note" id="maps-{tier}-note">([^<]*)</p>', text).group(1)
        assert f"{n:,} zones are more than one map can carry" in note
        assert f"Left out: {len(fences) - len(shown):,} of {len(fences):,} fences" in note
    # the fence holding the rule breaks is among those drawn
    table = run["tables"]["tier1"]
    for z in table.loc[table["bound_break"], "zone"]:
        assert z in drawn["tier1"]


def test_every_violation_still_links_to_an_element_that_exists(large):
    run, _, _, page = large
    ids = set(page.ids)
    assert page.violation_links
    assert all(h[1:] in ids for h in page.violation_links)
    drawn_ids = {p["id"] for p in page.zone_paths}
    reached = 0
    for b in run["summary"]["bound_breaks"]:
        target = element_id("zone", b["tier"], b["zone"])
        if target in drawn_ids:
            assert f"#{target}" in page.violation_links
            reached += 1
    assert reached == len(run["summary"]["bound_breaks"])  # their fence is drawn first
