"""The report's charts: plain SVG that parses, shows what the data hold, and marks the rules.

Box plots follow Tukey's rule, checked against matplotlib's own `cbook.boxplot_stats`
(a general-purpose reference library); tick steps are 1, 2 or 5 times a power of ten
(common practice: Heckbert, "Nice numbers for graph labels", Graphics Gems, 1990).
"""

from __future__ import annotations

import base64
import math
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from zonedesign.report import charts
from zonedesign.report.svgdraw import nice_ticks

SVG = "{http://www.w3.org/2000/svg}"


def _svg(uri: str) -> ET.Element:
    assert uri.startswith("data:image/svg+xml;base64,")
    return ET.fromstring(base64.b64decode(uri.split(",", 1)[1]).decode("utf-8"))


def _texts(root: ET.Element) -> list[str]:
    return [t.text or "" for t in root.iter(f"{SVG}text")]


@pytest.mark.parametrize("lo,hi", [(0, 65), (0.27, 0.97), (2200, 12000), (-3, 3), (0, 1), (137, 139.5)])
def test_ticks_are_round_steps_inside_the_range_and_at_least_three(lo, hi) -> None:
    ticks = nice_ticks(lo, hi, 5)
    assert len(ticks) >= 3
    assert all(lo - 1e-9 <= t <= hi + 1e-9 for t in ticks)
    step = ticks[1] - ticks[0]
    mantissa = step / 10 ** math.floor(math.log10(step))
    assert min(abs(mantissa - m) for m in (1, 2, 5, 10)) < 1e-9
    assert np.allclose(np.diff(ticks), step)


def test_a_histogram_draws_one_bar_per_filled_bin_and_names_the_rules_marks() -> None:
    rng = np.random.default_rng(3)
    households = rng.normal(140, 30, 400)
    uri = charts.count_histograms(
        {"households": households}, {"households": {"min": 50, "target": 140, "max": 280}}, "small"
    )
    root = _svg(uri)
    edges = np.linspace(50, 280, 31)  # the marks widen the range to the floor and ceiling
    filled = int((np.histogram(households, bins=edges)[0] > 0).sum())
    bars = [r for r in root.iter(f"{SVG}rect") if r.get("fill") == charts.BARS]
    assert len(bars) == filled
    words = _texts(root)
    for word in ("floor 50", "target 140", "ceiling 280", "households per zone", "tier small: zone sizes"):
        assert word in words


def test_names_from_the_rules_are_escaped_so_the_chart_still_parses() -> None:
    uri = charts.count_histograms({"a<b&c": np.array([1.0, 2.0, 3.0])}, {}, 'tier "x" <y>')
    assert 'tier tier "x" <y>: zone sizes' in _texts(_svg(uri))
    bars = charts.share_bars({"<odd & tier>": 0.5}, "share")
    assert "<odd & tier>" in _texts(_svg(bars))


def test_box_whiskers_quartiles_and_outliers_match_matplotlibs_boxplot_stats() -> None:
    from matplotlib import cbook

    rng = np.random.default_rng(8)
    values = np.concatenate([rng.normal(0.5, 0.1, 300), [0.0, 0.02, 1.4]])
    lo, q1, med, q3, hi, out = charts._box(values)
    ref = cbook.boxplot_stats(values)[0]
    assert (lo, q1, med, q3, hi) == pytest.approx((ref["whislo"], ref["q1"], ref["med"], ref["q3"], ref["whishi"]))
    assert sorted(out.tolist()) == pytest.approx(sorted(ref["fliers"].tolist()))


def test_share_bars_label_every_tier_with_its_percentage() -> None:
    root = _svg(charts.share_bars({"small": 0.8, "medium": 0.25}, "share of zones unchanged"))
    words = _texts(root)
    assert {"small", "medium", "80.0%", "25.0%", "share of zones unchanged"} <= set(words)
