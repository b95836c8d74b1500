"""The rules model: what the rules file states, as frozen records."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from zonedesign.errors import InputError
from zonedesign.records import Bounds

METHODS = ("descent", "annealing", "tabu")
EFFORTS = ("quick", "default", "thorough")


@dataclass(frozen=True)
class AreasRules:
    id: str
    counts: tuple[str, ...]
    attributes: tuple[str, ...] = ()
    fence: str | None = None
    weight: str | None = None
    layer: str | None = None
    crs: str | None = None  # stated CRS for files that carry none
    table: Path | None = None  # counts/attributes joined on `id`
    prefer: str | None = None  # "table" | "file": the side used for a column in both
    fence_prefix: int | None = None  # fence code = the first N characters of `fence`
    fence_suffix: int | None = None  # fence code = the last N characters of `fence`
    work_crs: str | None = None  # projected CRS areas and lengths are measured in
    # (tier, its own fence column or None) for every tier, bottom first, when any tier has
    # a fence of its own ([[tier]] fence); set from the tiers
    tier_fences: tuple[tuple[str, str | None], ...] = ()
    overlaps: str = "refuse"  # "refuse" | "cut"

    @property
    def row_ids(self) -> bool:
        """Ids are the row numbers (`id = "@row"`), for files without an id column."""
        return self.id == ROW_ID


ROW_ID = "@row"


@dataclass(frozen=True)
class GraphRules:
    contiguity: str = "rook"
    min_shared_length: float = 0.0
    tolerance: float = 0.0
    links: Path | None = None


STABILITY_DEFAULT = 20.0  # a redraw's cost of moving a unit; 0 switches stability off


@dataclass(frozen=True)
class TierOverride:
    """Bounds, target and weights that replace the tier's own in some fences only."""

    fences: tuple[str, ...]
    min: dict[str, float] = field(default_factory=dict)
    max: dict[str, float] = field(default_factory=dict)
    target: dict[str, float] = field(default_factory=dict)
    weights: dict[str, float] = field(default_factory=dict)


@dataclass(frozen=True)
class TierRules:
    name: str
    min: dict[str, float] = field(default_factory=dict)
    max: dict[str, float] = field(default_factory=dict)
    target: dict[str, float] = field(default_factory=dict)
    weights: dict[str, float] = field(
        default_factory=lambda: {
            "size": 1.0, "homogeneity": 1.0, "compactness": 1.0, "stability": STABILITY_DEFAULT
        }
    )
    homogeneity: str = "ssd"
    compactness: str = "polsby"
    overrides: tuple[TierOverride, ...] = ()  # [[tier.override]], in file order
    fence: str | None = None  # this tier's own fence column; else [areas] fence

    def bounds(self, count_names: Sequence[str]) -> Bounds:
        """min / max / target as a Bounds record aligned to `count_names` (±inf where
        unbounded, nan where no target); a bound on a count that is not there is an error."""
        count_names = tuple(count_names)
        c = len(count_names)
        lo, hi, target = np.full(c, -np.inf), np.full(c, np.inf), np.full(c, np.nan)
        for key, table, out in (("min", self.min, lo), ("max", self.max, hi), ("target", self.target, target)):
            for name, value in table.items():
                if name not in count_names:
                    raise InputError(
                        f"{key}.{name} names no count column (counts are {', '.join(count_names) or 'none'})",
                        where=f"tier {self.name!r}",
                    )
                out[count_names.index(name)] = float(value)
        return Bounds(count_names=count_names, lo=lo, hi=hi, target=target)


def tier_in_fence(tier: TierRules, fence: str) -> TierRules:
    """The tier's rules as they apply in one fence.

    The one place per-fence rules are resolved: design, redraw, audit, certificate, proofs
    and report all take a tier's bounds, target and weights in a fence from here. An
    override naming the fence replaces each bound, target and weight it gives; the rest
    are the tier's own. Overrides never share a fence (checked when the rules are read).
    """
    for o in tier.overrides:
        if str(fence) in o.fences:
            return replace(
                tier,
                min={**tier.min, **o.min},
                max={**tier.max, **o.max},
                target={**tier.target, **o.target},
                weights={**tier.weights, **o.weights},
                overrides=(),
            )
    return tier


def overridden_fences(tier: TierRules) -> set[str]:
    return {f for o in tier.overrides for f in o.fences}


def fence_groups(tier: TierRules) -> list[tuple[TierRules, Callable[[Sequence[str]], bool]]]:
    """The tier as it applies in each group of fences, with a test of whether a zone lying
    in the fences given belongs to that group.

    The tier's own rules come first and cover every zone not wholly inside one overridden
    fence (a zone across fences, itself a fault, is held to the tier's own bounds); then
    one entry per fence an override names.
    """
    claimed = overridden_fences(tier)
    groups: list[tuple[TierRules, Callable[[Sequence[str]], bool]]] = [
        (replace(tier, overrides=()), lambda fences: not (len(set(fences)) == 1 and next(iter(fences)) in claimed))
    ]
    for f in sorted(claimed):
        groups.append((tier_in_fence(tier, f), lambda fences, f=f: set(fences) == {f}))
    return groups


@dataclass(frozen=True)
class SearchRules:
    method: str = "annealing"
    seed: int = 1
    constructions: int = 4
    time_limit_fence: float = 10.0
    time_limit_total: float = 600.0
    # how hard to search: a preset of moves_per_unit and cooling (search/schedule.py)
    effort: str = "default"
    # annealing trial moves per unit of a fence (0: from effort); a fence's moves grow
    # with its units
    moves_per_unit: int = 0
    cooling: float | None = None  # temperature factor per step (None: from effort)
    # independent runs from fresh constructions, best kept; 0: as many as the fence's
    # move budget pays for, 1 to 16
    restarts: int = 0
    moves_per_temperature: int = 0  # 0: the run's moves spread over its temperatures
    # tabu
    tenure: int = 10
    max_no_improve: int = 0  # 0: a multiple of the number of units
    # a fence-tier with at most this many feasible zones is solved exactly (every feasible
    # zone enumerated, then set partitioning) and its proven optimum kept; 0 turns it off.
    # The default comes from benchmarks/results/exact-threshold.md
    exact_zones: int = 24_000
    # seconds the exact solve of one fence-tier may take before the search's result is kept
    # (the threshold's slowest measured solve took 8 s: a wide margin keeps runs repeatable)
    exact_time_limit: float = 60.0


@dataclass(frozen=True)
class RedrawRules:
    # "successor": an old code passes to the new zone holding most of its published count;
    # "fresh": every zone that changed gets a new code
    codes: str = "successor"


@dataclass(frozen=True)
class LockRules:
    """[lock]: a CSV of zones fixed by agreement (column `area`, one column per locked tier)."""

    file: Path | None = None


@dataclass(frozen=True)
class Rules:
    areas: AreasRules
    tiers: tuple[TierRules, ...]
    graph: GraphRules = GraphRules()
    search: SearchRules = SearchRules()
    redraw: RedrawRules = RedrawRules()
    lock: LockRules = field(default_factory=lambda: LockRules())
    source: Path | None = None
    text: str = ""

    def tier(self, name: str) -> TierRules:
        for t in self.tiers:
            if t.name == name:
                return t
        raise KeyError(name)
