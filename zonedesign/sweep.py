"""Sweep threshold rules: one design (or redraw) per combination of varied rule values.

`--vary KEY=V1,V2,...` keys are those of `rules.apply_override`, e.g.
`tier.1.min.households=40,50,60` (tiers counted from 1 at the bottom, or by name).
Variants are independent tasks, so they run through the same executors as fences.
"""

from __future__ import annotations

import io
import itertools
import time
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from zonedesign.errors import InputError
from zonedesign.records import Areas, Graph
from zonedesign.redraw import unchanged_share
from zonedesign.rules import Rules, apply_override


@dataclass(frozen=True)
class Variant:
    number: int
    values: tuple[tuple[str, str], ...]
    rules: Rules


@dataclass(frozen=True)
class VariantTask:
    variant: Variant
    areas: Areas
    graph: Graph
    previous: dict[str, np.ndarray] | None


def parse_vary(items: Sequence[str], rules: Rules) -> list[tuple[str, list[str]]]:
    """Parse `KEY=V1,V2,...` items; every key is tried on the rules so errors name it."""
    out: list[tuple[str, list[str]]] = []
    seen = set()
    for item in items:
        if "=" not in item:
            raise InputError(f"--vary {item!r}: expected KEY=V1,V2,... (e.g. tier.1.min.households=30,40)")
        key, _, rest = item.partition("=")
        key = key.strip()
        values = [v.strip() for v in rest.split(",") if v.strip()]
        if not key:
            raise InputError(f"--vary {item!r}: the key before '=' is empty")
        if not values:
            raise InputError(f"--vary {key}: no values after '='")
        if key in seen:
            raise InputError(f"--vary {key}: given twice")
        seen.add(key)
        for v in values:
            apply_override(rules, key, v)  # raises RulesError naming the key
        out.append((key, values))
    if not out:
        raise InputError("sweep needs at least one --vary KEY=V1,V2,...")
    return out


def variants(rules: Rules, vary: list[tuple[str, list[str]]]) -> list[Variant]:
    out = []
    keys = [k for k, _ in vary]
    for n, combo in enumerate(itertools.product(*[v for _, v in vary]), start=1):
        r = rules
        for key, value in zip(keys, combo):
            r = apply_override(r, key, value)
        out.append(Variant(number=n, values=tuple(zip(keys, combo)), rules=r))
    return out


def run_variant(task: VariantTask) -> dict:
    """Design (or redraw) one variant and measure it; runs in a worker."""
    from zonedesign.hierarchy import build_hierarchy, serial_executor
    from zonedesign.redraw import redraw_hierarchy
    from zonedesign.verify.checks import audit
    from zonedesign.zonetables import all_tables

    t0 = time.perf_counter()
    rules = task.variant.rules
    if task.previous is None:
        lookup = build_hierarchy(task.areas, task.graph, rules, executor=serial_executor).lookup()
    else:
        lookup = redraw_hierarchy(task.areas, task.graph, rules, task.previous, executor=serial_executor).lookup()
    tables = all_tables(task.areas, task.graph, lookup, rules.tiers)
    checked = audit(task.areas, task.graph, lookup, list(rules.tiers))
    row: dict = {"variant": task.variant.number}
    for key, value in task.variant.values:
        row[key] = _number(value)
    breaks = 0
    for tier in rules.tiers:
        df = tables[tier.name]
        breaks += int(df["bound_break"].sum())
        row[f"zones.{tier.name}"] = int(len(df))
        row[f"breaks.{tier.name}"] = int(df["bound_break"].sum())
        row[f"polsby_popper.median.{tier.name}"] = float(df["polsby_popper"].median())
        row[f"polsby_popper.p10.{tier.name}"] = float(df["polsby_popper"].quantile(0.1))
        row[f"homogeneity.median.{tier.name}"] = float(df["homogeneity"].median())
        row[f"homogeneity.p10.{tier.name}"] = float(df["homogeneity"].quantile(0.1))
        within = [c for c in df.columns if c.endswith("_vs_target")]
        row[f"within_10pct.{tier.name}"] = float((df[within[0]].abs() <= 0.1).mean()) if within else float("nan")
        if task.previous is not None:
            row[f"share_changed.{tier.name}"] = 1.0 - unchanged_share(task.previous[tier.name], lookup[tier.name])
    row["bound_breaks"] = breaks
    row["fences_infeasible"] = _infeasible_fences(task, lookup, tables)
    row["audit_ok"] = bool(checked.ok)
    row["seconds"] = round(time.perf_counter() - t0, 3)
    row["_lookup"] = lookup
    return row


def _infeasible_fences(task: VariantTask, lookup, tables) -> int:
    """Fences with a break that the arithmetic or CP-SAT proofs show cannot be avoided."""
    from zonedesign.api import Prepared, fence_units_problem
    from zonedesign.verify.proofs import prove_infeasible
    from zonedesign.zonetables import bounds_of

    prep = Prepared(rules=task.variant.rules, areas=task.areas, geometry=None, graph=task.graph,
                    notes=[], islands=[], links=0, inputs=[])
    n = 0
    for tier in task.variant.rules.tiers:
        df = tables[tier.name]
        for fence in sorted(set(df.loc[df["bound_break"], "fence"])):
            problem = fence_units_problem(prep, lookup, tier.name, fence, bounds_of(tier, task.areas.count_names), tier)
            proof = prove_infeasible(problem, fence, tier.name, time_limit=5.0)
            if proof is not None and str(getattr(proof, "status", "")).lower() in ("infeasible", "proven", "arithmetic"):
                n += 1
            elif proof is not None and getattr(proof, "kind", "") == "arithmetic":
                n += 1
    return n


def _number(value: str):
    try:
        f = float(value)
        return int(f) if f.is_integer() else f
    except ValueError:
        return value


def charts(table: pd.DataFrame, keys: list[str]) -> dict[str, bytes]:
    """One PNG per measure against the first varied key (one line per other combination)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    measures = [c for c in table.columns if c.split(".")[0] in
                ("zones", "breaks", "polsby_popper", "homogeneity", "within_10pct", "share_changed")]
    measures += ["bound_breaks", "fences_infeasible", "seconds"]
    x = keys[0]
    others = keys[1:]
    out = {}
    for m in measures:
        if m not in table:
            continue
        fig, ax = plt.subplots(figsize=(5.2, 3.2), dpi=90)
        groups = table.groupby(others, sort=True) if others else [((), table)]
        for name, g in groups:
            g = g.sort_values(x)
            label = ", ".join(f"{k}={v}" for k, v in zip(others, name if isinstance(name, tuple) else (name,)))
            ax.plot(g[x], g[m], marker="o", label=label or None)
        ax.set_xlabel(x)
        ax.set_ylabel(m)
        ax.grid(True, alpha=0.3)
        if others:
            ax.legend(fontsize=7)
        fig.tight_layout()
        buf = io.BytesIO()
        fig.savefig(buf, format="png")
        plt.close(fig)
        out[f"sweep_{m}.png"] = buf.getvalue()
    return out
