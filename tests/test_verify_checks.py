"""The audit finds exactly the faults a hierarchy has, and the CP-SAT certificate agrees.

Main data: NY8 (Debian r-cran-spdata, NY8_utm18.shp), 281 census tracts in 8 counties.
Tier 1 groups tracts by the first 9 digits of AREAKEY (tracts split from one original
tract), tier 2 is the county (first 5 digits), and the county is the fence: a real
two-tier hierarchy, checked whole and then broken one way at a time.
"""

from __future__ import annotations

import dataclasses
import json

import networkx as nx
import numpy as np
import pytest
from scipy import stats
from verify_support import grid_graph, make_areas, ny8

from zonedesign.errors import InputError
from zonedesign.rules import TierRules
from zonedesign.verify.certificate import certify
from zonedesign.verify.checks import audit

TIERS = [
    TierRules("tract_group", min={"persons": 1}, max={"persons": 20_000}),
    TierRules("county", min={"persons": 40_000}, max={"persons": 500_000}),
]


def ny8_hierarchy(shapes):
    frame, areas, graph = ny8(shapes)
    key = areas.ids.astype(str)
    labels = {
        "tract_group": np.array([k[:9] for k in key], dtype=object),
        "county": np.array([k[:5] for k in key], dtype=object),
    }
    nxg = nx.Graph()
    nxg.add_nodes_from(range(areas.n))
    i, j, _ = graph.edges()
    nxg.add_edges_from(zip(i.tolist(), j.tolist()))
    return areas, graph, labels, nxg


def _copy(labels):
    return {k: v.copy() for k, v in labels.items()}


def _removable(nxg, labels, tier, i):
    """Area i can leave its zone without splitting what remains (networkx, reference)."""
    zone = labels[tier]
    rest = [a for a in np.flatnonzero(zone == zone[i]) if a != i]
    return len(rest) > 0 and nx.is_connected(nxg.subgraph(rest))


def _singleton_tract(areas, labels, nxg, county):
    groups = labels["tract_group"]
    for i in range(areas.n):
        if labels["county"][i] == county and (groups == groups[i]).sum() == 1:
            if _removable(nxg, labels, "county", i):
                return i
    raise AssertionError("no singleton tract")


@pytest.fixture(scope="module")
def hierarchy(spdata_dir):
    return ny8_hierarchy(spdata_dir)


pytestmark = pytest.mark.opendata


# ---------------------------------------------------------------- NY8, healthy


def test_ny8_hierarchy_passes_every_rule(hierarchy):
    areas, graph, labels, _ = hierarchy
    result = audit(areas, graph, labels, TIERS)
    # r-cran-spdata NY8: tracts nest in counties and both tiers are contiguous under rook
    assert result.ok, result.violations_frame().to_string()
    assert result.violations_frame().empty
    zones = result.zones
    assert len(zones["county"]) == 8  # NY8: eight counties
    assert len(zones["tract_group"]) == len({k[:9] for k in areas.ids})
    # r-cran-spdata NY8: county sizes are 55, 18, 9, 11, 16, 142, 7 and 23 tracts
    sizes = dict(zip(zones["county"]["zone"], zones["county"]["areas"]))
    assert sizes == {"36007": 55, "36011": 18, "36017": 9, "36023": 11, "36053": 16, "36067": 142,
                     "36107": 7, "36109": 23}
    assert zones["county"]["persons"].sum() == pytest.approx(areas.counts[:, 0].sum())
    assert (zones["county"]["parts"] == 1).all()


def test_ny8_certificate_is_feasible_for_every_fence_and_tier(hierarchy):
    areas, graph, labels, _ = hierarchy
    certs = certify(areas, graph, labels, TIERS, time_limit=20)
    assert len(certs) == 8 * 2
    assert all(c.ok for c in certs), [c for c in certs if not c.ok]
    county = {c.fence: c for c in certs if c.tier == "county"}
    # r-cran-spdata NY8: county 36067 holds 142 tracts; the county tier's units are its tract groups
    assert county["36067"].n_areas == 142 and county["36067"].n_zones == 1
    groups = {g for g, c in zip(labels["tract_group"], labels["county"]) if c == "36067"}
    assert county["36067"].n_units == len(groups)


def test_ny8_zone_measures(hierarchy):
    areas, graph, labels, _ = hierarchy
    result = audit(areas, graph, labels, TIERS)
    county = result.zones["county"].set_index("zone")
    # Polsby & Popper 1991: 4 pi A / P^2 lies in (0, 1]
    assert ((county["polsby_popper"] > 0) & (county["polsby_popper"] <= 1)).all()
    # a county's area is the sum of its tracts' areas (additivity, common practice)
    assert county["area"].sum() == pytest.approx(areas.area.sum())
    # its perimeter is at most the sum of its tracts' perimeters
    assert (county["perimeter"] <= county.index.map(
        lambda c: areas.perimeter[labels["county"] == c].sum()) + 1e-6).all()
    # share attributes are measured as share*weight trait counts out of weight totals
    assert "rho_owner_share" in county and result.notes
    assert result.tiers["county"]["attribute_kinds"]["owner_share"] == "share"
    json.dumps(result.to_json())


# ---------------------------------------------------------------- NY8, broken one way at a time


def _far_county(graph, labels, i):
    near = {labels["county"][j] for j in graph.neighbours(i)}
    for c in sorted(set(labels["county"])):
        if c not in near and c != labels["county"][i]:
            return c
    raise AssertionError("no far county")


def break_far_county(areas, graph, labels, nxg):
    """A tract alone in its group is moved to a county it does not touch."""
    i = _singleton_tract(areas, labels, nxg, "36067")
    far = _far_county(graph, labels, i)
    broken = _copy(labels)
    broken["county"][i] = far
    return areas, broken, {("contiguity", "county", far), ("fence", "county", far)}


def break_neighbour_county(areas, graph, labels, nxg):
    """One tract of a multi-tract group is put under the neighbouring county."""
    groups = labels["tract_group"]
    for i in range(areas.n):
        if (groups == groups[i]).sum() < 2 or not _removable(nxg, labels, "county", i):
            continue
        other = {labels["county"][j] for j in graph.neighbours(i)} - {labels["county"][i]}
        if other:
            d = sorted(other)[0]
            broken = _copy(labels)
            broken["county"][i] = d
            return areas, broken, {("nesting", "tract_group", groups[i]), ("fence", "county", d)}
    raise AssertionError("no tract on a county border")


def break_reused_id(areas, graph, labels, nxg):
    """A group in another county is given the id of a group in 36007."""
    groups = labels["tract_group"]
    target = next(g for g in groups if g.startswith("36007") and (groups == g).sum() >= 2)
    donor = next(g for g in groups if g.startswith("36109"))
    broken = _copy(labels)
    broken["tract_group"][groups == donor] = target
    return areas, broken, {
        ("nesting", "tract_group", target),
        ("contiguity", "tract_group", target),
        ("fence", "tract_group", target),
    }


def break_duplicate_id(areas, graph, labels, nxg):
    ids = areas.ids.copy()
    ids[1] = ids[0]
    return dataclasses.replace(areas, ids=ids), _copy(labels), {("coverage", "", "")}


def break_dropped_id(areas, graph, labels, nxg):
    """An area missing from the lookup has no zone on any tier."""
    i = _singleton_tract(areas, labels, nxg, "36007")
    broken = _copy(labels)
    broken["tract_group"][i] = None
    broken["county"][i] = None
    return areas, broken, {("coverage", "tract_group", ""), ("coverage", "county", "")}


def break_split_zone(areas, graph, labels, nxg):
    """A far tract of the same county joins a tract group it does not touch."""
    groups = labels["tract_group"]
    target = next(g for g in groups if g.startswith("36067") and (groups == g).sum() >= 2)
    members = set(np.flatnonzero(groups == target).tolist())
    touching = members | {int(j) for m in members for j in graph.neighbours(m)}
    i = next(
        a for a in range(areas.n)
        if labels["county"][a] == "36067" and a not in touching and (groups == groups[a]).sum() == 1
    )
    broken = _copy(labels)
    broken["tract_group"][i] = target
    return areas, broken, {("contiguity", "tract_group", target)}


def break_fence(areas, graph, labels, nxg):
    """The fence line moves: one tract of a multi-tract group now carries the next county's code."""
    groups = labels["tract_group"]
    for i in range(areas.n):
        if (groups == groups[i]).sum() < 2:
            continue
        other = {areas.fence[j] for j in graph.neighbours(i)} - {areas.fence[i]}
        if other:
            fence = areas.fence.copy()
            fence[i] = sorted(other)[0]
            return dataclasses.replace(areas, fence=fence), _copy(labels), {
                ("fence", "tract_group", groups[i]),
                ("fence", "county", labels["county"][i]),
            }
    raise AssertionError("no tract on a county border")


def break_ceiling(areas, graph, labels, nxg):
    """A tract grows until its group passes the tier ceiling of 20,000 persons."""
    groups = labels["tract_group"]
    target = next(g for g in groups if g.startswith("36067") and (groups == g).sum() >= 2)
    members = np.flatnonzero(groups == target)
    counts = areas.counts.copy()
    counts[members[0], 0] += 20_000 - counts[members, 0].sum() + 123
    return dataclasses.replace(areas, counts=counts), _copy(labels), {("bounds", "tract_group", target)}


BREAKS = [
    break_far_county,
    break_neighbour_county,
    break_reused_id,
    break_duplicate_id,
    break_dropped_id,
    break_split_zone,
    break_fence,
    break_ceiling,
]


@pytest.mark.parametrize("make", BREAKS, ids=lambda f: f.__name__)
def test_audit_finds_exactly_the_injected_fault(hierarchy, make):
    areas, graph, labels, nxg = hierarchy
    b_areas, b_labels, expected = make(areas, graph, labels, nxg)
    result = audit(b_areas, graph, b_labels, TIERS)
    assert result.faults() == expected, result.violations_frame().to_string()
    assert not result.ok
    frame = result.violations_frame()
    assert list(frame.columns) == ["kind", "tier", "zone", "areas", "figures", "message"]
    assert frame["message"].str.len().min() > 20


@pytest.mark.parametrize("make", BREAKS, ids=lambda f: f.__name__)
def test_certificate_agrees_with_the_plain_checks(hierarchy, make):
    areas, graph, labels, nxg = hierarchy
    b_areas, b_labels, _ = make(areas, graph, labels, nxg)
    result = audit(b_areas, graph, b_labels, TIERS)
    certs = certify(b_areas, graph, b_labels, TIERS, time_limit=20)
    infeasible = {(c.fence, c.tier) for c in certs if c.status == "refuted"}
    assert all(c.status in ("confirmed", "refuted") for c in certs)
    assert infeasible == result.broken_cells()


def test_fault_figures_name_the_parts_and_parents(hierarchy):
    areas, graph, labels, nxg = hierarchy
    _, broken, _ = break_far_county(areas, graph, labels, nxg)
    result = audit(areas, graph, broken, TIERS)
    (contig,) = result.of_kind("contiguity")
    assert contig.figures["parts"] == 2 and contig.figures["part_sizes"][1] == 1
    assert sum(contig.figures["part_counts"]["persons"]) == pytest.approx(
        areas.counts[broken["county"] == contig.zone, 0].sum()
    )
    (fence,) = result.of_kind("fence")
    assert fence.figures["fences"]["36067"] == 1

    _, broken, _ = break_neighbour_county(areas, graph, labels, nxg)
    (nest,) = audit(areas, graph, broken, TIERS).of_kind("nesting")
    assert len(nest.figures["parents"]) == 2 and not nest.figures["id_reused"]
    assert "spans 2 zones of tier county" in nest.message

    _, broken, _ = break_reused_id(areas, graph, labels, nxg)
    (nest,) = audit(areas, graph, broken, TIERS).of_kind("nesting")
    assert nest.figures["id_reused"] and "do not touch" in nest.message

    b_areas, _, _ = break_ceiling(areas, graph, labels, nxg)
    (bound,) = audit(b_areas, graph, labels, TIERS).of_kind("bounds")
    assert bound.figures["side"] == "max" and bound.figures["excess"] == pytest.approx(123)
    assert "above the ceiling of 20,000 by 123" in bound.message


# ---------------------------------------------------------------- small grids


def _grid_case():
    graph = grid_graph(2, 3)
    areas = make_areas(np.array([10, 20, 30, 40, 50, 60]))
    labels = {"block": np.array(["A", "A", "B", "C", "C", "B"], dtype=object)}
    return areas, graph, labels


def test_zone_lists_reveal_empty_and_unlisted_zones():
    areas, graph, labels = _grid_case()
    tiers = [TierRules("block")]
    result = audit(areas, graph, labels, tiers, zone_lists={"block": ["A", "B", "C", "D"]})
    # Duque, Ramos & Surinach 2007: no region may be empty
    assert result.faults() == {("coverage", "block", "D")}
    result = audit(areas, graph, labels, tiers, zone_lists={"block": ["A", "B"]})
    assert result.faults() == {("coverage", "block", "C")}


def test_more_zones_than_units_is_a_coverage_fault():
    areas, graph, labels = _grid_case()
    listed = ["A", "B", "C"] + [f"Z{i}" for i in range(5)]
    result = audit(areas, graph, labels, [TierRules("block")], zone_lists={"block": listed})
    # Duque, Ramos & Surinach 2007: at most as many regions as areas
    assert any(v.figures.get("zones") == 8 and v.figures.get("units") == 6 for v in result.violations)


def test_lookup_problems_are_reported_as_coverage():
    areas, graph, labels = _grid_case()
    problems = [{"kind": "unknown", "id": "x99", "message": "area id x99 in the lookup is not an area"},
                "row 7: area id a001 appears twice"]
    result = audit(areas, graph, labels, [TierRules("block")], lookup_problems=problems)
    assert [v.kind for v in result.violations] == ["coverage", "coverage"]
    assert result.violations[0].areas == ("x99",)
    assert "appears twice" in result.violations[1].message


def test_bounds_report_value_bound_and_excess():
    areas, graph, labels = _grid_case()
    tiers = [TierRules("block", min={"persons": 40}, max={"persons": 85})]
    result = audit(areas, graph, labels, tiers)
    # A holds 30 (floor 40), B holds 90 (ceiling 85), C holds 90
    got = {(v.zone, v.figures["side"], v.figures["value"], v.figures["excess"]) for v in result.violations}
    assert got == {("A", "min", 30.0, -10.0), ("B", "max", 90.0, 5.0), ("C", "max", 90.0, 5.0)}


def test_rules_and_lookup_must_match():
    areas, graph, labels = _grid_case()
    with pytest.raises(InputError, match="tier 'block'.*min.households"):
        audit(areas, graph, labels, [TierRules("block", min={"households": 1})])
    with pytest.raises(InputError, match="do not match"):
        audit(areas, graph, labels, [TierRules("ward")])
    with pytest.raises(InputError, match="5 zone ids given for 6 areas"):
        audit(areas, graph, {"block": labels["block"][:5]}, [TierRules("block")])


def test_square_zone_polsby_popper():
    graph = grid_graph(2, 2)
    areas = make_areas(np.ones(4))
    result = audit(areas, graph, {"block": np.array(["S"] * 4, dtype=object)}, [TierRules("block")])
    # Polsby & Popper 1991: a square scores pi/4 = 0.785398
    assert result.zones["block"]["polsby_popper"].iloc[0] == pytest.approx(np.pi / 4)
    assert result.zones["block"]["perimeter"].iloc[0] == pytest.approx(8.0)


def test_deviation_from_target_and_outliers():
    areas, graph, labels = _grid_case()
    tiers = [TierRules("block", target={"persons": 50})]
    result = audit(areas, graph, labels, tiers)
    dev = dict(zip(result.zones["block"]["zone"], result.zones["block"]["persons_vs_target"]))
    assert dev == pytest.approx({"A": -0.4, "B": 0.8, "C": 0.8})
    flagged = {(o["zone"], o["measure"]) for o in result.outliers}
    assert ("B", "persons_vs_target") in flagged and ("A", "persons_vs_target") not in flagged


# ---------------------------------------------------------------- intra-area correlation


def _trait_areas(values, name):
    return make_areas(
        np.full(3, 10.0), count_names=("households",),
        attrs=np.array(values, dtype=float)[:, None], attr_names=(name,), weight=np.full(3, 10.0),
    )


def test_intra_area_correlation_check_value():
    graph = grid_graph(1, 3)
    areas = _trait_areas([2, 5, 8], "owners")
    one_zone = audit(areas, graph, {"zone": np.array(["Z"] * 3, dtype=object)}, [TierRules("zone")])
    three = audit(areas, graph, {"zone": np.array(["P", "Q", "R"], dtype=object)}, [TierRules("zone")])
    # the estimator is Tranmer & Steel's (1998) one-way ANOVA intraclass correlation,
    # rho = (F-1)/(F+n0-1); the worked example (three areas of 10 households with 2, 5 and 8
    # having a trait, rho = 0.246032) is our own, checked against scipy just below
    assert one_zone.zones["zone"]["rho_owners"].iloc[0] == pytest.approx(0.246032, abs=1e-6)
    assert three.tiers["zone"]["rho"]["owners"] == pytest.approx(0.246032, abs=1e-6)
    # scipy.stats.f_oneway on the household-level 0/1 data: rho = (F-1)/(F+n0-1), n0 = 10
    groups = [np.r_[np.ones(k), np.zeros(10 - k)] for k in (2, 5, 8)]
    f = stats.f_oneway(*groups).statistic
    assert one_zone.zones["zone"]["rho_owners"].iloc[0] == pytest.approx((f - 1) / (f + 10 - 1))


def test_share_attributes_use_share_times_weight():
    graph = grid_graph(1, 3)
    areas = _trait_areas([0.2, 0.5, 0.8], "owner_share")
    result = audit(areas, graph, {"zone": np.array(["Z"] * 3, dtype=object)}, [TierRules("zone")])
    # Tranmer & Steel 1998 check value, reached through shares of 10 households
    assert result.zones["zone"]["rho_owner_share"].iloc[0] == pytest.approx(0.246032, abs=1e-6)
    assert any("share*weight" in note for note in result.notes)


def test_plain_attributes_report_weighted_variance():
    graph = grid_graph(1, 3)
    areas = make_areas(np.ones(3), attrs=np.array([[1.0], [2.0], [6.0]]), attr_names=("income",),
                       weight=np.array([1.0, 1.0, 2.0]))
    result = audit(areas, graph, {"zone": np.array(["Z"] * 3, dtype=object)}, [TierRules("zone")])
    # weighted variance (numpy.average / numpy.cov with aweights, reference library)
    x, w = np.array([1.0, 2.0, 6.0]), np.array([1.0, 1.0, 2.0])
    expected = np.average((x - np.average(x, weights=w)) ** 2, weights=w)
    assert result.zones["zone"]["var_income"].iloc[0] == pytest.approx(expected)


# ---------------------------------------------------------------- random grids: checks vs model


def _random_hierarchy(rng, rows, cols):
    """Two tiers drawn at random: often broken, sometimes whole."""
    n = rows * cols
    graph = grid_graph(rows, cols)
    areas = make_areas(rng.integers(1, 10, n).astype(float),
                       fence=np.where(np.arange(n) % cols < cols // 2, "W", "E"))
    upper = rng.integers(0, 2, n)
    if rng.random() < 0.5:
        upper = (np.arange(n) % cols >= cols // 2).astype(int)
    lower = upper * 10 + rng.integers(0, 3, n)
    if rng.random() < 0.3:
        lower = upper * 10 + (np.arange(n) // cols)
    labels = {"block": np.array([f"b{v}" for v in lower], dtype=object),
              "ward": np.array([f"w{v}" for v in upper], dtype=object)}
    tiers = [TierRules("block", min={"persons": 3}, max={"persons": 25}),
             TierRules("ward", min={"persons": 10}, max={"persons": 60})]
    return areas, graph, labels, tiers


def test_certificate_agrees_on_random_grids():
    rng = np.random.default_rng(7)
    seen_ok = seen_broken = 0
    for _ in range(40):
        areas, graph, labels, tiers = _random_hierarchy(rng, 3, 4)
        result = audit(areas, graph, labels, tiers)
        certs = certify(areas, graph, labels, tiers, time_limit=10)
        infeasible = {(c.fence, c.tier) for c in certs if c.status == "refuted"}
        assert infeasible == result.broken_cells(), result.violations_frame().to_string()
        seen_ok += not infeasible
        seen_broken += bool(infeasible)
    assert seen_ok > 0 and seen_broken > 0
