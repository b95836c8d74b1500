"""`design`: every tier of a nested hierarchy, bottom-up, fence by fence."""

from __future__ import annotations

import contextlib
import time
from collections.abc import Callable, Iterator, Mapping
from pathlib import Path

from zonedesign.cli.progress import TaskBars
from zonedesign.jobs.inputs import Progress, check_out, prepare, say
from zonedesign.jobs.outputs import finish
from zonedesign.jobs.summary import RunResult, fence_rows, run_summary
from zonedesign.rules import Rules
from zonedesign.summaryparts import FenceFailure


def design(
    areas_path: str | Path,
    rules: str | Path | Rules,
    out: str | Path | None,
    *,
    layer: str | None = None,
    crs: str | None = None,
    overwrite: bool = False,
    executor: str = "local",
    workers: int = 1,
    scheduler: str | None = None,
    certify: bool = True,
    report: bool = True,
    progress: Progress | None = None,
    extra_files: Mapping[str, Path] | None = None,
) -> RunResult:
    """Design every tier of a nested hierarchy and write it to `out`."""
    from zonedesign.tiers.design import build_hierarchy

    t_start = time.perf_counter()
    run, prep = start_run(areas_path, rules, out, overwrite, layer, crs, executor, workers, scheduler, progress)

    def on_tier(name: str, i: int, n: int) -> None:
        say(progress, f"tier {i}/{n} '{name}' designed")

    per_tier = [len(set(prep.areas.in_tier(t.name).fence.tolist())) for t in prep.rules.tiers]
    fences = f"{per_tier[0]} fences" if len(set(per_tier)) == 1 else "fences per tier " + ", ".join(map(str, per_tier))
    say(progress, f"designing {len(prep.rules.tiers)} tiers over {fences}")
    with closing(run):
        result = build_hierarchy(prep.areas, prep.graph, prep.rules, executor=run, on_tier=on_tier, locks=prep.locks)
    lookup = result.lookup()
    seconds, summary = run_summary(prep, "design", result, executor, workers)
    summary.fences = fence_rows(result)
    failures = [FenceFailure(fence=f.fence, tier=f.tier, error=f.error) for f in result.failures]
    summary.fence_failures = failures
    return finish(
        prep,
        lookup,
        summary,
        out,
        overwrite=overwrite,
        seconds=seconds,
        t_start=t_start,
        certify=certify,
        report=report,
        progress=progress,
        extra_files=extra_files,
        failed=bool(failures),
    )


def start_run(areas_path, rules, out, overwrite, layer, crs, executor, workers, scheduler, progress,
               extra_input: str | Path | None = None):
    """Executor with per-tier progress bars, then the inputs read; the output folder is
    checked before the (slow) read and again once every input path is known."""
    from zonedesign.tiers.executors import make_executor

    bars = TaskBars(progress, lambda tasks: f"tier '{tasks[0].tier}' by fence")
    run = bars.wrap(make_executor(executor, workers, scheduler, on_done=bars.done))
    if out is not None:
        check_out(Path(out), overwrite)
    prep = prepare(areas_path, rules, layer=layer, crs=crs, progress=progress)
    if extra_input is not None:
        prep.inputs.append(Path(extra_input))
    if out is not None:
        check_out(Path(out), overwrite, prep.inputs)
    return run, prep


@contextlib.contextmanager
def closing(run: Callable) -> Iterator[None]:
    """Close the executor after its run: a dask cluster it started lives for one run."""
    try:
        yield
    finally:
        getattr(run, "close", lambda: None)()
