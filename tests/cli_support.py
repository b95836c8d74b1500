"""A small region, quick rules and helpers for the command-line, fault and repeatability tests."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path
from typing import Any

import geopandas as gpd
import pyogrio

from zonedesign.demo.synthetic import grid_with_holes

# Bounds sized for grid_with_holes cells (Poisson(30) + 5 households, 2.0-2.8 persons per
# household): a block takes 3 to 7 cells, a ward 2 to 8 blocks, every quadrant fence of a
# 10 x 10 grid (about 875 households) meets both tiers. Descent keeps a run under a second.
RULES = """\
# quick rules for the small test region
[areas]
id = "id"
counts = ["households", "persons"]
attributes = ["attr_a", "attr_b"]
fence = "fence"
weight = "persons"

[[tier]]
name = "block"
min = { households = 80 }
max = { households = 260 }
target = { households = 150 }

[[tier]]
name = "ward"
min = { households = 300 }
max = { households = 1200 }
target = { households = 600 }

[search]
method = "descent"
seed = 5
constructions = 2
time_limit_fence = 600.0  # a safety cap only: a cold numba compile must not reach it
"""


def region(nx: int = 10, ny: int = 10, seed: int = 0) -> gpd.GeoDataFrame:
    """An nx x ny grid of unit squares in four quadrant fences, in a metric CRS."""
    return grid_with_holes(nx, ny, seed=seed)


def write_areas(gdf: gpd.GeoDataFrame, path: Path, layer: str = "areas", **kw: Any) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    pyogrio.write_dataframe(gdf, path, layer=layer, driver="GPKG", **kw)
    return path


def write_inputs(folder: Path, gdf: gpd.GeoDataFrame | None = None, rules: str = RULES) -> tuple[Path, Path]:
    """folder/areas.gpkg and folder/rules.toml; returns both paths."""
    folder.mkdir(parents=True, exist_ok=True)
    areas = write_areas(region() if gdf is None else gdf, folder / "areas.gpkg")
    rules_path = folder / "rules.toml"
    rules_path.write_text(rules, encoding="utf-8")
    return areas, rules_path


def checksums(folder: Path) -> dict[str, str]:
    """sha256 of every file below `folder`, by relative path."""
    return {
        str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(Path(folder).rglob("*"))
        if p.is_file()
    }


def is_timing(key: str) -> bool:
    """`seconds`, `compile_seconds`, `seconds_all_restarts`, ...: how long, not what."""
    return "seconds" in key.split("_")


RUN_SETTINGS = ("executor", "workers")  # how the run was spread, not what it found


def comparable(summary: dict) -> dict:
    """summary.json without what may differ between equal runs: timings, versions and
    the executor settings themselves."""

    def strip(obj: Any) -> Any:
        if isinstance(obj, dict):
            return {k: strip(v) for k, v in obj.items() if not is_timing(k)}
        if isinstance(obj, list):
            return [strip(v) for v in obj]
        return obj

    out = strip({k: v for k, v in summary.items() if k not in ("versions",)})
    out["search"] = {k: v for k, v in out.get("search", {}).items() if k not in RUN_SETTINGS}
    return out


def read_summary(folder: Path) -> dict:
    return json.loads((Path(folder) / "summary.json").read_text(encoding="utf-8"))


class Ran:
    """Exit code and captured streams of one in-process command."""

    def __init__(self, code: int, out: str, err: str):
        self.code, self.out, self.err = code, out, err

    @property
    def err_lines(self) -> list[str]:
        return [line for line in self.err.splitlines() if line.strip()]

    def __repr__(self) -> str:
        return f"Ran(code={self.code}, err={self.err!r})"


def run_cli(capsys: Any, *args: str | Path) -> Ran:
    """`zonedesign ARGS` in this process; streams captured by pytest's capsys."""
    from zonedesign.cli import main

    capsys.readouterr()
    code = main([str(a) for a in args])
    out, err = capsys.readouterr()
    return Ran(code, out, err)


def first_tiers(text: str, n: int) -> str:
    """A rules text with only its first `n` [[tier]] tables (the tables after them kept)."""
    head, *tiers = text.split("[[tier]]")
    last, sep, tail = tiers[-1].partition("[search]")
    tiers[-1] = last
    return head + "".join("[[tier]]" + t for t in tiers[:n]) + sep + tail
