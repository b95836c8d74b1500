"""One fence of one tier as a task: its inputs, its result and its seed.

A task carries only its own fence's arrays and its own seed, so it runs the same in this
process, in a worker process or on a dask cluster.
"""

from __future__ import annotations

import time
import zlib
from dataclasses import dataclass, field

import numpy as np

from zonedesign.graph.components import components
from zonedesign.measures import compact_labels, score
from zonedesign.records import Problem
from zonedesign.rules import SearchRules


@dataclass(frozen=True)
class FenceTask:
    fence: str
    tier: str
    tier_index: int
    units: np.ndarray  # unit indices of this fence, ascending
    problem: Problem
    search: SearchRules
    seed: int
    start: np.ndarray | None = None
    anchors: np.ndarray | None = None
    names: np.ndarray | None = None  # how messages name each unit ("area X", "tier1 zone Y")


@dataclass
class FenceResult:
    fence: str
    tier: str
    labels: np.ndarray  # 0..k-1 per unit of the fence
    breaks: float
    total: float
    terms: dict[str, float]
    seconds: float
    info: dict = field(default_factory=dict)
    error: str = ""


def task_seed(seed: int, fence: str, tier_index: int) -> int:
    """A seed per task that does not depend on task order or on Python's hash salt."""
    return int(zlib.crc32(f"{seed}|{fence}|{tier_index}".encode()) & 0x7FFFFFFF)


def scored_result(task: FenceTask, labels: np.ndarray, t0: float, info: dict, error: str = "") -> FenceResult:
    """A fence's result for a labelling the search did not score itself."""
    labels, _ = compact_labels(labels)
    s = score(task.problem, labels)
    return FenceResult(
        fence=task.fence,
        tier=task.tier,
        labels=labels,
        breaks=s.breaks,
        total=s.total,
        terms=s.terms,
        seconds=time.perf_counter() - t0,
        info=info,
        error=error,
    )


def fallback_labels(problem: Problem) -> np.ndarray:
    """One zone per connected component: keeps nesting valid when a fence fails."""
    return compact_labels(components(problem.graph)[1])[0]


def locked_result(fence: str, tier: str) -> FenceResult:
    """The result of a fence whose every unit is in a locked zone (nothing to search)."""
    return FenceResult(
        fence=fence, tier=tier, labels=np.zeros(0, dtype=np.int64), breaks=0.0, total=0.0,
        terms={}, seconds=0.0, info={"locked": True},
    )
