"""Zone codes through a redraw: an agency's code continuity, stated and settable.

Census output-area maintenance (Cockings, Harfoot, Martin & Hornby 2011) keeps a zone's
code where the zone carries on and retires it where the zone is merged away; which zone
carries a split zone's code on is our policy ("successor": the part holding most of the
published count). The cases are built by hand, so the expected codes follow from the
policy's words; every check is made on the lookup.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from verify_support import grid_graph, make_areas

from zonedesign.changelog import change_table
from zonedesign.errors import RulesError
from zonedesign.rules import AreasRules, RedrawRules, Rules, SearchRules, TierRules, parse_rules
from zonedesign.tiers.naming import assign_codes, moved_areas, zone_kinds
from zonedesign.tiers.redraw import redraw_hierarchy


def _rules(lo: float, hi: float, codes: str = "successor") -> Rules:
    return Rules(
        areas=AreasRules(id="id", counts=("persons",), fence="fence"),
        tiers=(TierRules(name="tier1", min={"persons": lo}, max={"persons": hi}),),
        search=SearchRules(method="annealing", seed=3, constructions=2, time_limit_fence=10.0),
        redraw=RedrawRules(codes=codes),
    )


def _redraw(rows: int, cols: int, old: list[str], counts: list[float], lo: float, hi: float, codes: str = "successor"):
    areas = make_areas(np.array(counts, dtype=float), ids=[f"a{i:02d}" for i in range(rows * cols)])
    previous = {"tier1": np.array(old, dtype=object)}
    rules = _rules(lo, hi, codes)
    result = redraw_hierarchy(areas, grid_graph(rows, cols), rules, previous)
    lookup = result.lookup()
    changes = change_table(list(rules.tiers), areas.fence, areas.counts, areas.count_names, previous, lookup)
    return lookup["tier1"], result, changes


def test_a_split_zone_keeps_its_code_in_the_part_holding_most_of_it():
    # a 2 x 6 strip: A (left half, 6 x 20 = 120 persons) is above the ceiling of 100 and
    # B (right half, 6 x 16 = 96) has no room, so A must split into two zones
    old = ["f-tier1-0001"] * 3 + ["f-tier1-0002"] * 3 + ["f-tier1-0001"] * 3 + ["f-tier1-0002"] * 3
    counts = [20.0] * 3 + [16.0] * 3 + [20.0] * 3 + [16.0] * 3
    now, _, changes = _redraw(2, 6, old, counts, 30.0, 100.0)
    was_a = np.array(old) == "f-tier1-0001"
    parts = sorted(set(now[was_a].tolist()))
    assert len(parts) == 2
    held = {p: float(np.array(counts)[was_a & (now == p)].sum()) for p in parts}
    # the code stays with the part holding most of A's persons
    assert max(held, key=held.get) == "f-tier1-0001"
    # the other part gets the next free number in its fence and tier, in the old pattern
    assert set(parts) - {"f-tier1-0001"} == {"f-tier1-0003"}
    assert now[~was_a].tolist() == ["f-tier1-0002"] * 6
    row = changes.set_index("new_code").loc["f-tier1-0003"]
    assert row["kind"] == "split" and "above ceiling 100" in row["reason"]


def test_a_merge_keeps_the_larger_zones_code_and_retires_the_other_with_the_merged_zone_as_successor():
    # a 1 x 5 strip: A (2 x 10 = 20) is below the floor of 30; B (3 x 11 = 33) cannot give
    # an area without falling below the floor itself, so A and B merge (53 <= 70)
    old = ["f-tier1-0001"] * 2 + ["f-tier1-0002"] * 3
    now, result, changes = _redraw(1, 5, old, [10.0, 10.0, 11.0, 11.0, 11.0], 30.0, 70.0)
    assert now.tolist() == ["f-tier1-0002"] * 5
    assert result.tiers[0].succession.retired == {"f-tier1-0001": ["f-tier1-0002"]}
    retired = changes[changes["kind"] == "retired"].iloc[0]
    assert retired["old_codes"] == "f-tier1-0001" and retired["successors"] == "f-tier1-0002"
    assert "persons 20 below floor 30" in retired["reason"]
    merged = changes.set_index("new_code").loc["f-tier1-0002"]
    assert merged["kind"] == "merged" and merged["areas_in"] == 2 == merged["areas_out"] + 2


def test_two_old_zones_claiming_one_new_zone_give_it_the_code_with_the_larger_share():
    # A (6 areas of 10) sends 4 areas into Z0 and 2 into Z1; B (5 areas of 10) goes wholly
    # into Z0. Both claim Z0 (their largest share); B holds 50 of Z0's persons, A 40, so
    # Z0 carries B's code, A retires and Z1 gets a new code
    old = np.array(["d-t-0007"] * 6 + ["d-t-0003"] * 5, dtype=object)
    zone = np.array([0, 0, 0, 0, 1, 1] + [0] * 5)
    s = assign_codes(old, zone, np.array(["d", "d"], dtype=object), "t", np.full(11, 10.0), "successor")
    assert s.codes.tolist() == ["d-t-0003", "d-t-0008"]
    assert s.retired == {"d-t-0007": ["d-t-0003", "d-t-0008"]}
    lookup = s.codes[zone]
    assert int(moved_areas(old, lookup).sum()) == 6
    assert zone_kinds(old, lookup) == {"d-t-0003": "merged-and-split", "d-t-0008": "split"}


def test_ties_go_to_most_areas_then_the_lowest_new_zone():
    # A's published count splits 30 / 30 over two zones; the one with more areas wins
    old = np.array(["q-1"] * 4, dtype=object)
    zone = np.array([0, 1, 1, 1])
    s = assign_codes(old, zone, np.array(["f", "f"], dtype=object), "t", np.array([30.0, 10.0, 10.0, 10.0]), "successor")
    assert s.codes[1] == "q-1"
    # equal counts and areas: the lowest new zone
    s = assign_codes(old, np.array([1, 1, 0, 0]), np.array(["f", "f"], dtype=object), "t", np.full(4, 5.0), "successor")
    assert s.codes[0] == "q-1"


def test_fresh_codes_go_to_every_changed_zone_and_a_retired_code_is_never_reused():
    old = ["f-tier1-0001"] * 3 + ["f-tier1-0002"] * 3 + ["f-tier1-0001"] * 3 + ["f-tier1-0002"] * 3
    counts = [20.0] * 3 + [16.0] * 3 + [20.0] * 3 + [16.0] * 3
    now, result, _ = _redraw(2, 6, old, counts, 30.0, 100.0, codes="fresh")
    was_a = np.array(old) == "f-tier1-0001"
    # A changed, so neither part keeps its code; the new codes follow after every old one
    assert "f-tier1-0001" not in set(now.tolist())
    assert set(now[was_a].tolist()) == {"f-tier1-0003", "f-tier1-0004"}
    assert now[~was_a].tolist() == ["f-tier1-0002"] * 6
    assert set(result.tiers[0].succession.retired) == {"f-tier1-0001"}
    known = {"x-t-0001", "x-t-0009"}  # 0009 retired in an earlier round, still in the records
    s = assign_codes(np.array(["x-t-0001", ""], dtype=object), np.array([0, 1]), np.array(["x", "x"], dtype=object),
                     "t", np.ones(2), "fresh", known=known)
    assert s.codes.tolist() == ["x-t-0001", "x-t-0010"]


def test_the_code_policy_is_read_from_the_rules_with_key_and_line_in_errors():
    base = '[areas]\nid = "id"\ncounts = ["persons"]\n\n[[tier]]\nname = "tier1"\n'
    assert parse_rules(base, "r.toml").redraw.codes == "successor"
    assert parse_rules(base + '\n[redraw]\ncodes = "fresh"\n', "r.toml").redraw.codes == "fresh"
    # the bad value is on line 9 of the text below
    with pytest.raises(RulesError, match=r"r\.toml:9: redraw\.codes: 'kept' is not one of 'successor', 'fresh'"):
        parse_rules(base + '\n[redraw]\ncodes = "kept"\n', "r.toml")


def test_previous_counts_give_the_published_totals_and_without_them_the_column_says_so(tmp_path):
    from cli_support import region, write_areas, write_inputs

    from zonedesign import api

    areas, rules = write_inputs(tmp_path / "in")
    assert api.design(areas, rules, tmp_path / "d", report=False, certify=False).exit_code == 0
    later = region()
    later["households"] = (later["households"] * np.where(later["fence"] == later["fence"].iloc[0], 1.6, 1.0)).round()
    later_path = write_areas(later, tmp_path / "in" / "later.gpkg")
    lookup = tmp_path / "d" / "lookup.csv"
    with_counts = api.redraw(later_path, rules, lookup, tmp_path / "r1", previous_counts=areas,
                             report=False, certify=False)
    plain = api.redraw(later_path, rules, lookup, tmp_path / "r2", report=False, certify=False)
    published = pd.read_csv(tmp_path / "r1" / "changes.csv", keep_default_na=False)
    at_new = pd.read_csv(tmp_path / "r2" / "changes.csv", keep_default_na=False)
    assert "households_published" in published and "households_old_zone_new_counts" in at_new
    # the published total of a code is its zone's total as the design wrote it (pyogrio
    # reads the design's zones.gpkg, one layer per tier)
    import pyogrio

    for tier in ("block", "ward"):
        layer = pyogrio.read_dataframe(tmp_path / "d" / "zones.gpkg", layer=tier, read_geometry=False)
        design_total = dict(zip(layer["zone"].astype(str), layer["households"].astype(float)))
        rows = published[(published["tier"] == tier) & (published["households_published"] != "")]
        assert len(rows) > 0
        for code, total in zip(rows["new_code"].where(rows["kind"] != "retired", rows["old_codes"]),
                               rows["households_published"].astype(float)):
            assert total == design_total[code]
    # the redraw is the same; only the 'before' column differs
    assert with_counts.lookup and {k: v.tolist() for k, v in with_counts.lookup.items()} == {
        k: v.tolist() for k, v in plain.lookup.items()
    }
    assert with_counts.summary["previous"]["counts"] == str(areas)


def test_a_zone_locked_by_agreement_gives_locked_as_its_reason():
    # a 1 x 4 strip: L (locked, 2 x 80 = 160 persons) breaks the ceiling of 100 and is kept
    # as agreed; Z is untouched
    old = np.array(["L", "L", "Z", "Z"], dtype=object)
    areas = make_areas(np.array([80.0, 80.0, 30.0, 30.0]))
    tier = TierRules(name="tier1", min={"persons": 20.0}, max={"persons": 100.0})
    changes = change_table([tier], areas.fence, areas.counts, areas.count_names, {"tier1": old}, {"tier1": old},
                           locked={"tier1": {"L"}})
    reasons = dict(zip(changes["new_code"], changes["reason"]))
    assert reasons == {"L": "locked", "Z": "meets every bound; unchanged"}


def test_previous_counts_that_lack_a_column_or_a_number_are_refused_naming_file_column_and_row(tmp_path):
    from zonedesign.errors import InputError
    from zonedesign.redraw_output import read_counts_table

    path = tmp_path / "published.csv"
    path.write_text("code,persons\nA1,10\nA2,x\n")
    with pytest.raises(InputError, match=r"published\.csv: previous counts lack column\(s\) households"):
        read_counts_table(path, "code", ("persons", "households"))
    with pytest.raises(InputError, match=r"published\.csv: column persons, row 'A2': 'x' is not a number"):
        read_counts_table(path, "code", ("persons",))
    path.write_text("code,persons\nA1,10\nA2,12.5\n")
    assert read_counts_table(path, "code", ("persons",))["persons"].to_dict() == {"A1": 10.0, "A2": 12.5}
