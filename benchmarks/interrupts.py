"""Interrupts at random moments: a demo design, an audit with --repair and a redraw.

    python -m benchmarks.interrupts [--runs 30] [--seed 11] [--areas 1500] [--out FOLDER]

Each command first runs once to the end into its own folder (its length is measured
then, on its second run); each interrupted run replaces that folder with --overwrite and gets SIGINT or
SIGTERM (drawn at random) at a moment drawn uniformly from 5% to 95% of the measured
length. After each run the script records the exit code, any `.tmp`/`.old` folder left
beside the target, and whether the previous output is byte for byte unchanged. Runs go on
until --runs signals reached a running process. Writes
results/interrupts.md and results/interrupts.csv. Not part of the test suite (minutes).
"""

from __future__ import annotations

import argparse
import csv
import hashlib
import random
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd

from benchmarks.common import code_version, machine

HERE = Path(__file__).parent


def checksums(folder: Path) -> dict[str, str]:
    return {
        str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }


def left_beside(target: Path) -> list[str]:
    return sorted(p.name for p in target.parent.iterdir() if p.name.startswith(f".{target.name}."))


def run(args: list, cwd: Path) -> tuple[int, float]:
    t0 = time.perf_counter()
    done = subprocess.run([sys.executable, "-m", "zonedesign.cli", *map(str, args)], cwd=cwd,
                          capture_output=True, text=True)
    if done.returncode not in (0, 1):
        raise SystemExit(f"the reference run failed: {done.stderr}")
    return done.returncode, time.perf_counter() - t0


def interrupted(args: list, cwd: Path, at: float, sig: int) -> tuple[int, bool, str]:
    proc = subprocess.Popen([sys.executable, "-m", "zonedesign.cli", *map(str, args)], cwd=cwd,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    try:
        proc.wait(timeout=at)
        sent = False
    except subprocess.TimeoutExpired:
        proc.send_signal(sig)
        sent = True
    _, err = proc.communicate(timeout=300)
    return proc.returncode, sent, err.strip().splitlines()[-1] if err.strip() else ""


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--runs", type=int, default=30)
    p.add_argument("--seed", type=int, default=11)
    p.add_argument("--areas", type=int, default=1500)
    p.add_argument("--out", type=Path, default=HERE / "results")
    a = p.parse_args(argv)
    work = Path(tempfile.mkdtemp(prefix="zonedesign-interrupts-"))
    demo = work / "demo"
    run(["demo", "--areas", a.areas, "--no-report", "--quiet", "--out", demo], work)
    areas, rules = demo / "input" / "areas.gpkg", demo / "input" / "rules.toml"
    src = work / "src"
    src.mkdir()
    lookup = pd.read_csv(demo / "lookup.csv", dtype=str)
    lookup.to_csv(src / "lookup.csv", index=False)
    # every tenth area moved to the next lowest-tier zone of its list: breaks to repair
    low = lookup.columns[1]
    codes = sorted(lookup[low].unique())
    broken = lookup.copy()
    pick = broken.index[::10]
    broken.loc[pick, low] = [codes[(codes.index(c) + 1) % len(codes)] for c in broken.loc[pick, low]]
    broken.to_csv(src / "broken.csv", index=False)
    commands = {
        "demo design": ["demo", "--areas", a.areas, "--no-report", "--quiet"],
        "audit --repair": ["audit", areas, "--rules", rules, "--lookup", src / "broken.csv", "--repair",
                           "--no-report", "--quiet"],
        "redraw": ["redraw", areas, "--rules", rules, "--previous", src / "lookup.csv", "--no-report", "--quiet"],
    }
    targets = {k: work / k.replace(" ", "_").replace("-", "") for k in commands}
    lengths, previous = {}, {}
    for k, args in commands.items():
        run([*args, "--out", targets[k]], work)  # the first run may load compiled code
        _, lengths[k] = run([*args, "--out", targets[k], "--overwrite"], work)
        previous[k] = checksums(targets[k])
    inputs = checksums(src), checksums(demo / "input")
    rng = random.Random(a.seed)
    rows = []
    names = list(commands)
    i = 0
    # until `runs` signals reached a running process (a run that finished first is kept in
    # the table, and its length shortens the window for its command)
    while sum(r["signal_sent"] for r in rows) < a.runs and i < 2 * a.runs:
        k = names[i % len(names)]
        i += 1
        sig = rng.choice([signal.SIGINT, signal.SIGTERM])
        at = rng.uniform(0.05, 0.95) * lengths[k]
        code, sent, last = interrupted([*commands[k], "--out", targets[k], "--overwrite"], work, at, sig)
        now = checksums(targets[k])
        rows.append({
            "run": i, "command": k, "signal": signal.Signals(sig).name, "at_seconds": round(at, 2),
            "length_seconds": round(lengths[k], 2), "signal_sent": sent, "exit_code": code,
            "expected_code": 128 + sig if sent else "0/1", "tmp_left": len(left_beside(targets[k])),
            "previous_unchanged": now == previous[k], "last_stderr_line": last,
        })
        if not sent:  # finished first: its output is the new "previous", its length the window
            previous[k] = now
            lengths[k] = min(lengths[k], at)
        print(rows[-1], flush=True)
    inputs_kept = inputs == (checksums(src), checksums(demo / "input"))
    write_results(a.out, rows, lengths, inputs_kept, a)
    return 0


def write_results(out: Path, rows: list[dict], lengths: dict, inputs_kept: bool, a: argparse.Namespace) -> None:
    out.mkdir(parents=True, exist_ok=True)
    with open(out / "interrupts.csv", "w", newline="") as f:
        w = csv.DictWriter(f, fieldnames=list(rows[0]), lineterminator="\n")
        w.writeheader()
        w.writerows(rows)
    sent = [r for r in rows if r["signal_sent"]]
    right = [r for r in sent if r["exit_code"] == r["expected_code"]]
    codes = sorted({r["exit_code"] for r in rows})
    per_command = ", ".join(f"{sum(r['command'] == k for r in rows)} {k}" for k in lengths)
    lines = [
        "# Interrupts at random moments", "",
        *[f"- {k}: {v}" for k, v in {**machine(), "code": code_version()}.items()], "",
        f"Runs: {len(rows)} ({per_command}); "
        f"seed {a.seed}; demo region of {a.areas} areas.",
        "Measured lengths of the uninterrupted runs (s): "
        + ", ".join(f"{k} {v:.1f}" for k, v in lengths.items()) + ".", "",
        "| figure | value |", "|---|---|",
        f"| runs | {len(rows)} |",
        f"| signal sent while running | {len(sent)} (the rest had finished first) |",
        f"| exit 130 after SIGINT / 143 after SIGTERM | {len(right)} of {len(sent)} |",
        f"| exit codes seen | {', '.join(map(str, codes))} |",
        f"| runs leaving a .tmp or .old folder beside --out | {sum(r['tmp_left'] > 0 for r in rows)} |",
        f"| interrupted runs whose previous output changed | {sum(not r['previous_unchanged'] for r in sent)} |",
        f"| input files unchanged | {'yes' if inputs_kept else 'NO'} |",
        "",
        "Method: `python -m benchmarks.interrupts`; see the module docstring. Each signal goes to the",
        "command's own process at a moment drawn uniformly from 5% to 95% of the length measured",
        "for that command in the same session; every run replaces the previous output with --overwrite.",
        "",
    ]
    (out / "interrupts.md").write_text("\n".join(lines))


if __name__ == "__main__":
    sys.exit(main())
