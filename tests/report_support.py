"""Support for the report's tests: invented runs, and a reader for the HTML they give.

Runs are grids of square zones nested in square blocks. No engine is involved: tables,
layers and summary are laid out here the way a run lays them out (zonetables columns,
dissolved layers, summary.json keys), so the report can be tested on its own. `Page`
reads a report back with the standard library's html.parser.
"""

from __future__ import annotations

import re
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import shapely

CELL = 100.0  # metres per side of a bottom-tier zone
TIER_NAMES = ("tier1", "tier2", "tier3")
ZONE_PREFIXES = ("B", "W", "Q")  # zone codes B0.., W0.., Q0.. per tier, bottom first
HOUSEHOLDS = (90, 180)  # households per bottom-tier zone, drawn uniformly


def tier_limits(cells: int) -> dict[str, float]:
    """Floor, target and ceiling of households for zones of `cells` bottom-tier zones."""
    mean = cells * sum(HOUSEHOLDS) / 2
    return {"min": round(0.35 * mean), "target": round(mean), "max": round(2.0 * mean)}


def rules_text(parents: tuple[int, ...]) -> str:
    lines = [
        "[areas]",
        'id = "code"',
        'counts = ["households", "persons"]',
        'fence = "district"',
        "",
    ]
    for name, side in zip(TIER_NAMES, (1, *parents)):
        lim = tier_limits(side * side)
        extra = ", persons = 100" if side == 1 else ""
        lines += [
            "[[tier]]",
            f'name = "{name}"',
            f"min = {{ households = {lim['min']}{extra} }}",
            f"max = {{ households = {lim['max']} }}",
            f"target = {{ households = {lim['target']} }}",
            "",
        ]
    lines += ["[search]", 'method = "annealing"', "seed = 7", ""]
    return "\n".join(lines)


def grid_run(
    side: int,
    *,
    parents: tuple[int, ...] = (4,),
    fence_side: int,
    low_zones: int = 1,
    seed: int = 3,
    origin: tuple[float, float] = (500_000.0, 6_200_000.0),
) -> dict:
    """A run over a `side` x `side` grid of bottom-tier zones.

    Each entry of `parents` adds an upper tier whose zones are square blocks of that many
    bottom zones a side; fences are `fence_side` x `fence_side` blocks. The first
    `low_zones` bottom zones of the first fence get too few households, so they break the
    floor. Returns the keyword arguments of `write_report`: summary, tables, layers.
    """
    import geopandas as gpd

    rng = np.random.default_rng(seed)
    r, c = np.divmod(np.arange(side * side), side)
    x0 = origin[0] + c * CELL
    y0 = origin[1] + r * CELL
    per_row = side // fence_side
    fence_of = np.array(
        [f"D{k}" for k in ((r // fence_side) * per_row + c // fence_side).tolist()], dtype=object
    )
    households = rng.integers(HOUSEHOLDS[0], HOUSEHOLDS[1], side * side).astype(float)
    households[np.flatnonzero(fence_of == fence_of[0])[:low_zones]] = 25.0
    persons = np.round(households * rng.uniform(2.0, 2.8, side * side))
    crs = "EPSG:3035"
    sides = (1, *parents)
    labels = []
    for prefix, s in zip(ZONE_PREFIXES, sides):
        labels.append(
            np.array(
                [f"{prefix}{k}" for k in ((r // s) * (side // s) + c // s).tolist()], dtype=object
            )
        )
    tables: dict[str, pd.DataFrame] = {}
    layers = {}
    for t, (name, s) in enumerate(zip(TIER_NAMES, sides)):
        codes, uniq = pd.factorize(labels[t])
        first = np.zeros(len(uniq), dtype=np.int64)
        first[codes[::-1]] = np.arange(codes.shape[0])[::-1]
        # a square block of bottom zones dissolves into one box
        geoms = shapely.box(x0[first], y0[first], x0[first] + s * CELL, y0[first] + s * CELL)
        lim = tier_limits(s * s)
        lo = {"households": lim["min"], **({"persons": 100.0} if s == 1 else {})}
        df = _table(
            np.asarray(uniq, dtype=object),
            fence_of[first],
            {
                "households": np.bincount(codes, weights=households),
                "persons": np.bincount(codes, weights=persons),
            },
            geoms,
            {"households": lim["target"]},
            lo,
            {"households": lim["max"]},
            rng,
        )
        df["n_areas"] = np.bincount(codes)
        df["n_units"] = np.bincount(codes) if t == 0 else np.full(len(df), (s // sides[t - 1]) ** 2)
        if t + 1 < len(sides):
            df["parent"] = labels[t + 1][first]
        tables[name] = df
        layers[name] = gpd.GeoDataFrame(df.copy(), geometry=list(geoms), crs=crs)
    fences = sorted(set(fence_of.tolist()), key=lambda f: int(f[1:]))
    bound_breaks, violations = [], []
    for name, df in tables.items():
        for z, f, b in zip(df["zone"], df["fence"], df["breaks"]):
            if b:
                bound_breaks.append({"tier": name, "zone": z, "fence": f, "breaks": b})
                violations.append(
                    {
                        "kind": "bounds",
                        "tier": name,
                        "zone": z,
                        "areas": [z],
                        "n_areas": 1,
                        "fences": [f],
                        "figures": {},
                        "message": f"zone {z}: {b}",
                    }
                )
    violations.append(
        {
            "kind": "coverage",
            "tier": TIER_NAMES[len(sides) - 1],
            "zone": "",
            "areas": ["a-missing"],
            "n_areas": 1,
            "fences": [],
            "figures": {},
            "message": "area a-missing has no zone",
        }
    )
    summary = {
        "command": "design",
        "caution": "Thresholds must follow your own statistical-disclosure-control rules. "
        "These invented results need review by the responsible statistician.",
        "versions": {"zonedesign": "0.1.0", "python": "3.11"},
        "inputs": ["input/areas.gpkg", "input/rules.toml"],
        "areas": {
            "count": int(side * side),
            "crs": crs,
            "fences": len(fences),
            "repaired_polygons": ["B3"],
            "notes": ["1 invalid polygon repaired (B3)"],
        },
        "graph": {
            "contiguity": "rook",
            "edges": int(2 * side * (side - 1)),
            "links": 0,
            "islands": [{"fence": fences[0], "areas": ["B0"], "linked": False}],
        },
        "rules": rules_text(parents),
        "objective": {
            n: {
                "homogeneity": "ssd",
                "compactness": "polsby",
                "weights": {"size": 1.0, "homogeneity": 1.0},
            }
            for n in tables
        },
        "search": {"method": "annealing", "seed": 7},
        "fences": [
            {
                "tier": t,
                "fence": f,
                "zones": 4,
                "units": 16,
                "breaks": 0.0,
                "objective": 1.25,
                "terms": {"size": 0.5, "compactness": 0.75},
                "seconds": 0.4,
                "error": None,
            }
            for t in tables
            for f in fences
        ],
        "fence_failures": [],
        "audit": {"ok": False, "violations": violations},
        "certificate": [
            {
                "fence": f,
                "tier": "tier1",
                "status": "FEASIBLE",
                "seconds": 0.1,
                "zones": 4,
                "units": 16,
                "arcs": 40,
            }
            for f in fences
        ],
        "bound_breaks": bound_breaks,
        "proofs": [
            {
                "tier": "tier1",
                "fence": fences[0],
                "status": "INFEASIBLE",
                "kind": "arithmetic",
                "text": f"fence {fences[0]}: 25 households cannot reach the floor",
            }
        ],
        "seconds": {"read": 0.2, "graph": 0.1, "total": 3.5},
        "exit_code": 1,
    }
    return {"summary": summary, "tables": tables, "layers": layers}


def _table(zone, fence, counts, geoms, target, lo, hi, rng) -> pd.DataFrame:
    area = shapely.area(geoms)
    per = shapely.length(geoms)
    df = pd.DataFrame({"zone": np.asarray(zone, dtype=str), "fence": np.asarray(fence, dtype=str)})
    for name, v in counts.items():
        df[name] = v
    for name, t in target.items():
        df[f"{name}_vs_target"] = (df[name] - t) / t
    df["polsby_popper"] = 4 * np.pi * area / per**2
    df["within_spread"] = rng.uniform(0.1, 0.9, len(df))
    df["area_km2"] = area / 1e6
    parts = np.full(len(df), "", dtype=object)
    for name in counts:
        v = df[name].to_numpy()
        text = np.full(len(df), "", dtype=object)
        if name in lo:
            low = v < lo[name]
            text[low] = [f"{name} {x:g} < min {lo[name]:g}" for x in v[low]]
        if name in hi:
            high = v > hi[name]
            text[high] = [f"{name} {x:g} > max {hi[name]:g}" for x in v[high]]
        both = (parts != "") & (text != "")
        parts = np.where(both, parts + "; " + text, parts + text).astype(object)
    df["breaks"] = parts
    df["bound_break"] = df["breaks"] != ""
    return df


class Page(HTMLParser):
    """Ids, links, zone paths, headings, tables and fetchable attributes of a page."""

    def __init__(self, text: str) -> None:
        super().__init__(convert_charrefs=True)
        self.ids: list[str] = []
        self.stack: list[tuple[str, dict]] = []
        self.zone_paths: list[dict] = []
        self.fence_paths: list[str | None] = []
        self.headings: list[int] = []
        self.violation_links: list[str] = []
        self.violation_rows = 0
        self.tables: list[dict] = []
        self.fetchable: list[str] = []
        self.html_lang = None
        self.text_before_h2 = ""
        self.seen_h2 = False
        self.feed(text)

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "html":
            self.html_lang = a.get("lang")
        if "id" in a:
            self.ids.append(a["id"])
        for key in ("src", "href", "xlink:href", "action", "poster", "srcset"):
            if key in a and not a[key].startswith(("#", "data:")):
                self.fetchable.append(a[key])
        if re.fullmatch(r"h[1-6]", tag):
            self.headings.append(int(tag[1]))
            self.seen_h2 = self.seen_h2 or tag == "h2"
        if tag == "path" and "zone" in a.get("class", "").split():
            svg = next((x for t, x in reversed(self.stack) if t == "svg"), {})
            self.zone_paths.append({**a, "svg": svg.get("id"), "title": ""})
        if tag == "path" and a.get("class") == "fence":
            svg = next((x for t, x in reversed(self.stack) if t == "svg"), {})
            self.fence_paths.append(svg.get("id"))
        if tag == "tr" and "violation" in a.get("class", "").split():
            self.violation_rows += 1
        if tag == "a" and any(
            t == "tr" and "violation" in x.get("class", "").split() for t, x in self.stack
        ):
            self.violation_links.append(a.get("href", ""))
        if tag == "table":
            self.tables.append({"caption": False, "col_headers": 0, "scoped": 0})
        if tag == "caption" and self.tables:
            self.tables[-1]["caption"] = True
        if tag == "th" and self.tables:
            self.tables[-1]["col_headers"] += 1
            self.tables[-1]["scoped"] += a.get("scope") in ("col", "row")
        if tag not in ("meta", "link", "br", "img", "input", "rect", "circle", "line"):
            self.stack.append((tag, a))

    def handle_startendtag(self, tag, attrs):
        self.handle_starttag(tag, attrs)
        if self.stack and self.stack[-1][0] == tag:
            self.stack.pop()

    def handle_endtag(self, tag):
        while self.stack:
            t, _ = self.stack.pop()
            if t == tag:
                break

    def handle_data(self, data):
        if not self.seen_h2:
            self.text_before_h2 += data
        if (
            self.stack
            and self.stack[-1][0] == "title"
            and len(self.stack) > 1
            and self.stack[-2][0] == "path"
        ):
            if self.zone_paths:
                self.zone_paths[-1]["title"] += data


def merged_run(run: dict, tier: str, pairs: list[tuple[str, str]]) -> dict:
    """`run` redrawn: each pair of zones of `tier` merged into one new zone, every other kept.

    The new zones get codes no zone had before (`N0`, `N1`, ...), as a redraw names them.
    """
    import geopandas as gpd

    table = run["tables"][tier].set_index("zone")
    layer = run["layers"][tier].set_index("zone")
    gone = {z for pair in pairs for z in pair}
    rows, geoms = [], []
    for k, (a, b) in enumerate(pairs):
        row = table.loc[a].copy()
        for c in ("households", "persons", "n_areas", "n_units"):
            if c in table:
                row[c] = table.loc[a, c] + table.loc[b, c]
        row.name = f"N{k}"
        rows.append(row)
        geoms.append(shapely.union_all([layer.geometry[a], layer.geometry[b]]))
    kept = table.drop(index=sorted(gone))
    new_table = pd.concat([kept, pd.DataFrame(rows)]).rename_axis("zone").reset_index()
    new_geoms = list(layer.drop(index=sorted(gone)).geometry) + geoms
    tables = dict(run["tables"], **{tier: new_table})
    layers = dict(run["layers"], **{tier: gpd.GeoDataFrame(new_table.copy(), geometry=new_geoms, crs=layer.crs)})
    summary = dict(run["summary"], command="redraw")
    return {"summary": summary, "tables": tables, "layers": layers}


# NY8 census tracts (Debian r-cran-spdata, NY8_utm18.shp): POP8 persons, county = AREAKEY[:5]
NY8_RULES = """
[areas]
id = "AREAKEY"
counts = ["POP8"]
attributes = ["PCTOWNHOME", "PCTAGE65P"]
fence = "county"
weight = "POP8"

[[tier]]
name = "tier1"
min = { POP8 = 5000 }
max = { POP8 = 16000 }
target = { POP8 = 9000 }

[[tier]]
name = "tier2"
min = { POP8 = 20000 }
max = { POP8 = 150000 }
target = { POP8 = 50000 }

[search]
method = "descent"
seed = 2
time_limit_fence = 2.0
"""
NY8_TIED = "tier.2.min.POP8,tier.2.target.POP8=20000/30000,40000/50000,60000/65000"


def ny8_inputs(spdata_dir, folder):
    """NY8 tracts as a GeoPackage with a county column, and the rules above, in `folder`."""
    import geopandas as gpd

    frame = gpd.read_file(spdata_dir / "NY8_utm18.shp", engine="pyogrio")
    frame["county"] = frame["AREAKEY"].astype(str).str[:5]
    frame.to_file(folder / "ny8.gpkg", layer="tracts", driver="GPKG")
    (folder / "rules.toml").write_text(NY8_RULES)
    return folder / "ny8.gpkg", folder / "rules.toml"
