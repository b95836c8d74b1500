"""The status words every output uses, and how solver words map onto them.

A certificate (an independent check of zones against the rules) is `confirmed`, `refuted`
or `undecided`; a solve (a proof, a repair, an exact model) is `optimal`, `feasible`,
`infeasible` or `undecided`. Solver words (OPTIMAL, UNKNOWN, ...) stay inside the solver
wrapper; older summaries that carry them are read through these maps. An undecided
certificate is never a pass.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping

CERTIFICATE_WORDS = ("confirmed", "refuted", "undecided")
SOLVE_WORDS = ("optimal", "feasible", "infeasible", "undecided")

# a certificate model that has a solution accepts the zones; one without refutes them
_CERTIFICATE_FROM_SOLVER = {
    "OPTIMAL": "confirmed",
    "FEASIBLE": "confirmed",
    "INFEASIBLE": "refuted",
}
_SOLVE_FROM_OLD = {
    "OPTIMAL": "optimal",
    "FEASIBLE": "feasible",
    "INFEASIBLE": "infeasible",
    "NOTHING TO REPAIR": "optimal",  # no move is the fewest
    "NO PROOF": "feasible",  # the proof search found a valid zoning
}


def certificate_word(entry: Mapping | str) -> str:
    """confirmed / refuted / undecided for one certificate entry (or its status)."""
    raw = entry if isinstance(entry, str) else (entry.get("verdict") or entry.get("status") or "")
    word = str(raw).strip()
    if word.lower() in CERTIFICATE_WORDS:
        return word.lower()
    return _CERTIFICATE_FROM_SOLVER.get(word.upper(), "undecided")


def solve_word(status: str) -> str:
    """optimal / feasible / infeasible / undecided for a solve's status."""
    word = str(status).strip()
    if word.lower() in SOLVE_WORDS:
        return word.lower()
    return _SOLVE_FROM_OLD.get(word.upper(), "undecided")


def certificate_verdict(entries: Iterable[Mapping]) -> tuple[str, dict[str, int]]:
    """The certificate as a whole and its count per word: refuted if any model refutes,
    else undecided if any is undecided, else confirmed (nothing checked is undecided)."""
    counts = dict.fromkeys(CERTIFICATE_WORDS, 0)
    for e in entries:
        counts[certificate_word(e)] += 1
    if counts["refuted"]:
        return "refuted", counts
    if counts["undecided"] or not sum(counts.values()):
        return "undecided", counts
    return "confirmed", counts
