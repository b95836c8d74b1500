"""Design: each fence's units searched afresh, zones named fence-tier-number.

The design strategy of the tier runner (`tiers.runner.run_tiers`): a fence's task is its
proven optimum where it has few feasible zones (`exactfence.prove_fence`), else one
search (`search.engine.solve`) from the fence's seed; a fence whose search fails keeps one
zone per connected part, so nesting stays valid and the other fences are kept.
"""

from __future__ import annotations

import time
import traceback
from collections.abc import Callable

import numpy as np

from zonedesign import interrupts
from zonedesign.locks import Locks
from zonedesign.plain import plain
from zonedesign.records import Areas, Graph
from zonedesign.rules import Rules, TierRules, tier_in_fence
from zonedesign.tiers.executors import Executor
from zonedesign.tiers.naming import design_ids
from zonedesign.tiers.runner import HierarchyResult, Strategy, TierZones, run_tiers
from zonedesign.tiers.tasks import FenceResult, FenceTask, fallback_labels, scored_result, task_seed
from zonedesign.tiers.units import Units, fence_problem


def design_fence(task: FenceTask) -> FenceResult:
    """Solve one fence of one tier; an exception becomes a failed result, never a lost run."""
    from zonedesign.exactfence import prove_fence
    from zonedesign.search.engine import solve

    t0 = time.perf_counter()
    try:
        # exact where it is cheap: a proven optimum stands in for the search
        proof = prove_fence(task.problem, task.search, task.names)
        if proof.labels is not None:
            return scored_result(task, proof.labels, t0, proof.info())
        sol = solve(
            task.problem,
            search_rules=task.search,
            seed=task.seed,
            time_limit=task.search.time_limit_fence,
            start=task.start,
            anchors=task.anchors,
        )
        return FenceResult(
            fence=task.fence,
            tier=task.tier,
            labels=np.asarray(sol.labels, dtype=np.int64),
            breaks=float(sol.score.breaks),
            total=float(sol.score.total),
            terms=dict(sol.score.terms),
            seconds=time.perf_counter() - t0,
            info={**plain(sol.info), **proof.info()},
        )
    except Exception as exc:  # noqa: BLE001 - one fence's failure must not lose the others
        interrupts.raise_if_fatal(exc)
        return scored_result(
            task, fallback_labels(task.problem), t0, {"traceback": traceback.format_exc(limit=5)},
            error=f"{type(exc).__name__}: {exc}",
        )


class DesignStrategy(Strategy):
    """Each fence searched afresh; zones named fence-tier-number around the locked codes."""

    fence_fn = staticmethod(design_fence)

    def __init__(self, rules: Rules, count_names: tuple[str, ...]):
        self.rules = rules
        self.count_names = count_names

    def task(self, t: int, tier: TierRules, fence: str, index: np.ndarray, units: Units) -> FenceTask:
        return FenceTask(
            fence=fence,
            tier=tier.name,
            tier_index=t,
            units=index,
            problem=fence_problem(units, index, tier_in_fence(tier, fence), self.count_names),
            search=self.rules.search,
            seed=task_seed(self.rules.search.seed, fence, t),
            names=None if units.names is None else units.names[index],
        )

    def name_zones(self, t: int, tier: TierRules, units: Units, zones: TierZones) -> tuple[np.ndarray, dict]:
        return design_ids(tier.name, zones.zone_fence, zones.lock_codes), {}


def build_hierarchy(
    areas: Areas,
    graph: Graph,
    rules: Rules,
    *,
    executor: Executor | None = None,
    on_tier: Callable[[str, int, int], None] | None = None,
    locks: Locks | None = None,
) -> HierarchyResult:
    """Design every tier bottom-up; `graph` holds rook edges plus declared links.

    Locked zones (`locks`) are kept as given; the rest is designed around them."""
    strategy = DesignStrategy(rules, areas.count_names)
    return run_tiers(areas, graph, rules, strategy, executor=executor, on_tier=on_tier, locks=locks)
