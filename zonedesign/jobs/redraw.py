"""`redraw`: a published hierarchy on new counts, changing as little as possible."""

from __future__ import annotations

import time
from collections.abc import Mapping
from pathlib import Path

from zonedesign.jobs.design import closing, start_run
from zonedesign.jobs.inputs import Progress, read_previous, say
from zonedesign.jobs.outputs import finish
from zonedesign.jobs.summary import RunResult, run_summary
from zonedesign.rules import Rules
from zonedesign.summaryparts import FenceFailure, PreviousPart, RedrawPart, TierChanges


def redraw(
    areas_path: str | Path,
    rules: str | Path | Rules,
    previous: str | Path,
    out: str | Path | None,
    *,
    layer: str | None = None,
    crs: str | None = None,
    overwrite: bool = False,
    mend: bool = False,
    executor: str = "local",
    workers: int = 1,
    scheduler: str | None = None,
    certify: bool = True,
    report: bool = True,
    progress: Progress | None = None,
    extra_files: Mapping[str, Path] | None = None,
    previous_counts: str | Path | None = None,
) -> RunResult:
    """Redraw a published hierarchy on new counts, changing as little as possible.

    previous_counts: the previous areas file (or a table of area id and counts) whose
    totals were published; changes.csv then states them beside the new totals."""
    from zonedesign.redraw_output import published_counts, redraw_tables
    from zonedesign.tiers.redraw import redraw_hierarchy

    t_start = time.perf_counter()
    run, prep = start_run(
        areas_path, rules, out, overwrite, layer, crs, executor, workers, scheduler, progress, extra_input=previous
    )
    prev, problems = read_previous(previous, prep, mend=mend)
    names = [t.name for t in prep.rules.tiers]
    published, before = None, None
    if previous_counts is not None:
        prep.inputs.append(Path(previous_counts))
        published, before = published_counts(
            previous_counts, previous, prep.areas.ids, prep.rules.areas.id, prep.areas.count_names, names
        )
    say(progress, f"redrawing {len(prep.rules.tiers)} tiers against {previous}")
    with closing(run):
        result = redraw_hierarchy(prep.areas, prep.graph, prep.rules, prev, executor=run, published=published,
                                   locks=prep.locks)
    lookup = result.lookup()
    changes, per_area, figures = redraw_tables(
        prep, prev, lookup, policy=result.policy, before_totals=before,
        retired={t.name: t.succession.retired for t in result.tiers},
    )
    seconds, summary = run_summary(prep, "redraw", result, executor, workers)
    summary.previous = PreviousPart.of({"lookup": str(previous),
                                        "counts": None if previous_counts is None else str(previous_counts),
                                        **problems})
    summary.redraw = RedrawPart(
        code_policy=result.policy,
        stability={t.name: t.stability for t in result.tiers},
        moved_areas="areas whose zone's code changed under the code policy",
    )
    summary.changes = {name: TierChanges.of(f) for name, f in figures.items()}
    failures = [FenceFailure(fence=f.fence, tier=t.name, error=f.error) for t in result.tiers for f in t.fences
                if f.error]
    summary.fence_failures = failures
    return finish(
        prep, lookup, summary, out, overwrite=overwrite, seconds=seconds, t_start=t_start,
        certify=certify, report=report, progress=progress, extra_files=extra_files,
        extra_tables={"changes.csv": changes, "area_changes.csv": per_area}, failed=bool(failures),
    )
