"""Zone search: construction, AZP descent, annealing, tabu, merge and split moves.

`solve(problem, ...)` is the entry point; `ZoneState` is the incremental zone state the
compiled kernels work on.
"""

from zonedesign.search.engine import Solution, solve
from zonedesign.search.state import ZoneState

__all__ = ["Solution", "ZoneState", "solve"]
