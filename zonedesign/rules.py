"""The rules file: tiers, bounds, targets, weights and search settings (TOML).

    [areas]
    id = "code"                       # id column
    counts = ["persons", "households"]
    attributes = ["owner_share", "flat_share"]
    fence = "district"                # optional; or { column = "code", prefix = 3 } (or suffix)
    weight = "persons"                # optional homogeneity weight column
    table = "counts.csv"              # optional CSV/Parquet of counts joined on id (path
                                      # relative to the rules file)
    prefer = "table"                  # which side wins for a column in both ("table"/"file")
    work_crs = "EPSG:32618"           # optional projected working CRS (metres)
    overlaps = "refuse"               # or "cut": each overlap kept by one polygon

    [graph]                           # optional
    contiguity = "rook"               # "rook" or "queen"
    min_shared_length = 0.0           # metres; rook pairs sharing less are not neighbours
    tolerance = 0.0                   # metres; > 0 switches to the tolerant (snapping) method
    links = "links.csv"               # optional CSV of id pairs, relative to the rules file

    [[tier]]                          # bottom tier first
    name = "small"
    min = { households = 50, persons = 120 }    # set from your own disclosure-control rules
    max = { households = 280, persons = 700 }
    target = { households = 140 }
    weights = { size = 1.0, homogeneity = 1.0, compactness = 1.0, stability = 20.0 }
    homogeneity = "ssd"               # or "pairwise"
    compactness = "polsby"            # or "cut"

    [search]
    method = "annealing"              # "descent", "annealing" or "tabu"
    effort = "default"                # "quick", "default" or "thorough"
    moves_per_unit = 0                # annealing moves per unit (0: from effort)
    cooling = 0.97                    # temperature factor per step (unset: from effort)
    seed = 1
    constructions = 4
    time_limit_fence = 10.0           # seconds per fence and tier
    time_limit_total = 600.0          # seconds for the whole run

    [redraw]                          # optional
    codes = "successor"               # or "fresh": how zone codes carry on in a redraw
"""

from __future__ import annotations

import difflib
import json
import math
import re
import tomllib
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from zonedesign.errors import InputError, RulesError
from zonedesign.measures import TERMS
from zonedesign.records import Bounds

if TYPE_CHECKING:
    pass

METHODS = ("descent", "annealing", "tabu")
EFFORTS = ("quick", "default", "thorough")


@dataclass(frozen=True)
class AreasRules:
    id: str
    counts: tuple[str, ...]
    attributes: tuple[str, ...] = ()
    fence: str | None = None
    weight: str | None = None
    layer: str | None = None
    crs: str | None = None  # stated CRS for files that carry none
    table: Path | None = None  # counts/attributes joined on `id`
    prefer: str | None = None  # "table" | "file": the side used for a column in both
    fence_prefix: int | None = None  # fence code = the first N characters of `fence`
    fence_suffix: int | None = None  # fence code = the last N characters of `fence`
    work_crs: str | None = None  # projected CRS areas and lengths are measured in
    # (tier, its own fence column or None) for every tier, bottom first, when any tier has
    # a fence of its own ([[tier]] fence); set from the tiers
    tier_fences: tuple[tuple[str, str | None], ...] = ()
    overlaps: str = "refuse"  # "refuse" | "cut"

    @property
    def row_ids(self) -> bool:
        """Ids are the row numbers (`id = "@row"`), for files without an id column."""
        return self.id == ROW_ID


ROW_ID = "@row"


@dataclass(frozen=True)
class GraphRules:
    contiguity: str = "rook"
    min_shared_length: float = 0.0
    tolerance: float = 0.0
    links: Path | None = None


STABILITY_DEFAULT = 20.0  # a redraw's cost of moving a unit; 0 switches stability off


@dataclass(frozen=True)
class TierOverride:
    """Bounds, target and weights that replace the tier's own in some fences only."""

    fences: tuple[str, ...]
    min: dict[str, float] = field(default_factory=dict)
    max: dict[str, float] = field(default_factory=dict)
    target: dict[str, float] = field(default_factory=dict)
    weights: dict[str, float] = field(default_factory=dict)


@dataclass(frozen=True)
class TierRules:
    name: str
    min: dict[str, float] = field(default_factory=dict)
    max: dict[str, float] = field(default_factory=dict)
    target: dict[str, float] = field(default_factory=dict)
    weights: dict[str, float] = field(
        default_factory=lambda: {
            "size": 1.0, "homogeneity": 1.0, "compactness": 1.0, "stability": STABILITY_DEFAULT
        }
    )
    homogeneity: str = "ssd"
    compactness: str = "polsby"
    overrides: tuple[TierOverride, ...] = ()  # [[tier.override]], in file order
    fence: str | None = None  # this tier's own fence column; else [areas] fence

    def bounds(self, count_names: Sequence[str]) -> Bounds:
        """min / max / target as a Bounds record aligned to `count_names` (±inf where
        unbounded, nan where no target); a bound on a count that is not there is an error."""
        count_names = tuple(count_names)
        c = len(count_names)
        lo, hi, target = np.full(c, -np.inf), np.full(c, np.inf), np.full(c, np.nan)
        for key, table, out in (("min", self.min, lo), ("max", self.max, hi), ("target", self.target, target)):
            for name, value in table.items():
                if name not in count_names:
                    raise InputError(
                        f"{key}.{name} names no count column (counts are {', '.join(count_names) or 'none'})",
                        where=f"tier {self.name!r}",
                    )
                out[count_names.index(name)] = float(value)
        return Bounds(count_names=count_names, lo=lo, hi=hi, target=target)


def tier_in_fence(tier: TierRules, fence: str) -> TierRules:
    """The tier's rules as they apply in one fence.

    The one place per-fence rules are resolved: design, redraw, audit, certificate, proofs
    and report all take a tier's bounds, target and weights in a fence from here. An
    override naming the fence replaces each bound, target and weight it gives; the rest
    are the tier's own. Overrides never share a fence (checked when the rules are read).
    """
    for o in tier.overrides:
        if str(fence) in o.fences:
            return replace(
                tier,
                min={**tier.min, **o.min},
                max={**tier.max, **o.max},
                target={**tier.target, **o.target},
                weights={**tier.weights, **o.weights},
                overrides=(),
            )
    return tier


def overridden_fences(tier: TierRules) -> set[str]:
    return {f for o in tier.overrides for f in o.fences}


def fence_groups(tier: TierRules) -> list[tuple[TierRules, Callable[[Sequence[str]], bool]]]:
    """The tier as it applies in each group of fences, with a test of whether a zone lying
    in the fences given belongs to that group.

    The tier's own rules come first and cover every zone not wholly inside one overridden
    fence (a zone across fences, itself a fault, is held to the tier's own bounds); then
    one entry per fence an override names.
    """
    claimed = overridden_fences(tier)
    groups: list[tuple[TierRules, Callable[[Sequence[str]], bool]]] = [
        (replace(tier, overrides=()), lambda fences: not (len(set(fences)) == 1 and next(iter(fences)) in claimed))
    ]
    for f in sorted(claimed):
        groups.append((tier_in_fence(tier, f), lambda fences, f=f: set(fences) == {f}))
    return groups


@dataclass(frozen=True)
class SearchRules:
    method: str = "annealing"
    seed: int = 1
    constructions: int = 4
    time_limit_fence: float = 10.0
    time_limit_total: float = 600.0
    # how hard to search: a preset of moves_per_unit and cooling (search/schedule.py)
    effort: str = "default"
    # annealing trial moves per unit of a fence (0: from effort); a fence's moves grow
    # with its units
    moves_per_unit: int = 0
    cooling: float | None = None  # temperature factor per step (None: from effort)
    # independent runs from fresh constructions, best kept; 0: as many as the fence's
    # move budget pays for, 1 to 16
    restarts: int = 0
    moves_per_temperature: int = 0  # 0: the run's moves spread over its temperatures
    # tabu
    tenure: int = 10
    max_no_improve: int = 0  # 0: a multiple of the number of units


@dataclass(frozen=True)
class RedrawRules:
    # "successor": an old code passes to the new zone holding most of its published count;
    # "fresh": every zone that changed gets a new code
    codes: str = "successor"


@dataclass(frozen=True)
class LockRules:
    """[lock]: a CSV of zones fixed by agreement (column `area`, one column per locked tier)."""

    file: Path | None = None


@dataclass(frozen=True)
class Rules:
    areas: AreasRules
    tiers: tuple[TierRules, ...]
    graph: GraphRules = GraphRules()
    search: SearchRules = SearchRules()
    redraw: RedrawRules = RedrawRules()
    lock: LockRules = field(default_factory=lambda: LockRules())
    source: Path | None = None
    text: str = ""

    def tier(self, name: str) -> TierRules:
        for t in self.tiers:
            if t.name == name:
                return t
        raise KeyError(name)


# ---------------------------------------------------------------- parsing

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


def parse_rules(text: str, source: str = "<rules>", base_dir: Path | None = None) -> Rules:
    """Parse and check a rules file's text; every problem is a RulesError naming key and line.

    `source` names the file in messages; a relative `[graph] links` is taken relative to
    `base_dir`.
    """
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        message = _syntax_message(str(exc), source, text)
        raise RulesError(message, problems=[message]) from exc
    rules = _build(data, _Check(source, _KeyLines(text)), base_dir)
    return replace(rules, source=None if source == "<rules>" else Path(source), text=text)


def load_rules(path: str | Path) -> Rules:
    """Read and check a rules file (TOML)."""
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: rules file not found")
    try:
        # utf-8-sig: editors on some systems start a file with a byte-order mark
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError as exc:
        raise RulesError(f"{path}: not UTF-8 text (byte {exc.start})") from exc
    except OSError as exc:
        raise InputError(f"{path}: cannot read the rules file ({exc.strerror})") from exc
    rules = parse_rules(text, source=str(path), base_dir=path.parent)
    return replace(rules, source=path)


def _syntax_message(message: str, source: str, text: str) -> str:
    """tomllib's "... (at line X, column Y)" as "source:X:Y: ..."."""
    end = _TOML_END.search(message)
    if end:
        lines = text.split("\n")
        return f"{source}:{len(lines)}:{len(lines[-1]) + 1}: {message[: end.start()]} (at the end of the file)"
    m = _TOML_POS.search(message)
    if m:
        return f"{source}:{m.group(1)}:{m.group(2)}: {message[: m.start()]}"
    m = _TOML_LINE.search(message)
    if m:
        return f"{source}:{m.group(1)}: {message[: m.start()]}"
    return f"{source}: {message}"


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


def _build(data: dict, check: _Check, base_dir: Path | None) -> Rules:
    """Rules records from parsed TOML data, or one RulesError listing every problem."""
    top = check.table(data, (), TOP_KEYS, "the rules file")
    if "areas" in top:
        areas = _areas(top["areas"], check, base_dir)
    else:
        check.fail(("areas",), "missing [areas] table (id and counts columns)")
        areas = AreasRules(id="", counts=())
    graph = _graph(top.get("graph", {}), check, base_dir)
    search = _search(top.get("search", {}), check)
    lock = _lock(top.get("lock"), check, base_dir)
    tiers = _tiers(top.get("tier"), check, areas)
    redraw = _redraw(top.get("redraw", {}), check)
    # the areas file is read once, with every tier's own fence column
    if any(t.fence for t in tiers):
        areas = replace(areas, tier_fences=tuple((t.name, t.fence) for t in tiers))
    _raise(check.problems)
    return Rules(areas=areas, tiers=tiers, graph=graph, search=search, redraw=redraw, lock=lock)


def _redraw(value: object, check: _Check) -> RedrawRules:
    path: KeyPath = ("redraw",)
    t = check.table(value, path, REDRAW_KEYS, "[redraw]")
    codes = check.text(t, "codes", path, choices=CODE_POLICIES)
    return RedrawRules(codes=codes or RedrawRules().codes)


def _lock(value: object, check: _Check, base_dir: Path | None) -> LockRules:
    path: KeyPath = ("lock",)
    if value is None:
        return LockRules()
    t = check.table(value, path, LOCK_KEYS, "[lock]")
    file = check.text(t, "file", path)
    if isinstance(value, dict) and "file" not in value:
        check.fail(path, 'a [lock] table needs file = "locked.csv"')
    return LockRules(file=None if file is None else _relative(file, base_dir))


def _raise(problems: list[str]) -> None:
    if not problems:
        return
    more = len(problems) - 1
    head = problems[0] if not more else f"{problems[0]} (and {more} more problem{'s' * (more > 1)})"
    raise RulesError("\n".join([head, *problems[1:]]), problems=problems)


def _areas(value: object, check: _Check, base_dir: Path | None = None) -> AreasRules:
    path: KeyPath = ("areas",)
    t = check.table(value, path, AREAS_KEYS, "[areas]")
    counts = check.names(t, "counts", path, required=True)
    if "counts" in t and isinstance(t["counts"], list) and not t["counts"]:
        check.fail((*path, "counts"), "empty; name at least one count column")
    fence, prefix, suffix = _fence(t, check, path)
    table = check.text(t, "table", path)
    prefer = check.text(t, "prefer", path, choices=PREFER)
    if prefer is not None and table is None:
        check.fail((*path, "prefer"), "only means something with table = \"...\" (a counts table)")
    work_crs = check.text(t, "work_crs", path)
    if work_crs is not None:
        problem = projected_problem(work_crs)
        if problem:
            check.fail((*path, "work_crs"), problem)
    ident = check.text(t, "id", path, required=True) or ""
    if ident == ROW_ID and table is not None:
        check.fail((*path, "table"), f'a table is joined on the id column; id = "{ROW_ID}" has none')
    return AreasRules(
        id=ident,
        counts=counts,
        attributes=check.names(t, "attributes", path),
        fence=fence,
        weight=check.text(t, "weight", path),
        layer=check.text(t, "layer", path),
        crs=check.text(t, "crs", path),
        table=None if table is None else _relative(table, base_dir),
        prefer=prefer,
        fence_prefix=prefix,
        fence_suffix=suffix,
        work_crs=work_crs,
        overlaps=check.text(t, "overlaps", path, choices=OVERLAPS) or "refuse",
    )


def _relative(text: str, base_dir: Path | None) -> Path:
    # absolute, so that the rules written into an output folder still find the table
    p = Path(text)
    return (base_dir / p if base_dir is not None and not p.is_absolute() else p).absolute()


def _fence(t: dict, check: _Check, path: KeyPath) -> tuple[str | None, int | None, int | None]:
    """`fence = "column"` or `fence = { column = "code", prefix = N }` (or suffix = N)."""
    if "fence" not in t or not isinstance(t["fence"], dict):
        return check.text(t, "fence", path), None, None
    fpath = (*path, "fence")
    f = check.table(t["fence"], fpath, FENCE_KEYS, "fence = { column, prefix or suffix }")
    column = check.text(f, "column", fpath, required=True)
    cut: dict[str, int] = {}
    for key in ("prefix", "suffix"):
        if key in f:
            n = check.number(f[key], (*fpath, key), at_least=1, whole=True)
            if n is not None:
                cut[key] = int(n)
    if "prefix" in f and "suffix" in f:
        check.fail((*fpath, "suffix"), "give prefix or suffix, not both")
    elif not ("prefix" in f or "suffix" in f):
        check.fail(fpath, 'a fence table needs prefix = N or suffix = N (else write fence = "column")')
    return column, cut.get("prefix"), cut.get("suffix")


def projected_problem(text: str) -> str | None:
    """Why `text` cannot be a working CRS (not a CRS, geographic, not in metres), or None."""
    try:
        from pyproj import CRS

        crs = CRS.from_user_input(text)
    except Exception as exc:  # noqa: BLE001 - pyproj raises its own CRSError
        return f"{text!r} is not a CRS pyproj knows ({_first(exc)})"
    if crs.is_geographic:
        return (
            f"{text!r} ({crs.name}) is geographic (degrees); areas and lengths need a projected CRS "
            "in metres, e.g. the UTM zone of the data"
        )
    axes = crs.axis_info
    if not crs.is_projected or not axes or any(abs(a.unit_conversion_factor - 1.0) > 1e-12 for a in axes):
        return f"{text!r} ({crs.name}) is not a projected CRS in metres"
    return None


def _first(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


def _graph(value: object, check: _Check, base_dir: Path | None) -> GraphRules:
    path: KeyPath = ("graph",)
    t = check.table(value, path, GRAPH_KEYS, "[graph]")
    default = GraphRules()
    out = {}
    for key in ("min_shared_length", "tolerance"):
        if key in t:
            v = check.number(t[key], (*path, key), at_least=0.0)
            if v is not None:
                out[key] = float(v)
    links = check.text(t, "links", path)
    if links is not None:
        p = Path(links)
        out["links"] = base_dir / p if base_dir is not None and not p.is_absolute() else p
    return replace(default, contiguity=check.text(t, "contiguity", path, choices=CONTIGUITY) or default.contiguity, **out)


def _search(value: object, check: _Check) -> SearchRules:
    path: KeyPath = ("search",)
    t = check.table(value, path, SEARCH_KEYS, "[search]")
    out: dict[str, object] = {}
    method = check.text(t, "method", path, choices=METHODS)
    if method is not None:
        out["method"] = method
    effort = check.text(t, "effort", path, choices=EFFORTS)
    if effort is not None:
        out["effort"] = effort
    limits: dict[str, dict] = {
        "seed": {"whole": True, "at_least": 0},
        "constructions": {"whole": True, "at_least": 1},
        "time_limit_fence": {"above": 0.0},
        "time_limit_total": {"above": 0.0},
        "cooling": {"above": 0.0, "below": 1.0},
        "moves_per_unit": {"whole": True, "at_least": 0},
        "moves_per_temperature": {"whole": True, "at_least": 0},
        "tenure": {"whole": True, "at_least": 0},
        "max_no_improve": {"whole": True, "at_least": 0},
        "restarts": {"whole": True, "at_least": 0},
    }
    for key, limit in limits.items():
        if key in t:
            v = check.number(t[key], (*path, key), **limit)
            if v is not None:
                out[key] = v if limit.get("whole") else float(v)
    return replace(SearchRules(), **out)


def _tiers(value: object, check: _Check, areas: AreasRules) -> tuple[TierRules, ...]:
    if value is None:
        check.fail(("tier",), "no [[tier]] tables; at least one tier is needed")
        return ()
    if not isinstance(value, list) or not all(isinstance(t, dict) for t in value):
        check.fail(("tier",), "write each tier as a [[tier]] table (bottom tier first)")
        return ()
    if not value:
        check.fail(("tier",), "no [[tier]] tables; at least one tier is needed")
    tiers = []
    names: dict[str, int] = {}
    for k, raw in enumerate(value):
        tier = _tier(raw, k, check, areas)
        # case-blind: GeoPackage layer names and many file systems do not tell case apart
        if tier.name.casefold() in names:
            check.fail(("tier", k, "name"), f"{tier.name!r} is already the name of tier {names[tier.name.casefold()] + 1}"
                       " (tier names must differ in more than case)")
        elif tier.name:
            names[tier.name.casefold()] = k
        tiers.append(tier)
    return tuple(tiers)


# a tier name becomes a lookup column and a GeoPackage layer: letters, digits, _ . - and
# inner spaces only; no prefix that SQLite or GeoPackage reserve for their own tables
TIER_NAME = re.compile(r"^[^\W][\w .-]{0,62}$")
RESERVED_PREFIXES = ("gpkg_", "rtree_", "sqlite_")
LOOKUP_ID = "area"  # the id column of every lookup zonedesign writes


def tier_name_problem(name: str, areas: AreasRules) -> str | None:
    """Why `name` cannot be a tier's name (a lookup column and a layer name), or None."""
    if not TIER_NAME.match(name) or name != name.strip():
        return (f"{name!r}: a tier name may hold letters, digits, '_', '.', '-' and inner spaces "
                "(at most 63 characters), as a GeoPackage layer and a CSV header need")
    if name.lower().startswith(RESERVED_PREFIXES):
        return f"{name!r}: names starting with {', '.join(RESERVED_PREFIXES)} are reserved by GeoPackage"
    if name.casefold() in {(areas.id or "").casefold(), LOOKUP_ID}:
        return f"{name!r} is also the id column of the lookup; its columns would clash"
    return None


def _tier(raw: dict, k: int, check: _Check, areas: AreasRules) -> TierRules:
    path: KeyPath = ("tier", k)
    t = check.table(raw, path, TIER_KEYS, "[[tier]]")
    name = check.text(t, "name", path, required=True) or ""
    if name.isdigit():
        check.fail((*path, "name"), f"{name!r}: a tier name cannot be a number (sweep keys count tiers as tier.1, tier.2)")
    elif name and tier_name_problem(name, areas):
        check.fail((*path, "name"), tier_name_problem(name, areas))
    lo, hi, target, weights = _bound_tables(t, path, check, areas)
    _check_bounds(lo, hi, target, path, check)
    weights = {**TierRules(name="").weights, **weights}
    overrides = _overrides(t.get("override"), path, check, areas, lo, hi, target)
    return TierRules(
        name=name,
        min=lo,
        max=hi,
        target=target,
        weights=weights,
        homogeneity=check.text(t, "homogeneity", path, choices=HOMOGENEITY) or "ssd",
        compactness=check.text(t, "compactness", path, choices=COMPACTNESS) or "polsby",
        overrides=overrides,
        fence=check.text(t, "fence", path),
    )


def _bound_tables(t: dict, path: KeyPath, check: _Check, areas: AreasRules) -> tuple[dict, dict, dict, dict]:
    """min, max, target and weights as given in a tier or an override table."""
    bounds: dict[str, dict[str, float]] = {}
    for key in BOUND_KEYS:
        table = check.table(t.get(key, {}), (*path, key), areas.counts or ("(no counts)",), f"{key} (keys are [areas].counts)")
        got = {}
        for col, v in table.items():
            num = check.number(v, (*path, key, col), above=0.0) if key == "target" else check.number(v, (*path, key, col), at_least=0.0)
            if num is not None:
                got[col] = float(num)
        bounds[key] = got
    weights = {}
    given = check.table(t.get("weights", {}), (*path, "weights"), TERMS, "weights")
    for term, v in given.items():
        num = check.number(v, (*path, "weights", term), at_least=0.0)
        if num is not None:
            weights[term] = float(num)
    return bounds["min"], bounds["max"], bounds["target"], weights


def _check_bounds(lo: dict, hi: dict, target: dict, path: KeyPath, check: _Check) -> None:
    for col in lo.keys() & hi.keys():
        if lo[col] > hi[col]:
            check.fail((*path, "min", col), f"min {_num(lo[col])} is above max {_num(hi[col])}")
    for col, v in target.items():
        a, b = lo.get(col, 0.0), hi.get(col, math.inf)
        if not a <= v <= b:
            check.fail((*path, "target", col), f"target {_num(v)} is outside [min {_num(a)}, max {_num(b)}]")


def _overrides(
    value: object, path: KeyPath, check: _Check, areas: AreasRules, lo: dict, hi: dict, target: dict
) -> tuple[TierOverride, ...]:
    """[[tier.override]] tables: each names its fences and the bounds that apply there."""
    if value is None:
        return ()
    if not isinstance(value, list) or not all(isinstance(o, dict) for o in value):
        check.fail((*path, "override"), "write each override as a [[tier.override]] table after its [[tier]]")
        return ()
    out = []
    claimed: dict[str, int] = {}
    for m, raw in enumerate(value):
        opath: KeyPath = (*path, "override", m)
        o = check.table(raw, opath, OVERRIDE_KEYS, "[[tier.override]]")
        fences = o.get("fences")
        if fences is None:
            check.fail((*opath, "fences"), "missing (a list of fence codes this override applies in)")
            fences = []
        elif not isinstance(fences, list) or not fences or not all(isinstance(f, str) and f.strip() for f in fences):
            check.fail((*opath, "fences"), f"expected a non-empty list of fence codes (text), got {_show(fences)}")
            fences = []
        for f in fences:
            if f in claimed:
                where = "this override" if claimed[f] == m else f"override {claimed[f] + 1} of this tier"
                check.fail((*opath, "fences"), f"fence {f!r} is already in {where}; overrides of a tier must not overlap")
            else:
                claimed[f] = m
        o_lo, o_hi, o_target, o_weights = _bound_tables(o, opath, check, areas)
        if not (o_lo or o_hi or o_target or o_weights):
            check.fail(opath, "changes nothing; give min, max, target or weights")
        _check_bounds({**lo, **o_lo}, {**hi, **o_hi}, {**target, **o_target}, opath, check)
        out.append(TierOverride(fences=tuple(dict.fromkeys(fences)), min=o_lo, max=o_hi, target=o_target, weights=o_weights))
    return tuple(out)


def _num(x: float) -> str:
    """A number as TOML and messages write it: 40 rather than 40.0."""
    if isinstance(x, float) and x.is_integer() and abs(x) < 1e15:
        return str(int(x))
    return repr(x)


# ---------------------------------------------------------------- checks against data


def check_rules_against(
    rules: Rules,
    columns: Sequence[str],
    where: str,
    table_columns: Sequence[str] | None = None,
) -> None:
    """Every column the rules name exists in the areas file `where` (its `columns`) or,
    with `[areas] table`, in that table (its `table_columns`)."""
    check = _Check(str(rules.source) if rules.source else "<rules>", _KeyLines(rules.text) if rules.text else None)
    a = rules.areas
    present = list(columns)
    extra = list(table_columns or [])
    wanted: list[tuple[KeyPath, str]] = [] if a.row_ids else [(("areas", "id"), a.id)]
    wanted += [(("areas", "counts"), c) for c in a.counts]
    wanted += [(("areas", "attributes"), c) for c in a.attributes]
    if a.fence is not None:
        wanted.append((("areas", "fence"), a.fence))
    if a.weight is not None:
        wanted.append((("areas", "weight"), a.weight))
    wanted += [(("tier", k, "fence"), t.fence) for k, t in enumerate(rules.tiers) if t.fence]
    table = a.table.name if a.table is not None else None
    if table is not None and a.id not in extra and not a.row_ids:
        check.fail(("areas", "table"), f"the id column {a.id!r} is not in {table}, so it cannot be joined")
    for path, col in wanted:
        if path == ("areas", "id") or (col == a.id and not a.row_ids):
            found = col in present  # the id (also as a fence) always comes from the areas file
        else:
            found = col in present or col in extra
            if table is not None and col in present and col in extra and a.prefer is None:
                check.fail(
                    ("areas", "table"),
                    f"column {col!r} is in both {where} and {table}; say which to use with "
                    'prefer = "table" or prefer = "file"',
                )
        if found:
            continue
        pool = present + extra
        lower = {c.lower(): c for c in pool}
        near = lower.get(col.lower()) or next(iter(difflib.get_close_matches(col, pool, 1)), None)
        hint = f"; did you mean {near!r}?" if near else ""
        also = f" nor in {table}" if table is not None and path != ("areas", "id") else ""
        check.fail(path, f"column {col!r} is not in {where}{also}{hint}")
    _raise(check.problems)


def check_fences_against(rules: Rules, fences: Sequence[str] | Mapping[str, Sequence[str]], where: str) -> None:
    """Every fence code an override names is a fence of its tier in the areas file `where`.

    `fences`: the fence code of every area, or per tier name (tiers with fences of their own).
    """
    check = _Check(str(rules.source) if rules.source else "<rules>", _KeyLines(rules.text) if rules.text else None)
    for k, t in enumerate(rules.tiers):
        codes = fences.get(t.name, ()) if isinstance(fences, Mapping) else fences
        known = sorted({str(f) for f in codes})
        shown = ", ".join(known[:10]) + (f" and {len(known) - 10} more" if len(known) > 10 else "")
        for m, o in enumerate(t.overrides):
            unknown = [f for f in o.fences if f not in set(known)]
            if unknown:
                near = difflib.get_close_matches(unknown[0], known, 1)
                hint = f"; did you mean {near[0]!r}?" if near else ""
                check.fail(
                    ("tier", k, "override", m, "fences"),
                    f"fence code(s) {', '.join(map(repr, unknown))} not among the fences of {where} ({shown}){hint}",
                )
    _raise(check.problems)


# ---------------------------------------------------------------- writing


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


# ---------------------------------------------------------------- overrides (sweeps)

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
