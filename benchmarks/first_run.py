"""first-run: the first `zonedesign demo` on a fresh install against the second.

The README's setup is `pip install .` in a fresh venv. The wheel's build compiles the
search's kernels into the package it installs (setup.py), so the first run should load
them instead of compiling them. The benchmark copies the project (pyproject.toml,
setup.py, README.md, zonedesign/) into a temporary folder, makes a fresh venv there,
installs the copy with `pip install DIR` (dependencies from pip's own cache or the
package index) and runs `zonedesign demo --out DIR` twice with the installed package, one
run after the other, from a folder that holds no copy of the code; it reports the
wall-clock and CPU seconds of the install and of each run (CPU: user + system time of the
process and every process it started and waited for) and the ratio first / second. A
third run of the installed package on an empty numba cache of its own (NUMBA_CACHE_DIR)
shows what a first run costs without the shipped kernels. All runs must write the same
lookup (same seed, same zones): where the kernels come from may change how long a run
takes, never what it makes.

A third child, on another empty cache, compiles the search's kernel groups
(`search.warm.GROUPS`) one by one with nothing else running and reports each group's
seconds and every kernel numba compiled more than once (a second specialisation, for
instance for a literal 0 argument, is a second compile of that kernel and of everything it
calls).

Goal (issue 15): first / second <= 1.3.
"""

from __future__ import annotations

import hashlib
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from benchmarks.common import md_table, project_copy, write_results

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

_COMPILE = """
import collections, json, time
from numba.core import event
from zonedesign.search import warm
specs = collections.defaultdict(set)
class Seen(event.Listener):
    def on_start(self, ev):
        pass
    def on_end(self, ev):
        f = ev.data["dispatcher"].py_func
        specs[f.__module__ + "." + f.__qualname__].add(str(ev.data["args"]))
event.register("numba:compile", Seen())
groups = {}
for name, run in warm.GROUPS.items():
    t0 = time.perf_counter()
    run()
    groups[name] = time.perf_counter() - t0
twice = {k: sorted(v) for k, v in specs.items() if len(v) > 1 and k.startswith("zonedesign.")}
print(json.dumps({"groups": groups, "kernels": len(specs), "twice": twice}))
"""


def compile_groups(env: dict[str, str], cwd: Path, cache: Path, python: str = sys.executable) -> dict:
    """Seconds of each kernel group compiled on an empty cache, and the kernels compiled
    for more than one signature."""
    env = {**env, "NUMBA_CACHE_DIR": str(cache)}
    done = subprocess.run([python, "-c", _COMPILE], capture_output=True, text=True, env=env, cwd=cwd)
    lines = done.stdout.strip().splitlines()
    if done.returncode != 0 or not lines:
        raise RuntimeError(f"the compiling process failed: {done.stderr.strip()[-2000:]}")
    return json.loads(lines[-1])


def run_demo_measured(out: Path, env: dict[str, str], cwd: Path, areas: int | None, python: str = sys.executable) -> dict:
    """One `zonedesign demo` in a child process: exit code, wall and CPU seconds, the
    job's own phase seconds (summary.json) and a digest of its lookup."""
    cmd = [python, "-m", "zonedesign.cli", "demo", "--out", str(out), "--quiet"]
    if areas is not None:
        cmd += ["--areas", str(areas)]
    info = _measured(cmd, env, cwd, "zonedesign demo")
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    lookup = sorted(out.glob("lookup*.csv"))
    digest = hashlib.sha256(b"".join(p.read_bytes() for p in lookup)).hexdigest()[:16] if lookup else ""
    return {"wall_s": info["wall"], "cpu_s": info["cpu"], "seconds": summary.get("seconds", {}), "lookup": digest}


def _measured(cmd: list[str], env: dict[str, str], cwd: Path, what: str) -> dict:
    done = subprocess.run([sys.executable, "-c", _MEASURE, *cmd], capture_output=True, text=True, env=env, cwd=cwd)
    lines = done.stdout.strip().splitlines()
    if done.returncode != 0 or not lines:
        raise RuntimeError(f"the measuring process failed: {done.stderr.strip()[-2000:]}")
    info = json.loads(lines[-1])
    if info["rc"] != 0:
        raise RuntimeError(f"{what} exited {info['rc']}: {done.stderr.strip()[-2000:]}")
    return info


def fresh_install(folder: Path) -> tuple[str, dict[str, str], dict]:
    """A fresh venv in `folder` with a copy of this project installed by `pip install`:
    the venv's Python, an environment for its runs (no NUMBA_CACHE_DIR, no PYTHONPATH)
    and the install's wall and CPU seconds."""
    project = project_copy(folder / "project")
    env = {k: v for k, v in os.environ.items() if k not in ("NUMBA_CACHE_DIR", "PYTHONPATH", "VIRTUAL_ENV")}
    venv = folder / "venv"
    subprocess.run([sys.executable, "-m", "venv", str(venv)], check=True, env=env)
    python = str(venv / "bin" / "python")
    info = _measured([python, "-m", "pip", "install", "-q", str(project)], env, folder, "pip install")
    return python, env, info


def main(quick: bool = False, folder: Path | None = None, log=print) -> dict:
    t0 = time.perf_counter()
    areas = 1500 if quick else None
    rows = []
    with tempfile.TemporaryDirectory(prefix="zd-first-run-") as tmp:
        tmp = Path(tmp)
        log("  pip install of the project into a fresh venv ...")
        python, env, inst = fresh_install(tmp)
        log(f"    {inst['wall']:.1f} s wall, {inst['cpu']:.1f} CPU s")
        rows.append({"run": "pip install", "wall_s": inst["wall"], "cpu_s": inst["cpu"], "lookup_sha256": ""})
        runs_dir = tmp / "runs"
        runs_dir.mkdir()
        (tmp / "cache-empty").mkdir()
        plans = [
            ("first", env),
            ("second", env),
            ("first, empty numba cache", {**env, "NUMBA_CACHE_DIR": str(tmp / "cache-empty")}),
        ]
        for label, run_env in plans:
            log(f"  {label} demo run ({'1,500' if quick else 'default'} areas) ...")
            r = run_demo_measured(runs_dir / f"out-{len(rows)}", run_env, runs_dir, areas, python)
            log(f"    {r['wall_s']:.1f} s wall, {r['cpu_s']:.1f} CPU s, lookup {r['lookup']}")
            phases = {f"phase_{k}_s": v for k, v in r["seconds"].items()}
            rows.append({"run": label, "wall_s": r["wall_s"], "cpu_s": r["cpu_s"], "lookup_sha256": r["lookup"], **phases})
        log("  kernel groups on another empty cache ...")
        (tmp / "cache-groups").mkdir()
        comp = compile_groups(env, runs_dir, tmp / "cache-groups", python)
    _, first, second, cold = rows
    wall_ratio = first["wall_s"] / second["wall_s"]
    cpu_ratio = first["cpu_s"] / second["cpu_s"]
    digests = {r["lookup_sha256"] for r in rows[1:]}
    same = len(digests) == 1 and "" not in digests
    met = max(wall_ratio, cpu_ratio) <= GOAL
    goals = (
        f"Goal: first / second <= {GOAL} (wall clock and CPU seconds), after `pip install` in a fresh venv.\n\n"
        f"- first / second by wall clock: **{wall_ratio:.2f}** ({first['wall_s']:.1f} s / {second['wall_s']:.1f} s)\n"
        f"- first / second by CPU seconds: **{cpu_ratio:.2f}** ({first['cpu_s']:.1f} s / {second['cpu_s']:.1f} s)\n"
        f"- goal {'met' if met else 'MISSED'}\n"
        f"- without the kernels the wheel ships (empty numba cache): first / second "
        f"{cold['wall_s'] / second['wall_s']:.2f} by wall clock ({cold['wall_s']:.1f} s), "
        f"{cold['cpu_s'] / second['cpu_s']:.2f} by CPU ({cold['cpu_s']:.1f} s)\n"
        f"- the install (dependencies, build, kernel compile): {rows[0]['wall_s']:.1f} s wall, {rows[0]['cpu_s']:.1f} CPU s\n"
        f"- every run wrote the same lookup: {'yes' if same else 'NO'}\n"
    )
    group_rows = [{"group": g, "compile_s": v} for g, v in comp["groups"].items()]
    group_rows.append({"group": "all", "compile_s": sum(comp["groups"].values())})
    twice = "".join(f"- `{k}`: {len(v)} signatures\n" for k, v in comp["twice"].items()) or "- none\n"
    compile_text = (
        f"{md_table(group_rows, digits=1)}\n\n{comp['kernels']} kernels compiled; "
        f"kernels of zonedesign compiled for more than one signature:\n\n{twice}"
    )
    method = (
        "The project is copied into a temporary folder, a fresh venv is made there "
        "(`python -m venv`) and the copy installed with `pip install -q DIR` (its wheel's "
        "build compiles the kernels, setup.py). `python -m zonedesign.cli demo --out DIR --quiet"
        f"{' --areas 1500' if quick else ''}` then runs with the venv's Python from a folder "
        "without the code, twice on the installed package's own cache and once with "
        "NUMBA_CACHE_DIR pointing at an empty folder, each through a small parent process "
        "that reads the run's wall-clock seconds and its CPU seconds (RUSAGE_CHILDREN: the "
        "run and every process it waited for). Phase seconds come from each run's "
        "summary.json.\n"
    )
    write_results(
        NAME, TITLE, rows, [("Goals", goals), ("Runs", md_table(rows, digits=1)), ("Compile by group", compile_text), ("Method", method)],
        quick=quick, seconds=time.perf_counter() - t0, folder=folder,
    )
    return {"wall_ratio": wall_ratio, "cpu_ratio": cpu_ratio, "same_lookup": same, "rows": rows, "compile": comp}
