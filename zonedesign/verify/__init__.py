"""The independent checker: plain checks, CP-SAT certificate, proofs, repair, exact solver.

Never imports zonedesign.search: contiguity, nesting and bounds are re-derived here on a
separate code path so the checker can catch the optimiser's bugs.

    checks.audit(areas, graph, labels, tiers)            -> AuditResult
    certificate.certify(areas, graph, labels, tiers)     -> list[Certificate]
    proofs.prove_infeasible(problem, fence, tier, ...)   -> Proof | None
    repair.minimal_repair(areas, graph, labels, tiers)   -> RepairResult
    repair.repair_labelling(graph, counts, bounds, prev) -> LabelRepair (plain arrays)
    exact.solve_exact(problem, ...)                      -> ExactResult
    overlay.zones_from_layers(geometry, ids, layers, id) -> (labels, flags)

The CP-SAT model blocks (assignment, bounds, fence, nesting, flow contiguity, scaling)
live once, in `cpsat`; `labels` encodes zone ids, `zonefigures` measures zones for the
audit, `repairmodel` states one repair cluster.

Names are loaded on first use, so `import zonedesign.verify` stays light.
"""

from __future__ import annotations

import importlib

_WHERE = {
    "audit": "checks",
    "AuditResult": "checks",
    "Violation": "checks",
    "certify": "certificate",
    "Certificate": "certificate",
    "prove_infeasible": "proofs",
    "arithmetic_proof": "proofs",
    "Proof": "proofs",
    "minimal_repair": "repair",
    "repair_frame": "repair",
    "RepairResult": "repair",
    "repair_labelling": "repair",
    "LabelRepair": "repair",
    "Move": "repair",
    "solve_exact": "exact",
    "feasible_zones": "exact",
    "ExactResult": "exact",
    "zones_from_layers": "overlay",
}

__all__ = sorted(_WHERE)


def __getattr__(name: str):
    if name in _WHERE:
        return getattr(importlib.import_module(f"zonedesign.verify.{_WHERE[name]}"), name)
    raise AttributeError(f"module 'zonedesign.verify' has no attribute {name!r}")
