"""Rules written back as TOML (a variant's rules.toml, `rules init`)."""

from __future__ import annotations

import json

from zonedesign.rules.keylines import _BARE_KEY, REDRAW_KEYS, SEARCH_KEYS, _num
from zonedesign.rules.model import Rules


def rules_to_toml(rules: Rules) -> str:
    """The rules as TOML text; parse_rules reads it back to equal records."""
    data = _rules_data(rules)
    out = ["[areas]"]
    out += [f"{k} = {_toml_value(v)}" for k, v in data["areas"].items()]
    out += ["", "[graph]"]
    out += [f"{k} = {_toml_value(v)}" for k, v in data["graph"].items()]
    for tier in data["tier"]:
        out += ["", "[[tier]]"]
        out += [f"{k} = {_toml_value(v)}" for k, v in tier.items() if k != "override"]
        for o in tier.get("override", []):
            out += ["", "[[tier.override]]"]
            out += [f"{k} = {_toml_value(v)}" for k, v in o.items() if v or k == "fences"]
    out += ["", "[search]"]
    out += [f"{k} = {_toml_value(v)}" for k, v in data["search"].items()]
    out += ["", "[redraw]"]
    out += [f"{k} = {_toml_value(v)}" for k, v in data["redraw"].items()]
    if "lock" in data:
        out += ["", "[lock]", f"file = {_toml_value(data['lock']['file'])}"]
    return "\n".join(out) + "\n"


def _rules_data(rules: Rules) -> dict:
    """The rules as the plain tables a TOML file holds, defaults written out."""
    a = rules.areas
    areas: dict[str, object] = {"id": a.id, "counts": list(a.counts), "attributes": list(a.attributes)}
    for key in ("fence", "weight", "layer", "crs", "table", "prefer", "work_crs"):
        if getattr(a, key) is not None:
            areas[key] = str(getattr(a, key))
    for key in ("prefix", "suffix"):
        if getattr(a, f"fence_{key}") is not None:
            areas["fence"] = {"column": a.fence, key: getattr(a, f"fence_{key}")}
    if a.overlaps != "refuse":
        areas["overlaps"] = a.overlaps
    g = rules.graph
    graph: dict[str, object] = {
        "contiguity": g.contiguity,
        "min_shared_length": g.min_shared_length,
        "tolerance": g.tolerance,
    }
    if g.links is not None:
        graph["links"] = str(g.links)
    tiers = [
        {
            "name": t.name,
            "min": dict(t.min),
            "max": dict(t.max),
            "target": dict(t.target),
            "weights": dict(t.weights),
            "homogeneity": t.homogeneity,
            "compactness": t.compactness,
            **({"fence": t.fence} if t.fence else {}),
            **({"override": [
                {"fences": list(o.fences), "min": dict(o.min), "max": dict(o.max), "target": dict(o.target),
                 "weights": dict(o.weights)}
                for o in t.overrides
            ]} if t.overrides else {}),
        }
        for t in rules.tiers
    ]
    # a setting left to the effort preset (None) is not written
    search = {key: getattr(rules.search, key) for key in SEARCH_KEYS if getattr(rules.search, key) is not None}
    redraw = {key: getattr(rules.redraw, key) for key in REDRAW_KEYS}
    out = {"areas": areas, "graph": graph, "tier": tiers, "search": search, "redraw": redraw}
    if rules.lock.file is not None:
        out["lock"] = {"file": str(rules.lock.file)}
    return out


def _toml_value(value: object) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return _num(value)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, str):
        return _toml_string(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        if not value:
            return "{}"
        return "{ " + ", ".join(f"{_toml_key(k)} = {_toml_value(v)}" for k, v in value.items()) + " }"
    raise TypeError(f"no TOML form for {type(value).__name__}")


def _toml_string(text: str) -> str:
    # JSON escapes are TOML escapes; TOML also wants DEL escaped
    return json.dumps(text, ensure_ascii=False).replace("\x7f", "\\u007f")


def _toml_key(key: str) -> str:
    return key if _BARE_KEY.fullmatch(key) else _toml_string(key)
