"""Running a CP-SAT solve without losing the process's interrupt handler.

OR-Tools resets SIGINT to the system default during a solve and does not put the
process's own handler back, so Ctrl-C after any solve would kill the run before it can
remove its temporary output folder.
"""

from __future__ import annotations

import signal
import threading

from ortools.sat.python import cp_model


def solve_model(solver: cp_model.CpSolver, model: cp_model.CpModel) -> int:
    """solver.Solve(model), then the SIGINT handler that was in place is restored."""
    handler = signal.getsignal(signal.SIGINT)
    try:
        return solver.Solve(model)
    finally:
        if handler is not None and threading.current_thread() is threading.main_thread():
            signal.signal(signal.SIGINT, handler)
