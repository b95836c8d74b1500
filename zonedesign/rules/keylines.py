"""Reading a rules file's text: key paths, the line of every key, and checks that name them."""

from __future__ import annotations

import difflib
import json
import math
import re
from collections.abc import Sequence

from zonedesign.errors import RulesError

CONTIGUITY = ("rook", "queen")
HOMOGENEITY = ("ssd", "pairwise")
COMPACTNESS = ("polsby", "cut")
BOUND_KEYS = ("min", "max", "target")
AREAS_KEYS = (
    "id", "counts", "attributes", "fence", "weight", "layer", "crs", "table", "prefer", "work_crs", "overlaps",
)
FENCE_KEYS = ("column", "prefix", "suffix")
PREFER = ("table", "file")
OVERLAPS = ("refuse", "cut")
GRAPH_KEYS = ("contiguity", "min_shared_length", "tolerance", "links")
TIER_KEYS = ("name", "fence", "min", "max", "target", "weights", "homogeneity", "compactness", "override")
OVERRIDE_KEYS = ("fences", "min", "max", "target", "weights")
SEARCH_KEYS = (
    "method",
    "seed",
    "constructions",
    "time_limit_fence",
    "time_limit_total",
    "effort",
    "moves_per_unit",
    "cooling",
    "moves_per_temperature",
    "tenure",
    "max_no_improve",
    "restarts",
    "exact_zones",
    "exact_time_limit",
)
REDRAW_KEYS = ("codes",)
CODE_POLICIES = ("successor", "fresh")
TOP_KEYS = ("areas", "graph", "tier", "search", "redraw", "lock")
LOCK_KEYS = ("file",)
_BARE_KEY = re.compile(r"[A-Za-z0-9_-]+")
_KEY_PART = r"""(?:[A-Za-z0-9_-]+|"(?:[^"\\]|\\.)*"|'[^']*')"""
_KEY = re.compile(rf"\s*({_KEY_PART}(?:\s*\.\s*{_KEY_PART})*)\s*=")
_TOML_POS = re.compile(r"\s*\(at line (\d+), column (\d+)\)\s*$")
_TOML_LINE = re.compile(r"\s*\(at line (\d+)\)\s*$")
_TOML_END = re.compile(r"\s*\(at end of document\)\s*$")
KeyPath = tuple[str | int, ...]  # a key path; ints are 0-based tier positions


def key_name(path: KeyPath) -> str:
    """A key path as users write it: tier positions count from 1 (`tier.1.min.persons`)."""
    return ".".join(str(p + 1) if isinstance(p, int) else p for p in path)


class _KeyLines:
    """The line of each key in a TOML text, found by scanning headers and `key =` lines."""

    def __init__(self, text: str):
        self.lines: dict[KeyPath, int] = {}
        context: KeyPath = ()
        arrays: dict[tuple[str, ...], int] = {}
        depth = 0
        in_string = ""
        for number, raw in enumerate(text.split("\n"), start=1):  # as tomllib counts lines
            if in_string:
                if in_string in raw:
                    in_string = ""
                continue
            line = _strip_comment(raw)
            if depth > 0:
                depth += _balance(line)
                continue
            stripped = line.strip()
            if stripped.startswith("[["):
                name = tuple(_split_key(stripped[2:].split("]]")[0]))
                # [[tier.override]] counts per tier: ("tier", 2, "override", 0)
                for k in range(len(name) - 1, 0, -1):
                    if name[:k] in arrays:
                        name = (*name[:k], arrays[name[:k]], *name[k:])
                        break
                arrays[name] = arrays.get(name, -1) + 1
                context = (*name, arrays[name])
                self.lines.setdefault(context, number)
                continue
            if stripped.startswith("["):
                parts = tuple(_split_key(stripped[1:].split("]")[0]))
                context = parts
                for k in range(len(parts), 0, -1):
                    if parts[:k] in arrays:
                        context = (*parts[:k], arrays[parts[:k]], *parts[k:])
                        break
                self.lines.setdefault(context, number)
                continue
            m = _KEY.match(line)
            if not m:
                continue
            path = (*context, *_split_key(m.group(1)))
            self.lines.setdefault(path, number)
            value = line[m.end() :]
            if value.lstrip().startswith("{"):
                inner = value.lstrip()[1:]
                for im in re.finditer(rf"(?:^|,)\s*({_KEY_PART}(?:\s*\.\s*{_KEY_PART})*)\s*=", inner):
                    self.lines.setdefault((*path, *_split_key(im.group(1))), number)
            for quote in ('"""', "'''"):
                if value.count(quote) % 2 == 1:
                    in_string = quote
            if not in_string:
                depth = max(0, _balance(value))

    def line(self, path: KeyPath) -> int | None:
        """The line of `path`, else of its nearest enclosing key or table."""
        for k in range(len(path), 0, -1):
            if path[:k] in self.lines:
                return self.lines[path[:k]]
        return None


def _strip_comment(line: str) -> str:
    quote = ""
    for i, ch in enumerate(line):
        if quote:
            if ch == quote and (quote == "'" or line[i - 1] != "\\"):
                quote = ""
        elif ch in "\"'":
            quote = ch
        elif ch == "#":
            return line[:i]
    return line


def _balance(text: str) -> int:
    """Open minus closed brackets and braces outside strings."""
    depth, quote = 0, ""
    for i, ch in enumerate(text):
        if quote:
            if ch == quote and (quote == "'" or text[i - 1] != "\\"):
                quote = ""
        elif ch in "\"'":
            quote = ch
        elif ch in "[{":
            depth += 1
        elif ch in "]}":
            depth -= 1
    return depth


def _split_key(text: str) -> list[str]:
    parts = re.findall(_KEY_PART, text)
    out = []
    for p in parts:
        if p.startswith('"'):
            try:
                p = json.loads(p)
            except ValueError:
                p = p[1:-1]
        elif p.startswith("'"):
            p = p[1:-1]
        out.append(p)
    return out


class _Check:
    """Collects located problems while the rules records are built."""

    def __init__(self, source: str, lines: _KeyLines | None):
        self.source = source
        self.lines = lines
        self.found: list[tuple[float, str]] = []

    def fail(self, path: KeyPath, message: str) -> None:
        line = self.lines.line(path) if self.lines is not None else None
        where = f"{self.source}:{line}" if line else self.source
        self.found.append((line or math.inf, f"{where}: {key_name(path)}: {message}"))

    @property
    def problems(self) -> list[str]:
        """In file order; problems without a line last."""
        return [text for _, text in sorted(self.found, key=lambda x: x[0])]

    def table(self, value: object, path: KeyPath, allowed: Sequence[str], what: str) -> dict:
        if not isinstance(value, dict):
            self.fail(path, f"expected a table ({what}), got {_show(value)}")
            return {}
        for key in value:
            if key not in allowed:
                near = difflib.get_close_matches(key, allowed, 1)
                hint = f"; did you mean {near[0]!r}?" if near else ""
                self.fail((*path, key), f"unknown key in {what} (allowed: {', '.join(allowed)}){hint}")
        return {k: v for k, v in value.items() if k in allowed}

    def text(self, table: dict, key: str, path: KeyPath, *, required: bool = False, choices: Sequence[str] = ()) -> str | None:
        if key not in table:
            if required:
                self.fail((*path, key), "missing")
            return None
        value = table[key]
        if not isinstance(value, str) or not value.strip():
            self.fail((*path, key), f"expected a non-empty text, got {_show(value)}")
            return None
        if choices and value not in choices:
            self.fail((*path, key), f"{value!r} is not one of {', '.join(map(repr, choices))}")
            return None
        return value

    def names(self, table: dict, key: str, path: KeyPath, *, required: bool = False) -> tuple[str, ...]:
        if key not in table:
            if required:
                self.fail((*path, key), "missing (a list of column names)")
            return ()
        value = table[key]
        if not isinstance(value, list) or not all(isinstance(v, str) and v.strip() for v in value):
            self.fail((*path, key), f"expected a list of column names, got {_show(value)}")
            return ()
        seen = set()
        for v in value:
            if v in seen:
                self.fail((*path, key), f"column {v!r} listed twice")
            seen.add(v)
        return tuple(value)

    def number(
        self,
        value: object,
        path: KeyPath,
        *,
        above: float | None = None,
        at_least: float | None = None,
        below: float | None = None,
        whole: bool = False,
    ) -> float | int | None:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            kind = "a whole number" if whole else "a number"
            self.fail(path, f"expected {kind}, got {_show(value)}")
            return None
        if whole and not isinstance(value, int):
            self.fail(path, f"expected a whole number, got {_show(value)}")
            return None
        if not math.isfinite(value):
            self.fail(path, f"expected a finite number, got {_show(value)}")
            return None
        if at_least is not None and value < at_least:
            self.fail(path, f"must be at least {_num(at_least)}, got {_num(value)}")
            return None
        if above is not None and value <= above:
            self.fail(path, f"must be above {_num(above)}, got {_num(value)}")
            return None
        if below is not None and value >= below:
            self.fail(path, f"must be below {_num(below)}, got {_num(value)}")
            return None
        return value


def _show(value: object) -> str:
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, list):
        return "a list"
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


def _raise(problems: list[str]) -> None:
    if not problems:
        return
    more = len(problems) - 1
    head = problems[0] if not more else f"{problems[0]} (and {more} more problem{'s' * (more > 1)})"
    raise RulesError("\n".join([head, *problems[1:]]), problems=problems)


def _num(x: float) -> str:
    """A number as TOML and messages write it: 40 rather than 40.0."""
    if isinstance(x, float) and x.is_integer() and abs(x) < 1e15:
        return str(int(x))
    return repr(x)
