"""Sweep overrides: rule values changed by key (`tier.2.min.persons=...`)."""

from __future__ import annotations

import tomllib
from collections.abc import Sequence
from dataclasses import replace

from zonedesign.errors import RulesError
from zonedesign.measures import TERMS
from zonedesign.rules.keylines import BOUND_KEYS, GRAPH_KEYS, SEARCH_KEYS, _Check
from zonedesign.rules.model import Rules
from zonedesign.rules.parse import _build
from zonedesign.rules.write import _rules_data

OVERRIDE_FORMS = (
    "tier.<N or name>.<min|max|target>.<count column>",
    "tier.<N or name>.override.<M>.<min|max|target|weights>.<column or term>",
    "tier.<N or name>.weights.<size|homogeneity|compactness|stability>",
    "tier.<N or name>.<homogeneity|compactness>",
    f"search.<{'|'.join(SEARCH_KEYS)}>",
    f"graph.<{'|'.join(GRAPH_KEYS)}>",
)


def apply_override(rules: Rules, key: str, value: str) -> Rules:
    """The rules with one value changed, checked like a rules file.

    Keys: `tier.<N or name>.<min|max|target|weights>.<column or term>` (N counts from 1),
    `tier.<N or name>.<homogeneity|compactness>`, `search.<field>`, `graph.<field>`.
    `none` as the value of a min, max or target removes that bound. Example:

    >>> r = apply_override(rules, "tier.1.min.households", "30")
    """
    return apply_overrides(rules, [(key, value)])


def apply_overrides(rules: Rules, items: Sequence[tuple[str, str]]) -> Rules:
    """The rules with every (key, value) of `items` changed, then checked as a whole.

    One variant of a sweep changes several keys at once (a floor and its target); each
    alone may contradict the base rules, so only the combined rules are validated.
    """
    data = _rules_data(rules)
    for key, value in items:
        _set_override(rules, data, key, _override_value(value))
    where = ", ".join(f"{k}={v}" for k, v in items)
    built = _build(data, _Check(f"override {where}", None), None)
    return replace(built, source=rules.source, text=rules.text)


def override_key(rules: Rules, key: str) -> str:
    """The one spelling of a sweep key: tiers by number (`tier.small.min.x` -> `tier.1.min.x`).

    Raises RulesError naming the key when it names no tier, field, count column or term.
    """
    parts = key.split(".")
    _set_override(rules, _rules_data(rules), key, 0)
    if parts[0] == "tier":
        field = parts[2]
        if len(parts) == 4 and field in BOUND_KEYS and parts[3] not in rules.areas.counts:
            _bad_key(key, f"{parts[3]!r} is not a count column (counts: {', '.join(rules.areas.counts)})")
        if len(parts) == 4 and field == "weights" and parts[3] not in TERMS:
            _bad_key(key, f"no objective term {parts[3]!r} (terms: {', '.join(TERMS)})")
        parts[1] = str(_tier_position(rules, parts[1], key) + 1)
    return ".".join(parts)


def _set_override(rules: Rules, data: dict, key: str, parsed: object) -> None:
    parts = key.split(".")
    head = parts[0]
    if head == "tier" and len(parts) == 6 and parts[2] == "override":
        k = _tier_position(rules, parts[1], key)
        overrides = data["tier"][k].get("override", [])
        if not parts[3].isdigit() or not 1 <= int(parts[3]) <= len(overrides):
            _bad_key(key, f"tier {parts[1]} has {len(overrides)} override(s); count them from 1")
        table = overrides[int(parts[3]) - 1]
        if parts[4] not in (*BOUND_KEYS, "weights"):
            _bad_key(key, f"an override has no field {parts[4]!r}")
        if parsed is None:
            table[parts[4]].pop(parts[5], None)
        else:
            table[parts[4]][parts[5]] = parsed
    elif head == "tier" and len(parts) in (3, 4):
        k = _tier_position(rules, parts[1], key)
        tier = data["tier"][k]
        field = parts[2]
        if field in (*BOUND_KEYS, "weights") and len(parts) == 4:
            if parsed is None and field in BOUND_KEYS:
                tier[field].pop(parts[3], None)
            else:
                tier[field][parts[3]] = parsed
        elif field in ("homogeneity", "compactness") and len(parts) == 3:
            tier[field] = parsed
        else:
            _bad_key(key, f"tier field {field!r} with {len(parts)} parts")
    elif head in ("search", "graph") and len(parts) == 2:
        allowed = SEARCH_KEYS if head == "search" else GRAPH_KEYS
        if parts[1] not in allowed:
            _bad_key(key, f"no field {parts[1]!r} in [{head}]")
        data[head][parts[1]] = parsed
    else:
        _bad_key(key, "not a sweep key")


def _override_value(value: str) -> object:
    """A TOML value (30, 0.5, "tabu"); bare words are text; `none` or nothing means absent."""
    text = value.strip()
    if text.lower() in ("", "none"):
        return None
    try:
        return tomllib.loads(f"v = {text}")["v"]
    except tomllib.TOMLDecodeError:
        return text


def _tier_position(rules: Rules, selector: str, key: str) -> int:
    listed = ", ".join(f"{k + 1} {t.name!r}" for k, t in enumerate(rules.tiers))
    if selector.isdigit():
        k = int(selector) - 1
        if 0 <= k < len(rules.tiers):
            return k
        raise RulesError(f"override key {key!r}: no tier {selector} (tiers: {listed})")
    for k, t in enumerate(rules.tiers):
        if t.name == selector:
            return k
    raise RulesError(f"override key {key!r}: no tier named {selector!r} (tiers: {listed})")


def _bad_key(key: str, why: str) -> None:
    raise RulesError(f"override key {key!r}: {why}; allowed: {'; '.join(OVERRIDE_FORMS)}")
