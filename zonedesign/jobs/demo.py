"""The later-count demo: design the region, redraw it ten years on, audit the redraw."""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

from zonedesign.jobs.design import design
from zonedesign.jobs.inputs import Progress, say
from zonedesign.jobs.redraw import redraw
from zonedesign.jobs.summary import RunResult


def later_scenario(
    input_dir: Path,
    out: str | Path,
    *,
    overwrite: bool = False,
    executor: str = "local",
    workers: int = 1,
    scheduler: str | None = None,
    certify: bool = True,
    report: bool = True,
    progress: Progress | None = None,
    extra_files: Mapping[str, Path] | None = None,
    written: Any = None,
) -> RunResult:
    """Design the demo region, redraw it on the counts ten years on, audit the redraw.

    OUT/design/ holds the first hierarchy; OUT/ itself holds the redraw (lookup.csv,
    changes.csv, summary.json with the independent audit and certificate, report.html).
    """
    import shutil
    import tempfile

    areas = input_dir / "areas.gpkg"
    later = input_dir / "areas.later.gpkg"
    rules = input_dir / "rules.toml"
    work = Path(tempfile.mkdtemp(prefix="zonedesign-later-"))
    try:
        say(progress, "designing the first hierarchy")
        first = design(areas, rules, work / "design", executor=executor, workers=workers,
                       scheduler=scheduler, report=report, certify=certify, progress=progress)
        files = dict(extra_files or {})
        for p in sorted((work / "design").rglob("*")):
            if p.is_file():
                files[f"design/{p.relative_to(work / 'design')}"] = p
        say(progress, "redrawing on the later counts")
        res = redraw(later, rules, work / "design" / "lookup.csv", out, overwrite=overwrite,
                     executor=executor, workers=workers, scheduler=scheduler, report=report, certify=certify,
                     progress=progress, extra_files=files)
        res.record.first_design_exit_code = first.exit_code
        return res
    finally:
        shutil.rmtree(work, ignore_errors=True)
