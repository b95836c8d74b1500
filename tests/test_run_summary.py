"""The run summary as one typed record.

summary.json is `RunSummary.to_json()`; `RunSummary.from_json` reads it back whole, takes
optional parts as absent, and refuses a summary without a required key, naming the file
and the key. The break counts are counted once, in the record's outcome: `show`, the
report and the CLI's last line all give the record's numbers, and those are the zones the
written lookup puts outside their bounds.
"""

from __future__ import annotations

import copy
import json
import re
from pathlib import Path

import geopandas as gpd
import pandas as pd
import pytest
from cli_support import RULES, read_summary, run_cli, write_inputs

from zonedesign import api
from zonedesign.cli.show import show
from zonedesign.errors import InputError
from zonedesign.summaryparts import BoundBreak, FenceRow
from zonedesign.summaryrecord import RunSummary

# a ward floor above every quarter's households (about 875): each fence's ward breaks it
FLOOR = 1000
BROKEN_RULES = RULES.replace("min = { households = 300 }", f"min = {{ households = {FLOOR} }}").replace(
    "max = { households = 1200 }", "max = { households = 2000 }").replace(
    "target = { households = 600 }", "target = { households = 1500 }")


@pytest.fixture(scope="module")
def broken(tmp_path_factory) -> tuple[api.RunResult, Path, Path]:
    """A small design whose ward tier cannot meet its floor, certified and reported."""
    root = tmp_path_factory.mktemp("summary")
    areas, rules = write_inputs(root / "in", rules=BROKEN_RULES)
    res = api.design(areas, rules, root / "out")
    assert res.exit_code == 1
    return res, root / "out", areas


def test_summary_json_is_the_record_and_reads_back_equal(broken) -> None:
    res, out, _ = broken
    data = read_summary(out)
    record = RunSummary.from_json(data, source=str(out / "summary.json"))
    assert record.to_json() == data
    assert record == res.record
    assert record.outcome == res.record.outcome
    # the parts the readers use are typed, not string paths
    assert all(isinstance(f, FenceRow) for f in record.fences)
    assert all(isinstance(b, BoundBreak) for b in record.bound_breaks)
    assert record.tier_names == ["block", "ward"]
    assert record.search.seed == 5 and record.search.method == "descent"


@pytest.mark.parametrize("path", ["exit_code", "command", "fences[0].tier", "audit.ok", "certificate[1].fence",
                                  "bound_breaks[0].zone"])
def test_a_summary_without_a_required_key_is_refused_naming_the_file_and_key(broken, path: str) -> None:
    _, out, _ = broken
    data = copy.deepcopy(read_summary(out))
    *parents, last = re.findall(r"[^.\[\]]+", path)
    holder = data
    for step in parents:
        holder = holder[int(step)] if step.isdigit() else holder[step]
    del holder[last]
    source = str(out / "summary.json")
    with pytest.raises(InputError, match=re.escape(f"{source}: required key {path} is missing")):
        RunSummary.from_json(data, source=source)


def test_a_key_of_the_wrong_type_is_refused_by_name(broken) -> None:
    _, out, _ = broken
    data = read_summary(out)
    data["tiers"]["ward"]["zones"] = "four"
    with pytest.raises(InputError, match=r"summary.json: key tiers.ward.zones should be a whole number, not str"):
        RunSummary.from_json(data)


def test_optional_parts_may_be_absent(broken) -> None:
    _, out, _ = broken
    data = read_summary(out)
    for part in ("certificate", "proofs", "locks", "fences", "search", "areas", "graph", "tiers", "overrides"):
        data.pop(part, None)
    record = RunSummary.from_json(data)
    assert record.certificate is None and record.fences is None and record.areas is None
    assert record.to_json() == data
    assert record.outcome.certificate is None and record.outcome.bound_breaks == len(data["bound_breaks"])


def test_show_the_report_and_the_record_give_the_same_break_counts(broken) -> None:
    res, out, areas = broken
    # counted outside the project: ward totals of the written lookup below the floor
    lookup = pd.read_csv(out / "lookup.csv", dtype=str)
    counts = gpd.read_file(areas)[["id", "households"]].astype({"id": str})
    totals = lookup.merge(counts, left_on=lookup.columns[0], right_on="id").groupby("ward")["households"].sum()
    below = int((totals < FLOOR).sum())
    assert below == 4

    record = RunSummary.from_json(read_summary(out))
    assert record.outcome.bound_breaks == below == len(record.bound_breaks)
    assert record.tiers["ward"].bound_breaks == below

    shown = show(out).splitlines()
    assert sum(line.startswith("  break: tier ward zone ") for line in shown) == below
    assert f"  tier ward: {record.tiers['ward'].zones} zones, {below} bound break(s)" in " ".join(shown)
    assert shown[-1] == f"  exit code of the run: 1 ({', '.join(record.outcome.reasons)})"
    assert record.outcome.reasons[0] == f"{below} bound break(s)"

    html = (out / "report.html").read_text(encoding="utf-8")
    assert f"<dt>Zones outside their bounds</dt><dd>{below}</dd>" in html
    assert f"<dt>Exit code</dt><dd>{res.exit_code} (ran, but a rule is broken)</dd>" in html


@pytest.mark.parametrize(("summary", "reasons"), [
    ({"command": "design", "exit_code": 0, "audit": {"ok": True, "violations": []}, "bound_breaks": []}, ()),
    ({"command": "design", "exit_code": 1, "audit": {"ok": True, "violations": []}, "bound_breaks": [],
      "certificate": [{"tier": "t1", "fence": "F0", "status": "confirmed"},
                      {"tier": "t1", "fence": "F1", "status": "undecided"}]}, ("certificate undecided",)),
    ({"command": "audit", "exit_code": 1,
      "audit": {"ok": False, "violations": [{"kind": "bounds", "tier": "t1", "zone": "z1"},
                                            {"kind": "bounds", "tier": "t1", "zone": "z1"},
                                            {"kind": "contiguity", "tier": "t1", "zone": "z2"}]}},
     ("1 bound break(s)", "1 audit violation(s)")),
    ({"command": "sweep", "exit_code": 1,
      "sweep": {"vary": [], "invalid": [{"variant": 2, "name": "b", "problem": "min above max"}],
                "variants": [{"variant": 1, "valid": True, "bound_breaks": 3, "audit_ok": True, "fence_failures": 1},
                             {"variant": 2, "valid": False, "audit_ok": False}]}},
     ("1 variant(s) not run", "1 variant(s) with failed fences", "3 bound break(s)")),
])
def test_the_outcome_names_every_reason_for_the_exit_code(summary: dict, reasons: tuple) -> None:
    # an audit counts a zone that breaks bounds of two counts once; the certificate is a
    # pass only when every model confirms
    done = RunSummary.from_json(summary).outcome
    assert done.reasons == reasons
    assert done.holds == (not reasons)


def test_the_cli_prints_the_counts_the_record_holds(capsys, tmp_path: Path) -> None:
    areas, rules = write_inputs(tmp_path / "in", rules=BROKEN_RULES)
    ran = run_cli(capsys, "design", areas, "--rules", rules, "--out", tmp_path / "out", "--no-report")
    record = RunSummary.from_json(json.loads((tmp_path / "out" / "summary.json").read_text(encoding="utf-8")))
    done = record.outcome
    assert ran.code == done.exit_code == 1
    assert ran.err_lines[-1].endswith(
        f"finished with {done.bound_breaks} bound break(s), {done.violations} audit violation(s), "
        f"{done.failed_fences} failed fence(s), certificate {done.certificate}: exit 1")
    assert done.reasons[0] == f"{done.bound_breaks} bound break(s)"
