"""Proofs of bounds no zoning can meet, as a user reads them: the highest floor a fence
could meet, named by area ids and zone codes, and a locked zone's break forced by its lock.

Small invented cases have answers known by construction; NY8 tracts are open data
(Debian's r-cran-spdata NY8_utm18.shp, 281 census tracts of eight New York counties).
"""

from __future__ import annotations

import json
import warnings
from pathlib import Path

import geopandas as gpd
import pandas as pd
import pyogrio
import shapely

from zonedesign.cli import main

UTM = "EPSG:32633"


def write_rules(path: Path, areas: str, tiers: str) -> Path:
    path.write_text(f"[areas]\n{areas}\n\n{tiers}\n[search]\nmethod = \"descent\"\nconstructions = 1\n")
    return path


def audit(areas: Path, rules: Path, lookup: Path, out: Path) -> int:
    return main(["audit", str(areas), "--rules", str(rules), "--lookup", str(lookup), "--out", str(out),
                 "--quiet", "--no-certificate"])


def test_a_locked_zone_that_breaks_a_floor_is_said_to_be_forced_by_its_lock(tmp_path):
    # by construction: a row of five squares of 10 persons; the agreed zone L1 = A0 alone
    # (10 persons) lies below the floor of 20; the rest (A1..A4, 40) is one valid zone
    gdf = gpd.GeoDataFrame({"code": [f"A{k}" for k in range(5)], "persons": [10] * 5},
                           geometry=[shapely.box(x, 0, x + 1, 1) for x in range(5)], crs=UTM)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pyogrio.write_dataframe(gdf, tmp_path / "areas.gpkg", driver="GPKG")
    (tmp_path / "locked.csv").write_text("area,tier1\nA0,L1\n")
    rules = write_rules(tmp_path / "rules.toml", 'id = "code"\ncounts = ["persons"]',
                        '[[tier]]\nname = "tier1"\nmin = { persons = 20 }\nmax = { persons = 100 }\n\n'
                        '[lock]\nfile = "locked.csv"\n')
    (tmp_path / "lookup.csv").write_text("area,tier1\nA0,L1\nA1,Z\nA2,Z\nA3,Z\nA4,Z\n")
    out = tmp_path / "out"
    assert audit(tmp_path / "areas.gpkg", rules, tmp_path / "lookup.csv", out) == 1  # README: 1, a rule broken
    summary = json.loads((out / "summary.json").read_text())
    (brk,) = summary["bound_breaks"]
    assert brk["zone"] == "L1" and brk["locked"] is True
    (proof,) = summary["proofs"]
    assert proof["kind"] == "lock" and proof["floors"] == []
    assert proof["text"] == (
        "zone L1 of tier tier1 is fixed by the lock file locked.csv: its 1 area and its code are kept "
        "as agreed, and it has 10 persons, below the floor of 20; the lock forces the break, no zoning "
        "that keeps the lock can mend it"
    )
    assert "\n" not in proof["text"]
    report = (out / "report.html").read_text()
    assert "forced by the lock" in report


def test_ny8_a_floor_too_high_in_one_county_names_its_tracts_and_the_highest_floor(tmp_path, spdata_dir):
    # NY8 (r-cran-spdata): each county as one zone; an override puts the floor of county
    # 36023 above its whole population, so no zoning meets it, and the highest floor that
    # could be met is the county's total, met by the county as one zone (by construction:
    # the ceiling is above every county's total and each county is contiguous)
    raw = gpd.read_file(spdata_dir / "NY8_utm18.shp")
    raw["AREAKEY"] = raw["AREAKEY"].astype(str)
    county = raw["AREAKEY"].str[:5]
    total = int(round(raw.loc[county == "36023", "POP8"].sum()))
    areas = spdata_dir / "NY8_utm18.shp"
    rules = write_rules(
        tmp_path / "rules.toml",
        'id = "AREAKEY"\ncounts = ["POP8"]\nfence = { column = "AREAKEY", prefix = 5 }',
        f'[[tier]]\nname = "county"\nmin = {{ POP8 = 1 }}\nmax = {{ POP8 = 1000000 }}\n\n'
        f'[[tier.override]]\nfences = ["36023"]\nmin = {{ POP8 = {total + 5000} }}\n',
    )
    pd.DataFrame({"area": raw["AREAKEY"], "county": "C" + county}).to_csv(tmp_path / "lookup.csv", index=False)
    out = tmp_path / "out"
    assert audit(areas, rules, tmp_path / "lookup.csv", out) == 1
    summary = json.loads((out / "summary.json").read_text())
    assert [b["zone"] for b in summary["bound_breaks"]] == ["C36023"]
    (proof,) = summary["proofs"]
    (floor,) = proof["floors"]
    assert floor["status"] == "optimal" and floor["at_least"] == floor["at_most"] == total
    first = sorted(raw.loc[county == "36023", "AREAKEY"])[0]
    assert f"the highest floor of POP8 that could be met in fence 36023 is {total:,} POP8 (proven" in proof["text"]
    assert f"area {first}" in proof["text"] and "unit " not in proof["text"]
    assert "\n" not in proof["text"]
