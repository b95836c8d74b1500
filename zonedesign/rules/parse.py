"""Parsing the rules file into the model, with every problem naming its key and line."""

from __future__ import annotations

import math
import re
import tomllib
from dataclasses import replace
from pathlib import Path

from zonedesign.errors import InputError, RulesError
from zonedesign.measures import TERMS
from zonedesign.rules.keylines import (
    _TOML_END,
    _TOML_LINE,
    _TOML_POS,
    AREAS_KEYS,
    BOUND_KEYS,
    CODE_POLICIES,
    COMPACTNESS,
    CONTIGUITY,
    FENCE_KEYS,
    GRAPH_KEYS,
    HOMOGENEITY,
    LOCK_KEYS,
    OVERLAPS,
    OVERRIDE_KEYS,
    PREFER,
    REDRAW_KEYS,
    SEARCH_KEYS,
    TIER_KEYS,
    TOP_KEYS,
    KeyPath,
    _Check,
    _KeyLines,
    _num,
    _raise,
    _show,
)
from zonedesign.rules.model import (
    EFFORTS,
    METHODS,
    ROW_ID,
    AreasRules,
    GraphRules,
    LockRules,
    RedrawRules,
    Rules,
    SearchRules,
    TierOverride,
    TierRules,
)


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
        # beyond a few million zones the enumeration alone outgrows memory and minutes
        "exact_zones": {"whole": True, "at_least": 0, "below": 2_000_001},
        "exact_time_limit": {"above": 0.0},
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
