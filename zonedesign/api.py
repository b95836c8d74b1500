"""The Python face of zonedesign: prepare(), design(), redraw(), audit(), sweep().

Each command reads its inputs, runs the job and writes an output folder atomically; it
returns a `RunResult`: its `record` (the typed `RunSummary`), `summary` (the same as
summary.json holds it), the exit code and the output folder. The work lives in
`zonedesign.jobs`, one module per command.
"""

from __future__ import annotations

from zonedesign.jobs.audit import audit
from zonedesign.jobs.demo import later_scenario
from zonedesign.jobs.design import design
from zonedesign.jobs.inputs import Prepared, Progress, check_out, prepare
from zonedesign.jobs.redraw import redraw
from zonedesign.jobs.summary import RunResult, base_summary
from zonedesign.jobs.sweep import sweep
from zonedesign.summaryrecord import RunSummary

__all__ = [
    "Prepared",
    "Progress",
    "RunResult",
    "RunSummary",
    "audit",
    "base_summary",
    "check_out",
    "design",
    "later_scenario",
    "prepare",
    "redraw",
    "sweep",
]
