"""Reading an areas file: measures, projection, formats, open data and located errors."""

from __future__ import annotations

import math
import warnings
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pyproj
import pytest
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st

from zonedesign.errors import InputError
from zonedesign.io.formats import read_table_columns, read_table_sample
from zonedesign.io.read import read_areas
from zonedesign.io.validate import disjoint_interiors
from zonedesign.rules import AreasRules

UTM = "EPSG:32633"
RULES = AreasRules(
    id="code",
    counts=("persons", "households"),
    attributes=("owners",),
    fence="district",
    weight="persons",
)


def squares(n: int) -> list[shapely.Polygon]:
    """n unit squares in a row, sharing edges (coordinates exact in every format)."""
    return [shapely.box(x, 0, x + 1, 1) for x in range(n)]


def frame(n: int = 4, geoms: list | None = None, crs: str | None = UTM, **columns: object) -> gpd.GeoDataFrame:
    data = {
        "code": [f"A{k + 1}" for k in range(n)],
        "persons": [100.0 + 10 * k for k in range(n)],
        "households": [40.0 + k for k in range(n)],
        "owners": [0.125 * (k + 1) for k in range(n)],  # exact in every format, GeoJSON text too
        "district": ["North" if k < n // 2 else "South" for k in range(n)],
    }
    data.update(columns)
    return gpd.GeoDataFrame(data, geometry=geoms if geoms is not None else squares(n), crs=crs)


def write(gdf: gpd.GeoDataFrame, path: Path, **kw: object) -> Path:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # pyogrio warns when writing a file without a CRS
        pyogrio.write_dataframe(gdf, path, **kw)
    return path


def problems_of(path: Path, rules: AreasRules = RULES, **kw: object) -> list[str]:
    with pytest.raises(InputError) as info:
        read_areas(path, rules, **kw)
    err = info.value
    first = str(err).splitlines()[0]
    assert first.startswith(err.problems[0]), "the first line leads with the first problem"
    if len(err.problems) > 1:
        assert f"(and {len(err.problems) - 1} more problem" in first
    return err.problems


# ---------------------------------------------------------------- measures


def test_unit_square_has_area_1_and_perimeter_4(tmp_path: Path) -> None:
    path = write(frame(1, [shapely.box(500000, 0, 500001, 1)]), tmp_path / "areas.gpkg")
    areas = read_areas(path, RULES).areas
    assert areas.area[0] == pytest.approx(1.0, abs=1e-9)  # common practice: unit square
    assert areas.perimeter[0] == pytest.approx(4.0, abs=1e-9)  # common practice: 4 sides of 1


def test_right_triangle_3_4_5_has_area_6_and_perimeter_12(tmp_path: Path) -> None:
    tri = shapely.Polygon([(0, 0), (3, 0), (0, 4)])
    path = write(frame(1, [tri]), tmp_path / "areas.gpkg")
    areas = read_areas(path, RULES).areas
    assert areas.area[0] == pytest.approx(6.0, abs=1e-9)  # common practice: 3 * 4 / 2
    assert areas.perimeter[0] == pytest.approx(12.0, abs=1e-9)  # common practice: 3 + 4 + 5


def test_360_gon_matches_regular_polygon_formulas_and_approaches_the_circle(tmp_path: Path) -> None:
    n, r = 360, 1000.0
    t = 2 * np.pi * np.arange(n) / n
    circle = shapely.Polygon(np.c_[r * np.cos(t), r * np.sin(t)])
    path = write(frame(1, [circle]), tmp_path / "areas.gpkg")
    areas = read_areas(path, RULES).areas
    # from memory (common practice): a regular n-gon of circumradius r has
    # area n r^2 sin(2 pi / n) / 2 and perimeter 2 n r sin(pi / n)
    exact_area = n * r**2 * math.sin(2 * math.pi / n) / 2
    exact_perimeter = 2 * n * r * math.sin(math.pi / n)
    assert areas.area[0] == pytest.approx(exact_area, rel=1e-12)
    assert areas.perimeter[0] == pytest.approx(exact_perimeter, rel=1e-12)
    # ... which fall short of pi r^2 and 2 pi r by about (2 pi / n)^2 / 6 and (pi / n)^2 / 6
    assert areas.area[0] / (math.pi * r**2) == pytest.approx(1 - (2 * math.pi / n) ** 2 / 6, abs=1e-8)
    assert areas.perimeter[0] / (2 * math.pi * r) == pytest.approx(1 - (math.pi / n) ** 2 / 6, abs=1e-8)


def test_geographic_file_is_projected_to_utm_with_areas_within_half_a_percent(tmp_path: Path) -> None:
    # three invented blocks of about 1 km near 45 N 10 E, in longitude and latitude
    geoms = [shapely.box(10.0 + 0.013 * k, 45.0, 10.013 + 0.013 * k, 45.009) for k in range(3)]
    path = write(frame(3, geoms, crs="EPSG:4326"), tmp_path / "areas.geojson")
    file = read_areas(path, RULES)
    geod = pyproj.Geod(ellps="WGS84")
    for k, g in enumerate(geoms):
        ref_area, ref_perimeter = geod.geometry_area_perimeter(g)
        # pyproj's geodesic area on the WGS84 ellipsoid is the reference library here
        assert file.areas.area[k] == pytest.approx(abs(ref_area), rel=0.005)
        assert file.areas.perimeter[k] == pytest.approx(ref_perimeter, rel=0.005)
    assert file.areas.crs == "EPSG:32632"  # common practice: 10 E lies in UTM zone 32 (6-12 E)
    assert file.geometry.crs.to_epsg() == 32632
    assert any("EPSG:32632" in note and "EPSG:4326" in note for note in file.notes)


def test_file_without_crs_needs_a_stated_one(tmp_path: Path) -> None:
    path = write(frame(2, crs=None), tmp_path / "areas.gpkg")
    (problem,) = problems_of(path)
    assert problem.startswith("areas.gpkg: no coordinate reference system")
    stated = read_areas(path, RULES, crs=UTM)
    assert stated.areas.crs == UTM
    assert read_areas(path, AreasRules(**{**RULES.__dict__, "crs": UTM})).areas.crs == UTM


# ---------------------------------------------------------------- the record


def test_record_holds_columns_in_rules_order_and_file_row_order(tmp_path: Path) -> None:
    gdf = frame(4)
    path = write(gdf, tmp_path / "areas.gpkg")
    file = read_areas(path, RULES)
    a = file.areas
    assert a.ids.dtype == object and a.ids.tolist() == ["A1", "A2", "A3", "A4"]
    assert a.count_names == ("persons", "households")
    assert a.counts.dtype == np.float64 and a.counts.shape == (4, 2)
    np.testing.assert_array_equal(a.counts[:, 1], gdf["households"])
    np.testing.assert_array_equal(a.attrs[:, 0], gdf["owners"])
    np.testing.assert_array_equal(a.weight, gdf["persons"])
    assert a.fence.tolist() == ["North", "North", "South", "South"]
    assert list(file.geometry.index) == [0, 1, 2, 3]
    assert shapely.equals(file.geometry.to_numpy(), gdf.geometry.to_numpy()).all()


def test_without_fence_or_weight_columns_one_fence_and_unit_weights(tmp_path: Path) -> None:
    path = write(frame(3), tmp_path / "areas.gpkg")
    a = read_areas(path, AreasRules(id="code", counts=("persons",))).areas
    assert a.fence.tolist() == ["all", "all", "all"]
    np.testing.assert_array_equal(a.weight, np.ones(3))
    assert a.attrs.shape == (3, 0)


def test_integer_ids_and_codes_become_plain_text(tmp_path: Path) -> None:
    path = write(frame(3, code=[7, 8, 9], district=[1, 1, 2]), tmp_path / "areas.gpkg")
    a = read_areas(path, RULES).areas
    assert a.ids.tolist() == ["7", "8", "9"]
    assert a.fence.tolist() == ["1", "1", "2"]


def test_each_format_reads_to_the_same_areas(tmp_path: Path) -> None:
    gdf = frame(6)
    gpkg = tmp_path / "areas.gpkg"
    write(gdf.iloc[:2], gpkg, layer="draft")
    write(gdf, gpkg, layer="final")
    paths = {
        "gpkg": (gpkg, {"layer": "final"}),
        "geojson": (write(gdf, tmp_path / "areas.geojson"), {}),
        "shp": (write(gdf, tmp_path / "areas.shp"), {}),
        "parquet": (tmp_path / "areas.parquet", {}),
    }
    gdf.to_parquet(tmp_path / "areas.parquet")
    read = {k: read_areas(p, RULES, **kw).areas for k, (p, kw) in paths.items()}
    first = read["gpkg"]
    for name, a in read.items():
        for field in ("ids", "counts", "attrs", "weight", "area", "perimeter", "fence"):
            np.testing.assert_array_equal(getattr(a, field), getattr(first, field), err_msg=f"{name}.{field}")
        assert a.crs == first.crs == UTM, name


def test_read_table_columns_reports_columns_types_rows_and_crs(tmp_path: Path) -> None:
    gdf = frame(5)
    path = write(gdf, tmp_path / "areas.gpkg")
    gdf.to_parquet(tmp_path / "areas.parquet")
    for p in (path, tmp_path / "areas.parquet"):
        columns, dtypes, n_rows, crs = read_table_columns(p)
        assert columns == ["code", "persons", "households", "owners", "district"]
        assert dict(zip(columns, dtypes))["persons"] == "float64"
        assert n_rows == 5
        assert crs == UTM


def test_read_table_sample_gives_the_first_rows_without_geometry(tmp_path: Path) -> None:
    gdf = frame(5)
    gdf.to_parquet(tmp_path / "areas.parquet")
    for p in (write(gdf, tmp_path / "areas.gpkg"), tmp_path / "areas.parquet"):
        sample = read_table_sample(p, n_rows=3)
        assert list(sample.columns) == ["code", "persons", "households", "owners", "district"]
        assert sample["code"].tolist() == ["A1", "A2", "A3"]


# ---------------------------------------------------------------- open data


@pytest.mark.opendata
def test_ny8_reads_281_tracts_repairs_five_and_keeps_every_person(spdata_dir: Path) -> None:
    path = spdata_dir / "NY8_utm18.shp"
    file = read_areas(path, AreasRules(id="AREAKEY", counts=("POP8",), attributes=("PCTOWNHOME",)))
    raw = pyogrio.read_dataframe(path)
    # r-cran-spdata NY8_utm18.shp: 281 census tracts
    assert file.areas.n == 281
    # r-cran-spdata NY8_utm18.shp: five invalid polygons (project design notes), the same
    # five that shapely (reference library) finds invalid in the raw file
    invalid = raw["AREAKEY"].to_numpy()[~shapely.is_valid(raw.geometry.to_numpy())]
    assert sorted(file.areas.repaired) == sorted(invalid.tolist())
    assert len(file.areas.repaired) == 5
    assert any("5 invalid polygon(s) repaired" in n for n in file.notes)
    assert shapely.is_valid(file.geometry.to_numpy()).all()
    # every person of the file is kept: the POP8 total of r-cran-spdata NY8_utm18.dbf
    assert file.areas.counts[:, 0].sum() == pytest.approx(float(raw["POP8"].sum()), rel=0, abs=1e-6)
    assert file.areas.ids.tolist() == raw["AREAKEY"].astype(str).tolist()


# ---------------------------------------------------------------- located errors


def test_missing_file(tmp_path: Path) -> None:
    (problem,) = problems_of(tmp_path / "areas.gpkg")
    assert problem.startswith("areas.gpkg: file not found")


def test_unreadable_file(tmp_path: Path) -> None:
    path = tmp_path / "areas.gpkg"
    path.write_bytes(b"this is not a geopackage\x00\x01")
    (problem,) = problems_of(path)
    assert problem.startswith("areas.gpkg: cannot read")
    plain = tmp_path / "areas.parquet"
    pd.DataFrame({"code": ["A1"], "persons": [1.0]}).to_parquet(plain)
    (problem,) = problems_of(plain)
    assert problem == "areas.parquet: a Parquet file without GeoParquet metadata (no geometry column)"


def test_empty_layer(tmp_path: Path) -> None:
    path = write(frame(0, []), tmp_path / "areas.gpkg")
    problems = problems_of(path)
    assert problems[0] == "areas.gpkg: no rows (empty layer)"


def test_layers_must_be_named_when_several_and_must_exist(tmp_path: Path) -> None:
    path = tmp_path / "areas.gpkg"
    write(frame(2), path, layer="draft")
    write(frame(2), path, layer="final")
    (problem,) = problems_of(path)
    assert problem.startswith("areas.gpkg: 2 layers ('draft', 'final'); say which")
    (problem,) = problems_of(path, layer="fianl")
    assert problem == "areas.gpkg: no layer 'fianl' (layers: 'draft', 'final')"
    assert read_areas(path, RULES, layer="final").areas.n == 2


def test_missing_columns_are_named_with_their_role_and_a_near_match(tmp_path: Path) -> None:
    gdf = frame(2).rename(columns={"code": "Code", "households": "hh", "owners": "own", "district": "area_group"})
    gdf = gdf.drop(columns=["persons"])
    problems = problems_of(write(gdf, tmp_path / "areas.gpkg"))
    text = "\n".join(problems)
    assert "areas.gpkg: id column 'code' not found; did you mean 'Code'?" in text
    assert "areas.gpkg: count column 'persons' not found" in text
    assert "areas.gpkg: count column 'households' not found" in text
    assert "areas.gpkg: attribute column 'owners' not found" in text
    assert "areas.gpkg: fence column 'district' not found" in text
    weight_rules = AreasRules(id="Code", counts=("hh",), weight="pop")
    (problem,) = problems_of(write(gdf, tmp_path / "b.gpkg"), weight_rules)
    assert problem.startswith("b.gpkg: weight column 'pop' not found")


def test_null_ids_are_named_by_row_number(tmp_path: Path) -> None:
    problems = problems_of(write(frame(4, code=["A1", None, "", "A4"]), tmp_path / "areas.gpkg"))
    assert problems == ["areas.gpkg: column 'code', rows #2, #3: no id"]


def test_duplicate_ids_list_the_first_five_offenders(tmp_path: Path) -> None:
    codes = [f"D{k}" for k in range(7)] * 2
    (problem,) = problems_of(write(frame(14, code=codes), tmp_path / "areas.gpkg"))
    assert problem.startswith("areas.gpkg: column 'code': 7 duplicate id(s): 'D0' (rows 1, 8); 'D1' (rows 2, 9)")
    assert "'D4' (rows 5, 12); and 2 more" in problem
    assert "'D5'" not in problem


def test_non_numeric_counts_show_values_and_row_ids(tmp_path: Path) -> None:
    gdf = frame(4, persons=["120", "x", "", "95"])
    (problem,) = problems_of(write(gdf, tmp_path / "areas.gpkg"))
    assert problem == "areas.gpkg: column 'persons', rows 'A2', 'A3': not a number ('x', '')"


def test_negative_and_missing_counts(tmp_path: Path) -> None:
    gdf = frame(4, households=[40.0, -3.0, np.nan, 41.0])
    problems = problems_of(write(gdf, tmp_path / "areas.gpkg"))
    assert problems == [
        "areas.gpkg: column 'households', row 'A3': missing value",
        "areas.gpkg: column 'households', row 'A2': negative (-3.0)",
    ]


def test_attributes_must_be_numbers_and_must_vary(tmp_path: Path) -> None:
    (problem,) = problems_of(write(frame(3, owners=["0.2", "many", "0.4"]), tmp_path / "a.gpkg"))
    assert problem == "a.gpkg: column 'owners', row 'A2': not a number ('many')"
    (problem,) = problems_of(write(frame(3, owners=[0.5, 0.5, 0.5]), tmp_path / "b.gpkg"))
    assert problem.startswith("b.gpkg: column 'owners': the same value (0.5) in every row")


def test_fence_codes_must_be_present(tmp_path: Path) -> None:
    (problem,) = problems_of(write(frame(3, district=["North", None, "South"]), tmp_path / "areas.gpkg"))
    assert problem == "areas.gpkg: fence column 'district', row 'A2': no fence code"


def test_weights_must_not_be_negative(tmp_path: Path) -> None:
    rules = AreasRules(id="code", counts=("households",), weight="persons")
    (problem,) = problems_of(write(frame(3, persons=[1.0, -2.0, 3.0]), tmp_path / "areas.gpkg"), rules)
    assert problem == "areas.gpkg: column 'persons', row 'A2': negative (-2.0)"


def test_empty_and_non_polygon_geometries(tmp_path: Path) -> None:
    geoms = [shapely.box(0, 0, 1, 1), None, shapely.Point(5, 5), shapely.LineString([(7, 7), (8, 8)])]
    problems = problems_of(write(frame(4, geoms), tmp_path / "areas.gpkg"))
    assert problems == [
        "areas.gpkg: geometry, row 'A2': empty or missing",
        "areas.gpkg: geometry, rows 'A3', 'A4': not a polygon (line, point)",
    ]


def test_invalid_polygons_are_repaired_and_reported_not_refused(tmp_path: Path) -> None:
    bowtie = shapely.Polygon([(10, 0), (12, 2), (12, 0), (10, 2)])
    file = read_areas(write(frame(3, [shapely.box(0, 0, 1, 1), bowtie, shapely.box(1, 0, 2, 1)]), tmp_path / "a.gpkg"), RULES)
    assert file.areas.repaired == ("A2",)
    assert "a.gpkg: 1 invalid polygon(s) repaired with make_valid: 'A2'" in file.notes
    assert shapely.is_valid(file.geometry[1])
    # shapely (reference library): the two triangles of the bow-tie, 1 m2 each
    assert file.areas.area[1] == pytest.approx(2.0)


def test_overlapping_polygons_are_refused_beyond_the_tolerance(tmp_path: Path) -> None:
    geoms = [shapely.box(0, 0, 1, 1), shapely.box(0.5, 0, 1.5, 1), shapely.box(3, 0, 4, 1)]
    (problem,) = problems_of(write(frame(3, geoms), tmp_path / "areas.gpkg"))
    assert problem == (
        "areas.gpkg: geometry: 1 overlapping pair(s) of polygons: 'A1' and 'A2' (0.5 m2)"
        '; overlaps = "cut" in [areas] mends them'
    )
    # an overlap of 1e-9 of the smaller polygon is below the 1e-6 tolerance
    slight = [shapely.box(0, 0, 1, 1), shapely.box(1 - 1e-9, 0, 2, 1)]
    assert read_areas(write(frame(2, slight), tmp_path / "b.gpkg"), RULES).areas.n == 2


def test_all_problems_of_a_file_come_in_one_error(tmp_path: Path) -> None:
    gdf = frame(4, persons=["1", "x", "3", "4"], owners=[1.0, 1.0, 1.0, 1.0], district=["N", None, "S", "S"])
    problems = problems_of(write(gdf, tmp_path / "areas.gpkg"))
    assert problems == [
        "areas.gpkg: column 'persons', row 'A2': not a number ('x')",
        "areas.gpkg: column 'owners': the same value (1.0) in every row, so it cannot tell zones "
        "apart; drop it from [areas].attributes",
        "areas.gpkg: fence column 'district', row 'A2': no fence code",
    ]


# ---------------------------------------------------------------- the exact overlap test


def grid_partition(cells: np.ndarray) -> list[shapely.Geometry]:
    """Zones of a labelled grid as unions of unit squares (they tile the grid exactly)."""
    out = []
    for z in np.unique(cells):
        rows, cols = np.nonzero(cells == z)
        zone = shapely.union_all(shapely.box(cols, rows, cols + 1, rows + 1))
        out.append(shapely.segmentize(zone, 1.0))  # a vertex at every grid point of the edges
    return out


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 6), st.integers(0, 6), st.integers(1, 3), st.integers(1, 3)), min_size=2, max_size=7))
def test_disjoint_interiors_never_misses_an_overlap(boxes: list[tuple[int, int, int, int]]) -> None:
    geoms = np.array([shapely.box(x, y, x + w, y + h) for x, y, w, h in boxes])
    i, j = np.triu_indices(len(geoms), 1)
    # shapely (reference library): pairwise intersection areas
    overlapping = bool((shapely.area(shapely.intersection(geoms[i], geoms[j])) > 0).any())
    if disjoint_interiors(geoms):
        assert not overlapping


@settings(max_examples=40, deadline=None)
@given(st.lists(st.integers(0, 4), min_size=25, max_size=25), st.booleans())
def test_disjoint_interiors_proves_exact_tilings(labels: list[int], drop: bool) -> None:
    cells = np.array(labels).reshape(5, 5)
    zones = grid_partition(cells)
    if drop and len(zones) > 1:
        zones = zones[1:]  # a tiling with holes and gaps is still free of overlaps
    geoms = np.array(zones)
    # shapely's unions of grid squares share their vertices exactly, so no overlap test is needed
    assert disjoint_interiors(geoms)
    i, j = np.triu_indices(len(geoms), 1)
    assert not (shapely.area(shapely.intersection(geoms[i], geoms[j])) > 0).any()


def test_projected_file_is_measured_as_is_without_notes(tmp_path: Path) -> None:
    file = read_areas(write(frame(2), tmp_path / "areas.gpkg"), RULES)
    assert file.notes == []
    assert file.crs_note == f"areas and lengths measured in the file's projected CRS {UTM}"
    assert isinstance(file.geometry, gpd.GeoSeries) and isinstance(file.areas.ids, np.ndarray)
    assert pd.api.types.is_float_dtype(file.areas.area.dtype)


def test_a_layer_named_for_a_one_layer_file_is_noted_not_silently_ignored(tmp_path: Path) -> None:
    path = write(frame(), tmp_path / "areas.geojson")
    notes = read_areas(path, RULES, layer="blocks").notes
    assert any("layer 'blocks' ignored" in n and ".geojson" in n for n in notes)
    assert not any("ignored" in n for n in read_areas(path, RULES).notes)
