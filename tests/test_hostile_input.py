"""Bad input is refused with exit code 2 and one line that says what is wrong and where.

Each test feeds the command line one kind of hostile input and checks the exit code, that
stderr holds exactly one line (no traceback), what that line names (file, row id, column,
key, line) and that no output folder appears. Invalid polygons are the exception: they
are repaired, listed and the run goes on.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import shapely
from cli_support import RULES, Ran, checksums, region, run_cli, write_areas, write_inputs

QUICK = ("--quiet", "--no-report", "--no-certificate")


def line_of(text: str, needle: str) -> int:
    """1-based line of the first line of `text` containing `needle`."""
    return next(k for k, line in enumerate(text.splitlines(), start=1) if needle in line)


def design(capsys, folder: Path, gdf=None, rules: str = RULES, *extra: str) -> Ran:
    areas, rules_path = write_inputs(folder, gdf, rules)
    return run_cli(capsys, "design", areas, "--rules", rules_path, "--out", folder / "out", *QUICK, *extra)


def refused(ran: Ran, pattern: str, out: Path | None = None) -> str:
    """The run exited 2 with one error line matching `pattern`; returns that line."""
    assert ran.code == 2, ran
    assert "Traceback" not in ran.err
    assert len(ran.err_lines) == 1, ran.err
    line = ran.err_lines[0]
    assert line.startswith("zonedesign: error: "), line
    assert re.search(pattern, line), f"{pattern!r} not in {line!r}"
    if out is not None:
        assert not out.exists()
    return line


@pytest.fixture(scope="module")
def designed(tmp_path_factory) -> dict[str, Path]:
    """A finished design of the small region: its inputs and its lookup."""
    from zonedesign.cli import main

    folder = tmp_path_factory.mktemp("designed")
    areas, rules = write_inputs(folder / "input")
    assert main(["design", str(areas), "--rules", str(rules), "--out", str(folder / "out"), *QUICK]) == 0
    return {"areas": areas, "rules": rules, "lookup": folder / "out" / "lookup.csv", "out": folder / "out"}


# ---------------------------------------------------------------- files and layers


def test_a_missing_areas_file_is_named(capsys, tmp_path: Path) -> None:
    _, rules = write_inputs(tmp_path)
    ran = run_cli(capsys, "design", tmp_path / "nope.gpkg", "--rules", rules, "--out", tmp_path / "out", *QUICK)
    refused(ran, r"nope\.gpkg: file not found", tmp_path / "out")


def test_a_missing_rules_file_is_named(capsys, tmp_path: Path) -> None:
    areas, _ = write_inputs(tmp_path)
    ran = run_cli(capsys, "design", areas, "--rules", tmp_path / "nope.toml", "--out", tmp_path / "out", *QUICK)
    refused(ran, r"nope\.toml: rules file not found", tmp_path / "out")


def test_a_file_that_is_not_a_gis_file_is_unreadable(capsys, tmp_path: Path) -> None:
    _, rules = write_inputs(tmp_path)
    junk = tmp_path / "junk.gpkg"
    junk.write_bytes(b"not a geopackage at all\n" * 20)
    ran = run_cli(capsys, "design", junk, "--rules", rules, "--out", tmp_path / "out", *QUICK)
    refused(ran, r"junk\.gpkg: cannot read \(.*not recognized", tmp_path / "out")


def test_a_folder_given_as_the_areas_file_is_unreadable(capsys, tmp_path: Path) -> None:
    _, rules = write_inputs(tmp_path)
    (tmp_path / "dir").mkdir()
    ran = run_cli(capsys, "design", tmp_path / "dir", "--rules", rules, "--out", tmp_path / "out", *QUICK)
    refused(ran, r"dir: cannot read", tmp_path / "out")


def test_an_empty_layer_is_refused(capsys, tmp_path: Path) -> None:
    refused(design(capsys, tmp_path, region().iloc[:0]), r"areas\.gpkg: no rows \(empty layer\)", tmp_path / "out")


def test_two_layers_need_a_layer_name(capsys, tmp_path: Path) -> None:
    areas, rules = write_inputs(tmp_path)
    write_areas(region(), areas, layer="other")
    ran = run_cli(capsys, "design", areas, "--rules", rules, "--out", tmp_path / "out", *QUICK)
    refused(ran, r"areas\.gpkg: 2 layers \('areas', 'other'\); say which with --layer", tmp_path / "out")
    # naming one of them is enough
    ran = run_cli(capsys, "design", areas, "--rules", rules, "--out", tmp_path / "out", "--layer", "other", *QUICK)
    assert ran.code == 0, ran


def test_a_wrong_layer_name_lists_the_layers(capsys, tmp_path: Path) -> None:
    ran = design(capsys, tmp_path, None, RULES, "--layer", "nope")
    refused(ran, r"areas\.gpkg: no layer 'nope' \(layers: 'areas'\)", tmp_path / "out")


# ---------------------------------------------------------------- ids


def test_a_missing_id_column_names_the_rules_key_and_line(capsys, tmp_path: Path) -> None:
    ran = design(capsys, tmp_path, region().rename(columns={"id": "code"}))
    n = line_of(RULES, 'id = "id"')
    refused(ran, rf"rules\.toml:{n}: areas\.id: column 'id' is not in .*areas\.gpkg", tmp_path / "out")


def test_duplicate_ids_list_the_first_offenders_with_their_rows(capsys, tmp_path: Path) -> None:
    g = region()
    # rows 2k+1 repeat the id of row 2k for k = 0..6: seven duplicated ids
    for k in range(7):
        g.loc[2 * k + 1, "id"] = g.loc[2 * k, "id"]
    line = refused(design(capsys, tmp_path, g), r"areas\.gpkg: column 'id': 7 duplicate id\(s\): ", tmp_path / "out")
    assert "'G000001' (rows 1, 2); 'G000003' (rows 3, 4)" in line
    assert line.endswith("; and 2 more")  # five shown, the rest counted


def test_null_ids_are_named_by_row_number(capsys, tmp_path: Path) -> None:
    g = region()
    g["id"] = g["id"].astype(object)
    g.loc[[4, 9], "id"] = None
    refused(design(capsys, tmp_path, g), r"areas\.gpkg: column 'id', rows #5, #10: no id", tmp_path / "out")


# ---------------------------------------------------------------- counts and attributes


def test_non_numeric_counts_are_named_by_row_id_and_value(capsys, tmp_path: Path) -> None:
    g = region()
    g["households"] = g["households"].astype(str)
    g.loc[[1, 5], "households"] = ["x", "lots"]
    ran = design(capsys, tmp_path, g)
    refused(ran, r"areas\.gpkg: column 'households', rows 'G000002', 'G000006': not a number \('x', 'lots'\)")


def test_negative_counts_are_named(capsys, tmp_path: Path) -> None:
    g = region()
    g.loc[1, "households"] = -3
    refused(design(capsys, tmp_path, g), r"column 'households', row 'G000002': negative \(-3\.0\)", tmp_path / "out")


def test_nan_counts_are_missing_values(capsys, tmp_path: Path) -> None:
    g = region()
    g["persons"] = g["persons"].astype(float)
    g.loc[[2, 3], "persons"] = np.nan
    ran = design(capsys, tmp_path, g)
    refused(ran, r"column 'persons', rows 'G000003', 'G000004': missing value", tmp_path / "out")


def test_a_missing_count_column_names_the_rules_key(capsys, tmp_path: Path) -> None:
    ran = design(capsys, tmp_path, region().drop(columns=["persons"]))
    n = line_of(RULES, "counts = ")
    refused(ran, rf"rules\.toml:{n}: areas\.counts: column 'persons' is not in .*areas\.gpkg", tmp_path / "out")


def test_a_missing_attribute_column_suggests_a_near_name(capsys, tmp_path: Path) -> None:
    ran = design(capsys, tmp_path, region().drop(columns=["attr_b"]))
    n = line_of(RULES, "attributes = ")
    refused(ran, rf"rules\.toml:{n}: areas\.attributes: column 'attr_b' is not in .*; did you mean 'attr_a'\?")


def test_a_constant_attribute_is_refused(capsys, tmp_path: Path) -> None:
    g = region()
    g["attr_a"] = 0.5
    ran = design(capsys, tmp_path, g)
    refused(ran, r"areas\.gpkg: column 'attr_a': the same value \(0\.5\) in every row", tmp_path / "out")


def test_a_missing_fence_column_names_the_rules_key(capsys, tmp_path: Path) -> None:
    ran = design(capsys, tmp_path, region().drop(columns=["fence"]))
    n = line_of(RULES, 'fence = "fence"')
    refused(ran, rf"rules\.toml:{n}: areas\.fence: column 'fence' is not in", tmp_path / "out")


# ---------------------------------------------------------------- geometry


def test_a_file_without_crs_needs_one_stated(capsys, tmp_path: Path) -> None:
    g = region().set_crs(None, allow_override=True)
    with pytest.warns(UserWarning, match="crs"):  # pyogrio warns while writing such a file
        ran = design(capsys, tmp_path, g)
    refused(ran, r"areas\.gpkg: no coordinate reference system; state one with crs = .* or --crs", tmp_path / "out")
    ran = run_cli(capsys, "design", tmp_path / "areas.gpkg", "--rules", tmp_path / "rules.toml", "--out",
                  tmp_path / "out", "--crs", "EPSG:3857", *QUICK)
    assert ran.code == 0, ran


@pytest.mark.parametrize("kind, make", [("point", lambda g: g.centroid), ("line", lambda g: g.boundary)])
def test_points_or_lines_are_not_polygons(capsys, tmp_path: Path, kind: str, make) -> None:
    g = region()
    g["geometry"] = make(g)
    ran = design(capsys, tmp_path, g)
    refused(ran, rf"areas\.gpkg: geometry, rows 'G000001', .* and 95 more: not a polygon \({kind}\)", tmp_path / "out")


def test_empty_and_missing_geometries_are_named(capsys, tmp_path: Path) -> None:
    g = region()
    g.loc[[5], "geometry"] = [shapely.Polygon()]
    g.loc[[7], "geometry"] = [None]
    ran = design(capsys, tmp_path, g)
    refused(ran, r"areas\.gpkg: geometry, rows 'G000006', 'G000008': empty or missing", tmp_path / "out")


def test_invalid_polygons_are_repaired_listed_and_not_fatal(capsys, tmp_path: Path) -> None:
    g = region()
    x0, y0, x1, y1 = g.geometry[11].bounds
    # a square whose ring runs back along itself: invalid (self-touching), area unchanged
    g.loc[[11], "geometry"] = [shapely.Polygon([(x0, y0), (x1, y0), (x1, y1), (x0 + 0.5, y1),
                                                (x0 + 0.5, y0 + 0.5), (x0 + 0.5, y1), (x0, y1)])]
    assert not shapely.is_valid(g.geometry[11])  # shapely agrees it is invalid
    ran = design(capsys, tmp_path, g)
    assert ran.code in (0, 1), ran
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["areas"]["repaired_polygons"] == ["G000012"]
    assert any("repaired" in note and "'G000012'" in note for note in summary["areas"]["notes"])


def test_overlapping_polygons_are_reported_with_the_pairs(capsys, tmp_path: Path) -> None:
    g = region()
    g.loc[[12], "geometry"] = [shapely.affinity.translate(g.geometry[12], 0.3, 0)]
    ran = design(capsys, tmp_path, g)
    refused(ran, r"areas\.gpkg: geometry: 1 overlapping pair\(s\) of polygons: 'G000013' and 'G000014' \(0\.3 m2\)")


def test_an_overlap_within_the_tolerance_is_accepted(capsys, tmp_path: Path) -> None:
    g = region()
    # a nanometre of drift: far below the share of a polygon's area that counts as overlap
    g.loc[[12], "geometry"] = [shapely.affinity.translate(g.geometry[12], 1e-9, 0)]
    assert design(capsys, tmp_path, g).code == 0


# ---------------------------------------------------------------- rules


def test_a_rules_syntax_error_gives_line_and_column(capsys, tmp_path: Path) -> None:
    text = RULES.replace('fence = "fence"', 'fence = "fence')
    n = line_of(text, 'fence = "fence')
    refused(design(capsys, tmp_path, None, text), rf"rules\.toml:{n}:\d+: ", tmp_path / "out")


def test_an_unknown_rules_key_is_named_with_a_suggestion(capsys, tmp_path: Path) -> None:
    text = RULES.replace("seed = 5", "seed = 5\nsead = 4")
    n = line_of(text, "sead = 4")
    ran = design(capsys, tmp_path, None, text)
    refused(ran, rf"rules\.toml:{n}: search\.sead: unknown key in \[search\] .*; did you mean 'seed'\?")


def test_a_wrong_type_in_the_rules_is_named(capsys, tmp_path: Path) -> None:
    text = RULES.replace("seed = 5", 'seed = "five"')
    n = line_of(text, 'seed = "five"')
    refused(design(capsys, tmp_path, None, text), rf"rules\.toml:{n}: search\.seed: expected a whole number, got 'five'")


def test_min_above_max_is_named(capsys, tmp_path: Path) -> None:
    text = RULES.replace("min = { households = 80 }", "min = { households = 300 }")
    n = line_of(text, "min = { households = 300 }")
    ran = design(capsys, tmp_path, None, text)
    refused(ran, rf"rules\.toml:{n}: tier\.1\.min\.households: min 300 is above max 260 \(and 1 more problem\)")


def test_a_count_column_not_in_the_data_is_named(capsys, tmp_path: Path) -> None:
    text = RULES.replace('counts = ["households", "persons"]', 'counts = ["households", "people"]')
    n = line_of(text, "counts = ")
    ran = design(capsys, tmp_path, None, text)
    refused(ran, rf"rules\.toml:{n}: areas\.counts: column 'people' is not in .*areas\.gpkg", tmp_path / "out")


def test_a_link_to_an_unknown_id_names_the_row(capsys, tmp_path: Path) -> None:
    (tmp_path / "links.csv").write_text("from,to\nG000001,G999999\n")
    text = RULES.replace("[[tier]]", '[graph]\nlinks = "links.csv"\n\n[[tier]]', 1)
    ran = design(capsys, tmp_path, None, text)
    refused(ran, r"links\.csv, row 2: unknown area id 'G999999' in link", tmp_path / "out")


# ---------------------------------------------------------------- a previous lookup


def redraw(capsys, designed: dict[str, Path], previous: pd.DataFrame, folder: Path, *extra: str) -> Ran:
    path = folder / "previous.csv"
    previous.to_csv(path, index=False)
    return run_cli(capsys, "redraw", designed["areas"], "--rules", designed["rules"], "--previous", path,
                   "--out", folder / "out", *QUICK, *extra)


def previous_of(designed: dict[str, Path]) -> pd.DataFrame:
    return pd.read_csv(designed["lookup"], dtype=str, keep_default_na=False)


def test_a_previous_lookup_with_unknown_ids_is_refused_naming_them(capsys, tmp_path: Path, designed) -> None:
    prev = previous_of(designed)
    prev.loc[[0, 1], "area"] = ["Z1", "Z2"]
    line = refused(redraw(capsys, designed, prev, tmp_path), r"previous\.csv: previous lookup does not match: "
                   r"2 area id\(s\) not in the areas file \(first: Z1, Z2\)", tmp_path / "out")
    assert "(use --mend to mend it first)" in line


def test_a_previous_lookup_missing_areas_is_refused_naming_them(capsys, tmp_path: Path, designed) -> None:
    ran = redraw(capsys, designed, previous_of(designed).iloc[3:], tmp_path)
    refused(ran, r"3 area\(s\) missing from it \(first: G000001, G000002, G000003\)", tmp_path / "out")


def test_a_previous_lookup_that_does_not_nest_is_refused_naming_the_zone(capsys, tmp_path: Path, designed) -> None:
    prev = previous_of(designed)
    first = prev.loc[0, "block"]
    prev.loc[0, "ward"] = "elsewhere"
    ran = redraw(capsys, designed, prev, tmp_path)
    refused(ran, rf"block zone {first} lies in several ward zones", tmp_path / "out")


def test_mend_repairs_a_previous_lookup_first_and_records_what_it_mended(capsys, tmp_path: Path, designed) -> None:
    prev = previous_of(designed)
    prev.loc[0, "ward"] = "elsewhere"
    prev = pd.concat([prev.iloc[3:], pd.DataFrame({"area": ["Z1"], "block": ["b"], "ward": ["w"]})])
    ran = redraw(capsys, designed, prev, tmp_path, "--mend")
    assert ran.code in (0, 1), ran
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["previous"]["gone_areas"] == ["Z1"]
    assert summary["previous"]["new_areas"] == ["G000001", "G000002", "G000003"]
    lookup = pd.read_csv(tmp_path / "out" / "lookup.csv", dtype=str)
    assert sorted(lookup["area"]) == sorted(region()["id"])  # every area zoned, the gone one dropped


# ---------------------------------------------------------------- the output folder


def test_an_existing_output_folder_is_refused_without_overwrite(capsys, tmp_path: Path, designed) -> None:
    out = tmp_path / "out"
    ran = run_cli(capsys, "design", designed["areas"], "--rules", designed["rules"], "--out", out, *QUICK)
    assert ran.code == 0
    before = checksums(out)
    ran = run_cli(capsys, "design", designed["areas"], "--rules", designed["rules"], "--out", out, *QUICK)
    refused(ran, rf"--out {re.escape(str(out))}: the output folder exists \(add --overwrite to replace it\)")
    assert checksums(out) == before
    ran = run_cli(capsys, "design", designed["areas"], "--rules", designed["rules"], "--out", out, "--overwrite", *QUICK)
    assert ran.code == 0


def test_a_folder_that_is_not_an_output_is_never_replaced(capsys, tmp_path: Path, designed) -> None:
    out = tmp_path / "mine"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    for extra in ((), ("--overwrite",)):
        ran = run_cli(capsys, "design", designed["areas"], "--rules", designed["rules"], "--out", out, *extra, *QUICK)
        refused(ran, rf"--out {re.escape(str(out))}: the folder exists and is not a zonedesign output")
        assert "add --overwrite" not in ran.err
    assert (out / "keep.txt").read_text() == "mine"


def test_an_output_folder_holding_the_inputs_is_refused(capsys, designed) -> None:
    folder = designed["areas"].parent
    before = sorted(p.name for p in folder.iterdir())
    for out in (folder, folder.parent):
        ran = run_cli(capsys, "design", designed["areas"], "--rules", designed["rules"], "--out", out,
                      "--overwrite", *QUICK)
        # refused before any work: as a holder of the inputs, or as a folder that is no output
        refused(ran, rf"--out {re.escape(str(out))}: ((holds|the folder of) the input .*areas\.gpkg"
                     r"|the folder exists and is not a zonedesign output)")
    assert sorted(p.name for p in folder.iterdir()) == before


def test_the_areas_file_itself_as_output_is_refused(capsys, designed) -> None:
    area_bytes = designed["areas"].read_bytes()
    ran = run_cli(capsys, "design", designed["areas"], "--rules", designed["rules"], "--out", designed["areas"],
                  "--overwrite", *QUICK)
    refused(ran, r"(holds the input .*areas\.gpkg|areas\.gpkg: a file of that name exists; name a folder)")
    assert designed["areas"].read_bytes() == area_bytes


def test_an_output_folder_below_a_file_is_refused(capsys, designed, tmp_path: Path) -> None:
    ran = run_cli(capsys, "design", designed["areas"], "--rules", designed["rules"], "--out",
                  designed["lookup"] / "sub", *QUICK)
    refused(ran, r"--out .*lookup\.csv/sub: .*lookup\.csv is a file, so the output folder cannot be made there")


# ---------------------------------------------------------------- usage


def test_usage_errors_are_one_line_too(capsys, tmp_path: Path) -> None:
    ran = run_cli(capsys, "design", tmp_path / "a.gpkg")
    refused(ran, r"zonedesign design: the following arguments are required: --rules, --out \(see zonedesign design --help\)")
    refused(run_cli(capsys, "design", "a.gpkg", "--rules", "r.toml", "--out", "o", "--workers", "0"),
            r"argument --workers: must be at least 1, not 0")
    refused(run_cli(capsys, "demo", "--out", tmp_path / "d", "--areas", "300"),
            r"argument --areas: the demo region needs at least 1500 areas, not 300")
    refused(run_cli(capsys, "frobnicate"), r"invalid choice: 'frobnicate'")
    refused(run_cli(capsys), r"^zonedesign: error: a command is needed: design, redraw, audit, sweep, demo, rules or show")
    refused(run_cli(capsys, "rules"), r"^zonedesign: error: rules needs an action: init or check")


def test_bad_sweep_keys_and_sizes_are_named(capsys, designed, tmp_path: Path) -> None:
    base = ("--rules", designed["rules"], "--out", tmp_path / "sw", "--quiet")
    refused(run_cli(capsys, "sweep", designed["areas"], "--vary", "tier.3.min.households=1,2", *base),
            r"override key 'tier\.3\.min\.households': no tier 3 \(tiers: 1 'block', 2 'ward'\)")
    refused(run_cli(capsys, "sweep", designed["areas"], "--vary", "nonsense", *base),
            r"--vary 'nonsense': expected KEY=V1,V2,\.\.\.")
    refused(run_cli(capsys, "design", designed["areas"], "--max-memory", "lots", *base),
            r"--max-memory: not a size: 'lots' \(use e\.g\. 4GB, 512MB or 1TB\)")
