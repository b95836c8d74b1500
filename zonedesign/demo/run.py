"""`zonedesign demo`: the main job on the built-in invented region."""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from pathlib import Path
from typing import TYPE_CHECKING, Any

from zonedesign.errors import InputError
from zonedesign.summaryrecord import RunSummary

if TYPE_CHECKING:
    from zonedesign import api

# below this many areas a district of the demo region (seed 7) falls short of the large
# tier's floor; every run checks its own districts against every tier's floor as well
MIN_AREAS = 1500


def run_demo(
    out: str | Path,
    *,
    scenario: str = "base",
    seed: int = 7,
    n: int = 5000,
    overwrite: bool = False,
    executor: str = "local",
    workers: int = 1,
    scheduler: str | None = None,
    report: bool = True,
    progress: api.Progress | None = None,
    certify: bool = True,
) -> api.RunResult:
    """Write the demo input, then design it (scenario "base") or design, redraw and audit it
    ten years on (scenario "later"). The input used lands in OUT/input/, and every output
    names it there. `seed` seeds the region (its map and counts); the search seed is the
    one in the rules."""
    from zonedesign import api
    from zonedesign.demo.scenarios import write_demo_input

    if scenario not in ("base", "later"):
        raise InputError(f"--scenario must be base or later, not {scenario!r}")
    out = Path(out)
    if n < MIN_AREAS:
        raise InputError(f"--areas must be at least {MIN_AREAS} for the demo region, not {n}")
    api.check_out(out.resolve(), overwrite)
    # the generated input is staged in the system's temporary folder, so a killed demo
    # leaves nothing beside the target; it is copied into OUT/input/ atomically, and the
    # outputs name OUT/input/, where the files stay, not the staging folder
    staging = Path(tempfile.mkdtemp(prefix="zonedesign-demo-"))
    shown = str(out / "input")
    said = _relabelled(progress, str(staging / "input"), shown)
    try:
        if said:
            said(f"making the demo region (about {n} areas asked for, region seed {seed})")
        written = write_demo_input(staging / "input", seed=seed, n=n, later=(scenario == "later"))
        made = _check_districts(written["areas"], written["rules"], n, seed)
        if said:
            said(f"the demo region holds {made} areas; its input is kept in {shown}/")
        files = {f"input/{p.name}": p for p in sorted((staging / "input").iterdir())}
        common = dict(overwrite=overwrite, executor=executor, workers=workers, scheduler=scheduler,
                      report=report, certify=certify, progress=said, extra_files=files)
        if scenario == "base":
            res = api.design(staging / "input" / "areas.gpkg", staging / "input" / "rules.toml", out, **common)
        else:
            res = api.later_scenario(staging / "input", out, written=written, **common)
        demo = {"region_seed": seed, "areas_asked": n, "areas": made, "scenario": scenario}
        # every path in the record names OUT/input/ as the written summary.json does; read
        # as partial, it takes the record as the job made it, whatever parts that holds
        res.record = RunSummary.from_json(_replaced(res.summary, str(staging / "input"), shown),
                                          source="the demo's summary", partial=True)
        res.record.demo = demo
        _relabel_outputs(out, str(staging / "input"), shown, demo)
        return res
    finally:
        shutil.rmtree(staging, ignore_errors=True)


def _relabelled(progress, staged: str, shown: str):
    if progress is None:
        return None
    return lambda message: progress(message.replace(staged, shown))


def _check_districts(areas: Path, rules: Path, n: int, seed: int) -> int:
    """The number of areas made; refuses a region with a district below a tier's floor."""
    import pyogrio

    from zonedesign.rules import load_rules

    table = pyogrio.read_dataframe(areas, read_geometry=False)
    r = load_rules(rules)
    totals = table.groupby(r.areas.fence)[list(r.areas.counts)].sum()
    for tier in r.tiers:
        for count, floor in tier.min.items():
            low = totals[count][totals[count] < floor]
            if len(low):
                raise InputError(
                    f"the demo region of {n} areas (seed {seed}): district {low.index[0]} holds "
                    f"{int(low.iloc[0])} {count}, below tier {tier.name}'s floor of {floor:g}; "
                    f"ask for more areas (--areas) or another --seed"
                )
    return len(table)


def _replaced(obj: Any, staged: str, shown: str) -> Any:
    if isinstance(obj, str):
        return obj.replace(staged, shown)
    if isinstance(obj, dict):
        return {k: _replaced(v, staged, shown) for k, v in obj.items()}
    if isinstance(obj, list):
        return [_replaced(v, staged, shown) for v in obj]
    return obj


def _relabel_outputs(out: Path, staged: str, shown: str, demo: dict) -> None:
    """Name OUT/input/ instead of the staging folder in every summary and report, and
    record the region seed beside the search seed; each file is replaced whole."""
    for path in sorted(out.rglob("*")):
        if path.suffix not in (".json", ".html") or not path.is_file():
            continue
        text = path.read_text(encoding="utf-8")
        new = text.replace(staged, shown)
        if path.name == "summary.json":
            data = json.loads(new)
            if isinstance(data, dict):
                data["demo"] = demo
                new = json.dumps(data, sort_keys=True, indent=2, ensure_ascii=False) + "\n"
        if new != text:
            tmp = path.with_name(f".{path.name}.tmp")
            tmp.write_text(new, encoding="utf-8")
            os.replace(tmp, path)
