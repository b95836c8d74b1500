"""report_size: the HTML report's bytes and drawing time from 20,000 to 200,000 areas.

    python -m benchmarks.report_size [--quick]

The run is invented (the report's test support, `tests/report_support.grid_run`): a grid of
square bottom-tier zones in square fences with two upper tiers, laid out as a run lays out
its tables, layers and summary. Each area is its own bottom-tier zone, the worst case for
the page: 200,000 areas give 200,704 zones to list and map (a real run groups three or more
areas per zone). Measured per size: the file's bytes against the budget
(`report.html.REPORT_BYTES`), the seconds `write_report` takes, and what the page drew
(zones on maps, tiers listed in the Zones section). Times are given as the ratio of the
largest run to the smallest, both measured in this run.
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

NAME = "report_size"
TITLE = "report size and drawing time at national scale"


def main(quick: bool = False, folder: Path | None = None, log=print) -> dict:
    # the invented national-size run is the report tests' own fixture builder
    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
    from report_support import Page, grid_run

    from benchmarks.common import md_table, write_results
    from zonedesign.report.html import REPORT_BYTES, write_report

    t_start = time.perf_counter()
    # side of the grid -> side of a fence (a multiple of 16, so the upper tiers nest in fences)
    sides = {144: 48, 448: 64} if not quick else {64: 32, 144: 48}
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for side, fence_side in sides.items():
            run = grid_run(side, parents=(4, 16), fence_side=fence_side, low_zones=200)
            path = Path(tmp) / f"report{side}.html"
            t0 = time.perf_counter()
            write_report(path, **run)
            seconds = time.perf_counter() - t0
            size = path.stat().st_size
            page = Page(path.read_text(encoding="utf-8"))
            drawn = {}
            for p in page.zone_paths:
                drawn[p["data-tier"]] = drawn.get(p["data-tier"], 0) + 1
            rows.append({
                "areas": side * side,
                "zones per tier": ", ".join(f"{t} {len(df):,}" for t, df in run["tables"].items()),
                "report_mb": size / 1e6,
                "budget_mb": REPORT_BYTES / 1e6,
                "within_budget": size <= REPORT_BYTES,
                "write_s": seconds,
                "zones drawn": ", ".join(f"{t} {n:,}" for t, n in drawn.items()),
            })
            log(f"  {side * side:,} areas: {size / 1e6:.2f} MB in {seconds:.1f} s")
    ratio = rows[-1]["write_s"] / rows[0]["write_s"]
    goals = (
        f"- every report within the {REPORT_BYTES / 1e6:g} MB budget: "
        f"{'yes' if all(r['within_budget'] for r in rows) else 'NO'}\n"
        f"- drawing time, largest against smallest run (same process): {ratio:.2f} x for "
        f"{rows[-1]['areas'] / rows[0]['areas']:.1f} x the areas"
    )
    sections = [("Goals", goals), ("Runs", md_table(rows, digits=2)), ("Method", __doc__.split("\n\n", 2)[2])]
    write_results(NAME, TITLE, rows, sections, quick=quick, seconds=time.perf_counter() - t_start, folder=folder)
    return {"rows": rows}


if __name__ == "__main__":
    main(quick="--quick" in sys.argv)
