"""Zone search: construction, AZP descent, annealing, tabu, merge and split moves.

`solve(problem, ...)` is the entry point; `ZoneState` is the incremental zone state the
compiled kernels work on.
"""

import importlib
import pkgutil

from zonedesign.search.cachestamp import compiled_modules, drop_stale_caches

# before anything compiles: cached code of a changed kernel module must not be reused;
# every module of the package that holds compiled functions is found, none listed by hand
drop_stale_caches(compiled_modules([importlib.import_module(f"{__name__}.{m.name}") for m in pkgutil.iter_modules(__path__)]))

from zonedesign.search.engine import Solution, solve  # noqa: E402
from zonedesign.search.state import ZoneState  # noqa: E402

__all__ = ["Solution", "ZoneState", "solve"]
