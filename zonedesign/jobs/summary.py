"""The run summary: its head, per-fence figures, the certificate, locks and proofs."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from zonedesign import __version__
from zonedesign.exactfence import PROOF_KEYS, proof_fields
from zonedesign.glossary import CAUTION
from zonedesign.jobs.inputs import Prepared, Progress, versions
from zonedesign.plain import plain


@dataclass
class RunResult:
    out: Path | None
    summary: dict
    exit_code: int
    lookup: dict[str, np.ndarray] = field(default_factory=dict)


def run_summary(prep: Prepared, command: str, result: Any, executor: str, workers: int) -> tuple[dict, dict]:
    """Phase timings and the summary's head shared by design and redraw."""
    seconds = dict(prep.seconds)
    seconds.update(result.seconds)
    summary = base_summary(prep, command)
    summary["search"] = {
        "method": prep.rules.search.method,
        "seed": prep.rules.search.seed,
        "executor": executor,
        "workers": workers,
    }
    return seconds, summary


def fence_figures(result: Any) -> list[dict]:
    rows = []
    for tier in result.tiers:
        for f in tier.fences:
            rows.append(
                {
                    "tier": tier.name,
                    "fence": f.fence,
                    "zones": int(np.unique(f.labels).shape[0]) if f.labels.size else 0,
                    "units": int(f.labels.shape[0]),
                    "breaks": f.breaks,
                    "objective": f.total,
                    "terms": f.terms,
                    "seconds": round(f.seconds, 3),
                    "error": f.error,
                    **proof_fields(f.info),
                    "info": {k: v for k, v in f.info.items() if k != "traceback" and k not in PROOF_KEYS},
                }
            )
    return rows


def base_summary(prep: Prepared, command: str) -> dict:
    return {
        "command": command,
        "caution": CAUTION,
        "zonedesign": __version__,
        "versions": versions(),
        "inputs": [str(p) for p in prep.inputs],
        "areas": {
            "count": prep.areas.n,
            "crs": prep.areas.crs,
            "crs_choice": prep.crs_note,
            "fences": len(set(prep.areas.fence.tolist())),
            "fence_codes": sorted(set(prep.areas.fence.tolist())),
            "fences_per_tier": {t.name: len(set(prep.areas.in_tier(t.name).fence.tolist())) for t in prep.rules.tiers},
            "repaired_polygons": list(prep.areas.repaired),
            "overlaps_cut": prep.overlaps_cut,
            "duplicates_merged": prep.duplicates_merged,
            "notes": prep.notes,
        },
        "graph": {
            "contiguity": prep.rules.graph.contiguity,
            "edges": prep.graph.n_edges,
            "links": prep.links,
            "islands": prep.islands,
        },
        "rules": prep.rules.text,
        "tier_order": [t.name for t in prep.rules.tiers],
        "overrides": {
            t.name: [
                {"fences": list(o.fences), "min": o.min, "max": o.max, "target": o.target, "weights": o.weights}
                for o in t.overrides
            ]
            for t in prep.rules.tiers
            if t.overrides
        },
        "objective": {
            t.name: {"homogeneity": t.homogeneity, "compactness": t.compactness, "weights": dict(t.weights)}
            for t in prep.rules.tiers
        },
    }


def run_certificate(prep: Prepared, labels: Mapping[str, np.ndarray], tiers: list, summary: dict,
                    progress: Progress | None) -> list:
    """The CP-SAT certificate into summary["certificate"], with a fence-tier counter; every
    undecided fence and tier is named on the progress line (it makes the exit code 1)."""
    from zonedesign.cli.progress import bar, say
    from zonedesign.verify.certificate import certify, fence_tiers

    with bar(progress, fence_tiers(prep.areas, tiers), "certificate (fence-tiers)") as b:
        certs = certify(prep.areas, prep.graph, labels, tiers, on_done=lambda _done, _total: b.update())
    summary["certificate"] = [plain(c) for c in certs]
    for c in certs:
        if c.undecided:
            say(progress, f"certificate undecided for tier {c.tier} fence {c.fence}: CP-SAT stopped at its time limit")
    return certs


def add_lock_checks(prep: Prepared, lookup: Mapping[str, np.ndarray], summary: dict) -> None:
    """Every locked zone must be in the lookup exactly as the lock file gives it."""
    if not prep.locks:
        return
    from zonedesign.locks import lock_breaks

    found = lock_breaks(prep.locks, lookup, prep.areas)
    summary["locks"] = {
        "file": str(prep.locks.source),
        "zones": {name: sorted(prep.locks.zones(name)) for name in prep.locks.codes},
        "kept": not found,
    }
    if found:
        summary["audit"]["violations"] = list(summary["audit"].get("violations", [])) + found
        summary["audit"]["ok"] = False


def mark_locked_breaks(prep: Prepared, breaks: list[dict]) -> None:
    """A locked zone that breaks a bound stays as agreed; its break says so."""
    if not prep.locks:
        return
    for b in breaks:
        b["locked"] = b["zone"] in prep.locks.zones(b["tier"])


def explain_breaks(prep: Prepared, lookup: Mapping[str, np.ndarray], breaks: list[dict]) -> list[dict]:
    """A plain-words proof for each fence whose breaks no zoning could avoid."""
    from zonedesign.breakproofs import explain_breaks as explain

    found = explain(prep.areas, prep.graph, prep.rules.tiers, lookup, breaks, locks=prep.locks or None)
    return [plain(p) for p in found]


def violations_of(checked: Any) -> list:
    return list(getattr(checked, "violations", []))
