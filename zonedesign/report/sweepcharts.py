"""Charts of a sweep: small multiples of every decision measure, and changes between variants.

Every panel shares one x axis (the variants, in order, named by their values) and states
its y axis in plain words. A flat series keeps an honest scale: a zero stays at the foot
of an axis from 0, never in the middle of an auto-scaled -0.04 to 0.04.
"""

from __future__ import annotations

import textwrap
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from zonedesign.report.charts import BARS, EDGE, INK, _margins, _pyplot


@dataclass(frozen=True)
class Measure:
    column: str  # sweep.csv column
    words: str  # the axis label and panel title, in plain words
    kind: str  # "count" (whole numbers from 0), "share" (0 to 1) or "value"
    best: str  # "max", "min" or "" (a choice, not a score)


def small_multiples(labels: Sequence[str], series: Sequence[tuple[Measure, np.ndarray]], x_words: str) -> bytes:
    """One SVG of one panel per measure, four to a row, sharing the variants axis."""
    plt = _pyplot()
    from matplotlib.ticker import MaxNLocator, PercentFormatter

    n = len(series)
    cols = min(4, max(n, 1))
    rows = (n + cols - 1) // cols
    fig, axes = plt.subplots(rows, cols, figsize=(3.35 * cols, 2.35 * rows + 0.5), squeeze=False, sharex=True)
    x = np.arange(len(labels))
    for k, (measure, values) in enumerate(series):
        ax = axes[k // cols][k % cols]
        y = np.asarray(values, dtype=float)
        ax.plot(x, y, marker="o", color=EDGE, linewidth=1.4, markersize=4)
        ax.set_title(textwrap.fill(measure.words, 44), fontsize=8.5, color=INK, loc="left")
        ax.set_ylabel(_unit(measure), fontsize=7.5)
        ax.grid(True, axis="y", alpha=0.3)
        ax.set_ylim(*y_limits(measure.kind, y))
        if measure.kind == "share":
            ax.yaxis.set_major_formatter(PercentFormatter(1.0, decimals=0))
        elif measure.kind == "count":
            ax.yaxis.set_major_locator(MaxNLocator(integer=True, nbins=5))
    for k in range(n, rows * cols):
        axes[k // cols][k % cols].set_visible(False)
    long = max(map(len, labels), default=0) > 8
    axes[0][0].set_xticks(x)
    axes[0][0].set_xticklabels(labels, rotation=30 if long else 0, ha="right" if long else "center", fontsize=7)
    for k in range(n):
        r, c = divmod(k, cols)
        if k + cols >= n:  # nothing drawn below: this panel carries the variant names
            axes[r][c].tick_params(labelbottom=True)
    fig.supxlabel(x_words, fontsize=8.5, color=INK)
    _margins(fig, left=0.55, right=0.45, bottom=0.95 if long else 0.65, top=0.35, wspace=0.35)
    fig.subplots_adjust(hspace=0.75)
    return _svg(fig)


def y_limits(kind: str, values: np.ndarray) -> tuple[float, float]:
    """A panel's y range: from 0 (or below, for negative values) to a little above the top;
    shares from 0 to 100 %; a flat series of zeros from 0 to 1."""
    if kind == "share":
        return 0.0, 1.02
    y = np.asarray(values, dtype=float)
    y = y[np.isfinite(y)]
    if not y.size:
        return 0.0, 1.0
    lo, hi = float(y.min()), float(y.max())
    return min(0.0, lo * 1.1), max(hi * 1.1 if hi > 0 else 1.0, 1.0 if kind == "count" else 0.0) or 1.0


def change_bars(pairs: Sequence[str], per_tier: dict[str, Sequence[float]]) -> bytes:
    """Areas changing zone from each variant to the next, one bar per tier."""
    plt = _pyplot()
    tiers = list(per_tier)
    fig, ax = plt.subplots(figsize=(max(5.0, 1.1 * len(pairs) * max(len(tiers), 1) + 1.5), 2.8))
    width = 0.8 / max(len(tiers), 1)
    x = np.arange(len(pairs))
    hatches = ["", "//", "..", "xx", "\\\\", "oo"]
    for k, t in enumerate(tiers):
        ax.bar(x + (k - (len(tiers) - 1) / 2) * width, per_tier[t], width, label=f"tier {t}",
               color=BARS, edgecolor=EDGE, hatch=hatches[k % len(hatches)], linewidth=0.6)
    ax.set_xticks(x)
    ax.set_xticklabels(pairs, fontsize=7)
    ax.set_ylabel("areas changing zone")
    ax.set_xlabel("from one variant to the next")
    ax.yaxis.get_major_locator().set_params(integer=True)
    ax.legend(frameon=False, fontsize=7)
    _margins(fig, left=0.7, bottom=0.6, top=0.2)
    return _svg(fig)


def _unit(measure: Measure) -> str:
    return {"count": "number", "share": "share of zones"}.get(measure.kind, "value")


def _svg(fig) -> bytes:
    import io

    plt = _pyplot()
    buf = io.BytesIO()
    fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
    plt.close(fig)
    return buf.getvalue()
