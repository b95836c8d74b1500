"""The benchmark harness on toy sizes: instance builders, the three move-loop
implementations, the Ward baseline and the result files behave as the benchmarks rely on.
No timing is asserted here; timing goals live in benchmarks/."""

from __future__ import annotations

import importlib
import math
import sys
from pathlib import Path

import networkx as nx
import numpy as np
import pytest

from zonedesign import measures
from zonedesign.graph.adjacency import rook_graph

# benchmarks/ sits beside the package at the repository root, outside the installed package
_ROOT = str(Path(__file__).resolve().parent.parent)
if _ROOT not in sys.path:
    sys.path.insert(0, _ROOT)
baseline = importlib.import_module("benchmarks.baseline")
quality = importlib.import_module("benchmarks.quality")
scale = importlib.import_module("benchmarks.scale")
speed = importlib.import_module("benchmarks.speed")
redraw_bench = importlib.import_module("benchmarks.redraw")
reshape_bench = importlib.import_module("benchmarks.reshape")
common = importlib.import_module("benchmarks.common")
grown_subset, largest_component = common.grown_subset, common.largest_component
md_table, write_results = common.md_table, common.write_results


def _nx_graph(graph) -> nx.Graph:
    i, j, _ = graph.edges()
    g = nx.Graph()
    g.add_nodes_from(range(graph.n))
    g.add_edges_from(zip(i.tolist(), j.tolist()))
    return g


def _zones_connected(graph, labels) -> bool:
    g = _nx_graph(graph)
    return all(nx.is_connected(g.subgraph(np.flatnonzero(labels == z).tolist())) for z in np.unique(labels))


# ---------------------------------------------------------------- quality


def test_quality_grid_instance_is_one_connected_fence_with_bounds():
    inst = quality.grid_instance(6, 5, 0.1, 1)
    p = inst.problem
    assert 20 <= p.n <= 30
    assert nx.is_connected(_nx_graph(p.graph))  # networkx as the reference for connectivity
    assert np.isfinite(p.bounds.lo).all() and np.isfinite(p.bounds.hi).all()
    assert p.bounds.lo[0] < p.bounds.target[0] < p.bounds.hi[0]
    # standardised attributes: weighted mean 0 (common practice for z-scores)
    w = p.weight
    assert np.allclose((w[:, None] * p.attrs).sum(0) / w.sum(), 0.0, atol=1e-9)


def test_quality_row_engine_never_beats_the_proven_optimum():
    inst = quality.grid_instance(5, 4, 0.0, 2)
    row = quality.evaluate(inst, exact_time=30.0, methods=("descent",))
    assert row["exact_status"] == "optimal"
    assert math.isfinite(row["optimum"]) and row["optimum"] > 0
    assert row["descent_breaks"] == 0.0 and row["descent_feasible"]
    # an optimum is a lower bound on every feasible zoning's objective
    assert row["descent_objective"] >= row["optimum"] - 1e-9
    assert row["descent_gap_pct"] >= -1e-6
    summary = quality.summarise([row], methods=("descent",))
    assert summary[0]["instances_proven"] == 1
    assert summary[0]["worst_gap_pct"] == pytest.approx(row["descent_gap_pct"])


# ---------------------------------------------------------------- speed


@pytest.fixture(scope="module")
def toy_moves():
    p = speed.speed_instance(300, seed=4)
    labels = speed.start_labelling(p, seed=2)
    moves = speed.move_sequence(p, labels, 400, seed=3)
    return p, labels, moves


def test_speed_start_labelling_is_contiguous_and_covers_every_unit(toy_moves):
    p, labels, _ = toy_moves
    assert labels.shape == (p.n,) and labels.min() == 0
    assert _zones_connected(p.graph, labels)


def test_speed_moves_target_a_neighbouring_zone(toy_moves):
    p, labels, moves = toy_moves
    for i, b in moves[:100]:
        assert labels[i] != b
        assert b in set(labels[p.graph.neighbours(i)].tolist())


def test_speed_three_implementations_make_the_same_decisions(toy_moves):
    p, labels, moves = toy_moves
    lab_n, out_n, _ = speed.run_naive(p, labels, moves)
    lab_p, out_p, _ = speed.run_plain(p, labels, moves)
    lab_c, out_c, _ = speed.run_compiled(p, labels, moves)
    assert (out_n == out_p).all() and (out_n == out_c).all()
    assert (lab_n == lab_p).all() and (lab_n == lab_c).all()
    assert (out_n == speed.APPLIED).sum() > 0
    # only improving moves are applied, and every zone stays connected (networkx check)
    before, after = measures.score(p, labels), measures.score(p, lab_n)
    assert after.key() < before.key()
    assert _zones_connected(p.graph, lab_n)
    assert np.unique(lab_n).shape[0] == np.unique(labels).shape[0]


# ---------------------------------------------------------------- reshape


def test_reshape_both_implementations_keep_zones_connected_and_never_worsen():
    inst = quality.grid_instance(9, 9, 0.05, 3)
    p = inst.problem
    start = reshape_bench.start_labelling(p, seed=1)
    before = measures.score(p, measures.compact_labels(start[0])[0])
    for previous in (True, False):
        row, labels = reshape_bench.time_reshape(p, start, 2, previous)
        assert row["tries"] > 0 and row["per_try_s"] > 0
        assert _zones_connected(p.graph, labels)  # networkx as the reference for connectivity
        after = measures.score(p, labels)
        assert abs(after.total - row["objective"]) <= 1e-9 and after.breaks == pytest.approx(row["breaks"])
        # (breaks, objective) of the phase's end is never behind its start
        assert (row["breaks"], row["objective"]) <= (before.breaks + 1e-9, before.total + 1e-9)


# ---------------------------------------------------------------- scale


def test_scale_input_has_connected_fences_and_loadable_rules(tmp_path):
    from zonedesign.rules import load_rules

    made = scale.make_input(1200, tmp_path, seed=3)
    import geopandas as gpd

    gdf = gpd.read_parquet(made["paths"]["parquet"])
    assert len(gdf) == 1200
    g = _nx_graph(rook_graph(gdf.geometry.values))
    for f in gdf["fence"].unique():
        assert nx.is_connected(g.subgraph(np.flatnonzero(gdf["fence"].to_numpy() == f).tolist()))
    rules = load_rules(made["paths"]["rules"])
    # the scale runs use the demo's tiers and bounds, so the two never drift apart
    from zonedesign.demo.scenarios import demo_rules_text
    from zonedesign.rules import parse_rules

    demo = parse_rules(demo_rules_text())
    assert [(t.name, t.min, t.max, t.target) for t in rules.tiers] == [(t.name, t.min, t.max, t.target) for t in demo.tiers]


# ---------------------------------------------------------------- baseline


def test_ward_baseline_gives_k_contiguous_zones_and_judge_sums_squares():
    p = quality.grid_instance(6, 6, 0.0, 5).problem
    labels = baseline.ward_labels(p.attrs, p.graph, 7)
    assert np.unique(labels).shape[0] == 7
    # connectivity-constrained Ward merges only neighbours (scikit-learn documentation)
    assert baseline.non_contiguous(p.graph, labels) == 0
    got = baseline.judge(p, labels)
    assert got["zones"] == 7 and got["wss"] >= 0 and got["ss_unweighted"] >= 0
    # one zone per unit leaves no within-zone spread
    single = baseline.judge(p, np.arange(p.n))
    assert single["wss"] == pytest.approx(0.0, abs=1e-12) and single["ss_unweighted"] == pytest.approx(0.0, abs=1e-12)


def test_homogeneity_only_rules_zero_the_other_weights(tmp_path):
    from zonedesign.demo.scenarios import demo_rules_text
    from zonedesign.rules import load_rules

    path = tmp_path / "rules.toml"
    path.write_text(demo_rules_text(), encoding="utf-8")
    rules = load_rules(baseline.homogeneity_only(path))
    for t in rules.tiers:
        assert t.weights["homogeneity"] == 1.0
        assert t.weights["size"] == 0.0 and t.weights["compactness"] == 0.0


# ---------------------------------------------------------------- redraw


def test_the_redraw_ratio_counts_a_fence_with_nothing_to_mend_as_met_only_when_nothing_moved():
    assert redraw_bench._ratio(0, 0) == 1.0
    assert redraw_bench._ratio(3, 0) == float("inf")
    assert redraw_bench._ratio(3, 2) == 1.5


# ---------------------------------------------------------------- common


def test_grown_subset_is_connected_and_sized():
    p = quality.grid_instance(8, 8, 0.0, 1).problem
    sub = grown_subset(p.graph, 0, 20)
    assert sub.shape == (20,)
    assert nx.is_connected(_nx_graph(p.graph.subgraph(sub)))
    assert largest_component(p.graph).shape == (p.n,)


def test_results_files_carry_the_machine_header(tmp_path):
    rows = [{"a": 1, "b": 0.5}, {"a": 2, "b": math.nan}]
    md, csv = write_results("toy", "toy", rows, [("Table", md_table(rows))], quick=True, seconds=1.0, folder=tmp_path)
    text = md.read_text()
    assert "- date:" in text and "cores" in text and "RAM" in text
    assert csv.read_text().splitlines()[0] == "a,b"


def test_exact_threshold_row_counts_solves_and_never_lets_the_search_beat_the_optimum():
    bench = importlib.import_module("benchmarks.exact_threshold")
    inst = quality.grid_instance(5, 4, 0.0, 2)
    row = bench.measure(inst, threshold=1_000)
    assert row["proven"] and not row["over_cap"] and row["feasible_zones"] > 0
    # an optimum is a lower bound on every feasible zoning's objective
    assert row["anneal_gap_pct"] >= -1e-6


def test_exact_threshold_rule_stops_where_summed_exact_time_passes_annealing_time():
    bench = importlib.import_module("benchmarks.exact_threshold")

    def row(zones, exact, anneal, proven=True):
        return {"feasible_zones": zones, "exact_s": exact, "anneal_s": anneal, "proven": proven, "over_cap": False}

    rows = [row(1_500, 0.1, 1.0), row(12_345, 1.5, 1.0), row(30_000, 5.0, 1.0), row(20_456, 0.2, 1.0)]
    # sums in zone order: 0.1/1, 1.6/2, 1.8/3, 6.8/4 -> the last within 1 x is at 20,456 zones
    assert bench.threshold_of(rows) == 20_000
    assert bench.threshold_of([row(500, 0.1, 1.0, proven=False)]) == 0
