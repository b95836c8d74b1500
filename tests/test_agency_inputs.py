"""What an agency's real inputs need: counts from a separate table, fences coded inside the
area id, a stated working CRS, mended overlaps, per-fence bounds and locked zones.

Each rule is tried on a small invented case whose right answer is known by construction,
and on open data (Debian's r-cran-spdata shapefiles) where the issue names one. Every bad
form of a key is exit 2 with one line that says what is wrong and where.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
import shapely

from zonedesign.cli import main
from zonedesign.errors import InputError, RulesError
from zonedesign.io.read import read_areas
from zonedesign.io.table import match_ids
from zonedesign.rules import load_rules, parse_rules

UTM = "EPSG:32633"


def squares(n: int) -> list[shapely.Polygon]:
    return [shapely.box(x, 0, x + 1, 1) for x in range(n)]


def write_gpkg(gdf: gpd.GeoDataFrame, path: Path) -> Path:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # a file without a CRS warns
        pyogrio.write_dataframe(gdf, path, driver="GPKG" if path.suffix == ".gpkg" else None)
    return path


def boundaries(tmp_path: Path, ids: list, crs: str | None = UTM, **cols: list) -> Path:
    """A boundary file of unit squares in a row: ids and the given columns only."""
    gdf = gpd.GeoDataFrame({"code": ids, **cols}, geometry=squares(len(ids)), crs=crs)
    return write_gpkg(gdf, tmp_path / "areas.gpkg")


def rules_file(tmp_path: Path, areas: str, tiers: str = "") -> Path:
    tiers = tiers or '[[tier]]\nname = "tier1"\nmin = { persons = 1 }\n'
    path = tmp_path / "rules.toml"
    path.write_text(f"[areas]\n{areas}\n\n{tiers}\n[search]\nmethod = \"descent\"\nconstructions = 1\n")
    return path


def one_line_exit_2(argv: list[str], capsys: pytest.CaptureFixture) -> str:
    code = main(argv)
    err = capsys.readouterr().err.strip()
    assert code == 2, err
    assert len(err.splitlines()) == 1, err
    return err


def design_argv(areas: Path, rules: Path, out: Path) -> list[str]:
    return ["design", str(areas), "--rules", str(rules), "--out", str(out), "--quiet", "--no-report", "--no-certificate"]


# ---------------------------------------------------------------- counts table


def test_counts_come_from_the_table_matched_by_id_with_leading_zeros_kept(tmp_path):
    areas = boundaries(tmp_path, ["007", "070", "700", "0700"])
    # rows in another order than the file, ids as text with leading zeros
    (tmp_path / "counts.csv").write_text("code,persons\n0700,4\n700,3\n007,1\n070,2\n")
    rules = load_rules(rules_file(tmp_path, 'id = "code"\ncounts = ["persons"]\ntable = "counts.csv"'))
    file = read_areas(areas, rules.areas)
    # '007' and '0700' are ids of their own: compared as text, never as the numbers 7 and 700
    assert file.areas.ids.tolist() == ["007", "070", "700", "0700"]
    assert file.areas.counts[:, 0].tolist() == [1.0, 2.0, 3.0, 4.0]


def test_ids_stored_as_numbers_on_one_side_match_text_ids_with_leading_zeros(tmp_path):
    # a shapefile-style integer id column loses the leading zeros a census CSV keeps
    areas = boundaries(tmp_path, [1001, 1003, 2005])
    (tmp_path / "counts.csv").write_text("code,persons\n02005,30\n01001,10\n01003,20\n")
    rules = load_rules(rules_file(tmp_path, 'id = "code"\ncounts = ["persons"]\ntable = "counts.csv"'))
    file = read_areas(areas, rules.areas)
    assert file.areas.counts[:, 0].tolist() == [10.0, 20.0, 30.0]
    assert any("leading zeros" in n for n in file.notes)


def test_text_ids_that_differ_only_in_leading_zeros_are_not_matched():
    rows, zero = match_ids(np.array(["01", "2"], dtype=object), np.array(["1", "2"], dtype=object), tolerant=False)
    assert rows.tolist() == [-1, 1] and zero == 0
    # when one side stored numbers, the one unpartnered id reading the same is the partner
    rows, zero = match_ids(np.array(["1", "2"], dtype=object), np.array(["02", "01"], dtype=object), tolerant=True)
    assert rows.tolist() == [1, 0] and zero == 2


def test_table_missing_ids_lists_the_first_ten_and_a_count(tmp_path, capsys):
    ids = [f"A{k:02d}" for k in range(15)]
    areas = boundaries(tmp_path, ids)
    (tmp_path / "counts.csv").write_text("code,persons\nA00,5\nA01,6\nZ99,1\n")
    rules = rules_file(tmp_path, 'id = "code"\ncounts = ["persons"]\ntable = "counts.csv"')
    with pytest.raises(InputError) as info:
        read_areas(areas, load_rules(rules).areas)
    text = str(info.value)
    assert "13 area id(s) have no row in counts.csv" in text
    assert "'A02'" in text and "'A11'" in text and "'A12'" not in text  # the first 10 shown
    assert "(first 10 of 13)" in text
    assert "counts.csv: 1 id(s) match no area in areas.gpkg: 'Z99'" in text
    err = one_line_exit_2(design_argv(areas, rules, tmp_path / "out"), capsys)
    assert "counts.csv" in err and "no row" in err


def test_table_faults_name_the_table_and_the_row(tmp_path, capsys):
    areas = boundaries(tmp_path, ["A", "B", "C"])
    (tmp_path / "counts.csv").write_text("code,persons\nA,5\nB,x\nC,7\nC,8\n")
    rules = rules_file(tmp_path, 'id = "code"\ncounts = ["persons"]\ntable = "counts.csv"')
    with pytest.raises(InputError) as info:
        read_areas(areas, load_rules(rules).areas)
    problems = info.value.problems
    assert any("counts.csv: column 'code': 1 duplicate id(s): 'C' (rows 3, 4)" in p for p in problems)
    assert any("counts.csv: column 'persons', row 'B': not a number ('x')" in p for p in problems)
    one_line_exit_2(design_argv(areas, rules, tmp_path / "out"), capsys)


def test_a_column_in_both_files_needs_prefer(tmp_path, capsys):
    areas = boundaries(tmp_path, ["A", "B"], persons=[1, 2])
    (tmp_path / "counts.csv").write_text("code,persons\nA,10\nB,20\n")
    rules = rules_file(tmp_path, 'id = "code"\ncounts = ["persons"]\ntable = "counts.csv"')
    err = one_line_exit_2(["rules", "check", str(rules), str(areas)], capsys)
    # located at the table key's line (line 4 of the rules file)
    assert "rules.toml:4: areas.table: column 'persons' is in both" in err and "prefer" in err
    for prefer, expected in (("table", [10.0, 20.0]), ("file", [1.0, 2.0])):
        text = f'id = "code"\ncounts = ["persons"]\ntable = "counts.csv"\nprefer = "{prefer}"'
        file = read_areas(areas, load_rules(rules_file(tmp_path, text)).areas)
        assert file.areas.counts[:, 0].tolist() == expected


@pytest.mark.parametrize(
    "areas_text, message",
    [
        ('id = "code"\ncounts = ["persons"]\ntable = 3', "areas.table: expected a non-empty text"),
        ('id = "code"\ncounts = ["persons"]\ntable = "nope.csv"', "nope.csv: counts table not found"),
        ('id = "code"\ncounts = ["persons"]\nprefer = "table"', "areas.prefer: only means something with table"),
        ('id = "code"\ncounts = ["persons"]\ntable = "counts.csv"\nprefer = "mine"', "areas.prefer: 'mine' is not one of"),
        ('id = "code"\ncounts = ["persons"]\ntable = "counts.txt"', "a counts table must be .csv or .parquet"),
        ('id = "code"\ncounts = ["persons", "flats"]\ntable = "counts.csv"', "column 'flats' is not in"),
    ],
)
def test_bad_table_keys_are_exit_2_with_one_line(tmp_path, capsys, areas_text, message):
    areas = boundaries(tmp_path, ["A", "B"])
    (tmp_path / "counts.csv").write_text("code,persons\nA,10\nB,20\n")
    (tmp_path / "counts.txt").write_text("code,persons\nA,10\nB,20\n")
    rules = rules_file(tmp_path, areas_text)
    err = one_line_exit_2(["rules", "check", str(rules), str(areas)], capsys)
    assert message in err


def test_a_table_without_the_id_column_cannot_be_joined(tmp_path, capsys):
    areas = boundaries(tmp_path, ["A", "B"])
    (tmp_path / "counts.csv").write_text("key,persons\nA,10\nB,20\n")
    rules = rules_file(tmp_path, 'id = "code"\ncounts = ["persons"]\ntable = "counts.csv"')
    err = one_line_exit_2(["rules", "check", str(rules), str(areas)], capsys)
    assert "the id column 'code' is not in counts.csv" in err


# ---------------------------------------------------------------- fence from an id


def test_fence_codes_cut_from_the_id_prefix_or_suffix(tmp_path):
    areas = boundaries(tmp_path, ["N01-a", "N01-b", "S02-a", "S02-b"], persons=[1, 2, 3, 4])
    for cut, expected in (("prefix = 3", ["N01", "N01", "S02", "S02"]), ("suffix = 1", ["a", "b", "a", "b"])):
        text = f'id = "code"\ncounts = ["persons"]\nfence = {{ column = "code", {cut} }}'
        file = read_areas(areas, load_rules(rules_file(tmp_path, text)).areas)
        assert file.areas.fence.tolist() == expected
        assert any("fence codes are the" in n for n in file.notes)


def test_fence_prefix_longer_than_an_id_is_exit_2_naming_the_row(tmp_path, capsys):
    areas = boundaries(tmp_path, ["N01-a", "N1", "S02-a"], persons=[1, 2, 3])
    rules = rules_file(tmp_path, 'id = "code"\ncounts = ["persons"]\nfence = { column = "code", prefix = 3 }')
    err = one_line_exit_2(design_argv(areas, rules, tmp_path / "out"), capsys)
    assert "fence column 'code', row 'N1': shorter than the prefix of 3 characters" in err


@pytest.mark.parametrize(
    "fence, message",
    [
        ('{ column = "code", prefix = "3" }', "areas.fence.prefix: expected a whole number"),
        ('{ column = "code", prefix = 0 }', "areas.fence.prefix: must be at least 1"),
        ('{ column = "code", prefix = 2.5 }', "areas.fence.prefix: expected a whole number"),
        ('{ column = "code", prefix = 2, suffix = 1 }', "areas.fence.suffix: give prefix or suffix, not both"),
        ('{ column = "code" }', "areas.fence: a fence table needs prefix = N or suffix = N"),
        ('{ prefix = 2 }', "areas.fence.column: missing"),
        ('{ column = "code", start = 2 }', "areas.fence.start: unknown key"),
        ("4", "areas.fence: expected a non-empty text"),
    ],
)
def test_bad_fence_forms_are_rules_errors_with_their_line(fence, message):
    text = f'[areas]\nid = "code"\ncounts = ["persons"]\nfence = {fence}\n\n[[tier]]\nname = "tier1"\n'
    with pytest.raises(RulesError) as info:
        parse_rules(text, "r.toml")
    assert f"r.toml:4: {message}" in str(info.value)


@pytest.mark.opendata
def test_ny8_counts_from_a_csv_and_county_from_the_areakey_prefix_give_the_county_column_lookup(spdata_dir, tmp_path):
    from zonedesign.api import prepare
    from zonedesign.tiers.design import build_hierarchy

    # NY8 tracts (open data: r-cran-spdata NY8_utm18.shp); the first five digits of the
    # 11-digit AREAKEY are the county (state 36 + county code), as the US census codes tracts
    raw = gpd.read_file(spdata_dir / "NY8_utm18.shp")
    raw["county"] = raw["AREAKEY"].astype(str).str[:5]
    with_counts = raw[["AREAKEY", "county", "POP8", "PCTOWNHOME", "geometry"]]
    write_gpkg(with_counts, tmp_path / "ny8_counts.gpkg")
    write_gpkg(raw[["AREAKEY", "geometry"]], tmp_path / "ny8.gpkg")
    # the counts moved into a CSV, in another row order
    raw[["AREAKEY", "POP8", "PCTOWNHOME"]].iloc[::-1].to_csv(tmp_path / "ny8.csv", index=False)
    tier = '[[tier]]\nname = "tier1"\nmin = { POP8 = 8000 }\nmax = { POP8 = 20000 }\ntarget = { POP8 = 12000 }\n'
    # descent ends when no move helps; the time limit is a safety cap that a cold numba
    # compile must not reach, so both runs do the same work
    search = '[search]\nmethod = "descent"\nseed = 3\nconstructions = 1\ntime_limit_fence = 600.0\n'
    column = parse_rules(
        f'[areas]\nid = "AREAKEY"\ncounts = ["POP8"]\nattributes = ["PCTOWNHOME"]\nfence = "county"\n\n{tier}\n{search}'
    )
    derived = parse_rules(
        '[areas]\nid = "AREAKEY"\ncounts = ["POP8"]\nattributes = ["PCTOWNHOME"]\ntable = "ny8.csv"\n'
        f'fence = {{ column = "AREAKEY", prefix = 5 }}\n\n{tier}\n{search}',
        "ny8.toml",
        base_dir=tmp_path,
    )
    a = prepare(tmp_path / "ny8_counts.gpkg", column)
    b = prepare(tmp_path / "ny8.gpkg", derived)
    assert b.areas.ids.tolist() == a.areas.ids.tolist()
    assert b.areas.fence.tolist() == a.areas.fence.tolist()
    # eight counties (r-cran-spdata's NY8: tracts of eight New York counties)
    assert len(set(b.areas.fence.tolist())) == 8
    np.testing.assert_array_equal(b.areas.counts, a.areas.counts)
    assert b.areas.counts[:, 0].sum() == raw["POP8"].sum()  # pandas total of the open data
    assert np.array_equal(b.graph.indptr, a.graph.indptr) and np.array_equal(b.graph.indices, a.graph.indices)
    first = build_hierarchy(a.areas, a.graph, column).lookup()
    second = build_hierarchy(b.areas, b.graph, derived).lookup()
    assert first["tier1"].tolist() == second["tier1"].tolist()


def test_a_redraw_takes_new_counts_from_a_table_against_the_same_boundary_file(tmp_path, capsys):
    import sys

    sys.path.insert(0, str(Path(__file__).parent))
    from cli_support import RULES, region

    gdf = region()
    write_gpkg(gdf[["id", "fence", "geometry"]], tmp_path / "areas.gpkg")
    counts = pd.DataFrame(gdf.drop(columns=["geometry", "fence"]))
    counts.to_csv(tmp_path / "counts.csv", index=False)
    later = counts.copy()
    shocked = (gdf["fence"] == "F1").to_numpy()
    later.loc[shocked, ["households", "persons"]] *= 2  # a count shock in one fence
    later.to_csv(tmp_path / "later.csv", index=False)
    for name, table in (("rules.toml", "counts.csv"), ("later.toml", "later.csv")):
        (tmp_path / name).write_text(RULES.replace('fence = "fence"', f'fence = "fence"\ntable = "{table}"'))
    first, second = tmp_path / "first", tmp_path / "second"
    opts = ["--quiet", "--no-report", "--no-certificate"]
    assert main(["design", str(tmp_path / "areas.gpkg"), "--rules", str(tmp_path / "rules.toml"),
                 "--out", str(first), *opts]) in (0, 1)
    code = main(["redraw", str(tmp_path / "areas.gpkg"), "--rules", str(tmp_path / "later.toml"),
                 "--previous", str(first / "lookup.csv"), "--out", str(second), *opts])
    assert code in (0, 1), capsys.readouterr().err
    lookup = pd.read_csv(second / "lookup.csv", dtype=str)
    zones = gpd.read_file(second / "zones.gpkg", layer="block")
    # the zone totals are the later table's counts summed by pandas over the redrawn lookup
    merged = lookup.merge(later.astype({"id": str}), left_on="area", right_on="id")
    expected = merged.groupby("block")["households"].sum()
    got = zones.set_index("zone")["households"]
    assert got.sort_index().to_dict() == pytest.approx(expected.sort_index().astype(float).to_dict())
    assert merged["households"].sum() == later["households"].sum()


# ---------------------------------------------------------------- working CRS


def test_work_crs_reprojects_a_geographic_file_and_says_why(tmp_path):
    # squares of 0.01 degree near 15 E, 50 N (UTM zone 33 north)
    geoms = [shapely.box(15 + 0.01 * k, 50, 15.01 + 0.01 * k, 50.01) for k in range(3)]
    gdf = gpd.GeoDataFrame({"code": ["A", "B", "C"], "persons": [1, 2, 3]}, geometry=geoms, crs="EPSG:4326")
    areas = write_gpkg(gdf, tmp_path / "areas.gpkg")
    rules = load_rules(rules_file(tmp_path, 'id = "code"\ncounts = ["persons"]\nwork_crs = "EPSG:3035"'))
    file = read_areas(areas, rules.areas)
    assert file.areas.crs == "EPSG:3035"  # the stated CRS, not the UTM zone chosen by default
    assert "the stated work_crs" in file.crs_note
    # geopandas/pyproj (reference libraries) measure the same areas in that CRS
    expected = gdf.to_crs("EPSG:3035").area.to_numpy()
    np.testing.assert_allclose(file.areas.area, expected, rtol=1e-9)


def test_the_summary_says_which_crs_was_chosen(tmp_path):
    from zonedesign.api import base_summary, prepare

    geoms = [shapely.box(15 + 0.01 * k, 50, 15.01 + 0.01 * k, 50.01) for k in range(3)]
    gdf = gpd.GeoDataFrame({"code": ["A", "B", "C"], "persons": [1, 2, 3]}, geometry=geoms, crs="EPSG:4326")
    areas = write_gpkg(gdf, tmp_path / "areas.gpkg")
    default = base_summary(prepare(areas, rules_file(tmp_path, 'id = "code"\ncounts = ["persons"]')), "design")
    # common practice: the UTM zone of the data's centre (zone 33 north at 15 E)
    assert default["areas"]["crs"] == "EPSG:32633"
    assert "UTM zone of the data's centre" in default["areas"]["crs_choice"]
    stated = prepare(areas, rules_file(tmp_path, 'id = "code"\ncounts = ["persons"]\nwork_crs = "EPSG:3035"'))
    assert "stated work_crs" in base_summary(stated, "design")["areas"]["crs_choice"]


@pytest.mark.parametrize(
    "value, message",
    [
        ('"EPSG:4326"', "areas.work_crs: 'EPSG:4326' (WGS 84) is geographic (degrees)"),
        ('"EPSG:999999"', "areas.work_crs: 'EPSG:999999' is not a CRS pyproj knows"),
        ("32633", "areas.work_crs: expected a non-empty text"),
        ('"EPSG:2249"', "areas.work_crs: 'EPSG:2249' (NAD83 / Massachusetts Mainland (ftUS)) is not a projected CRS in metres"),
    ],
)
def test_a_work_crs_that_is_not_projected_metres_is_exit_2(tmp_path, capsys, value, message):
    rules = rules_file(tmp_path, f'id = "code"\ncounts = ["persons"]\nwork_crs = {value}')
    err = one_line_exit_2(["rules", "check", str(rules)], capsys)
    assert f"rules.toml:4: {message}" in err  # [areas] is line 1


# ---------------------------------------------------------------- overlaps and duplicates


def test_overlaps_cut_keeps_each_overlap_in_the_polygon_it_is_the_larger_share_of(tmp_path):
    # A [0,1] and B [0.5,2] share [0.5,1]: half of A, a third of B, so A keeps it
    # C [3,4] and D [3.5,4.5] share half of each: a tie, kept by the smaller id C
    geoms = [shapely.box(0, 0, 1, 1), shapely.box(0.5, 0, 2, 1), shapely.box(3, 0, 4, 1), shapely.box(3.5, 0, 4.5, 1)]
    gdf = gpd.GeoDataFrame({"code": ["A", "B", "C", "D"], "persons": [1, 2, 3, 4]}, geometry=geoms, crs=UTM)
    areas = write_gpkg(gdf, tmp_path / "areas.gpkg")
    refused = load_rules(rules_file(tmp_path, 'id = "code"\ncounts = ["persons"]'))
    with pytest.raises(InputError, match=r"2 overlapping pair\(s\) of polygons: 'A' and 'B' \(0.5 m2\)"):
        read_areas(areas, refused.areas)
    rules = load_rules(rules_file(tmp_path, 'id = "code"\ncounts = ["persons"]\noverlaps = "cut"'))
    file = read_areas(areas, rules.areas)
    # shapely (reference library): the areas left are those of the cut boxes
    assert file.areas.area.tolist() == pytest.approx([1.0, 1.0, 1.0, 0.5])
    assert shapely.equals(file.geometry[1], shapely.box(1, 0, 2, 1))
    assert [(c["kept_by"], c["cut_from"]) for c in file.overlaps_cut] == [("A", "B"), ("C", "D")]
    g = file.geometry.to_numpy()
    assert max(shapely.area(shapely.intersection(g[a], g[b])) for a in range(4) for b in range(a + 1, 4)) == 0.0


def test_identical_polygons_are_duplicates_refused_or_merged_never_silent(tmp_path, capsys):
    geoms = [shapely.box(0, 0, 1, 1), shapely.box(1, 0, 2, 1), shapely.box(1, 0, 2, 1)]
    gdf = gpd.GeoDataFrame({"code": ["A", "B", "B2"], "persons": [5, 7, 11]}, geometry=geoms, crs=UTM)
    areas = write_gpkg(gdf, tmp_path / "areas.gpkg")
    refuse = rules_file(tmp_path, 'id = "code"\ncounts = ["persons"]')
    err = one_line_exit_2(design_argv(areas, refuse, tmp_path / "out"), capsys)
    assert "1 pair(s) of identical polygons (duplicate areas): 'B' and 'B2' (persons 7 and 11)" in err
    assert "overlap" not in err.split("duplicate areas")[1].split(";")[0]  # not an "overlap of 1 m2"
    cut = load_rules(rules_file(tmp_path, 'id = "code"\ncounts = ["persons"]\noverlaps = "cut"'))
    file = read_areas(areas, cut.areas)
    assert file.areas.ids.tolist() == ["A", "B"]  # the first id kept
    assert file.areas.counts[:, 0].tolist() == [5.0, 18.0]  # counts summed: 7 + 11
    assert file.duplicates_merged == [
        {"kept": "B", "merged": ["B2"], "counts": {"B": {"persons": 7.0}, "B2": {"persons": 11.0}}}
    ]
    assert any("duplicate polygon(s) merged" in n for n in file.notes)


def test_row_ids_name_areas_by_their_row_number(tmp_path):
    gdf = gpd.GeoDataFrame({"persons": [1, 2, 3]}, geometry=squares(3), crs=UTM)
    areas = write_gpkg(gdf, tmp_path / "areas.gpkg")
    file = read_areas(areas, load_rules(rules_file(tmp_path, 'id = "@row"\ncounts = ["persons"]')).areas)
    assert file.areas.ids.tolist() == ["1", "2", "3"]
    assert any('id = "@row"' in n for n in file.notes)


@pytest.mark.parametrize(
    "areas_text, message",
    [
        ('id = "code"\ncounts = ["persons"]\noverlaps = "mend"', "areas.overlaps: 'mend' is not one of 'refuse', 'cut'"),
        ('id = "code"\ncounts = ["persons"]\noverlaps = true', "areas.overlaps: expected a non-empty text"),
        ('id = "@row"\ncounts = ["persons"]\ntable = "counts.csv"', 'areas.table: a table is joined on the id column'),
    ],
)
def test_bad_overlap_and_id_keys_are_exit_2(tmp_path, capsys, areas_text, message):
    err = one_line_exit_2(["rules", "check", str(rules_file(tmp_path, areas_text))], capsys)
    assert message in err


@pytest.mark.opendata
def test_auckland_runs_end_to_end_with_overlaps_cut_and_row_ids(spdata_dir, tmp_path, capsys):
    import networkx as nx

    # r-cran-spdata auckland.shp: 167 census area units, no CRS, no id column; one
    # polygon is drawn twice and 16 more pairs overlap slightly
    shp = spdata_dir / "auckland.shp"
    rules = tmp_path / "rules.toml"
    rules.write_text(
        '[areas]\nid = "@row"\ncounts = ["Und5_81"]\ncrs = "EPSG:2193"\noverlaps = "cut"\n\n'
        '[[tier]]\nname = "tier1"\nmin = { Und5_81 = 2000 }\nmax = { Und5_81 = 6000 }\n'
        'target = { Und5_81 = 3500 }\n\n[search]\nmethod = "descent"\nconstructions = 1\n'
        "time_limit_fence = 600.0\n"
    )
    out = tmp_path / "out"
    code = main(["design", str(shp), "--rules", str(rules), "--out", str(out), "--quiet", "--no-report"])
    assert code == 0, capsys.readouterr().err
    import json

    summary = json.loads((out / "summary.json").read_text())
    assert summary["areas"]["count"] == 166  # 167 less the duplicate merged into its twin
    assert len(summary["areas"]["duplicates_merged"]) == 1
    assert len(summary["areas"]["overlaps_cut"]) == 16
    raw = gpd.read_file(shp)
    lookup = pd.read_csv(out / "lookup.csv", dtype=str)
    zones = gpd.read_file(out / "zones.gpkg", layer="tier1")
    # pandas (reference): no count is lost when the duplicate is merged
    assert zones["Und5_81"].sum() == pytest.approx(raw["Und5_81"].sum())
    # networkx (reference library): every zone is connected in the rook graph of the
    # original polygons that shapely finds (a boundary of positive shared length)
    g = raw.geometry.to_numpy()
    i, j = shapely.STRtree(g).query(g, predicate="intersects")
    keep = i < j
    i, j = i[keep], j[keep]
    shared = shapely.length(shapely.intersection(shapely.boundary(g[i]), shapely.boundary(g[j])))
    graph = nx.Graph()
    graph.add_nodes_from(range(len(raw)))
    graph.add_edges_from((a, b) for a, b, s in zip(i.tolist(), j.tolist(), shared.tolist()) if s > 0)
    for zone, rows in lookup.groupby("tier1")["area"]:
        members = [int(r) - 1 for r in rows]  # @row ids count rows from 1
        assert nx.is_connected(graph.subgraph(members)), zone
    # shapely (reference library): no two dissolved zones overlap
    z = zones.geometry.to_numpy()
    a, b = shapely.STRtree(z).query(z, predicate="intersects")
    common = shapely.area(shapely.intersection(z[a[a < b]], z[b[a < b]]))
    assert common.size == 0 or common.max() < 1e-9 * shapely.area(z).min()
    # show says what was mended, never silently
    capsys.readouterr()
    assert main(["show", str(out)]) == 0
    shown = capsys.readouterr().out
    assert "overlaps cut: 16 pair(s)" in shown and "duplicates merged: 1 (" in shown


# ---------------------------------------------------------------- per-fence overrides

# By construction: fence U holds 4 squares of 25 persons (100 in all), fence R 3 squares of
# 10 (30 in all). The tier's floor of 50 can be met in U but never in R; an override that
# lowers the floor to 20 in R alone makes R feasible and leaves U's floor as it was.
TIER = '[[tier]]\nname = "tier1"\nmin = { persons = 50 }\nmax = { persons = 100 }\ntarget = { persons = 60 }\n'
OVERRIDE = '\n[[tier.override]]\nfences = ["R"]\nmin = { persons = 20 }\ntarget = { persons = 30 }\n'


def two_fences(tmp_path: Path) -> Path:
    gdf = gpd.GeoDataFrame(
        {"code": [f"U{k}" for k in range(4)] + [f"R{k}" for k in range(3)],
         "persons": [25] * 4 + [10] * 3, "district": ["U"] * 4 + ["R"] * 3},
        geometry=squares(7), crs=UTM,
    )
    return write_gpkg(gdf, tmp_path / "areas.gpkg")


AREAS = 'id = "code"\ncounts = ["persons"]\nfence = "district"'


def test_an_override_lowers_the_floor_in_its_fence_and_only_there(tmp_path):
    from zonedesign.api import prepare
    from zonedesign.verify.certificate import certify
    from zonedesign.verify.checks import audit

    areas = two_fences(tmp_path)
    # a hand-made lookup: u1 = U0 (25 persons, below 50), u2 = U1..U3 (75), r1 = all of R (30)
    lookup = {"tier1": np.array(["u1", "u2", "u2", "u2", "r1", "r1", "r1"], dtype=object)}
    for with_override, broken in ((False, {"u1", "r1"}), (True, {"u1"})):
        rules = load_rules(rules_file(tmp_path, AREAS, TIER + (OVERRIDE if with_override else "")))
        prep = prepare(areas, rules)
        found = audit(prep.areas, prep.graph, lookup, list(rules.tiers))
        assert {v.zone for v in found.violations if v.kind == "bounds"} == broken
        certs = {c.fence: c.ok for c in certify(prep.areas, prep.graph, lookup, list(rules.tiers))}
        assert certs == {"U": False, "R": with_override}


def test_design_meets_an_overridden_floor_and_the_summary_lists_the_override(tmp_path):
    import json

    areas = two_fences(tmp_path)
    out = tmp_path / "out"
    without = rules_file(tmp_path, AREAS, TIER)
    assert main([*design_argv(areas, without, tmp_path / "plain")]) == 1  # R cannot reach 50
    rules = rules_file(tmp_path, AREAS, TIER + OVERRIDE)
    assert main([*design_argv(areas, rules, out)]) == 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["overrides"] == {
        "tier1": [{"fences": ["R"], "min": {"persons": 20.0}, "max": {}, "target": {"persons": 30.0}, "weights": {}}]
    }
    lookup = pd.read_csv(out / "lookup.csv", dtype=str)
    sums = lookup.assign(persons=[25] * 4 + [10] * 3).groupby("tier1")["persons"].sum()
    r_zones = lookup.loc[lookup["area"].str.startswith("R"), "tier1"].unique()
    assert all(20 <= sums[z] <= 100 for z in r_zones)  # the override's floor in R
    assert all(50 <= sums[z] <= 100 for z in set(sums.index) - set(r_zones))  # the tier's own in U


def test_an_unknown_override_fence_is_exit_2_naming_it(tmp_path, capsys):
    areas = two_fences(tmp_path)
    rules = rules_file(tmp_path, AREAS, TIER + OVERRIDE.replace('["R"]', '["R", "Q"]'))
    for argv in (["rules", "check", str(rules), str(areas)], design_argv(areas, rules, tmp_path / "out")):
        err = one_line_exit_2(argv, capsys)
        assert "tier.1.override.1.fences: fence code(s) 'Q' not among the fences of" in err
        assert "rules.toml:13:" in err  # the line of the override's fences key


@pytest.mark.parametrize(
    "override, message",
    [
        ('fences = ["R"]\nmin = { persons = 20 }\n\n[[tier.override]]\nfences = ["R"]\nmax = { persons = 90 }',
         "tier.1.override.2.fences: fence 'R' is already in override 1 of this tier; overrides of a tier must not overlap"),
        ('fences = "R"\nmin = { persons = 20 }', "tier.1.override.1.fences: expected a non-empty list of fence codes"),
        ('fences = []\nmin = { persons = 20 }', "tier.1.override.1.fences: expected a non-empty list of fence codes"),
        ('min = { persons = 20 }', "tier.1.override.1.fences: missing"),
        ('fences = ["R"]', "tier.1.override.1: changes nothing"),
        ('fences = ["R"]\nmin = { persons = 120 }', "tier.1.override.1.min.persons: min 120 is above max 100"),
        ('fences = ["R"]\nmin = { flats = 2 }', "tier.1.override.1.min.flats: unknown key"),
        ('fences = ["R"]\nmin = { persons = -1 }', "tier.1.override.1.min.persons: must be at least 0"),
        ('fences = ["R"]\nbounds = 3', "tier.1.override.1.bounds: unknown key in [[tier.override]]"),
    ],
)
def test_bad_overrides_are_rules_errors_with_their_key(override, message):
    text = f"[areas]\n{AREAS}\n\n{TIER}\n[[tier.override]]\n{override}\n"
    with pytest.raises(RulesError) as info:
        parse_rules(text, "r.toml")
    assert message in str(info.value)


def test_overrides_round_trip_and_take_sweep_keys():
    from zonedesign.rules import apply_override, rules_to_toml, tier_in_fence

    rules = parse_rules(f"[areas]\n{AREAS}\n\n{TIER}{OVERRIDE}")
    assert parse_rules(rules_to_toml(rules)).tiers == rules.tiers
    swept = apply_override(rules, "tier.1.override.1.min.persons", "15")
    assert tier_in_fence(swept.tiers[0], "R").min == {"persons": 15.0}
    assert tier_in_fence(swept.tiers[0], "U").min == {"persons": 50.0}
    with pytest.raises(RulesError, match="has 1 override"):
        apply_override(rules, "tier.1.override.2.min.persons", "15")


# ---------------------------------------------------------------- locked zones

# By construction: fence U holds U0..U3 (25 persons each), fence R holds R0..R2 (10 each).
# The agreed zone AGREED-1 is U0 + U1 (50 persons); every other zone is free.
LOCK_TIERS = (
    '[[tier]]\nname = "tier1"\nmin = { persons = 20 }\nmax = { persons = 100 }\ntarget = { persons = 50 }\n\n'
    '[[tier]]\nname = "tier2"\nmin = { persons = 20 }\nmax = { persons = 1000 }\n'
)


def locked_inputs(tmp_path: Path, lock_csv: str) -> tuple[Path, Path]:
    areas = two_fences(tmp_path)
    (tmp_path / "locked.csv").write_text(lock_csv)
    rules = rules_file(tmp_path, AREAS, LOCK_TIERS + '\n[lock]\nfile = "locked.csv"\n')
    return areas, rules


def test_design_keeps_a_locked_zone_exactly_and_designs_around_it(tmp_path):
    import json

    areas, rules = locked_inputs(tmp_path, "area,tier1\nU0,AGREED-1\nU1,AGREED-1\n")
    out = tmp_path / "out"
    assert main(design_argv(areas, rules, out)) == 0
    lookup = pd.read_csv(out / "lookup.csv", dtype=str).set_index("area")
    assert sorted(lookup.index[lookup["tier1"] == "AGREED-1"]) == ["U0", "U1"]
    assert lookup.loc["U2", "tier1"] == lookup.loc["U3", "tier1"] != "AGREED-1"  # 50 persons, the rest of U
    summary = json.loads((out / "summary.json").read_text())
    assert summary["locks"]["kept"] is True
    assert summary["locks"]["zones"] == {"tier1": ["AGREED-1"]}


def test_a_locked_zone_survives_a_redraw_after_a_count_shock_unchanged(tmp_path):
    import json

    areas, rules = locked_inputs(tmp_path, "area,tier1\nU0,AGREED-1\nU1,AGREED-1\n")
    first = tmp_path / "first"
    assert main(design_argv(areas, rules, first)) == 0
    # a count shock: U0 and U1 now hold 80 persons each, 160 in the agreed zone (max 100)
    gdf = gpd.read_file(areas)
    gdf.loc[gdf["code"].isin(["U0", "U1"]), "persons"] = 80
    later = write_gpkg(gdf, tmp_path / "later.gpkg")
    second = tmp_path / "second"
    code = main(["redraw", str(later), "--rules", str(rules), "--previous", str(first / "lookup.csv"),
                 "--out", str(second), "--quiet", "--no-report", "--no-certificate"])
    assert code == 1  # the agreed zone now breaks the ceiling, and stays as agreed
    lookup = pd.read_csv(second / "lookup.csv", dtype=str).set_index("area")
    assert sorted(lookup.index[lookup["tier1"] == "AGREED-1"]) == ["U0", "U1"]
    summary = json.loads((second / "summary.json").read_text())
    (brk,) = [b for b in summary["bound_breaks"] if b["tier"] == "tier1"]
    assert brk["zone"] == "AGREED-1" and brk["locked"] is True
    assert summary["locks"]["kept"] is True


def test_every_sweep_variant_keeps_a_locked_zone_and_a_ceiling_below_it_is_a_proven_locked_break(tmp_path):
    import json

    areas, rules = locked_inputs(tmp_path, "area,tier1\nU0,AGREED-1\nU1,AGREED-1\n")
    out = tmp_path / "sweep"
    # the agreed zone holds 50 persons: a ceiling of 40 breaks it, one of 100 does not
    code = main(["sweep", str(areas), "--rules", str(rules), "--vary", "tier.1.max.persons,tier.1.target.persons=40/30,100/50",
                 "--out", str(out), "--quiet", "--no-report"])
    assert code == 1  # one variant holds a break, however forced
    rows = {r["tier.1.max.persons"]: r for r in json.loads((out / "summary.json").read_text())["sweep"]["variants"]}
    assert rows[100]["locks_kept"] is True and rows[100]["bound_breaks"] == 0
    assert rows[40]["locks_kept"] is True and rows[40]["bound_breaks"] == 1
    for folder in sorted((out / "variants").iterdir()):
        lookup = pd.read_csv(folder / "lookup.csv", dtype=str).set_index("area")
        assert sorted(lookup.index[lookup["tier1"] == "AGREED-1"]) == ["U0", "U1"], folder.name
    tight = [f for f in (out / "variants").iterdir() if "40" in f.name]
    summary = json.loads((tight[0] / "summary.json").read_text())
    (brk,) = summary["bound_breaks"]
    assert brk["zone"] == "AGREED-1" and brk["locked"] is True
    (proof,) = summary["proofs"]
    assert proof["kind"] == "lock" and "the lock forces the break" in proof["text"]


def test_the_audit_reports_a_locked_zone_the_lookup_does_not_keep(tmp_path):
    import json

    areas, rules = locked_inputs(tmp_path, "area,tier1\nU0,AGREED-1\nU1,AGREED-1\n")
    (tmp_path / "lookup.csv").write_text(
        "area,tier1,tier2\nU0,AGREED-1,T1\nU1,Z2,T1\nU2,Z2,T1\nU3,Z2,T1\nR0,Z3,T2\nR1,Z3,T2\nR2,Z3,T2\n"
    )
    out = tmp_path / "out"
    code = main(["audit", str(areas), "--rules", str(rules), "--lookup", str(tmp_path / "lookup.csv"),
                 "--out", str(out), "--quiet", "--no-report", "--no-certificate"])
    assert code == 1
    summary = json.loads((out / "summary.json").read_text())
    (lock,) = [v for v in summary["audit"]["violations"] if v.get("kind") == "lock"]
    assert lock["zone"] == "AGREED-1" and "1 of its areas elsewhere ('U1')" in lock["message"]


def test_audit_repair_mends_what_it_can_and_says_the_locked_break_left_is_forced(tmp_path):
    import json

    areas = two_fences(tmp_path)
    (tmp_path / "locked.csv").write_text("area,tier1\nU0,AGREED-1\nU1,AGREED-1\n")
    tiers = ('[[tier]]\nname = "tier1"\nmin = { persons = 20 }\nmax = { persons = 45 }\n\n'
             '[[tier]]\nname = "tier2"\nmin = { persons = 20 }\nmax = { persons = 1000 }\n')
    rules = rules_file(tmp_path, AREAS, tiers + '\n[lock]\nfile = "locked.csv"\n')
    # AGREED-1 holds 50 persons (ceiling 45): the lock forces that break; Z2 (50) can be split
    (tmp_path / "lookup.csv").write_text(
        "area,tier1,tier2\nU0,AGREED-1,T1\nU1,AGREED-1,T1\nU2,Z2,T1\nU3,Z2,T1\nR0,Z3,T2\nR1,Z3,T2\nR2,Z3,T2\n"
    )
    out = tmp_path / "out"
    code = main(["audit", str(areas), "--rules", str(rules), "--lookup", str(tmp_path / "lookup.csv"),
                 "--out", str(out), "--quiet", "--no-report", "--no-certificate", "--repair"])
    assert code == 1
    summary = json.loads((out / "summary.json").read_text())
    rep = summary["repair"]
    assert rep["method"].startswith("cp-sat") and rep["moves"] == 1  # U2 or U3 leaves Z2
    assert rep["breaks_left"] == rep["breaks_left_forced"] == 1
    fixed = pd.read_csv(out / "repaired" / "lookup.csv", dtype=str).set_index("area")
    assert sorted(fixed.index[fixed["tier1"] == "AGREED-1"]) == ["U0", "U1"]
    assert fixed.loc["U2", "tier1"] != fixed.loc["U3", "tier1"]


@pytest.mark.parametrize(
    "lock_csv, message",
    [
        ("area,tier1\nU0,L1\nU2,L1\n", "locked zone 'L1' of tier 'tier1' is not contiguous: 2 pieces ('U0' | 'U2')"),
        ("area,tier1\nU3,L1\nR0,L1\n", "locked zone 'L1' of tier 'tier1' crosses fences R, U"),
        ("area,tier1\nU0,L1\nX9,L1\n", "locked.csv: 1 area id(s) not in the areas file: 'X9'"),
        ("area,ward\nU0,L1\n", "locked.csv: column(s) 'ward' name no tier"),
        ("code,tier1\nU0,L1\n", "locked.csv: no column 'area'"),
        ("area,tier1\nU0,L1\nU0,L2\n", "locked.csv: area id(s) listed twice: 'U0'"),
        ("area,tier1,tier2\nU0,L1,B1\nU1,L1,\n", "locked zone 'L1' of tier 'tier1' straddles the tier 'tier2' zones"),
    ],
)
def test_bad_lock_files_are_exit_2_with_one_line(tmp_path, capsys, lock_csv, message):
    areas, rules = locked_inputs(tmp_path, lock_csv)
    for argv in (design_argv(areas, rules, tmp_path / "out"), ["rules", "check", str(rules), str(areas)]):
        err = one_line_exit_2(argv, capsys)
        assert message in err


@pytest.mark.parametrize(
    "lock, message",
    [
        ("[lock]\n", "lock: a [lock] table needs file"),
        ('[lock]\nfile = 3\n', "lock.file: expected a non-empty text"),
        ('[lock]\nfile = "a.csv"\nzones = 2\n', "lock.zones: unknown key in [lock]"),
    ],
)
def test_bad_lock_keys_are_rules_errors(lock, message):
    with pytest.raises(RulesError) as info:
        parse_rules(f"[areas]\n{AREAS}\n\n{LOCK_TIERS}\n{lock}")
    assert message in str(info.value)


def test_the_demo_locks_two_agreed_zones_each_contiguous_in_one_district(tmp_path):
    import networkx as nx

    from zonedesign.demo.scenarios import demo_region, write_demo_input
    from zonedesign.graph.adjacency import rook_graph
    from zonedesign.rules import load_rules

    paths = write_demo_input(tmp_path, seed=7, n=1500)
    rules = load_rules(paths["rules"])
    assert rules.lock.file == paths["locked"].absolute()
    assert any(t.overrides for t in rules.tiers)
    locked = pd.read_csv(paths["locked"], dtype=str)
    gdf = demo_region(7, 1500)
    small = rules.tiers[0].name
    assert list(locked.columns) == ["area", small] and locked[small].nunique() == 2
    g = rook_graph(gdf.geometry.values)
    graph = nx.Graph()
    graph.add_edges_from(zip(*(a.tolist() for a in g.edges()[:2])))
    row = {c: k for k, c in enumerate(gdf["code"])}
    lo, hi = rules.tiers[0].min["households"], rules.tiers[0].max["households"]
    for _, zone in locked.groupby(small)["area"]:
        members = [row[a] for a in zone]
        # networkx (reference library): each agreed zone is connected in the rook graph
        assert nx.is_connected(graph.subgraph(members))
        assert gdf["district"].iloc[members].nunique() == 1
        assert lo <= gdf["households"].iloc[members].sum() <= hi


# ---------------------------------------------------------------- a fence per tier

# By construction: 8 squares of 10 persons in a row; wards of two squares (W1..W4) nest in
# districts of four (D1, D2). Tier 1 keeps to wards and needs exactly 20 persons, so its
# zones are the wards; tier 2 keeps to districts and needs exactly 40, so its zones join
# two wards each: possible only if tier 2 may cross the ward lines that tier 1 may not.
FENCE_TIERS = (
    '[[tier]]\nname = "tier1"\nfence = "ward"\nmin = { persons = 20 }\nmax = { persons = 20 }\n\n'
    '[[tier]]\nname = "tier2"\nmin = { persons = 40 }\nmax = { persons = 40 }\n'
)


def wards(tmp_path: Path, district: list[str] | None = None) -> Path:
    gdf = gpd.GeoDataFrame(
        {"code": [f"A{k}" for k in range(8)], "persons": [10] * 8,
         "ward": [f"W{k // 2 + 1}" for k in range(8)],
         "district": district or ["D1"] * 4 + ["D2"] * 4},
        geometry=squares(8), crs=UTM,
    )
    return write_gpkg(gdf, tmp_path / "areas.gpkg")


def test_each_tier_keeps_to_its_own_fence_and_upper_zones_join_lower_fences(tmp_path):
    areas = wards(tmp_path)
    rules = rules_file(tmp_path, 'id = "code"\ncounts = ["persons"]\nfence = "district"', FENCE_TIERS)
    out = tmp_path / "out"
    assert main(design_argv(areas, rules, out)) == 0
    lookup = pd.read_csv(out / "lookup.csv", dtype=str)
    ward = [f"W{k // 2 + 1}" for k in range(8)]
    # tier 1 zones are exactly the wards, tier 2 zones exactly the districts
    assert lookup.groupby("tier1")["area"].apply(lambda a: {ward[int(x[1:])] for x in a}).map(len).eq(1).all()
    assert lookup["tier1"].nunique() == 4 and lookup["tier2"].nunique() == 2
    assert lookup.groupby("tier2")["area"].apply(lambda a: sorted(a)).tolist() == [
        ["A0", "A1", "A2", "A3"], ["A4", "A5", "A6", "A7"]
    ]


def test_the_audit_holds_each_tier_to_its_own_fence(tmp_path):
    from zonedesign.api import prepare
    from zonedesign.verify.checks import audit

    areas = wards(tmp_path)
    rules = load_rules(rules_file(tmp_path, 'id = "code"\ncounts = ["persons"]\nfence = "district"', FENCE_TIERS))
    prep = prepare(areas, rules)
    good = {"tier1": np.array(["a", "a", "b", "b", "c", "c", "d", "d"], dtype=object),
            "tier2": np.array(["x"] * 4 + ["y"] * 4, dtype=object)}
    assert audit(prep.areas, prep.graph, good, list(rules.tiers)).ok
    # A1 + A2 cross the line between W1 and W2: a fence break of tier 1 only
    bad = dict(good, tier1=np.array(["a", "b", "b", "c", "c", "e", "d", "d"], dtype=object))
    found = audit(prep.areas, prep.graph, bad, list(rules.tiers))
    assert {(v.kind, v.tier) for v in found.violations if v.kind == "fence"} == {("fence", "tier1")}


def test_a_lower_fence_that_does_not_nest_is_exit_2_naming_an_area(tmp_path, capsys):
    # W2 (A2, A3) lies in both districts once A3 moves to D2
    areas = wards(tmp_path, ["D1"] * 3 + ["D2"] * 5)
    rules = rules_file(tmp_path, 'id = "code"\ncounts = ["persons"]\nfence = "district"', FENCE_TIERS)
    for argv in (design_argv(areas, rules, tmp_path / "out"), ["rules", "check", str(rules), str(areas)]):
        err = one_line_exit_2(argv, capsys)
        assert ("fence 'ward' of tier 'tier1': code 'W2' is split between fences 'district' 'D1' (area 'A2') "
                "and 'D2' (area 'A3') of tier 'tier2'") in err


@pytest.mark.parametrize(
    "fence, message",
    [("3", "tier.1.fence: expected a non-empty text"), ('"wards"', "tier.1.fence: column 'wards' is not in")],
)
def test_bad_tier_fences_are_exit_2(tmp_path, capsys, fence, message):
    areas = wards(tmp_path)
    tiers = FENCE_TIERS.replace('fence = "ward"', f"fence = {fence}")
    rules = rules_file(tmp_path, 'id = "code"\ncounts = ["persons"]\nfence = "district"', tiers)
    err = one_line_exit_2(["rules", "check", str(rules), str(areas)], capsys)
    assert message in err


def test_audit_repair_never_moves_a_locked_zone(tmp_path):
    import json

    areas = two_fences(tmp_path)
    # the agreed zone holds U0..U2 (75 persons); U3 alone (25) is below the floor of 30, and
    # every mend moves one area into or out of the agreed zone, which the lock forbids
    (tmp_path / "locked.csv").write_text("area,tier1\nU0,AGREED-1\nU1,AGREED-1\nU2,AGREED-1\n")
    tiers = LOCK_TIERS.replace("min = { persons = 20 }\nmax = { persons = 100 }", "min = { persons = 30 }\nmax = { persons = 100 }", 1)
    rules = rules_file(tmp_path, AREAS, tiers + '\n[lock]\nfile = "locked.csv"\n')
    (tmp_path / "lookup.csv").write_text(
        "area,tier1,tier2\nU0,AGREED-1,T1\nU1,AGREED-1,T1\nU2,AGREED-1,T1\nU3,Z2,T1\nR0,Z3,T2\nR1,Z3,T2\nR2,Z3,T2\n"
    )
    out = tmp_path / "out"
    code = main(["audit", str(areas), "--rules", str(rules), "--lookup", str(tmp_path / "lookup.csv"),
                 "--repair", "--out", str(out), "--quiet", "--no-report", "--no-certificate"])
    assert code == 1
    summary = json.loads((out / "summary.json").read_text())
    # the CP-SAT repair keeps the lock, so it proves that no mend exists and moves nothing
    assert summary["repair"]["method"] == "cp-sat (fewest moves)", summary["repair"]
    assert summary["repair"]["status"] == "infeasible" and summary["repair"]["moves"] == 0
    repaired = pd.read_csv(out / "repaired" / "lookup.csv", dtype=str).set_index("area")
    assert sorted(repaired.index[repaired["tier1"] == "AGREED-1"]) == ["U0", "U1", "U2"]


def test_a_redraw_keeps_each_tier_to_its_own_fence(tmp_path):
    areas = wards(tmp_path)
    rules = rules_file(tmp_path, 'id = "code"\ncounts = ["persons"]\nfence = "district"', FENCE_TIERS)
    first, second = tmp_path / "first", tmp_path / "second"
    assert main(design_argv(areas, rules, first)) == 0
    code = main(["redraw", str(areas), "--rules", str(rules), "--previous", str(first / "lookup.csv"),
                 "--out", str(second), "--quiet", "--no-report", "--no-certificate"])
    assert code == 0
    # nothing changed, so nothing moves: the zones are still the wards and the districts
    a = pd.read_csv(first / "lookup.csv", dtype=str)
    b = pd.read_csv(second / "lookup.csv", dtype=str)
    assert a.equals(b)
