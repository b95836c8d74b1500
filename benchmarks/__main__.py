"""python -m benchmarks <name|all> [--quick] [--out FOLDER]

Writes <name>.md and <name>.csv under benchmarks/results/ (or --out).
"""

from __future__ import annotations

import argparse
import importlib
import sys
import time
from pathlib import Path

NAMES = ("quality", "quality-scale", "speed", "scale", "baseline", "redraw", "certificate", "exact-threshold", "reshape", "first-run")


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="python -m benchmarks", description="zonedesign benchmarks")
    p.add_argument("name", choices=[*NAMES, "all"], help="benchmark to run, or all of them")
    p.add_argument("--quick", action="store_true", help="smaller instances (all five in under 10 minutes)")
    p.add_argument("--out", type=Path, default=None, help="results folder (default benchmarks/results)")
    args = p.parse_args(argv)
    names = NAMES if args.name == "all" else (args.name,)
    for name in names:
        t0 = time.perf_counter()
        print(f"{name}{' (quick)' if args.quick else ''}:", flush=True)
        module = importlib.import_module(f"benchmarks.{name.replace('-', '_')}")
        module.main(quick=args.quick, folder=args.out, log=lambda s: print(s, flush=True))
        print(f"{name}: done in {time.perf_counter() - t0:.0f} s", flush=True)
    if not args.quick and args.out is None:
        from benchmarks.common import refresh_readme

        refresh_readme()
    return 0


if __name__ == "__main__":
    sys.exit(main())
