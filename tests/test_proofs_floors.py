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


def test_audit_repair_keeps_a_lock_and_uses_an_override_s_bounds(tmp_path):
    # by construction: fence U holds U0..U3 (25 persons each), fence R holds R0..R2 (10 each);
    # the tier's floor is 50, lowered to 20 in R by an override; the agreed zone AGREED-1 is
    # U0 + U1 (50). The lookup breaks two floors: Z2 = U2 and Z3 = U3 hold 25 each, r2 = R2
    # holds 10 (r1 = R0 + R1 holds 20, enough in R). The fewest moves: U2 and U3 in one zone
    # (one move), R2 into r1 (one move, 30 >= 20); under the tier's own floor R could never
    # be mended, and AGREED-1 neither gives nor takes an area
    gdf = gpd.GeoDataFrame(
        {"code": [f"U{k}" for k in range(4)] + [f"R{k}" for k in range(3)],
         "persons": [25] * 4 + [10] * 3, "district": ["U"] * 4 + ["R"] * 3},
        geometry=[shapely.box(x, 0, x + 1, 1) for x in range(7)], crs=UTM,
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pyogrio.write_dataframe(gdf, tmp_path / "areas.gpkg", driver="GPKG")
    (tmp_path / "locked.csv").write_text("area,tier1\nU0,AGREED-1\nU1,AGREED-1\n")
    rules = write_rules(
        tmp_path / "rules.toml", 'id = "code"\ncounts = ["persons"]\nfence = "district"',
        '[[tier]]\nname = "tier1"\nmin = { persons = 50 }\nmax = { persons = 100 }\n\n'
        '[[tier.override]]\nfences = ["R"]\nmin = { persons = 20 }\n\n[lock]\nfile = "locked.csv"\n',
    )
    (tmp_path / "lookup.csv").write_text(
        "area,tier1\nU0,AGREED-1\nU1,AGREED-1\nU2,Z2\nU3,Z3\nR0,r1\nR1,r1\nR2,r2\n")
    out = tmp_path / "out"
    code = main(["audit", str(tmp_path / "areas.gpkg"), "--rules", str(rules), "--lookup",
                 str(tmp_path / "lookup.csv"), "--out", str(out), "--quiet", "--no-certificate", "--repair"])
    assert code == 1  # README: the lookup as given breaks rules
    summary = json.loads((out / "summary.json").read_text())
    repair = summary["repair"]
    assert repair["method"] == "cp-sat (fewest moves)" and repair["status"] == "optimal"
    assert repair["moves"] == 2 and repair["repaired_lookup_passes"] is True
    fixed = pd.read_csv(out / "repaired" / "lookup.csv", dtype=str).set_index("area")["tier1"]
    assert sorted(fixed.index[fixed == "AGREED-1"]) == ["U0", "U1"]  # the lock survives
    assert fixed["U2"] == fixed["U3"] != "AGREED-1"
    assert fixed["R0"] == fixed["R1"] == fixed["R2"]  # 30 persons: the override's floor of 20 holds
