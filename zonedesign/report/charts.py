"""Small static charts for the report, returned as data URIs.

Charts are SVG documents wrapped in `data:` URIs and shown through <img>: they stay
sharp in print, need no fetch, and their internal ids cannot clash with the page's.
The report's own charts are drawn as plain SVG (`svgdraw`); the sweep report's charts
use matplotlib (Agg, `_pyplot`), text kept as text.
"""

from __future__ import annotations

import base64
import io
from collections.abc import Mapping, Sequence

import numpy as np

from zonedesign.report.svgdraw import Axes, Canvas, nice_ticks

INK = "#1f2328"
BARS = "#8fb3d9"
EDGE = "#4d6f94"
FLOOR = "#a3241b"
TARGET = "#1f5f3a"
CEILING = "#6a3d9a"


def _pyplot():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    plt.rcParams.update(
        {
            "svg.fonttype": "none",
            "svg.hashsalt": "zonedesign",
            "font.size": 8,
            "axes.edgecolor": "#6b6b6b",
            "axes.labelcolor": INK,
            "xtick.color": INK,
            "ytick.color": INK,
            "axes.spines.top": False,
            "axes.spines.right": False,
        }
    )
    return plt


def svg_uri(fig) -> str:
    """The figure as an SVG data URI; closes the figure."""
    plt = _pyplot()
    buf = io.BytesIO()
    fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
    plt.close(fig)
    return "data:image/svg+xml;base64," + base64.b64encode(buf.getvalue()).decode("ascii")


def _margins(
    fig,
    *,
    left: float = 0.6,
    right: float = 0.15,
    bottom: float = 0.45,
    top: float = 0.35,
    wspace: float = 0.3,
) -> None:
    """Margins in inches (a fixed layout draws the figure once, unlike tight_layout)."""
    w, h = fig.get_size_inches()
    fig.subplots_adjust(
        left=left / w, right=1 - right / w, bottom=bottom / h, top=1 - top / h, wspace=wspace
    )


def png_uri(data: bytes) -> str:
    return "data:image/png;base64," + base64.b64encode(data).decode("ascii")


def svg_text_uri(svg: str) -> str:
    """An SVG document's text as a data URI."""
    return "data:image/svg+xml;base64," + base64.b64encode(svg.encode("utf-8")).decode("ascii")


# floor, target and ceiling marks: colour and dash pattern, so they read without colour too
MARKS = (("floor", "min", FLOOR, "4 2"), ("target", "target", TARGET, None), ("ceiling", "max", CEILING, "1 1.5"))
PANEL_W = 300.0  # pixels per chart panel
PANEL_GAP = 70.0


def count_histograms(
    values: Mapping[str, np.ndarray], limits: Mapping[str, Mapping[str, float]], tier: str
) -> str | None:
    """One histogram per count of one tier, with the floor, target and ceiling marked.

    `limits[count]` may hold "min", "target", "max". The three marks differ in line style
    and are named in the legend, so they read without colour.
    """
    names = [c for c, v in values.items() if np.asarray(v).size]
    if not names:
        return None
    left, top, height = 60.0, 34.0, 170.0
    width = max(1000.0, left + len(names) * (PANEL_W + PANEL_GAP))
    c = Canvas(width, top + height + 50.0)
    c.text(width / 2, 16, f"tier {tier}: zone sizes", size=12, anchor="middle")
    for k, name in enumerate(names):
        x = np.asarray(values[name], dtype=float)
        x = x[np.isfinite(x)]
        lim = limits.get(name, {})
        marks = [(label, lim.get(key), colour, dash) for label, key, colour, dash in MARKS]
        marks = [(label, float(v), colour, dash) for label, v, colour, dash in marks if v is not None and np.isfinite(v)]
        lo = min([float(x.min())] + [v for _, v, _, _ in marks]) if x.size else 0.0
        hi = max([float(x.max())] + [v for _, v, _, _ in marks]) if x.size else 1.0
        edges = np.linspace(lo, hi if hi > lo else lo + 1, 31)
        heights, _ = np.histogram(x, bins=edges)
        ymax = max(1, int(heights.max()))
        yticks = [t for t in nice_ticks(0, ymax, 5) if t == int(t)]
        # headroom above the tallest bar for the legend of the marks
        top_y = max(ymax * (1.0 + 0.1 * len(marks)), yticks[-1] if yticks else ymax)
        ax = Axes(left + k * (PANEL_W + PANEL_GAP), top, PANEL_W, height, edges[0], edges[-1], 0.0, top_y)
        for h, a, b in zip(heights, edges[:-1], edges[1:]):
            if h:
                c.rect(ax.px(a), ax.py(h), ax.px(b) - ax.px(a), ax.py(0) - ax.py(h), BARS, EDGE, 0.4)
        for j, (label, v, colour, dash) in enumerate(marks):
            c.line(ax.px(v), ax.top, ax.px(v), ax.top + ax.height, colour, 1.4, dash)
            ly = ax.top + 10 + 13 * j
            lx = ax.left + ax.width - 92
            c.line(lx, ly - 3.5, lx + 18, ly - 3.5, colour, 1.4, dash)
            c.text(lx + 22, ly, f"{label} {v:g}", size=10)
        xticks = [t for t in nice_ticks(edges[0], edges[-1], 5) if edges[0] <= t <= edges[-1]]
        ax.frame(c, xticks, yticks, f"{name} per zone", "zones")
    return svg_text_uri(c.svg())


def _box(values: np.ndarray) -> tuple[float, float, float, float, float, np.ndarray]:
    """(low whisker, first quartile, median, third quartile, high whisker, outliers).

    Whiskers reach the furthest values within 1.5 interquartile ranges of the box
    (Tukey's box plot, common practice); values beyond are drawn one by one.
    """
    q1, med, q3 = (float(v) for v in np.percentile(values, [25, 50, 75]))
    reach = 1.5 * (q3 - q1)
    inside = values[(values >= q1 - reach) & (values <= q3 + reach)]
    lo = float(inside.min()) if inside.size else q1
    hi = float(inside.max()) if inside.size else q3
    return lo, q1, med, q3, hi, values[(values < lo) | (values > hi)]


def shape_boxplots(series: Mapping[str, Mapping[str, np.ndarray]]) -> str | None:
    """Box plots of Polsby-Popper and homogeneity, one box per tier.

    `series[measure][tier]` holds the per-zone values.
    """
    measures = [m for m, per in series.items() if any(np.asarray(v).size for v in per.values())]
    if not measures:
        return None
    left, top, height, panel = 60.0, 30.0, 180.0, 360.0
    width = max(1000.0, left + len(measures) * (panel + PANEL_GAP))
    c = Canvas(width, top + height + 50.0)
    for k, m in enumerate(measures):
        tiers = [t for t, v in series[m].items() if np.asarray(v).size]
        data = [np.asarray(series[m][t], dtype=float) for t in tiers]
        data = [d[np.isfinite(d)] for d in data]
        every = np.concatenate([d for d in data if d.size]) if any(d.size for d in data) else np.zeros(1)
        lo, hi = float(every.min()), float(every.max())
        pad = 0.05 * (hi - lo) if hi > lo else 0.5
        yticks = nice_ticks(lo - pad, hi + pad, 5)
        y0 = min(lo - pad, yticks[0]) if yticks else lo - pad
        y1 = max(hi + pad, yticks[-1]) if yticks else hi + pad
        ax = Axes(left + k * (panel + PANEL_GAP), top, panel, height, 0.5, len(tiers) + 0.5, y0, y1)
        c.text(ax.left + panel / 2, top - 10, m, size=11, anchor="middle")
        for j, d in enumerate(data, start=1):
            if not d.size:
                continue
            wlo, q1, med, q3, whi, out = _box(d)
            x, half = ax.px(j), 0.25 * panel / len(tiers)
            c.line(x, ax.py(wlo), x, ax.py(q1), EDGE)
            c.line(x, ax.py(q3), x, ax.py(whi), EDGE)
            c.line(x - half / 2, ax.py(wlo), x + half / 2, ax.py(wlo), EDGE)
            c.line(x - half / 2, ax.py(whi), x + half / 2, ax.py(whi), EDGE)
            c.rect(x - half, ax.py(q3), 2 * half, ax.py(q1) - ax.py(q3), BARS, EDGE, 0.8)
            c.line(x - half, ax.py(med), x + half, ax.py(med), INK, 1.4)
            for v in out[:400]:  # enough to show where outliers lie
                c.circle(x, ax.py(float(v)), 1.6, EDGE)
        ax.frame(c, None, yticks, "tier", "")
        bottom = ax.top + ax.height
        for j, t in enumerate(tiers, start=1):
            c.line(ax.px(j), bottom, ax.px(j), bottom + 4)
            c.text(ax.px(j), bottom + 15, str(t), size=10, anchor="middle")
    return svg_text_uri(c.svg())


def share_bars(shares: Mapping[str, float], title: str) -> str | None:
    """Horizontal bars of a share (0..1) per tier, each labelled with its percentage."""
    if not shares:
        return None
    tiers = list(shares)
    vals = [float(shares[t]) for t in tiers]
    left = 20.0 + 7.0 * max(len(str(t)) for t in tiers)
    row, top = 26.0, 10.0
    c = Canvas(800.0, top + row * len(tiers) + 44.0)
    ax = Axes(left, top, 800.0 - left - 20.0, row * len(tiers), 0.0, 1.15, len(tiers) - 0.5, -0.5)
    for j, (t, v) in enumerate(zip(tiers, vals)):
        y = ax.py(j)
        c.rect(ax.px(0), y - 0.4 * row, ax.px(min(max(v, 0.0), 1.15)) - ax.px(0), 0.8 * row, BARS, EDGE, 0.5)
        c.text(ax.px(min(v, 1.0) + 0.01), y + 3.5, f"{100 * v:.1f}%", size=10)
        c.text(left - 6, y + 3.5, str(t), size=10, anchor="end")
    ax.frame(c, [0.0, 0.2, 0.4, 0.6, 0.8, 1.0], None, title, "")
    return svg_text_uri(c.svg())


def limits_from_rules(
    text: str | None, tiers: Sequence[str]
) -> dict[str, dict[str, dict[str, float]]]:
    """Floor, target and ceiling per tier and count from the rules TOML text.

    Returns {tier: {count: {"min"|"target"|"max": value}}}; tiers are matched by name,
    else by position (bottom first). Text that does not parse gives no limits.
    """
    import tomllib

    out: dict[str, dict[str, dict[str, float]]] = {t: {} for t in tiers}
    if not text:
        return out
    try:
        doc = tomllib.loads(text)
    except (tomllib.TOMLDecodeError, TypeError):
        return out
    entries = doc.get("tier", [])
    if not isinstance(entries, list):
        return out
    for pos, entry in enumerate(entries):
        if not isinstance(entry, dict):
            continue
        name = str(entry.get("name", ""))
        if name not in out:
            if pos < len(tiers) and not entry.get("name"):
                name = tiers[pos]
            else:
                continue
        for key in ("min", "target", "max"):
            table = entry.get(key, {})
            if not isinstance(table, dict):
                continue
            for count, v in table.items():
                if isinstance(v, int | float):
                    out[name].setdefault(str(count), {})[key] = float(v)
    return out
