"""The rules file: tiers, bounds, targets, weights and search settings (TOML).

[areas]
id = "code"                       # id column
counts = ["persons", "households"]
attributes = ["owner_share", "flat_share"]
fence = "district"                # optional; or { column = "code", prefix = 3 } (or suffix)
weight = "persons"                # optional homogeneity weight column
table = "counts.csv"              # optional CSV/Parquet of counts joined on id (path
                                  # relative to the rules file)
prefer = "table"                  # which side wins for a column in both ("table"/"file")
work_crs = "EPSG:32618"           # optional projected working CRS (metres)
overlaps = "refuse"               # or "cut": each overlap kept by one polygon

[graph]                           # optional
contiguity = "rook"               # "rook" or "queen"
min_shared_length = 0.0           # metres; rook pairs sharing less are not neighbours
tolerance = 0.0                   # metres; > 0 switches to the tolerant (snapping) method
links = "links.csv"               # optional CSV of id pairs, relative to the rules file

[[tier]]                          # bottom tier first
name = "small"
min = { households = 50, persons = 120 }    # set from your own disclosure-control rules
max = { households = 280, persons = 700 }
target = { households = 140 }
weights = { size = 1.0, homogeneity = 1.0, compactness = 1.0, stability = 20.0 }
homogeneity = "ssd"               # or "pairwise"
compactness = "polsby"            # or "cut"

[search]
method = "annealing"              # "descent", "annealing" or "tabu"
effort = "default"                # "quick", "default" or "thorough"
moves_per_unit = 0                # annealing moves per unit (0: from effort)
cooling = 0.97                    # temperature factor per step (unset: from effort)
seed = 1
constructions = 4
time_limit_fence = 10.0           # seconds per fence and tier
time_limit_total = 600.0          # seconds for the whole run
exact_zones = 24000               # fence-tiers with at most this many feasible zones are
                                  # solved exactly (proof = "optimal"); 0: never
exact_time_limit = 60.0           # seconds one exact solve may take

[redraw]                          # optional
codes = "successor"               # or "fresh": how zone codes carry on in a redraw
"""

from __future__ import annotations

from zonedesign.rules.checks import (  # noqa: F401
    check_fences_against,
    check_rules_against,
)
from zonedesign.rules.keylines import (  # noqa: F401
    AREAS_KEYS,
    BOUND_KEYS,
    CODE_POLICIES,
    COMPACTNESS,
    CONTIGUITY,
    FENCE_KEYS,
    GRAPH_KEYS,
    HOMOGENEITY,
    LOCK_KEYS,
    OVERLAPS,
    OVERRIDE_KEYS,
    PREFER,
    REDRAW_KEYS,
    SEARCH_KEYS,
    TIER_KEYS,
    TOP_KEYS,
    KeyPath,
    key_name,
)
from zonedesign.rules.model import (  # noqa: F401
    EFFORTS,
    METHODS,
    ROW_ID,
    STABILITY_DEFAULT,
    AreasRules,
    GraphRules,
    LockRules,
    RedrawRules,
    Rules,
    SearchRules,
    TierOverride,
    TierRules,
    fence_groups,
    overridden_fences,
    tier_in_fence,
)
from zonedesign.rules.override import (  # noqa: F401
    OVERRIDE_FORMS,
    apply_override,
    apply_overrides,
    override_key,
)
from zonedesign.rules.parse import (  # noqa: F401
    LOOKUP_ID,
    RESERVED_PREFIXES,
    TIER_NAME,
    load_rules,
    parse_rules,
    projected_problem,
    tier_name_problem,
)
from zonedesign.rules.write import (  # noqa: F401
    _toml_string,
    _toml_value,
    rules_to_toml,
)
