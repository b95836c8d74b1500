"""Zone search: construction, AZP descent, annealing, tabu, merge and split moves.

`solve(problem, ...)` is the entry point; `ZoneState` is the incremental zone state the
compiled kernels work on.
"""

from zonedesign.search import anneal, azp, construct, kernels, mergesplit, tabu
from zonedesign.search.cachestamp import drop_stale_caches

# before anything compiles: cached code of a changed kernel module must not be reused
drop_stale_caches([kernels, construct, azp, anneal, tabu, mergesplit])

from zonedesign.search.engine import Solution, solve  # noqa: E402
from zonedesign.search.state import ZoneState  # noqa: E402

__all__ = ["Solution", "ZoneState", "solve"]
