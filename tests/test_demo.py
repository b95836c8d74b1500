"""`zonedesign demo`: a size that meets every tier, and outputs that name the input they keep."""

from __future__ import annotations

import json
from pathlib import Path

import pyogrio
import pytest

from zonedesign import api
from zonedesign.demo.run import MIN_AREAS, _check_districts, run_demo
from zonedesign.demo.scenarios import write_demo_input
from zonedesign.errors import InputError
from zonedesign.rules import load_rules


def test_at_its_minimum_size_every_district_holds_every_tier_s_floor(tmp_path: Path) -> None:
    paths = write_demo_input(tmp_path / "min", n=MIN_AREAS)
    made = _check_districts(paths["areas"], paths["rules"], MIN_AREAS, 7)
    table = pyogrio.read_dataframe(paths["areas"], read_geometry=False)
    assert made == len(table)
    rules = load_rules(paths["rules"])
    totals = table.groupby("district")[["households", "persons"]].sum()
    for tier in rules.tiers:
        for count, floor in tier.min.items():
            assert (totals[count] >= floor).all(), (tier.name, count)


def test_a_region_too_small_for_the_top_tier_is_refused_with_the_district_named(tmp_path: Path) -> None:
    paths = write_demo_input(tmp_path / "small", n=600)
    with pytest.raises(InputError, match=r"district D\d\d holds \d+ \w+, below tier \w+'s floor of \d+"):
        _check_districts(paths["areas"], paths["rules"], 600, 7)
    with pytest.raises(InputError, match=f"at least {MIN_AREAS}"):
        run_demo(tmp_path / "out", n=MIN_AREAS - 1)


def test_summary_report_and_progress_name_out_input_not_the_staging_folder(monkeypatch, tmp_path: Path) -> None:
    def fake_design(areas, rules, out, **kw):
        # stands in for the (slow) design: writes what a run writes about its inputs
        out = Path(out)
        out.mkdir(parents=True)
        for name, src in kw["extra_files"].items():
            (out / name).parent.mkdir(parents=True, exist_ok=True)
            (out / name).write_bytes(Path(src).read_bytes())
        summary = {"inputs": [str(areas), str(rules)], "search": {"seed": 1}, "command": "design"}
        (out / "summary.json").write_text(json.dumps(summary))
        (out / "report.html").write_text(f"<dd>{areas}, {rules}</dd>")
        kw["progress"](f"reading {areas}")
        return api.RunResult(out, summary, 0)

    monkeypatch.setattr(api, "design", fake_design)
    said: list[str] = []
    out = tmp_path / "demo-out"
    res = run_demo(out, n=MIN_AREAS, progress=said.append)
    kept = [str(out / "input" / "areas.gpkg"), str(out / "input" / "rules.toml")]
    summary = json.loads((out / "summary.json").read_text())
    assert summary["inputs"] == kept and res.summary["inputs"] == kept
    assert (out / "report.html").read_text() == f"<dd>{kept[0]}, {kept[1]}</dd>"
    assert all(Path(p).is_file() for p in kept)
    assert f"reading {kept[0]}" in said
    assert not any("zonedesign-demo-" in line for line in said)
    # the region seed is said apart from the search seed, and the areas made are counted
    made = len(pyogrio.read_dataframe(out / "input" / "areas.gpkg", read_geometry=False))
    assert summary["demo"] == {"region_seed": 7, "areas_asked": MIN_AREAS, "areas": made, "scenario": "base"}
    assert said[0] == f"making the demo region (about {MIN_AREAS} areas asked for, region seed 7)"
    assert said[1].startswith(f"the demo region holds {made} areas")
