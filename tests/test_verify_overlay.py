"""Deriving a lookup from zone polygons by overlay, on NY8 (r-cran-spdata, NY8_utm18.shp).

Zone layers are dissolved from the real tract-in-county hierarchy with geopandas; the
overlay must give that lookup back, and flag an area once a zone boundary is nudged
across it. Polygon areas and intersections come from shapely (reference library).
"""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from verify_support import ny8

from zonedesign.errors import InputError
from zonedesign.verify.overlay import zones_from_layers

pytestmark = pytest.mark.opendata


@pytest.fixture(scope="module")
def layers(spdata_dir):
    frame, areas, graph = ny8(spdata_dir)
    frame = frame.copy()
    frame["tract_group"] = frame["AREAKEY"].str[:9]
    frame["county"] = frame["AREAKEY"].str[:5]
    out = {}
    for tier in ("tract_group", "county"):
        out[tier] = frame[[tier, "geometry"]].dissolve(by=tier).reset_index().rename(columns={tier: "zone"})
    return frame, areas, graph, out


def _overlapping_tracts(frame) -> set[str]:
    """Tracts whose polygons overlap a neighbour's by more than 1 m^2 (shapely)."""
    geom = np.asarray(frame.geometry.values)
    a, b = shapely.STRtree(geom).query(geom, predicate="intersects")
    keep = a < b
    a, b = a[keep], b[keep]
    overlap = shapely.area(shapely.intersection(geom[a], geom[b])) > 1.0
    key = frame["AREAKEY"].to_numpy()
    return set(key[a[overlap]]) | set(key[b[overlap]])


def test_dissolved_layers_give_the_lookup_back(layers):
    frame, areas, _, zone_layers = layers
    labels, flags = zones_from_layers(frame.geometry, frame["AREAKEY"], zone_layers, "zone")
    assert list(labels["tract_group"]) == list(frame["tract_group"])
    assert list(labels["county"]) == list(frame["county"])
    # r-cran-spdata NY8: the repaired polygon of tract 36067013200 overlaps two neighbours in
    # other tract groups (shapely), so those groups' dissolved polygons reach into areas
    # given to other zones; nothing else is flagged, and counties (which hold both sides of
    # every overlap) are clean
    overlapping = _overlapping_tracts(frame)
    assert "36067013200" in overlapping
    assert flags and {f["kind"] for f in flags} == {"zone-boundary", "area-split"}
    assert {f["tier"] for f in flags} == {"tract_group"}
    for f in flags:
        if f["kind"] == "area-split":
            assert f["area"] in overlapping
        else:
            assert set(f["areas"]) <= overlapping and f["zone"] in {k[:9] for k in overlapping}


def test_nudged_boundary_flags_the_split_area(layers):
    frame, _, graph, zone_layers = layers
    county = zone_layers["county"].copy()
    # a tract of 36067 on the border with another county
    key = frame["AREAKEY"].to_numpy()
    county_of = frame["county"].to_numpy()
    i = next(a for a in range(len(frame)) if county_of[a] == "36067"
             and any(county_of[j] != "36067" for j in graph.neighbours(a)))
    other = sorted({county_of[j] for j in graph.neighbours(i)} - {"36067"})[0]
    tract = frame.geometry.iloc[i]
    # cut off the 30% of the tract nearest the other county and hand it over
    minx, miny, maxx, maxy = tract.bounds
    target = county.geometry[county["zone"] == other].iloc[0]
    best = None
    for box in (shapely.box(minx, miny, minx + 0.3 * (maxx - minx), maxy),
                shapely.box(maxx - 0.3 * (maxx - minx), miny, maxx, maxy),
                shapely.box(minx, miny, maxx, miny + 0.3 * (maxy - miny)),
                shapely.box(minx, maxy - 0.3 * (maxy - miny), maxx, maxy)):
        piece = tract.intersection(box)
        touch = piece.intersection(target.boundary).length
        if best is None or touch > best[0]:
            best = (touch, piece)
    piece = best[1]
    share = piece.area / tract.area
    home = county["zone"] == "36067"
    away = county["zone"] == other
    county.loc[home, "geometry"] = county.geometry[home].difference(piece)
    county.loc[away, "geometry"] = county.geometry[away].union(piece)

    labels, flags = zones_from_layers(frame.geometry, key, {"county": county}, "zone", tolerance_share=0.01)
    assert list(labels["county"]) == list(county_of)  # the larger share still decides
    split = [f for f in flags if f["kind"] == "area-split"]
    assert [f["area"] for f in split] == [key[i]]
    assert split[0]["zones"] == ["36067", other]
    # shapely: the handed-over piece is the second zone's share of the tract
    assert split[0]["shares"][1] == pytest.approx(share, abs=1e-6)
    assert split[0]["tolerance_share"] == 0.01 and "tolerance 1.0%" in split[0]["message"]
    # both zones now cut the tract: the zone side of the same fault
    boundary = {f["zone"]: f for f in flags if f["kind"] == "zone-boundary"}
    assert set(boundary) == {"36067", other}
    assert boundary[other]["areas"] == [key[i]] and boundary["36067"]["areas"] == [key[i]]
    assert boundary[other]["shares"][0] == pytest.approx(share, abs=1e-6)

    # a tolerance above the piece's share lets it pass
    _, loose = zones_from_layers(frame.geometry, key, {"county": county}, "zone", tolerance_share=0.45)
    assert loose == []


def test_missing_id_column_is_named(layers):
    frame, _, _, zone_layers = layers
    with pytest.raises(InputError, match="zone layer 'county'.*no column 'code'"):
        zones_from_layers(frame.geometry, frame["AREAKEY"], {"county": zone_layers["county"]}, "code")


def test_area_outside_every_zone_is_flagged(layers):
    frame, _, _, zone_layers = layers
    county = zone_layers["county"]
    kept = county[county["zone"] != "36017"]
    labels, flags = zones_from_layers(frame.geometry, frame["AREAKEY"], {"county": kept}, "zone")
    lost = set(frame["AREAKEY"][frame["county"] == "36017"])
    assert {a for a, z in zip(frame["AREAKEY"], labels["county"]) if z is None} == lost
    assert {f["area"] for f in flags if f["kind"] == "area-split"} == lost
    assert np.all([f["message"].endswith("lies in no zone of tier county") for f in flags])
