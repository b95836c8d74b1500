"""The one wrapper around a CP-SAT solve: it honours the run-wide stop flag.

OR-Tools, left to itself, takes SIGINT during a solve, ends the search early and returns
as if its time were up: the run would go on and write an output after a Ctrl-C. Here
CP-SAT keeps its hands off the signals; the stop flag's watcher ends the search with
`StopSearch`, and a solve ended that way raises `Interrupted` instead of returning a
truncated status.
"""

from __future__ import annotations

import signal
import threading

from ortools.sat.python import cp_model

from zonedesign import interrupts


def solve_model(solver: cp_model.CpSolver, model: cp_model.CpModel) -> int:
    """solver.Solve(model); raises `interrupts.Interrupted` when the run was asked to stop."""
    interrupts.check()
    solver.parameters.catch_sigint_signal = False
    handlers = {s: signal.getsignal(s) for s in (signal.SIGINT, signal.SIGTERM)}
    try:
        with interrupts.stopper(solver.StopSearch):
            status = solver.Solve(model)
    finally:
        # older OR-Tools reset SIGINT to the system default during a solve
        if threading.current_thread() is threading.main_thread():
            for s, h in handlers.items():
                if h is not None and signal.getsignal(s) is not h:
                    signal.signal(s, h)
    interrupts.check()
    return status
