"""The rules checked against an input's columns and fence codes."""

from __future__ import annotations

import difflib
from collections.abc import Mapping, Sequence

from zonedesign.rules.keylines import KeyPath, _Check, _KeyLines, _raise
from zonedesign.rules.model import Rules


def check_rules_against(
    rules: Rules,
    columns: Sequence[str],
    where: str,
    table_columns: Sequence[str] | None = None,
) -> None:
    """Every column the rules name exists in the areas file `where` (its `columns`) or,
    with `[areas] table`, in that table (its `table_columns`)."""
    check = _Check(str(rules.source) if rules.source else "<rules>", _KeyLines(rules.text) if rules.text else None)
    a = rules.areas
    present = list(columns)
    extra = list(table_columns or [])
    wanted: list[tuple[KeyPath, str]] = [] if a.row_ids else [(("areas", "id"), a.id)]
    wanted += [(("areas", "counts"), c) for c in a.counts]
    wanted += [(("areas", "attributes"), c) for c in a.attributes]
    if a.fence is not None:
        wanted.append((("areas", "fence"), a.fence))
    if a.weight is not None:
        wanted.append((("areas", "weight"), a.weight))
    wanted += [(("tier", k, "fence"), t.fence) for k, t in enumerate(rules.tiers) if t.fence]
    table = a.table.name if a.table is not None else None
    if table is not None and a.id not in extra and not a.row_ids:
        check.fail(("areas", "table"), f"the id column {a.id!r} is not in {table}, so it cannot be joined")
    for path, col in wanted:
        if path == ("areas", "id") or (col == a.id and not a.row_ids):
            found = col in present  # the id (also as a fence) always comes from the areas file
        else:
            found = col in present or col in extra
            if table is not None and col in present and col in extra and a.prefer is None:
                check.fail(
                    ("areas", "table"),
                    f"column {col!r} is in both {where} and {table}; say which to use with "
                    'prefer = "table" or prefer = "file"',
                )
        if found:
            continue
        pool = present + extra
        lower = {c.lower(): c for c in pool}
        near = lower.get(col.lower()) or next(iter(difflib.get_close_matches(col, pool, 1)), None)
        hint = f"; did you mean {near!r}?" if near else ""
        also = f" nor in {table}" if table is not None and path != ("areas", "id") else ""
        check.fail(path, f"column {col!r} is not in {where}{also}{hint}")
    _raise(check.problems)


def check_fences_against(rules: Rules, fences: Sequence[str] | Mapping[str, Sequence[str]], where: str) -> None:
    """Every fence code an override names is a fence of its tier in the areas file `where`.

    `fences`: the fence code of every area, or per tier name (tiers with fences of their own).
    """
    check = _Check(str(rules.source) if rules.source else "<rules>", _KeyLines(rules.text) if rules.text else None)
    for k, t in enumerate(rules.tiers):
        codes = fences.get(t.name, ()) if isinstance(fences, Mapping) else fences
        known = sorted({str(f) for f in codes})
        shown = ", ".join(known[:10]) + (f" and {len(known) - 10} more" if len(known) > 10 else "")
        for m, o in enumerate(t.overrides):
            unknown = [f for f in o.fences if f not in set(known)]
            if unknown:
                near = difflib.get_close_matches(unknown[0], known, 1)
                hint = f"; did you mean {near[0]!r}?" if near else ""
                check.fail(
                    ("tier", k, "override", m, "fences"),
                    f"fence code(s) {', '.join(map(repr, unknown))} not among the fences of {where} ({shown}){hint}",
                )
    _raise(check.problems)
