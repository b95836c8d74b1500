"""Infeasibility proofs: plain arithmetic where it suffices, CP-SAT where it does not.

Every CP-SAT verdict is checked against a brute-force search over all partitions of a
small graph, with connectivity judged by networkx (reference library).
"""

from __future__ import annotations

import networkx as nx
import numpy as np
from verify_support import grid_graph

from zonedesign.records import Bounds, Graph, Problem
from zonedesign.verify.proofs import arithmetic_proof, prove_infeasible


def problem(graph: Graph, counts, lo, hi, names=("households",)) -> Problem:
    n = graph.n
    counts = np.asarray(counts, dtype=float).reshape(n, -1)
    return Problem(
        graph=graph,
        counts=counts,
        bounds=Bounds(tuple(names), np.array(lo, float), np.array(hi, float), np.full(len(names), np.nan)),
        attrs=np.zeros((n, 0)),
        weight=np.ones(n),
        area=np.ones(n),
        perimeter=np.full(n, 4.0),
    )


def set_partitions(items):
    if not items:
        yield []
        return
    first, rest = items[0], items[1:]
    for part in set_partitions(rest):
        for k in range(len(part)):
            yield part[:k] + [[first] + part[k]] + part[k + 1:]
        yield [[first]] + part


def brute_force_feasible(p: Problem) -> bool:
    """Some partition into connected zones meets every bound (networkx connectivity)."""
    g = nx.Graph()
    g.add_nodes_from(range(p.n))
    i, j, _ = p.graph.edges()
    g.add_edges_from(zip(i.tolist(), j.tolist()))
    for part in set_partitions(list(range(p.n))):
        ok = True
        for block in part:
            sums = p.counts[block].sum(axis=0)
            if (sums < p.bounds.lo).any() or (sums > p.bounds.hi).any() or not nx.is_connected(g.subgraph(block)):
                ok = False
                break
        if ok:
            return True
    return False


def brute_force_highest_floor(p: Problem, c: int) -> float | None:
    """The largest smallest-zone count of column c over every partition into connected
    zones meeting every other bound (networkx connectivity); None when there is none."""
    g = nx.Graph()
    g.add_nodes_from(range(p.n))
    i, j, _ = p.graph.edges()
    g.add_edges_from(zip(i.tolist(), j.tolist()))
    lo = p.bounds.lo.copy()
    lo[c] = -np.inf
    best = None
    for part in set_partitions(list(range(p.n))):
        sums = [p.counts[block].sum(axis=0) for block in part]
        if any((s < lo).any() or (s > p.bounds.hi).any() for s in sums):
            continue
        if not all(nx.is_connected(g.subgraph(block)) for block in part):
            continue
        least = min(s[c] for s in sums)
        best = least if best is None else max(best, least)
    return best


def test_fence_total_below_the_floor():
    proof = prove_infeasible(problem(grid_graph(1, 3), [50, 60, 61], [400], [1000]), "D1", "block",
                             unit_ids=["area a1", "area a2", "area a3"])
    assert proof is not None and proof.proven and proof.kind == "arithmetic"
    # one zone of all three units is the largest any zone can be (common practice)
    assert proof.text == ("fence D1 has 171 households; the tier floor is 400, so no valid zone exists; "
                          "the highest floor of households that could be met in fence D1 is 171 households "
                          "(proven; the smallest zone of a zoning that meets it holds area a1, area a2, area a3)")
    assert proof.figures["total"] == 171 and proof.figures["floor"] == 400
    (top,) = proof.floors
    assert (top.status, top.at_least, top.at_most) == ("optimal", 171, 171)


def test_island_below_the_floor():
    graph = Graph.from_edges(4, [0, 2], [1, 3])  # two islands: {a, b} and {c, d}
    proof = prove_infeasible(problem(graph, [100, 100, 10, 20], [50], [1000]), "D2", "block",
                             unit_ids=["a", "b", "c", "d"])
    assert proof.kind == "arithmetic" and proof.proven
    assert proof.text.startswith("the island of 2 units in fence D2 (first: c, d) has 30 households; "
                                 "the tier floor is 50")
    assert proof.figures["island"] == ["c", "d"]
    # a zone cannot leave its island, so the island of 30 caps every floor (common practice)
    assert proof.floors[0].at_least == 30 and proof.text.endswith(
        "in fence D2 is 30 households (proven; the smallest zone of a zoning that meets it holds c, d)")
    # arithmetic alone says the same cap
    assert arithmetic_proof(problem(graph, [100, 100, 10, 20], [50], [1000]), "D2").figures["highest_floor"] == 30


def test_total_between_one_ceiling_and_two_floors():
    proof = prove_infeasible(problem(grid_graph(1, 3), [150, 160, 210], [400], [500]), "D3", "block",
                             unit_ids=["x", "y", "z"])
    assert proof.kind == "arithmetic"
    assert proof.text == (
        "fence D3 has 520 households: too many for one zone (the ceiling is 500) and too few for "
        "two (two floors of 400 make 800), so no valid zoning exists; the highest floor of "
        "households that could be met in fence D3 is 210 households (proven; the smallest zone of a "
        "zoning that meets it holds z)"
    )
    # by hand: two zones of the path 150-160-210 are {150} | {160, 210} or {150, 160} | {210},
    # whose smaller zones hold 150 and 210; arithmetic alone caps it at 520 / 2 = 260
    assert arithmetic_proof(problem(grid_graph(1, 3), [150, 160, 210], [400], [500]), "D3").figures[
        "highest_floor"] == 260
    assert brute_force_highest_floor(problem(grid_graph(1, 3), [150, 160, 210], [400], [500]), 0) == 210


def test_total_between_k_ceilings_and_k_plus_one_floors():
    # 1,030 > 3 * 300 and < 4 * 260
    proof = arithmetic_proof(problem(grid_graph(2, 5), [103] * 10, [260], [300]), "D4")
    assert "too many for three zones (three ceilings of 300 make 900)" in proof.text
    assert "too few for four (four floors of 260 make 1,040)" in proof.text


def test_unit_above_the_ceiling():
    proof = prove_infeasible(problem(grid_graph(1, 3), [150, 160, 210], [100], [200]), "D5", "block",
                             unit_ids=["x", "y", "z"])
    assert proof.text == "z alone has 210 households, above the tier ceiling of 200; no zone can hold it"


def test_counts_that_allow_no_common_number_of_zones():
    # persons allow 2 or 3 zones (300 within [100, 150] each); households allow 5 or 6
    p = problem(grid_graph(1, 6), [[50, 1]] * 6, [100, 1], [150, 1.4], names=("persons", "households"))
    proof = prove_infeasible(p, "D6", "block")
    assert proof.kind == "arithmetic"
    assert "persons allow 2 to 3 zones" in proof.text and "households allow 5 to 6 zones" in proof.text
    assert not brute_force_feasible(p)


def test_star_needs_cp_sat():
    # a centre of 1 with three leaves of 4: any zone without the centre is one leaf (4 < 5),
    # so every leaf joins the centre's zone (13 > 9); arithmetic sees nothing wrong
    star = Graph.from_edges(4, [0, 0, 0], [1, 2, 3])
    p = problem(star, [1, 4, 4, 4], [5], [9])
    assert arithmetic_proof(p) is None
    proof = prove_infeasible(p, "D7", "block", time_limit=10)
    assert proof.kind == "cp-sat" and proof.status == "INFEASIBLE" and proof.proven
    assert "CP-SAT proved that no division of its 4 units into 2 zones works" in proof.text
    assert not brute_force_feasible(p)


def test_feasible_fence_has_no_proof():
    star = Graph.from_edges(4, [0, 0, 0], [1, 2, 3])
    assert prove_infeasible(problem(star, [1, 4, 4, 4], [5], [13]), "D8", "block") is None


def test_time_out_is_stated_not_silent():
    rng = np.random.default_rng(3)
    p = problem(grid_graph(12, 12), rng.integers(1, 30, 144), [95], [100])
    proof = prove_infeasible(p, "D9", "block", time_limit=0.2)
    assert proof is not None and proof.status == "UNKNOWN" and not proof.proven
    assert proof.text.startswith("fence D9 is too large to prove within 0.2 s")


def test_cp_sat_verdicts_match_brute_force_on_random_graphs():
    rng = np.random.default_rng(11)
    verdicts = {True: 0, False: 0}
    for _ in range(30):
        n = int(rng.integers(4, 8))
        tree = nx.random_labeled_tree(n, seed=int(rng.integers(1 << 30)))
        edges = list(tree.edges()) + [tuple(rng.choice(n, 2, replace=False)) for _ in range(int(rng.integers(0, 3)))]
        graph = Graph.from_edges(n, [a for a, _ in edges], [b for _, b in edges])
        counts = rng.integers(1, 10, n)
        lo = float(rng.integers(3, 12))
        p = problem(graph, counts, [lo], [lo + float(rng.integers(0, 8))])
        proof = prove_infeasible(p, "R", "block", time_limit=10)
        assert proof is None or proof.status == "INFEASIBLE"
        feasible = brute_force_feasible(p)
        assert (proof is None) == feasible
        verdicts[feasible] += 1
    assert verdicts[True] > 0 and verdicts[False] > 0


def test_cp_sat_proof_on_a_path_with_no_contiguous_split():
    # path 5-5-1-1 with zones of exactly 6: the total 12 fits two zones, no unit is too big,
    # but no cut of the path leaves 6 on both sides
    p = problem(grid_graph(1, 4), [5, 5, 1, 1], [6], [6])
    assert arithmetic_proof(p) is None
    proof = prove_infeasible(p, "P", "block")
    assert proof is not None and proof.kind == "cp-sat" and proof.proven
    assert not brute_force_feasible(p)


def test_fence_proofs_name_area_ids_and_zone_codes():
    from zonedesign.breakproofs import explain_breaks
    from zonedesign.records import Areas
    from zonedesign.rules import TierRules

    graph = grid_graph(1, 4)
    n = graph.n
    areas = Areas(
        ids=np.array(["36007014300", "36007014400", "36007014500", "36007014600"], dtype=object),
        counts=np.array([[12_221.0], [300.0], [400.0], [500.0]]), count_names=("POP8",),
        attrs=np.zeros((n, 0)), attr_names=(), weight=np.ones(n), area=np.ones(n),
        perimeter=np.full(n, 4.0), fence=np.array(["36007"] * n, dtype=object),
    )
    lookup = {"tier1": np.array(["g1", "g2", "g2", "g3"], dtype=object),
              "tier2": np.array(["c1"] * n, dtype=object)}
    tiers = [TierRules("tier1", min={"POP8": 100}, max={"POP8": 10_000}),
             TierRules("tier2", min={"POP8": 100}, max={"POP8": 12_000})]
    breaks = [{"tier": "tier1", "fence": "36007"}, {"tier": "tier2", "fence": "36007"}]
    first, second = explain_breaks(areas, graph, tiers, lookup, breaks, time_limit=5)
    # the messages name the input's own area ids and zone codes, never positions (issue 16 item 8)
    assert first.text == ("area 36007014300 alone has 12,221 POP8, above the tier ceiling of 10,000; "
                          "no zone can hold it")
    assert second.text == "zone g1 alone has 12,221 POP8, above the tier ceiling of 12,000; no zone can hold it"


def test_highest_floor_matches_brute_force_on_random_graphs():
    # every fence proven infeasible says the highest floor it could meet; it must equal the
    # best smallest zone over all connected partitions meeting the other bounds (networkx)
    from zonedesign.verify.floors import search_highest_floor

    rng = np.random.default_rng(5)
    checked = 0
    kinds = set()
    for _ in range(40):
        n = int(rng.integers(4, 8))
        tree = nx.random_labeled_tree(n, seed=int(rng.integers(1 << 30)))
        edges = list(tree.edges()) + [tuple(rng.choice(n, 2, replace=False)) for _ in range(int(rng.integers(0, 3)))]
        graph = Graph.from_edges(n, [a for a, _ in edges], [b for _, b in edges])
        counts = rng.integers(1, 10, n)
        lo = float(rng.integers(6, 16))
        p = problem(graph, counts, [lo], [lo + float(rng.integers(0, 8))])
        proof = prove_infeasible(p, "R", "block", time_limit=10)
        if proof is None:
            continue
        assert proof.proven
        if "alone has" in proof.text:
            assert proof.floors == ()  # a ceiling no unit fits: no floor takes part
            continue
        assert len(proof.floors) == 1
        found = proof.floors[0]
        kinds.add(found.status)
        truth = brute_force_highest_floor(p, 0)
        if truth is None:
            assert found.status == "infeasible"
            assert "no floor of households can be met in fence R" in proof.text
        else:
            assert found.status == "optimal" and found.at_least == found.at_most == truth
            assert f"fence R is {truth:,.0f} households (proven; the smallest zone" in proof.text
        # the search alone (as the proof runs it) gives the same figures
        again = search_highest_floor(p, 0)
        assert (again.status, again.at_least, again.at_most) == (found.status, found.at_least, found.at_most)
        checked += 1
    assert checked >= 10 and kinds == {"optimal", "infeasible"}


def test_highest_floor_with_other_bounds_that_fail_on_their_own():
    # households of exactly 6 on the path 5-5-1-1 cannot be met (no cut leaves 6 a side), so
    # no floor of persons helps; the households floor, freed, is met at best by {5 | 5 | 1, 1}
    # at 2 (by hand, and by brute force below)
    p = problem(grid_graph(1, 4), [[10, 5], [10, 5], [10, 1], [10, 1]], [10, 6], [1000, 6],
                names=("persons", "households"))
    proof = prove_infeasible(p, "P", "block")
    assert proof.kind == "cp-sat" and proof.proven
    persons, households = proof.floors
    assert persons.status == "infeasible" and brute_force_highest_floor(p, 0) is None
    assert "no floor of persons can be met in fence P: its other bounds fail even without one" in proof.text
    assert households.status == "optimal" and households.at_least == 2 == brute_force_highest_floor(p, 1)


def test_highest_floor_out_of_budget_says_what_is_proven():
    # with no time at all only the arithmetic end is known, and the text says so
    from zonedesign.verify.floors import floor_sentence, search_highest_floor

    p = problem(grid_graph(1, 3), [150, 160, 210], [400], [500])
    found = search_highest_floor(p, 0, budget=0.0)
    assert found.status == "undecided" and found.at_least is None and found.at_most == 260
    assert floor_sentence(found, "fence D3") == (
        "the highest floor of households that could be met in fence D3 is at most 260 households "
        "(no zoning meeting the other bounds found: the search stopped at its budget of 0 s)"
    )


def test_highest_floor_on_a_larger_fence_states_both_ends():
    # a 10 x 10 grid under a short budget: whatever is said is proven at both ends, and a
    # range reads "at least F (proven), at most G"
    from zonedesign.verify.floors import floor_sentence, search_highest_floor

    rng = np.random.default_rng(8)
    p = problem(grid_graph(10, 10), rng.integers(1, 30, 100), [2000], [400])
    found = search_highest_floor(p, 0, budget=1.0)
    assert found.at_most is not None and found.at_most <= 1999
    text = floor_sentence(found, "fence G")
    if found.status == "feasible":
        assert found.at_least <= found.at_most
        assert f"is at least {found.at_least:,.0f} households (proven) and at most {found.at_most:,.0f}" in text
    elif found.status == "optimal":
        assert "(proven; the smallest zone of a zoning that meets it holds unit " in text
    else:
        assert found.status == "undecided" and "at most" in text
