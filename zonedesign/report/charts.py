"""Small static charts for the report (matplotlib, Agg), returned as data URIs.

Charts are SVG documents wrapped in `data:` URIs and shown through <img>: they stay
sharp in print, need no fetch, and their internal ids cannot clash with the page's.
Text is kept as text (not outlines), which keeps each chart to a few tens of kilobytes.
"""

from __future__ import annotations

import base64
import io
from collections.abc import Mapping, Sequence

import numpy as np

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
    plt = _pyplot()
    fig, axes = plt.subplots(1, len(names), figsize=(max(10.5, 3.1 * len(names) + 0.4), 2.6), squeeze=False)
    for ax, name in zip(axes[0], names):
        x = np.asarray(values[name], dtype=float)
        x = x[np.isfinite(x)]
        lim = limits.get(name, {})
        marks = [
            ("floor", lim.get("min"), FLOOR, (0, (4, 2))),
            ("target", lim.get("target"), TARGET, "solid"),
            ("ceiling", lim.get("max"), CEILING, (0, (1, 1.5))),
        ]
        lo = min([x.min()] + [v for _, v, _, _ in marks if v is not None]) if x.size else 0
        hi = max([x.max()] + [v for _, v, _, _ in marks if v is not None]) if x.size else 1
        bins = np.linspace(lo, hi if hi > lo else lo + 1, 31)
        ax.hist(x, bins=bins, color=BARS, edgecolor=EDGE, linewidth=0.4)
        for label, v, colour, style in marks:
            if v is not None and np.isfinite(v):
                ax.axvline(v, color=colour, linestyle=style, linewidth=1.4, label=f"{label} {v:g}")
        ax.set_xlabel(f"{name} per zone")
        ax.set_ylabel("zones")
        if ax.get_legend_handles_labels()[0]:
            ax.legend(frameon=False, fontsize=7)
    fig.suptitle(f"tier {tier}: zone sizes", fontsize=9, color=INK)
    _margins(fig, wspace=0.45)
    return svg_uri(fig)


def shape_boxplots(series: Mapping[str, Mapping[str, np.ndarray]]) -> str | None:
    """Box plots of Polsby-Popper and homogeneity, one box per tier.

    `series[measure][tier]` holds the per-zone values.
    """
    measures = [m for m, per in series.items() if any(np.asarray(v).size for v in per.values())]
    if not measures:
        return None
    plt = _pyplot()
    fig, axes = plt.subplots(
        1, len(measures), figsize=(max(10.5, 3.4 * len(measures) + 0.4), 2.8), squeeze=False
    )
    for ax, m in zip(axes[0], measures):
        tiers = [t for t, v in series[m].items() if np.asarray(v).size]
        data = [np.asarray(series[m][t], dtype=float) for t in tiers]
        data = [d[np.isfinite(d)] for d in data]
        ax.boxplot(
            data,
            tick_labels=tiers,
            patch_artist=True,
            boxprops={"facecolor": BARS, "edgecolor": EDGE},
            medianprops={"color": INK},
            flierprops={"markersize": 2, "markeredgecolor": EDGE},
        )
        ax.set_title(m, fontsize=8, color=INK)
        ax.set_xlabel("tier")
    _margins(fig, wspace=0.3)
    return svg_uri(fig)


def share_bars(shares: Mapping[str, float], title: str) -> str | None:
    """Horizontal bars of a share (0..1) per tier, each labelled with its percentage."""
    if not shares:
        return None
    plt = _pyplot()
    tiers = list(shares)
    vals = [float(shares[t]) for t in tiers]
    fig, ax = plt.subplots(figsize=(8.0, 0.7 + 0.4 * len(tiers)))
    y = np.arange(len(tiers))
    ax.barh(y, vals, color=BARS, edgecolor=EDGE, linewidth=0.5)
    for yi, v in zip(y, vals):
        ax.text(min(v, 1.0) + 0.01, yi, f"{100 * v:.1f}%", va="center", fontsize=7, color=INK)
    ax.set_yticks(y, tiers)
    ax.set_xlim(0, 1.15)
    ax.set_xlabel(title)
    ax.invert_yaxis()
    _margins(fig, left=0.25 + 0.065 * max(len(str(t)) for t in tiers), bottom=0.4, top=0.1)
    return svg_uri(fig)


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
