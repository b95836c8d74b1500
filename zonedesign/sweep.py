"""Sweep threshold rules: one design (or redraw) per variant of the rules, measured side by side.

`--vary` items (keys of `rules.apply_overrides`, tiers counted from 1 at the bottom or named):

    tier.1.min.households=45,50,60            one key, listed values
    tier.1.min.households=30:60:10            a range, both ends included: 30, 40, 50, 60
    tier.2.min.POP8,tier.2.target.POP8=20000/30000,40000/50000
                                              tied keys: values move together, one group each

Variants are every combination of the items. Each variant's rules are the base rules with
all of its values applied, then checked as a whole: a variant that breaks a rule of the
rules file (a floor above its target) is reported with the reason and the others still run.
A variant that changes a `graph.*` key gets its own graph. Variants are independent tasks,
so they run through the same executors as fences.
"""

from __future__ import annotations

import dataclasses
import re
import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from decimal import Decimal, InvalidOperation
from pathlib import Path

import numpy as np
import pandas as pd

from zonedesign.errors import InputError, RulesError
from zonedesign.locks import Locks
from zonedesign.plain import plain
from zonedesign.records import Areas, Graph
from zonedesign.rules import Rules, apply_overrides, override_key, rules_to_toml
from zonedesign.summaryparts import (
    AuditPart,
    BoundBreak,
    FenceFailure,
    GraphPart,
    ProofEntry,
    TierFigures,
)
from zonedesign.summaryrecord import RunSummary

MAX_VARIANTS = 1000  # a sweep beyond this is a typo (a range step too small), not a plan
PROOF_SECONDS = 5.0  # CP-SAT time per failing fence when seeking its proof


@dataclass(frozen=True)
class Axis:
    """One `--vary` item: keys that move together and their value groups."""

    keys: tuple[str, ...]  # as the user wrote them
    values: tuple[tuple[str, ...], ...]  # one group per step, a value per key


@dataclass(frozen=True)
class Variant:
    number: int
    values: tuple[tuple[str, str], ...]  # (key as written, value)
    name: str  # folder name under variants/, readable: tier2-min-POP8-40000
    rules: Rules | None  # None when the combined rules are invalid
    error: str = ""  # why the combined rules are invalid


@dataclass(frozen=True)
class VariantTask:
    variant: Variant
    areas: Areas
    graph: Graph
    previous: dict[str, np.ndarray] | None
    proof_seconds: float = PROOF_SECONDS
    locks: Locks | None = None  # agreed zones every variant keeps as they are


@dataclass
class VariantResult:
    """A variant's zones and every figure its summary.json and sweep.csv row hold."""

    row: dict
    lookup: dict[str, np.ndarray] = field(default_factory=dict)
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    audit: dict = field(default_factory=dict)
    tiers: dict = field(default_factory=dict)
    breaks: list[dict] = field(default_factory=list)
    proofs: list[dict] = field(default_factory=list)
    failures: list[dict] = field(default_factory=list)


# ---------------------------------------------------------------- parsing --vary


def parse_vary(items: Sequence[str], rules: Rules) -> list[Axis]:
    """Parse `--vary` items; a bad key, or one key named twice, is an InputError naming it."""
    out: list[Axis] = []
    seen: dict[str, str] = {}
    for item in items:
        if "=" not in item:
            raise InputError(f"--vary {item!r}: expected KEY=V1,V2,... (e.g. tier.1.min.households=30,40)")
        head, _, rest = item.partition("=")
        keys = tuple(k.strip() for k in head.split(","))
        if not head.strip() or any(not k for k in keys):
            raise InputError(f"--vary {item!r}: the key before '=' is empty")
        for key in keys:
            try:
                canonical = override_key(rules, key)
            except RulesError as exc:
                raise InputError(f"--vary {key}: {exc}") from None
            if canonical in seen:
                also = f" (as {seen[canonical]} and {key})" if seen[canonical] != key else ""
                raise InputError(f"--vary {key}: the same key is given twice{also}; give each key once")
            seen[canonical] = key
        groups = [g.strip() for g in rest.split(",") if g.strip()]
        if not groups:
            raise InputError(f"--vary {head.strip()}: no values after '='")
        values: list[tuple[str, ...]] = []
        for group in groups:
            parts = [p.strip() for p in group.split("/")] if len(keys) > 1 else [group]
            if len(parts) != len(keys):
                raise InputError(
                    f"--vary {head.strip()}: value group {group!r} has {len(parts)} value(s) for "
                    f"{len(keys)} tied keys; write one value per key, joined by '/'"
                )
            expanded = [expand_range(p, keys[k]) for k, p in enumerate(parts)]
            steps = {len(e) for e in expanded} - {1}
            if len(steps) > 1:
                raise InputError(f"--vary {head.strip()}: ranges in group {group!r} have different lengths")
            n = steps.pop() if steps else 1
            values += [tuple(e[i] if len(e) > 1 else e[0] for e in expanded) for i in range(n)]
        out.append(Axis(keys=keys, values=tuple(values)))
    if not out:
        raise InputError("sweep needs at least one --vary KEY=V1,V2,...")
    total = int(np.prod([len(a.values) for a in out]))
    if total > MAX_VARIANTS:
        raise InputError(f"--vary: {total:,} variants requested, more than {MAX_VARIANTS:,}; use fewer values")
    return out


def expand_range(text: str, key: str) -> list[str]:
    """`a:b:step` as its values, both ends included (`30:60:10` -> 30, 40, 50, 60); other text as is."""
    if ":" not in text:
        return [text]
    bits = text.split(":")
    try:
        if len(bits) != 3:
            raise InvalidOperation
        a, b, step = (Decimal(x.strip()) for x in bits)
    except InvalidOperation:
        raise InputError(f"--vary {key}: range {text!r} is not start:stop:step (e.g. 30:60:10)") from None
    if step <= 0 or b < a:
        raise InputError(f"--vary {key}: range {text!r} needs start <= stop and a step above 0")
    n = int((b - a) / step) + 1
    if n > MAX_VARIANTS:
        raise InputError(f"--vary {key}: range {text!r} gives {n:,} values, more than {MAX_VARIANTS:,}")
    return [_plain_decimal(a + i * step) for i in range(n)]


def _plain_decimal(d: Decimal) -> str:
    text = format(d.normalize(), "f")
    return text if text not in ("-0",) else "0"


# ---------------------------------------------------------------- variants


def variants(rules: Rules, axes: Sequence[Axis]) -> list[Variant]:
    """Every combination of the axes' value groups, each with its rules checked as a whole."""
    import itertools

    out: list[Variant] = []
    names: set[str] = set()
    for n, combo in enumerate(itertools.product(*[a.values for a in axes]), start=1):
        values = tuple((k, v) for axis, group in zip(axes, combo) for k, v in zip(axis.keys, group))
        name = variant_name(values, n, names)
        names.add(name)
        try:
            r = apply_overrides(rules, list(values))
            r = replace_text(r)
            out.append(Variant(number=n, values=values, name=name, rules=r))
        except RulesError as exc:
            out.append(Variant(number=n, values=values, name=name, rules=None, error=str(exc)))
    return out


def replace_text(rules: Rules) -> Rules:
    """The variant's rules with its own TOML text (summary.json and rules.toml show it)."""
    from dataclasses import replace

    return replace(rules, text=rules_to_toml(rules))


_UNSAFE = re.compile(r"[^A-Za-z0-9._+-]+")


def variant_name(values: Sequence[tuple[str, str]], number: int, taken: set[str]) -> str:
    """A folder name that says what the variant changes: `tier2-min-POP8-40000`."""
    words = []
    for key, value in values:
        parts = key.split(".")
        if parts[0] == "tier" and len(parts) > 1:
            parts = [f"tier{parts[1]}", *parts[2:]]
        words.append("-".join([*parts, value]))
    name = _UNSAFE.sub("-", "_".join(words)).strip("-.") or f"variant-{number:03d}"
    if len(name) > 120:
        name = f"variant-{number:03d}"
    while name in taken:
        name = f"{name}-{number}"
    return name


# ---------------------------------------------------------------- running one variant


def run_variant(task: VariantTask) -> VariantResult:
    """Design (or redraw) one variant, audit it and measure it; runs in a worker."""
    from zonedesign.tiers.design import build_hierarchy
    from zonedesign.tiers.executors import serial_executor
    from zonedesign.tiers.redraw import redraw_hierarchy
    from zonedesign.verify.checks import audit
    from zonedesign.zonetables import all_tables, table_breaks, tier_figures

    t0 = time.perf_counter()
    v = task.variant
    row: dict = {"variant": v.number, "name": v.name}
    for key, value in v.values:
        row[key] = _number(value)
    if v.rules is None:
        row.update({"valid": False, "problem": v.error, "audit_ok": False})
        return VariantResult(row=row)
    rules = v.rules
    if task.previous is None:
        result = build_hierarchy(task.areas, task.graph, rules, executor=serial_executor, locks=task.locks)
    else:
        result = redraw_hierarchy(task.areas, task.graph, rules, task.previous, executor=serial_executor,
                                  locks=task.locks)
    lookup = result.lookup()
    failures = [{"fence": f.fence, "tier": t.name, "error": f.error} for t in result.tiers for f in t.fences if f.error]
    tables = all_tables(task.areas, task.graph, lookup, rules.tiers)
    checked = audit(task.areas, task.graph, lookup, list(rules.tiers))
    breaks = table_breaks(rules.tiers, tables)
    lock_faults = []
    if task.locks:
        from zonedesign.locks import lock_breaks

        # a locked zone that breaks a bound stays as agreed; its break and proof say so
        for b in breaks:
            b["locked"] = b["zone"] in task.locks.zones(b["tier"])
        lock_faults = lock_breaks(task.locks, lookup, task.areas)
    proofs = _proofs(task, lookup, breaks)
    figures = {t.name: tier_figures(tables[t.name], t, task.areas.count_names) for t in rules.tiers}
    row["valid"] = True
    row["problem"] = ""
    row.update(measure_row(figures, task.areas.count_names))
    if task.previous is not None:
        from zonedesign.tiers.naming import moved_areas

        for tier in rules.tiers:
            # areas moved as every redraw figure counts them: areas whose zone code changed
            moved = moved_areas(task.previous[tier.name], lookup[tier.name])
            row[f"areas_changed_vs_previous.{tier.name}"] = int(moved.sum())
    row["bound_breaks"] = len(breaks)
    row["fences_infeasible"] = sum(1 for p in proofs if p.get("status") == "INFEASIBLE")
    row["fence_failures"] = len(failures)
    if task.locks:
        row["locks_kept"] = not lock_faults
    row["audit_ok"] = bool(checked.ok) and not lock_faults
    row["seconds"] = round(time.perf_counter() - t0, 3)
    violations = [plain(x) for x in getattr(checked, "violations", [])] + lock_faults
    return VariantResult(
        row=row, lookup=lookup, tables=tables, audit={"ok": row["audit_ok"], "violations": violations},
        tiers=figures, breaks=breaks, proofs=proofs, failures=failures,
    )


def measure_row(figures: dict, count_names: Sequence[str]) -> dict:
    """The sweep.csv figures of one variant, read from its summary's tier figures.

    sweep.csv and each variant's summary.json are the same numbers by construction.
    """
    row: dict = {}
    for tier, f in figures.items():
        row[f"zones.{tier}"] = f["zones"]
        row[f"breaks.{tier}"] = f["bound_breaks"]
        for c in count_names:
            row[f"smallest.{tier}.{c}"] = f["counts"][c]["min"]
        for c, share in f["share_within_10pct_of_target"].items():
            row[f"within_10pct.{tier}.{c}"] = share
        row[f"polsby_popper.median.{tier}"] = f["polsby_popper"]["median"]
        row[f"within_spread.median.{tier}"] = f["within_spread"]["median"]
    return row


def _proofs(task: VariantTask, lookup, breaks: list[dict]) -> list[dict]:
    """A proof (or a stated lack of one) per fence holding a break, as plain dicts."""
    from zonedesign.breakproofs import explain_breaks

    found = explain_breaks(task.areas, task.graph, task.variant.rules.tiers, lookup, breaks,
                           time_limit=task.proof_seconds, locks=task.locks or None)
    return [plain(p) for p in found]


def _number(value: str):
    try:
        f = float(value)
        return int(f) if f.is_integer() else f
    except ValueError:
        return value


# ---------------------------------------------------------------- comparing variants


def changes_between(results: Sequence[VariantResult], tiers: Sequence[str]) -> pd.DataFrame:
    """Areas changing zone per tier from each valid variant to the next, and from the first.

    Zones are matched one to one by their areas (tiers.fewest.matched_moves), so a zone that
    only carries another code is not counted as changed.
    """
    from zonedesign.tiers.fewest import matched_moves

    valid = [r for r in results if r.lookup]
    rows = []
    for k, r in enumerate(valid):
        rec = {"variant": r.row["variant"], "name": r.row["name"]}
        for t in tiers:
            rec[f"areas_changed_vs_first.{t}"] = matched_moves(valid[0].lookup[t], r.lookup[t])
            rec[f"areas_changed_vs_before.{t}"] = (
                matched_moves(valid[k - 1].lookup[t], r.lookup[t]) if k else 0
            )
        rows.append(rec)
    return pd.DataFrame(rows)


def sweep_table(results: Sequence[VariantResult], tiers: Sequence[str]) -> pd.DataFrame:
    """sweep.csv: one row per variant, valid or not, with the changes between variants."""
    table = pd.DataFrame([r.row for r in results])
    moved = changes_between(results, tiers)
    if not moved.empty:
        table = table.merge(moved.drop(columns=["name"]), on="variant", how="left")
    return table


def variant_summary(head: RunSummary, variant: Variant, result: VariantResult,
                    graph_head: dict | None = None) -> RunSummary:
    """The summary.json of one variant's folder: the run's head with the variant's own rules."""
    from zonedesign.jobs.summary import tier_objectives

    rules = variant.rules
    failed = bool(result.breaks) or not result.audit.get("ok", False) or bool(result.failures)
    out = dataclasses.replace(
        head,
        command="sweep variant",
        variant={"number": variant.number, "name": variant.name, "values": {k: v for k, v in variant.values}},
        rules=rules.text,
        tier_order=[t.name for t in rules.tiers],
        objective=tier_objectives(rules.tiers),
        audit=AuditPart.of(result.audit),
        certificate=[],  # variants are audited; run `design` on the chosen rules to certify
        tiers={name: TierFigures.of(f) for name, f in result.tiers.items()},
        bound_breaks=[BoundBreak.of(b) for b in result.breaks],
        proofs=[ProofEntry.of(p) for p in result.proofs],
        fence_failures=[FenceFailure.of(f) for f in result.failures],
        sweep_row=dict(result.row),
        exit_code=1 if failed else 0,
    )
    if graph_head is not None:
        out.graph = GraphPart.of(graph_head)
    return out.settle()


def write_variant(folder: Path, geometry, ids: np.ndarray, result: VariantResult, summary: RunSummary) -> dict:
    """lookup.csv, zones.gpkg, rules.toml and summary.json of one variant; returns its layers."""
    from zonedesign.dissolve import zone_layers
    from zonedesign.io.lookup import write_lookup
    from zonedesign.io.output import write_json, write_layers_gpkg

    folder.mkdir(parents=True)
    write_lookup(folder / "lookup.csv", ids, result.lookup)
    layers = zone_layers(geometry, result.lookup, result.tables)
    write_layers_gpkg(folder / "zones.gpkg", layers)
    (folder / "rules.toml").write_text(summary.rules or "", encoding="utf-8")
    write_json(folder / "summary.json", summary)
    return layers
