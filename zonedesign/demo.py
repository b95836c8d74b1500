"""`zonedesign demo`: the main job on the built-in invented region."""

from __future__ import annotations

import shutil
import tempfile
from pathlib import Path

from zonedesign import api
from zonedesign.errors import InputError


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
) -> api.RunResult:
    """Write the demo input, then design it (scenario "base") or design, redraw and audit it
    ten years on (scenario "later"). The input used lands in OUT/input/."""
    from zonedesign.scenarios import write_demo_input

    out = Path(out)
    if n < 500:
        raise InputError(f"--areas must be at least 500 for the demo region, not {n}")
    api._check_out(out.resolve(), overwrite)
    # the generated input is staged in the system's temporary folder, so a killed demo
    # leaves nothing beside the target; it is copied into OUT/input/ atomically
    staging = Path(tempfile.mkdtemp(prefix="zonedesign-demo-"))
    try:
        if progress:
            progress(f"making the demo region ({n} areas, seed {seed})")
        written = write_demo_input(staging / "input", seed=seed, n=n, later=(scenario == "later"))
        files = {f"input/{p.name}": p for p in sorted((staging / "input").iterdir())}
        if scenario == "base":
            return api.design(
                staging / "input" / "areas.gpkg",
                staging / "input" / "rules.toml",
                out,
                overwrite=overwrite,
                executor=executor,
                workers=workers,
                scheduler=scheduler,
                report=report,
                progress=progress,
                extra_files=files,
            )
        if scenario == "later":
            return api.later_scenario(
                staging / "input",
                out,
                overwrite=overwrite,
                executor=executor,
                workers=workers,
                scheduler=scheduler,
                report=report,
                progress=progress,
                extra_files=files,
                written=written,
            )
        raise InputError(f"--scenario must be base or later, not {scenario!r}")
    finally:
        shutil.rmtree(staging, ignore_errors=True)
