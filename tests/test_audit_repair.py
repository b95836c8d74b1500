"""`audit --repair` always hands back a lookup that passes the audit, as a full output.

The zones layers are read back with pyogrio (reference library for GeoPackage) and the
repaired lookup is audited again by the independent checker.
"""

from __future__ import annotations

import pandas as pd
import pyogrio
import pytest
from cli_support import write_inputs

from zonedesign import api
from zonedesign.report.svgmap import element_id
from zonedesign.verify.repair import Move, RepairResult


@pytest.fixture(scope="module")
def designed(tmp_path_factory):
    """A valid design of the demo-shaped inputs (computed once for the module)."""
    tmp = tmp_path_factory.mktemp("designed")
    areas, rules = write_inputs(tmp / "in")
    first = api.design(areas, rules, tmp / "designed", report=False, certify=False)
    assert first.exit_code == 0
    return areas, rules, tmp / "designed" / "lookup.csv"


def _broken_lookup(designed, tmp_path):
    areas, rules, lookup_path = designed
    lookup = pd.read_csv(lookup_path, dtype=str)
    # a far area put into another fence's block, and two blocks of one ward merged
    far = lookup.index[lookup["ward"] != lookup.loc[0, "ward"]][-1]
    lookup.loc[0, "block"] = lookup.loc[far, "block"]
    ward = lookup.loc[5, "ward"]
    blocks = sorted(set(lookup.loc[lookup["ward"] == ward, "block"]))
    lookup.loc[lookup["block"] == blocks[1], "block"] = blocks[0]
    path = tmp_path / "broken.csv"
    lookup.to_csv(path, index=False)
    return areas, rules, path


@pytest.fixture(scope="module")
def repaired(designed, tmp_path_factory):
    """One audit --repair of the broken lookup, its id column renamed, with the certificate
    and the report: what a QA team runs (computed once for the module)."""
    tmp = tmp_path_factory.mktemp("repaired")
    areas, rules, broken = _broken_lookup(designed, tmp)
    renamed = tmp / "renamed.csv"
    pd.read_csv(broken, dtype=str).rename(columns={"area": "tract_code"}).to_csv(renamed, index=False)
    res = api.audit(areas, rules, tmp / "audit", lookup=renamed, repair=True)
    return areas, rules, res, tmp / "audit"


@pytest.mark.slow
def test_repair_gives_a_lookup_that_passes(repaired):
    areas, rules, res, out = repaired
    assert res.exit_code == 1  # the input hierarchy breaks rules
    assert res.summary["repair"]["repaired_lookup_passes"]
    again = api.audit(areas, rules, None, lookup=out / "repaired" / "lookup.csv", report=False)
    assert again.exit_code == 0
    moves = pd.read_csv(out / "repair.csv")
    assert len(moves) == res.summary["repair"]["moves"] > 0


def test_when_the_cp_sat_repair_cannot_finish_the_search_mends_it_and_says_so(designed, tmp_path, monkeypatch):
    areas, rules, broken = _broken_lookup(designed, tmp_path)

    def gives_up(areas_, graph, labels, tiers, **kw):
        return RepairResult(moves=[], labels=None, status="undecided", reason="time limit")

    monkeypatch.setattr("zonedesign.verify.repair.minimal_repair", gives_up)
    res = api.audit(areas, rules, tmp_path / "audit", lookup=broken, repair=True, report=False, certify=False)
    assert res.summary["repair"]["method"].startswith("redraw search")
    assert res.summary["repair"]["repaired_lookup_passes"]
    again = api.audit(areas, rules, None, lookup=tmp_path / "audit" / "repaired" / "lookup.csv", report=False, certify=False)
    assert again.exit_code == 0


def test_an_unproven_cp_sat_repair_gives_way_to_a_search_repair_with_fewer_moves(designed, tmp_path, monkeypatch):
    areas, rules, broken = _broken_lookup(designed, tmp_path)
    designed = pd.read_csv(designed[2], dtype=str)
    # a valid but wasteful "repair": the design itself with two blocks of a ward swapping names
    ward = designed.loc[0, "ward"]
    a, b = sorted(set(designed.loc[designed["ward"] == ward, "block"]))[:2]
    wasteful = designed["block"].map({a: b, b: a}).fillna(designed["block"]).to_numpy(dtype=object)

    def wastes(areas_, graph, labels, tiers, **kw):
        new = {t.name: designed[t.name].to_numpy(dtype=object) for t in tiers}
        new["block"] = wasteful
        moves = [
            Move(str(areas_.ids[i]), t, str(labels[t][i]), str(new[t][i]))
            for t in new for i in range(areas_.n) if str(labels[t][i]) != str(new[t][i])
        ]
        return RepairResult(moves=moves, labels=new, status="feasible", reason="not proven")

    monkeypatch.setattr("zonedesign.verify.repair.minimal_repair", wastes)
    res = api.audit(areas, rules, tmp_path / "audit", lookup=broken, repair=True, report=False, certify=False)
    repair = res.summary["repair"]
    assert repair["method"].startswith("redraw search") and repair["cp_sat_status"] == "feasible"
    assert repair["repaired_lookup_passes"]
    moves = pd.read_csv(tmp_path / "audit" / "repair.csv")
    # the search's zones keep the names they carry on, so only areas that moved are listed
    wasted = int((designed["block"] != pd.Series(wasteful)).sum())
    assert len(moves) == repair["moves"] < wasted


@pytest.mark.slow
def test_the_repaired_hierarchy_is_a_full_output_that_the_report_and_show_describe(repaired):
    from zonedesign.cli.show import show

    _, _, res, out = repaired
    folder = out / "repaired"
    for name in ("lookup.csv", "zones.gpkg", "changes.csv", "area_changes.csv", "report.html"):
        assert (folder / name).is_file(), name
    # the id column keeps the input lookup's own name
    assert (folder / "lookup.csv").read_text().splitlines()[0].split(",")[0] == "tract_code"
    # an audit writes the audited hierarchy's zones too, one layer per tier (pyogrio lists them)
    tiers = res.summary["tier_order"]
    assert [name for name, _ in pyogrio.list_layers(out / "zones.gpkg")] == tiers
    assert [name for name, _ in pyogrio.list_layers(folder / "zones.gpkg")] == tiers
    repair = res.summary["repair"]
    moved = pd.read_csv(folder / "area_changes.csv", dtype=str, keep_default_na=False)
    changes = pd.read_csv(folder / "changes.csv", dtype=str, keep_default_na=False)
    for tier in tiers:
        n = int(((moved["tier"] == tier) & (moved["old_code"] != "")).sum())
        assert repair["moved_per_tier"][tier] == n
        assert changes.loc[changes["tier"] == tier, "areas_in"].astype(int).sum() == n
    assert (changes.loc[changes["kind"] != "kept", "reason"] != "").all()
    html = (out / "report.html").read_text(encoding="utf-8")
    assert 'id="repair"' in html and "proven the fewest" in html and "repaired/report.html" in html
    # the moves on a map: every audited zone the repair touches is drawn by what it does to it
    touched = repair["zones"]
    assert touched and all(
        f'id="{element_id("repair", t, z)}"' in html for t, zones in touched.items() for z in zones
    )
    line = [x for x in show(out).splitlines() if x.strip().startswith("repair:")]
    assert len(line) == 1 and str(repair["moves"]) in line[0]

