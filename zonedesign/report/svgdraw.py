"""Plain SVG drawing for the report's charts: axes, nice ticks, text, as strings.

The report's static charts are small: a few dozen bars, boxes and lines each. Writing
their SVG directly keeps the report free of a plotting library's start-up and drawing
time (about two seconds of the demo's report with one) and gives stable, small output.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from xml.sax.saxutils import escape

FONT = "font-family:DejaVu Sans,Arial,Helvetica,sans-serif"
AXIS = "#6b6b6b"


def nice_ticks(lo: float, hi: float, most: int = 6) -> list[float]:
    """Round tick values covering [lo, hi], at most about `most` of them.

    The step is 1, 2 or 5 times a power of ten (common practice for axis labels:
    Heckbert, "Nice numbers for graph labels", Graphics Gems, 1990).
    """
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return []
    if hi <= lo:
        hi = lo + 1.0
    raw = (hi - lo) / max(1, most - 1)
    power = 10.0 ** math.floor(math.log10(raw))
    steps = [m * power for m in (0.1, 0.2, 0.5, 1.0, 2.0, 5.0, 10.0)]
    k = next(j for j, st in enumerate(steps) if st >= raw)
    while True:
        step = steps[k]
        ticks = [round(j * step, 12) + 0.0 for j in range(math.ceil(lo / step - 1e-9), math.floor(hi / step + 1e-9) + 1)]
        # at least three labels where the range allows (a coarse step can leave one)
        if len(ticks) >= 3 or k == 0:
            return ticks
        k -= 1


def tick_text(v: float) -> str:
    return f"{v:g}"


@dataclass
class Canvas:
    """An SVG document built element by element, in pixels."""

    width: float
    height: float
    parts: list[str] = field(default_factory=list)

    def text(self, x: float, y: float, s: str, size: float = 11, anchor: str = "start", colour: str = "#1f2328",
             rotate: bool = False, bold: bool = False) -> None:
        turn = f' transform="rotate(-90 {x:.1f} {y:.1f})"' if rotate else ""
        weight = ";font-weight:bold" if bold else ""
        self.parts.append(
            f'<text x="{x:.1f}" y="{y:.1f}" text-anchor="{anchor}" fill="{colour}"'
            f' style="{FONT};font-size:{size}px{weight}"{turn}>{escape(s)}</text>'
        )

    def line(self, x1: float, y1: float, x2: float, y2: float, colour: str = AXIS, width: float = 1.0,
             dash: str | None = None) -> None:
        d = f' stroke-dasharray="{dash}"' if dash else ""
        self.parts.append(
            f'<line x1="{x1:.1f}" y1="{y1:.1f}" x2="{x2:.1f}" y2="{y2:.1f}" stroke="{colour}"'
            f' stroke-width="{width}"{d}/>'
        )

    def rect(self, x: float, y: float, w: float, h: float, fill: str, edge: str, width: float = 0.6) -> None:
        self.parts.append(
            f'<rect x="{x:.1f}" y="{y:.1f}" width="{max(w, 0.0):.1f}" height="{max(h, 0.0):.1f}"'
            f' fill="{fill}" stroke="{edge}" stroke-width="{width}"/>'
        )

    def circle(self, x: float, y: float, r: float, edge: str) -> None:
        self.parts.append(f'<circle cx="{x:.1f}" cy="{y:.1f}" r="{r}" fill="none" stroke="{edge}" stroke-width="0.8"/>')

    def svg(self) -> str:
        return (
            f'<svg xmlns="http://www.w3.org/2000/svg" width="{self.width:.0f}" height="{self.height:.0f}"'
            f' viewBox="0 0 {self.width:.0f} {self.height:.0f}">'
            f'<rect width="100%" height="100%" fill="#ffffff"/>{"".join(self.parts)}</svg>'
        )


@dataclass(frozen=True)
class Axes:
    """A plot area on a canvas: pixel box (left, top, width, height) and data ranges."""

    left: float
    top: float
    width: float
    height: float
    x0: float
    x1: float
    y0: float
    y1: float

    def px(self, x: float) -> float:
        span = self.x1 - self.x0 or 1.0
        return self.left + (x - self.x0) / span * self.width

    def py(self, y: float) -> float:
        span = self.y1 - self.y0 or 1.0
        return self.top + self.height - (y - self.y0) / span * self.height

    def frame(self, c: Canvas, xticks: list[float] | None, yticks: list[float] | None, xlabel: str, ylabel: str) -> None:
        """Left and bottom axis lines with ticks and labels."""
        bottom = self.top + self.height
        c.line(self.left, bottom, self.left + self.width, bottom)
        c.line(self.left, self.top, self.left, bottom)
        for v in xticks or []:
            x = self.px(v)
            c.line(x, bottom, x, bottom + 4)
            c.text(x, bottom + 15, tick_text(v), size=10, anchor="middle")
        for v in yticks or []:
            y = self.py(v)
            c.line(self.left - 4, y, self.left, y)
            c.text(self.left - 6, y + 3.5, tick_text(v), size=10, anchor="end")
        if xlabel:
            c.text(self.left + self.width / 2, bottom + 31, xlabel, anchor="middle")
        if ylabel:
            c.text(self.left - 34, self.top + self.height / 2, ylabel, anchor="middle", rotate=True)
