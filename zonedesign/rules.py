"""The rules file: tiers, bounds, targets, weights and search settings (TOML).

    [areas]
    id = "code"                       # id column
    counts = ["persons", "households"]
    attributes = ["owner_share", "flat_share"]
    fence = "district"                # optional
    weight = "persons"                # optional homogeneity weight column

    [graph]                           # optional
    contiguity = "rook"               # "rook" or "queen"
    min_shared_length = 0.0           # metres; rook pairs sharing less are not neighbours
    tolerance = 0.0                   # metres; > 0 switches to the tolerant (snapping) method
    links = "links.csv"               # optional CSV of id pairs, relative to the rules file

    [[tier]]                          # bottom tier first
    name = "block"
    min = { households = 40, persons = 100 }
    max = { households = 250, persons = 625 }
    target = { households = 125 }
    weights = { size = 1.0, homogeneity = 1.0, compactness = 1.0, stability = 0.0 }
    homogeneity = "ssd"               # or "pairwise"
    compactness = "polsby"            # or "cut"

    [search]
    method = "annealing"              # "descent", "annealing" or "tabu"
    seed = 1
    constructions = 4
    time_limit_fence = 10.0           # seconds per fence and tier
    time_limit_total = 600.0          # seconds for the whole run
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

TERMS = ("size", "homogeneity", "compactness", "stability")
METHODS = ("descent", "annealing", "tabu")


@dataclass(frozen=True)
class AreasRules:
    id: str
    counts: tuple[str, ...]
    attributes: tuple[str, ...] = ()
    fence: str | None = None
    weight: str | None = None
    layer: str | None = None
    crs: str | None = None  # stated CRS for files that carry none


@dataclass(frozen=True)
class GraphRules:
    contiguity: str = "rook"
    min_shared_length: float = 0.0
    tolerance: float = 0.0
    links: Path | None = None


@dataclass(frozen=True)
class TierRules:
    name: str
    min: dict[str, float] = field(default_factory=dict)
    max: dict[str, float] = field(default_factory=dict)
    target: dict[str, float] = field(default_factory=dict)
    weights: dict[str, float] = field(
        default_factory=lambda: {"size": 1.0, "homogeneity": 1.0, "compactness": 1.0, "stability": 0.0}
    )
    homogeneity: str = "ssd"
    compactness: str = "polsby"


@dataclass(frozen=True)
class SearchRules:
    method: str = "annealing"
    seed: int = 1
    constructions: int = 4
    time_limit_fence: float = 10.0
    time_limit_total: float = 600.0
    # annealing
    cooling: float = 0.9
    moves_per_temperature: int = 0  # 0: a multiple of the number of units
    # tabu
    tenure: int = 10
    max_no_improve: int = 0  # 0: a multiple of the number of units


@dataclass(frozen=True)
class Rules:
    areas: AreasRules
    tiers: tuple[TierRules, ...]
    graph: GraphRules = GraphRules()
    search: SearchRules = SearchRules()
    source: Path | None = None
    text: str = ""

    def tier(self, name: str) -> TierRules:
        for t in self.tiers:
            if t.name == name:
                return t
        raise KeyError(name)
