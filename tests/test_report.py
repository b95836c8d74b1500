"""The HTML report read as a document: caution, maps, links, tables, no fetches.

Runs are invented (tests/report_support.py); the HTML is read back with the standard
library's html.parser, a parser independent of the code that writes it.
"""

from __future__ import annotations

import base64
import re

import numpy as np
import pandas as pd
import pytest
from report_support import Page, grid_run

from zonedesign.report.charts import limits_from_rules
from zonedesign.report.html import DEFAULT_CAUTION, render_report, write_report
from zonedesign.report.svgmap import element_id


@pytest.fixture(scope="module")
def small():
    run = grid_run(8, parents=(4,), fence_side=4, low_zones=2)
    text = render_report(**run)
    return run, text, Page(text)


def test_caution_stands_at_the_top(small):
    run, text, page = small
    assert run["summary"]["caution"] in " ".join(page.text_before_h2.split())
    bare = Page(render_report(summary={}, tables={}, layers={}))
    # common practice: outputs for official statistics carry a disclosure-control caution
    assert DEFAULT_CAUTION in " ".join(bare.text_before_h2.split())


def test_every_zone_of_every_tier_is_one_path_with_its_id_and_tooltip(small):
    run, _, page = small
    for tier, table in run["tables"].items():
        paths = [p for p in page.zone_paths if p["svg"] == f"map-{tier}"]
        assert sorted(p["id"] for p in paths) == sorted(
            element_id("zone", tier, z) for z in table["zone"]
        )
        for p, (_, row) in zip(
            sorted(paths, key=lambda p: p["data-zone"]), table.sort_values("zone").iterrows()
        ):
            assert p["data-zone"] == row["zone"] and p["data-fence"] == row["fence"]
            assert f"zone {row['zone']}" in p["title"] and "Polsby-Popper" in p["title"]


def test_rule_breaking_zones_are_hatched_and_outlined_not_only_coloured(small):
    run, text, page = small
    table = run["tables"]["tier1"]
    broken = set(table.loc[table["bound_break"], "zone"])
    assert len(broken) == 2
    for p in page.zone_paths:
        if p["svg"] != "map-tier1":
            continue
        classes = p["class"].split()
        hatched = any(re.fullmatch(r"h\d+", c) for c in classes)
        assert hatched == ("broken" in classes) == (p["data-zone"] in broken)
        if p["data-zone"] in broken:
            assert "breaks a rule" in p["title"]
    for k in {c for p in page.zone_paths for c in p["class"].split() if re.fullmatch(r"h\d+", c)}:
        assert f'<pattern id="hatch-{k[1:]}"' in text  # the hatching exists for each colour used
    assert re.search(r"\.zone\.broken\{stroke:#[0-9a-f]{6};stroke-width:[\d.]+\}", text)


def test_fences_are_drawn_as_their_own_heavier_line(small):
    _, text, page = small
    assert sorted(p for p in page.fence_paths if p) == ["map-tier1", "map-tier2"]
    assert re.search(r"\.fence\{fill:none;stroke:#[0-9a-f]{6};stroke-width:2", text)


def test_every_violation_row_links_to_an_element_that_exists(small):
    run, _, page = small
    ids = set(page.ids)
    n = len(run["summary"]["bound_breaks"]) + len(run["summary"]["audit"]["violations"])
    assert page.violation_rows == n
    assert len(page.violation_links) == n
    assert all(h.startswith("#") and h[1:] in ids for h in page.violation_links)
    table = run["tables"]["tier1"]
    for z in table.loc[table["bound_break"], "zone"]:
        assert "#" + element_id("zone", "tier1", z) in page.violation_links


def test_ids_are_unique(small):
    _, _, page = small
    assert len(page.ids) == len(set(page.ids))


def test_nothing_is_fetched(small):
    _, text, page = small
    assert page.fetchable == []
    # the only URL in the text is the SVG namespace name, which is never fetched
    assert set(re.findall(r"https?://[^\s\"'<>)]+", text)) <= {"http://www.w3.org/2000/svg"}
    assert "default-src 'none'" in text  # the page forbids fetches of its own
    assert re.findall(r"url\((?!#)", text) == []


def test_document_is_accessible(small):
    _, _, page = small
    assert page.html_lang == "en"
    assert page.headings[0] == 1 and page.headings.count(1) == 1
    # headings never skip a level on the way down (common practice)
    assert all(b <= a + 1 for a, b in zip(page.headings, page.headings[1:]))
    assert page.tables
    for t in page.tables:
        assert t["caption"] and t["col_headers"] > 0 and t["scoped"] == t["col_headers"]


def test_text_contrast_is_adequate(small):
    _, text, _ = small

    def luminance(hex_colour: str) -> float:
        rgb = [int(hex_colour[i : i + 2], 16) / 255 for i in (1, 3, 5)]
        lin = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in rgb]
        return 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]

    def ratio(a: str, b: str) -> float:
        la, lb = sorted((luminance(a), luminance(b)), reverse=True)
        return (la + 0.05) / (lb + 0.05)

    ink = re.search(r"--ink:(#[0-9a-f]{6})", text).group(1)
    paper = re.search(r"--paper:(#[0-9a-f]{6})", text).group(1)
    link = re.search(r"--link:(#[0-9a-f]{6})", text).group(1)
    caution = re.search(r"\.caution\{background:(#[0-9a-f]{6});[^}]*color:(#[0-9a-f]{6})", text)
    # WCAG 2.1 contrast formula and its 4.5:1 minimum for body text (W3C 2018)
    assert ratio(ink, paper) >= 4.5
    assert ratio(link, paper) >= 4.5
    assert ratio(caution.group(2), caution.group(1)) >= 4.5


def test_distributions_mark_floor_target_and_ceiling_from_the_rules(small):
    run, text, _ = small
    limits = limits_from_rules(run["summary"]["rules"], list(run["tables"]))
    assert limits["tier1"]["households"] == {"min": 47.0, "target": 135.0, "max": 270.0}
    charts = re.findall(
        r'<img class="chart" src="data:image/svg\+xml;base64,([^"]+)" alt="([^"]*)"', text
    )
    assert len(charts) == 3  # one histogram figure per tier, one of shapes
    svg = base64.b64decode(charts[0][0]).decode()
    for word in ("floor 47", "target 135", "ceiling 270"):
        assert word in svg
    assert "households" in charts[0][1]


def test_tables_cover_fences_proofs_certificate_islands_rules_and_versions(small):
    run, text, _ = small
    s = run["summary"]
    assert "Figures per fence and tier" in text
    assert s["proofs"][0]["text"] in text
    assert "infeasible: proved that no zoning of this fence can meet every bound" in text
    assert "confirmed: an independent CP-SAT model accepts these zones" in text
    assert "Islands found in the area graph" in text and "Repaired polygons" in text
    assert "min = { households = 47, persons = 100 }" in text  # the rules, preformatted
    assert "<dt>seed</dt><dd>7</dd>" in text
    assert "Software versions" in text and "Seconds per phase" in text


def test_redraw_report_shows_a_change_map_and_the_share_unchanged():
    run = grid_run(8, parents=(4,), fence_side=4)
    kinds = np.array(["kept", "merged", "split", "reshaped", "new", "kept"])
    table = run["tables"]["tier1"]
    table["change"] = kinds[np.arange(len(table)) % kinds.shape[0]]
    run["summary"]["command"] = "redraw"
    changes = pd.DataFrame(
        {
            "tier": ["tier2"] * 5,
            "fence": ["D0"] * 5,
            "old_zones": ["W0", "W1;W2", "W3", "W9", "W8"],
            "new_zone": ["W0", "W1", "W2", "W3", ""],
            "kind": ["kept", "merged", "split", "kept", "retired"],
        }
    )
    text = render_report(**run, changes=changes)
    page = Page(text)
    change_paths = [p for p in page.zone_paths if p["svg"] == "changes-map-tier1"]
    assert len(change_paths) == len(table)
    by_zone = dict(zip(table["zone"], table["change"]))
    for p in change_paths:
        kind = by_zone[p["data-zone"]]
        assert f"k-{kind}" in p["class"].split() and p["title"].startswith(kind)
    # each kind has its own pattern, and the legend names it in words
    patterns = {
        k: re.search(rf'<pattern id="kind-{k}"[^>]*>(.*?)</pattern>', text).group(1)
        for k in set(kinds)
    }
    assert len(set(patterns.values())) == len(patterns)
    for k in set(kinds):
        assert re.search(rf'class="zone k-{k}"[^>]*/></svg><span>{k}:', text)
    share = (table["change"] == "kept").mean()
    assert f"tier tier1: {100 * share:.1f}% unchanged" in text
    assert "tier tier2: 50.0% unchanged" in text  # 2 kept of the 4 zones now standing


def test_sections_render_from_whatever_the_summary_holds(tmp_path):
    for summary in (
        {},
        {"command": "audit", "audit": {"ok": True, "violations": []}},
        {
            "fences": "not a list",
            "tiers": 3,
            "graph": {"islands": None},
            "seconds": {"total": None},
        },
    ):
        path = tmp_path / "report.html"
        write_report(path, summary=summary, tables={}, layers={})
        text = path.read_text(encoding="utf-8")
        assert "could not be drawn" not in text
        assert text.startswith("<!DOCTYPE html>") and text.rstrip().endswith("</html>")
