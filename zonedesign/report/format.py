"""Text helpers of the report: escaping, numbers in words a reader expects, tables."""

from __future__ import annotations

import html
import json
import math
import re
from collections.abc import Sequence
from typing import Any

import numpy as np

from zonedesign.report.svgmap import element_id

TABLE_ROWS = 1000  # longer tables are cut, with a line saying how many rows were left out


class Raw(str):
    """Cell text that is already HTML."""


def esc(x: Any) -> str:
    """Text made safe for HTML content and attribute values."""
    return html.escape("" if x is None else str(x), quote=True)


def html_table(
    caption: str,
    cols: Sequence[str],
    rows: Sequence[Sequence[Any]],
    *,
    row_ids: Sequence[str] | None = None,
    row_headers: bool = False,
    row_class: str | None = None,
) -> str:
    """An accessible table: caption, column headers with scope, optional row headers.

    Rows past `TABLE_ROWS` are left out with a line saying how many.
    """
    head = "".join(f'<th scope="col">{esc(c)}</th>' for c in cols)
    body = []
    cls = f' class="{row_class}"' if row_class else ""
    for i, row in enumerate(rows[:TABLE_ROWS]):
        ident = f' id="{row_ids[i]}"' if row_ids is not None else ""
        cells = []
        for j, v in enumerate(row):
            text = v if isinstance(v, Raw) else esc(text_of(v))
            cells.append(
                f'<th scope="row">{text}</th>' if row_headers and j == 0 else f"<td>{text}</td>"
            )
        body.append(f"<tr{ident}{cls}>{''.join(cells)}</tr>")
    more = ""
    if len(rows) > TABLE_ROWS:
        more = f'<p class="note">{len(rows) - TABLE_ROWS:,} more row(s) left out to keep the report small; summary.json holds them all.</p>'
    return (
        f'<div class="table-wrap"><table><caption>{esc(caption)}</caption><thead><tr>{head}</tr></thead>'
        f"<tbody>{''.join(body)}</tbody></table></div>{more}"
    )


LIST_ITEMS = 12  # a list in a table cell shows this many items, then how many in all


def text_of(v: Any) -> str:
    """A cell value as text: numbers as `num`, lists shortened, mappings as JSON."""
    if isinstance(v, Raw):
        return v
    if v is None:
        return ""
    if isinstance(v, bool | np.bool_):
        return "yes" if v else "no"
    if isinstance(v, int | float | np.integer | np.floating):
        return num(v)
    if isinstance(v, list | tuple | np.ndarray):
        items = list(v)
        shown = ", ".join(text_of(x) for x in items[:LIST_ITEMS])
        return shown + (f" … ({len(items):,} in all)" if len(items) > LIST_ITEMS else "")
    if isinstance(v, dict):
        text = json.dumps(v, default=str)
        return text if len(text) <= 400 else text[:400] + " …"
    text = str(v)
    return text if len(text) <= 2000 else text[:2000] + " …"


def num(v: Any) -> str:
    """A number as a reader expects it: thousands separated, three significant digits."""
    if v is None:
        return "–"
    if isinstance(v, bool | np.bool_):
        return "yes" if v else "no"
    try:
        x = float(v)
    except (TypeError, ValueError):
        return str(v)
    if not math.isfinite(x):
        return "–" if math.isnan(x) else ("∞" if x > 0 else "−∞")
    if x == round(x) and abs(x) < 1e15:
        return f"{int(round(x)):,}"
    if abs(x) >= 1000:
        return f"{x:,.0f}"
    return f"{x:.3g}"


def pct(v: Any) -> str:
    try:
        return f"{100 * float(v):+.1f}%".replace("-", "−")
    except (TypeError, ValueError):
        return "–"


def pct_plain(v: Any) -> str:
    try:
        return f"{100 * float(v):.1f}%"
    except (TypeError, ValueError):
        return "–"


def isnan(v: Any) -> bool:
    try:
        return v is None or bool(isinstance(v, float | np.floating) and math.isnan(v))
    except TypeError:
        return False


def natural(s: Any) -> tuple:
    """Sort key that puts D2 before D10."""
    return tuple(
        (0, int(p), "") if p.isdigit() else (1, 0, p) for p in re.split(r"(\d+)", str(s)) if p
    )


def slug(s: Any) -> str:
    return element_id("x", "t", str(s))[4:]


def get(d: Any, *keys: str) -> Any:
    for k in keys:
        if not isinstance(d, dict):
            return None
        d = d.get(k)
    return d


def dicts(x: Any) -> list[dict]:
    return [d for d in x if isinstance(d, dict)] if isinstance(x, list | tuple) else []
