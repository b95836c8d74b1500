"""The words zonedesign uses, defined once for `zonedesign --help` and the README."""

from __future__ import annotations

# said in every summary, report and README: zonedesign does not choose thresholds
CAUTION = (
    "Thresholds must follow your own statistical-disclosure-control rules. These results "
    "inform official statistics and need review by the responsible statistician before "
    "publication."
)

WORDS: tuple[tuple[str, str], ...] = (
    ("area", "one base polygon of the input, with its counts and attributes"),
    ("unit", "what a tier groups: areas for tier 1, zones of the tier below for the others"),
    ("zone", "a connected group of units forming one unit of its tier"),
    ("tier", "one level of the hierarchy, bottom first; every zone lies in one zone of the tier above"),
    ("fence", "a boundary no zone crosses (a code column such as a district)"),
    ("link", "an adjacency you declare (a bridge or ferry to an island) in links.csv"),
    ("lookup", "the table of area id -> zone code for every tier (lookup.csv)"),
    ("n_areas / n_units", "in a zone table: the areas a zone holds / the units it groups"),
    ("within_spread", "the within-zone variance of the attributes: 0 when a zone's areas are alike"),
    ("<count>_vs_target", "(zone count - target) / target: 0 on target, -0.2 a fifth below"),
)


def glossary_text(indent: str = "  ") -> str:
    """The glossary as aligned plain-text lines."""
    width = max(len(w) for w, _ in WORDS)
    return "\n".join(f"{indent}{w.ljust(width)}  {m}" for w, m in WORDS)
