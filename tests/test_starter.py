"""`zonedesign rules init`: a starter whose guesses fit the file and whose bounds are
labelled placeholders scaled to the data, on the demo input and on two open data sets."""

from __future__ import annotations

import math
import re
from pathlib import Path

import geopandas as gpd
import networkx as nx
import numpy as np
import pandas as pd
import pytest
import shapely

from zonedesign.rules import check_rules_against, parse_rules
from zonedesign.starter import PLACEHOLDER, read_starter_input, starter_rules


def _starter(path: Path) -> tuple[str, object]:
    table, graph, note = read_starter_input(path)
    text = starter_rules(table, graph, note=note)
    rules = parse_rules(text, "starter.toml")
    check_rules_against(rules, [str(c) for c in table.columns], path.name)
    return text, rules


def _two_figures(x: float) -> float:
    scale = 10.0 ** (math.floor(math.log10(x)) - 1)
    return round(x / scale) * scale


def _shapely_connected(geometry, codes: np.ndarray) -> bool:
    """Each code's polygons connected, by shapely and networkx alone: two areas touch when
    they meet within half a metre (a few NY8 tracts need make_valid, whose repaired
    rings no longer share every vertex)."""
    geoms = np.asarray(geometry, dtype=object)
    geoms = np.where(shapely.is_valid(geoms), geoms, shapely.make_valid(geoms))
    tree = shapely.STRtree(geoms)
    a, b = tree.query(shapely.buffer(geoms, 0.5), predicate="intersects")
    g = nx.Graph()
    g.add_nodes_from(range(len(geoms)))
    g.add_edges_from((int(i), int(j)) for i, j in zip(a, b) if i != j)
    return all(nx.is_connected(g.subgraph(np.flatnonzero(codes == c).tolist())) for c in np.unique(codes))


def _bound_lines(text: str) -> list[str]:
    return [line for line in text.splitlines() if re.match(r"^(min|max|target) = ", line)]


def _assert_placeholders_scaled(text: str, rules, table: pd.DataFrame) -> None:
    """Every bound is labelled a placeholder; tier 1's floor is 3 x the median area count
    (two significant figures), its ceiling 5 x the floor and its target between."""
    lines = _bound_lines(text)
    assert lines and all(line.endswith(PLACEHOLDER) for line in lines)
    assert "census" not in text.lower()
    assert "zonedesign does not choose thresholds for you" in text  # the README's caution
    first = rules.tiers[0]
    for count, floor in first.min.items():
        median = float(np.median(table[count].to_numpy(dtype=np.float64)))  # numpy, reference
        assert floor == _two_figures(3 * median)
        assert first.max[count] == _two_figures(5 * floor)
    for count, target in first.target.items():
        assert first.min[count] < target < first.max[count]
    names = [t.name for t in rules.tiers]
    assert names == [f"tier{k}" for k in range(1, len(names) + 1)]


@pytest.fixture(scope="module")
def demo_input(tmp_path_factory) -> Path:
    from zonedesign.demo.scenarios import write_demo_input

    return write_demo_input(tmp_path_factory.mktemp("demo"), n=1500)["areas"]


def test_on_the_demo_input_the_starter_finds_code_counts_shares_and_districts(demo_input):
    text, rules = _starter(demo_input)
    gdf = gpd.read_file(demo_input, engine="pyogrio")
    assert rules.areas.id == "code"
    assert set(rules.areas.counts) == {"households", "persons"}
    assert set(rules.areas.attributes) == {"owner_share", "flat_share"}
    assert rules.areas.fence == "district" and rules.areas.fence_prefix is None
    # the true number of districts over every row, and each a connected group (the demo's
    # two islands are part of coastal districts: allowed as small detached pieces)
    n_codes = gdf["district"].nunique()
    assert f"# {n_codes} codes (district)" in text
    _assert_placeholders_scaled(text, rules, gdf)
    # every tier offered fits the smallest district
    smallest = gdf.groupby("district")["households"].sum().min()
    assert all(t.min["households"] <= smallest for t in rules.tiers)


@pytest.mark.opendata
def test_on_ny8_tracts_the_starter_takes_areakey_pop8_and_the_county_prefix(spdata_dir):
    path = spdata_dir / "NY8_utm18.shp"
    text, rules = _starter(path)
    gdf = gpd.read_file(path, engine="pyogrio")
    # r-cran-spdata NY8: AREAKEY is the 11-digit tract code, unique per tract; POP8 the
    # tract population; X, Y, Xm, Ym, Xshift, Yshift are coordinates and never an id or count
    assert rules.areas.id == "AREAKEY" and gdf["AREAKEY"].is_unique
    assert rules.areas.counts == ("POP8",)
    # shares in 0..1 (PCTOWNHOME, PCTAGE65P), never the coordinates or the z-score Z
    assert {"PCTOWNHOME", "PCTAGE65P"} <= set(rules.areas.attributes)
    assert not {"X", "Y", "Xm", "Ym", "Z", "Xshift", "Yshift"} & set(rules.areas.attributes)
    # the first five digits of AREAKEY are the county FIPS code: the eight counties of the
    # data set (r-cran-spdata NY8 documentation), each a connected group of tracts
    assert (rules.areas.fence, rules.areas.fence_prefix) == ("AREAKEY", 5)
    counties = gdf["AREAKEY"].str[:5].to_numpy()
    assert len(np.unique(counties)) == 8
    assert "# 8 codes (the first 5 characters of AREAKEY), each a connected group" in text
    assert _shapely_connected(gdf.geometry.values, counties)
    _assert_placeholders_scaled(text, rules, gdf)
    smallest = gdf.groupby(counties)["POP8"].sum().min()
    assert all(t.min["POP8"] <= smallest for t in rules.tiers)


@pytest.mark.opendata
def test_on_nc_counties_the_starter_takes_fips_the_birth_counts_and_a_region_index(spdata_dir):
    path = spdata_dir / "sids.shp"
    text, rules = _starter(path)
    gdf = gpd.read_file(path, engine="pyogrio")
    # r-cran-spdata nc.sids documentation: FIPS is the county code; BIR74/BIR79 births,
    # SID74/SID79 deaths, NWBIR74/NWBIR79 non-white births; CNTY_ID, CNTY_, FIPSNO and
    # CRESS_ID are county ids; east, north, x, y, lon, lat are coordinates
    assert rules.areas.id == "FIPS" and gdf["FIPS"].is_unique
    assert set(rules.areas.counts) == {"BIR74", "SID74", "NWBIR74", "BIR79", "SID79", "NWBIR79"}
    assert not {"CNTY_ID", "CNTY_", "FIPSNO", "CRESS_ID", "east", "north", "x", "y", "lon", "lat"} & (
        set(rules.areas.counts) | set(rules.areas.attributes))
    # L_id and M_id are Cressie & Read's (1985) indices grouping the 100 counties into four
    # regions (r-cran-spdata nc.sids documentation); either is a real grouping
    assert rules.areas.fence in {"L_id", "M_id"}
    codes = gdf[rules.areas.fence].to_numpy()
    assert len(np.unique(codes)) == 4 and f"# 4 codes ({rules.areas.fence})" in text
    assert _shapely_connected(gdf.geometry.values, codes)
    _assert_placeholders_scaled(text, rules, gdf)


def test_a_coordinate_column_is_never_the_id_and_a_missing_id_is_said():
    # Easting and Northing are unique whole numbers here, yet coordinates (common practice)
    n = 30
    table = pd.DataFrame({
        "name": [f"place {k % 10}" for k in range(n)],
        "Easting": np.arange(n) * 1000 + 400_000,
        "Northing": np.arange(n) * 997 + 6_000_000,
        "persons": np.arange(n) % 7 + 50,
    })
    text = starter_rules(table)
    rules = parse_rules(text, "starter.toml")
    assert rules.areas.id == "@row"  # row numbers until the user names a real id column
    assert "no column holds a unique, non-empty value per area" in text
    assert "'name' comes closest" in text
    assert rules.areas.counts == ("persons",)


def test_a_synthetic_table_gets_its_id_counts_shares_and_district():
    n = 60
    table = pd.DataFrame({
        "zone_code": [f"Z{k:03d}" for k in range(n)],
        "district": np.repeat(["Ashford", "Brindle", "Colm"], n // 3),
        "TRACT": np.arange(n) + 100,  # an id-like number, neither count nor attribute
        "households": np.arange(n) % 7 + 20,
        "population": (np.arange(n) % 7 + 20) * 2.0,
        "owner_share": np.linspace(0.1, 0.9, n),
        "flag": np.ones(n),
    })
    text = starter_rules(table)
    rules = parse_rules(text, "starter.toml")
    assert rules.areas.id == "zone_code"
    assert rules.areas.fence == "district"
    assert "# 3 codes (district), not checked on the map" in text
    assert set(rules.areas.counts) == {"population", "households"}
    assert rules.areas.attributes == ("owner_share",)  # a constant column carries no information
    _assert_placeholders_scaled(text, rules, table)
    assert text.count("#") > 10  # a commented file
