"""Inputs of every command: the areas, rules and graph (`prepare`), and previous lookups."""

from __future__ import annotations

import platform
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from zonedesign import __version__
from zonedesign.cli.progress import Stages
from zonedesign.errors import InputError
from zonedesign.plain import plain
from zonedesign.records import Areas, Graph
from zonedesign.rules import Rules, load_rules

Progress = Callable[[str], None]


def say(progress: Progress | None, text: str) -> None:
    if progress is not None:
        progress(text)


@dataclass
class Prepared:
    """Inputs read, validated and turned into arrays and a graph."""

    rules: Rules
    areas: Areas
    geometry: Any  # GeoSeries in the projected CRS, row order of `areas`
    graph: Graph  # rook/queen edges plus declared links, across fences too
    notes: list[str]
    islands: list[dict]
    links: int
    inputs: list[Path]
    seconds: dict[str, float] = field(default_factory=dict)
    crs_note: str = ""  # which CRS areas and lengths are measured in, and why
    overlaps_cut: list[dict] = field(default_factory=list)  # [areas] overlaps = "cut"
    locks: Any = None  # zonedesign.locks.Locks from [lock] file, or None
    duplicates_merged: list[dict] = field(default_factory=list)


def versions() -> dict[str, str]:
    import geopandas
    import numba
    import ortools
    import shapely

    return {
        "zonedesign": __version__,
        "python": platform.python_version(),
        "numpy": np.__version__,
        "pandas": pd.__version__,
        "shapely": shapely.__version__,
        "geopandas": geopandas.__version__,
        "numba": numba.__version__,
        "ortools": ortools.__version__,
    }


def prepare(
    areas_path: str | Path,
    rules: str | Path | Rules,
    *,
    layer: str | None = None,
    crs: str | None = None,
    progress: Progress | None = None,
) -> Prepared:
    """Read the rules and the areas, build the graph, add links, find islands."""
    from zonedesign.graph.areagraph import area_graph
    from zonedesign.io.read import read_areas
    from zonedesign.io.table import rule_columns
    from zonedesign.rules import check_fences_against, check_rules_against

    seconds: dict[str, float] = {}
    inputs = [Path(areas_path)]
    if not isinstance(rules, Rules):
        inputs.append(Path(rules))
        rules = load_rules(rules)
    t0 = time.perf_counter()
    stage = Stages(progress, "preparing", 2)
    stage(f"reading {areas_path}")
    layer = layer or rules.areas.layer
    columns, table_columns = rule_columns(areas_path, rules.areas, layer=layer)
    check_rules_against(rules, columns, str(areas_path), table_columns)
    if rules.areas.table is not None:
        inputs.append(Path(rules.areas.table))
    file = read_areas(areas_path, rules.areas, layer=layer, crs=crs)
    fences = {t.name: file.areas.in_tier(t.name).fence.tolist() for t in rules.tiers}
    check_fences_against(rules, fences, str(areas_path))
    seconds["read"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    stage(f"building the {rules.graph.contiguity} graph of {file.areas.n} areas")
    notes = list(file.notes)
    built = area_graph(file.geometry, file.areas, rules.graph, notes=notes)
    graph = built.graph
    found = [plain(x) for x in built.islands]
    n_links = built.links
    if rules.graph.links is not None:
        inputs.append(Path(rules.graph.links))
    for island in found:
        # whether a declared link joins the island to the rest of its fence
        island["linked"] = bool(built.linked & set(island.get("ids", [])))
    seconds["graph"] = time.perf_counter() - t0
    locks = None
    if rules.lock.file is not None:
        from zonedesign.locks import read_locks

        inputs.append(Path(rules.lock.file))
        locks = read_locks(rules.lock.file, file.areas, graph, rules.tiers)
    stage.close()
    return Prepared(
        rules=rules,
        areas=file.areas,
        geometry=file.geometry,
        graph=graph,
        notes=notes,
        islands=found,
        links=n_links,
        inputs=inputs,
        seconds=seconds,
        crs_note=file.crs_note,
        overlaps_cut=file.overlaps_cut,
        duplicates_merged=file.duplicates_merged,
        locks=locks,
    )


def check_out(out: Path, overwrite: bool, inputs: list[Path] | None = None) -> None:
    """Refuse, before any work, an --out that could wipe the wrong place (io.output.check_target)."""
    from zonedesign.io.output import check_target

    check_target(out, overwrite=overwrite, inputs=inputs or [])


def read_previous(
    path: str | Path, prep: Prepared, *, mend: bool
) -> tuple[dict[str, np.ndarray], dict[str, list[str]]]:
    """The previous lookup aligned to the areas ("" for areas it lacks).

    Unknown ids (gone areas), missing ids (new areas) and tiers that do not nest stop the
    run unless `mend` is set; then gone areas are dropped, new areas join a neighbouring
    zone, and each lower zone goes to the upper zone most of its areas were in.
    """
    from zonedesign.io.lookup import read_lookup

    names = [t.name for t in prep.rules.tiers]
    frame = read_lookup(path, None, names)
    first = frame.columns[0] if frame.index.name is None else None
    ids = frame[first].astype(str).to_numpy() if first is not None else frame.index.astype(str).to_numpy()
    known = set(prep.areas.ids.tolist())
    pos = {a: i for i, a in enumerate(prep.areas.ids.tolist())}
    gone = [a for a in ids if a not in known]
    have = set(ids.tolist())
    new = [a for a in prep.areas.ids.tolist() if a not in have]
    prev: dict[str, np.ndarray] = {}
    for name in names:
        col = np.full(prep.areas.n, "", dtype=object)
        vals = frame[name].astype(str).to_numpy()
        for a, v in zip(ids, vals):
            i = pos.get(a)
            if i is not None:
                col[i] = v
        prev[name] = col
    not_nested = []
    for lo, hi in zip(names[:-1], names[1:]):
        pairs = pd.DataFrame({"z": prev[lo], "p": prev[hi]})
        pairs = pairs[pairs["z"] != ""].drop_duplicates()
        multi = pairs.groupby("z")["p"].nunique()
        not_nested += [f"{lo} zone {z} lies in several {hi} zones" for z in multi[multi > 1].index[:5]]
    problems = {"gone_areas": gone, "new_areas": new, "not_nested": not_nested}
    if (gone or new or not_nested) and not mend:
        parts = []
        if gone:
            parts.append(f"{len(gone)} area id(s) not in the areas file (first: {', '.join(gone[:5])})")
        if new:
            parts.append(f"{len(new)} area(s) missing from it (first: {', '.join(new[:5])})")
        if not_nested:
            parts.append(not_nested[0])
        raise InputError(f"{path}: previous lookup does not match: {'; '.join(parts)} (use --mend to mend it first)")
    if not_nested:
        prev = mend_nesting(prev, names)
    return prev, problems


def mend_nesting(labels: dict[str, np.ndarray], names: list[str]) -> dict[str, np.ndarray]:
    """Each lower zone goes wholly to the upper zone most of its areas are in ("" = none)."""
    out = {n: np.asarray(labels[n], dtype=object).copy() for n in names}
    for lo, hi in zip(names[:-1], names[1:]):
        frame = pd.DataFrame({"z": out[lo], "p": out[hi]})
        top = (
            frame[(frame["z"] != "") & (frame["p"] != "")].groupby(["z", "p"]).size().reset_index(name="c")
            .sort_values(["z", "c", "p"], ascending=[True, False, True]).drop_duplicates("z")
        )
        to_parent = dict(zip(top["z"], top["p"]))
        out[hi] = np.array([to_parent.get(z, p) if z != "" else p for z, p in zip(out[lo], out[hi])], dtype=object)
    return out


def lookup_labels(path: str | Path, prep: Prepared, names: list[str]) -> tuple[dict[str, np.ndarray], list]:
    """Zone ids per area from a lookup file, with its id problems kept for the audit."""
    from zonedesign.io.lookup import read_lookup

    frame, problems = read_lookup(path, prep.areas.ids, names, strict=False)
    labels = {}
    for n in names:
        col = frame[n].to_numpy(dtype=object) if n in frame else np.full(prep.areas.n, None, dtype=object)
        labels[n] = np.array([None if (v is None or (isinstance(v, float) and np.isnan(v))) else str(v) for v in col], dtype=object)
    return labels, list(problems)


def layer_labels(path: str | Path, prep: Prepared, names: list[str], tolerance: float) -> tuple[dict[str, np.ndarray], list]:
    """Zone ids per area derived by overlay from one polygon layer per tier."""
    import pyogrio

    from zonedesign.verify.overlay import zones_from_layers

    available = [name for name, _ in pyogrio.list_layers(path)]
    missing = [n for n in names if n not in available]
    if missing:
        raise InputError(f"{path}: no layer for tier(s) {', '.join(missing)}; layers here: {', '.join(available)}")
    layers = {}
    for n in names:
        gdf = pyogrio.read_dataframe(path, layer=n)
        if gdf.crs is not None and prep.geometry.crs is not None and gdf.crs != prep.geometry.crs:
            gdf = gdf.to_crs(prep.geometry.crs)
        if "zone" not in gdf.columns:
            raise InputError(f"{path}: layer {n!r} has no 'zone' column")
        layers[n] = gdf
    labels, flags = zones_from_layers(prep.geometry, prep.areas.ids, layers, "zone", tolerance_share=tolerance)
    return labels, list(flags)


def complete(values: np.ndarray) -> bool:
    arr = np.asarray(values, dtype=object)
    return bool(all(isinstance(v, str) and v != "" for v in arr))


def codes_of(values: np.ndarray) -> np.ndarray:
    return np.array(["" if v is None else str(v) for v in np.asarray(values, dtype=object)], dtype=object)


def id_column(lookup: str | Path | None, prep: Prepared) -> str:
    """The id column's name in the audited lookup (the rules' id column for --tiers-from)."""
    if lookup is None:
        return prep.rules.areas.id or "area"
    from zonedesign.io.lookup import read_lookup

    frame, _ = read_lookup(lookup, None, None, strict=False)
    return str(frame.index.name or prep.rules.areas.id or "area")
