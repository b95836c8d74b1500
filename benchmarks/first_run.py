"""first-run: the first `zonedesign demo` on a fresh install against the second.

A fresh install has no numba cache, so its first run compiles every kernel the search
uses; later runs load them from the cache. The benchmark copies the code into a temporary
folder with an empty numba cache of its own (`NUMBA_CACHE_DIR`, see
`common.code_snapshot`), then runs `zonedesign demo --out DIR` twice in child processes,
one after the other, and reports the wall-clock and CPU seconds of each (CPU: user +
system time of the run and every process it started and waited for) and the ratio
first / second. Both runs must write the same lookup (same seed, same zones): the compile
strategy may change how long a run takes, never what it makes.

Goal (issue 15): first / second <= 1.3.
"""

from __future__ import annotations

import hashlib
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from benchmarks.common import code_snapshot, md_table, write_results

NAME = "first-run"
TITLE = "first-run (first demo on an empty numba cache vs the second)"
GOAL = 1.3

_MEASURE = """
import json, resource, subprocess, sys, time
t0 = time.perf_counter()
rc = subprocess.call(sys.argv[1:])
ru = resource.getrusage(resource.RUSAGE_CHILDREN)
print(json.dumps({"rc": rc, "wall": time.perf_counter() - t0, "cpu": ru.ru_utime + ru.ru_stime}))
"""


def run_demo_measured(out: Path, env: dict[str, str], cwd: Path, areas: int | None) -> dict:
    """One `zonedesign demo` in a child process: exit code, wall and CPU seconds, the
    job's own phase seconds (summary.json) and a digest of its lookup."""
    cmd = [sys.executable, "-m", "zonedesign.cli", "demo", "--out", str(out), "--quiet"]
    if areas is not None:
        cmd += ["--areas", str(areas)]
    done = subprocess.run([sys.executable, "-c", _MEASURE, *cmd], capture_output=True, text=True, env=env, cwd=cwd)
    lines = done.stdout.strip().splitlines()
    if done.returncode != 0 or not lines:
        raise RuntimeError(f"the measuring process failed: {done.stderr.strip()[-2000:]}")
    info = json.loads(lines[-1])
    if info["rc"] != 0:
        raise RuntimeError(f"zonedesign demo exited {info['rc']}: {done.stderr.strip()[-2000:]}")
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    lookup = sorted(out.glob("lookup*.csv"))
    digest = hashlib.sha256(b"".join(p.read_bytes() for p in lookup)).hexdigest()[:16] if lookup else ""
    return {"wall_s": info["wall"], "cpu_s": info["cpu"], "seconds": summary.get("seconds", {}), "lookup": digest}


def main(quick: bool = False, folder: Path | None = None, log=print) -> dict:
    t0 = time.perf_counter()
    areas = 1500 if quick else None
    rows = []
    with tempfile.TemporaryDirectory(prefix="zd-first-run-") as tmp:
        tmp = Path(tmp)
        env = code_snapshot(tmp / "code")
        for label in ("first", "second"):
            log(f"  {label} demo run ({'1,500' if quick else 'default'} areas) ...")
            r = run_demo_measured(tmp / f"out-{label}", env, tmp, areas)
            log(f"    {r['wall_s']:.1f} s wall, {r['cpu_s']:.1f} CPU s, lookup {r['lookup']}")
            phases = {f"phase_{k}_s": v for k, v in r["seconds"].items()}
            rows.append({"run": label, "wall_s": r["wall_s"], "cpu_s": r["cpu_s"], "lookup_sha256": r["lookup"], **phases})
    first, second = rows
    wall_ratio = first["wall_s"] / second["wall_s"]
    cpu_ratio = first["cpu_s"] / second["cpu_s"]
    same = first["lookup_sha256"] == second["lookup_sha256"] and first["lookup_sha256"] != ""
    met = max(wall_ratio, cpu_ratio) <= GOAL
    goals = (
        f"Goal: first / second <= {GOAL} (wall clock and CPU seconds).\n\n"
        f"- first / second by wall clock: **{wall_ratio:.2f}** ({first['wall_s']:.1f} s / {second['wall_s']:.1f} s)\n"
        f"- first / second by CPU seconds: **{cpu_ratio:.2f}** ({first['cpu_s']:.1f} s / {second['cpu_s']:.1f} s)\n"
        f"- goal {'met' if met else 'MISSED'}\n"
        f"- both runs wrote the same lookup: {'yes' if same else 'NO'}\n"
    )
    method = (
        "The code is copied into a temporary folder with an empty numba cache "
        "(NUMBA_CACHE_DIR) of its own; `python -m zonedesign.cli demo --out DIR --quiet"
        f"{' --areas 1500' if quick else ''}` runs twice, one after the other, each through a "
        "small parent process that reads the run's wall-clock seconds and its CPU seconds "
        "(RUSAGE_CHILDREN: the run and every process it waited for). Phase seconds come "
        "from each run's summary.json.\n"
    )
    write_results(
        NAME, TITLE, rows, [("Goals", goals), ("Runs", md_table(rows, digits=1)), ("Method", method)],
        quick=quick, seconds=time.perf_counter() - t0, folder=folder,
    )
    return {"wall_ratio": wall_ratio, "cpu_ratio": cpu_ratio, "same_lookup": same, "rows": rows}
