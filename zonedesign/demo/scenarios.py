"""The demo region: an invented coastal region generated from a seed, and its later counts.

The region lies in open sea on the map (UTM zone 31N, EPSG:32631, about 56 N 3 E), so it
can never be mistaken for a real place; every name in it is built from invented
syllables. It holds about 5,000 base areas (Voronoi cells, dense in towns and sparse in
the countryside), an irregular coastline, a river that district boundaries follow, ten
districts (the fence) and two small islands that belong to coastal districts: the demo
links one of them to the mainland by a ferry and leaves the other to be reported.
"""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from zonedesign.demo.agreedzones import agreed_zones
from zonedesign.demo.synthetic import voronoi_cells
from zonedesign.graph.adjacency import rook_graph
from zonedesign.graph.components import components, islands

CRS = "EPSG:32631"
ORIGIN = (452_000.0, 6_176_000.0)  # south-west corner of the map frame, metres
WIDTH, HEIGHT = 64_000.0, 48_000.0
N_DISTRICTS = 10
N_TOWNS = 8
GROWTH_PUSH = 8.0

_ONSETS = ("Br", "Dr", "Fl", "Gw", "Kr", "Qu", "Sk", "Thr", "Vr", "Hesk", "Orv", "Ysk")
_NUCLEI = ("a", "e", "i", "o", "ae", "ei", "au", "y")
_CODAS = ("ll", "rr", "nd", "sk", "th", "lv", "rn", "v", "ld", "st")
_ENDINGS = ("amere", "ovale", "enholt", "askeld", "orrin", "ethwy", "umbry", "idane", "overt", "alisk")

RULES_TEXT = """\
# Rules for the demo region: three nested tiers of statistical zones inside districts.
# The bounds are invented for this invented region, in the manner of output-zone design
# (a floor on households and persons that protects confidentiality, a ceiling about five
# to six times the floor, a target in between); they are not any office's thresholds.
# Set real bounds from your own disclosure-control rules.
# Stability only counts in a redraw: it prices every area that leaves its previous zone,
# set high so that zones still within their bounds stay as they were.

[areas]
id = "code"
counts = ["households", "persons"]
attributes = ["owner_share", "flat_share"]
fence = "district"
weight = "persons"

[graph]
contiguity = "rook"
links = "links.csv"

[[tier]]
name = "small"
min = { households = 50, persons = 120 }
max = { households = 280, persons = 700 }
target = { households = 140 }
weights = { size = 1.0, homogeneity = 1.0, compactness = 1.0, stability = 20.0 }

# the two most thinly settled districts: a lower floor, so that small zones there need not
# stretch across empty country to reach it
[[tier.override]]
fences = ["D02", "D08"]
min = { households = 45, persons = 110 }
target = { households = 120 }

[[tier]]
name = "medium"
min = { households = 450, persons = 1100 }
max = { households = 2500, persons = 6000 }
target = { households = 1100 }
weights = { size = 1.0, homogeneity = 1.0, compactness = 1.0, stability = 20.0 }

[[tier]]
name = "large"
min = { households = 2200, persons = 5400 }
max = { households = 12000, persons = 30000 }
target = { households = 5000 }
weights = { size = 1.0, homogeneity = 0.5, compactness = 1.0, stability = 20.0 }

[search]
method = "annealing"
seed = 1

# two small zones fixed by agreement (locked.csv): kept as they are by design and redraw
[lock]
file = "locked.csv"
"""


def demo_rules_text() -> str:
    """The demo's rules file (also kept as scenarios/demo_rules.toml)."""
    return RULES_TEXT


# ---------------------------------------------------------------- names


def invented_names(count: int, rng: np.random.Generator) -> list[str]:
    """`count` distinct place names built from invented syllables."""
    names: list[str] = []
    while len(names) < count:
        parts = [
            _ONSETS[rng.integers(len(_ONSETS))],
            _NUCLEI[rng.integers(len(_NUCLEI))],
            _CODAS[rng.integers(len(_CODAS))],
            _ENDINGS[rng.integers(len(_ENDINGS))],
        ]
        name = "".join(parts)
        if name not in names and not any(name[:4] == other[:4] for other in names):
            names.append(name)
    return names


# ---------------------------------------------------------------- the land


class _Layout:
    """Coastline, islands, towns and river of one seed, in local metres (0..W, 0..H)."""

    def __init__(self, rng: np.random.Generator):
        self.centre = np.array([0.42 * WIDTH, 0.5 * HEIGHT])
        self.radii = np.array([0.36 * WIDTH, 0.38 * HEIGHT])
        k = np.arange(2, 25)
        amp = rng.uniform(0.3, 1.0, k.shape[0]) / k**0.8
        self.k, self.phase = k, rng.uniform(0, 2 * np.pi, k.shape[0])
        # the coast wobbles within 20% of the ellipse, so the islands stay offshore
        self.amp = amp * 0.2 / amp.sum()
        self.islands = [
            (np.array([0.915 * WIDTH, 0.30 * HEIGHT]), 1300.0),
            (np.array([0.905 * WIDTH, 0.78 * HEIGHT]), 1000.0),
        ]
        self.river_phase = rng.uniform(0, 2 * np.pi, 2)
        self.river_x0 = self.centre[0] - 0.85 * self.radii[0]
        self.towns, self.sigmas = self._place_towns(rng)

    def mainland(self, xy: np.ndarray) -> np.ndarray:
        d = (xy - self.centre) / self.radii
        rho = np.hypot(d[:, 0], d[:, 1])
        theta = np.arctan2(d[:, 1], d[:, 0])
        r = 1.0 + (self.amp * np.cos(self.k * theta[:, None] + self.phase)).sum(axis=1)
        return rho < r

    def island(self, xy: np.ndarray) -> np.ndarray:
        """Index of the island holding each point, -1 for none."""
        out = np.full(xy.shape[0], -1)
        for k, (c, r) in enumerate(self.islands):
            out[np.hypot(*(xy - c).T) < r] = k
        return out

    def river_y(self, x: np.ndarray) -> np.ndarray:
        a, b = self.river_phase
        return (
            self.centre[1]
            + 2500.0 * np.sin(2 * np.pi * x / 23_000.0 + a)
            + 900.0 * np.sin(2 * np.pi * x / 7_000.0 + b)
        )

    def side(self, xy: np.ndarray) -> np.ndarray:
        """+1 north of the river, -1 south, 0 west of its source."""
        s = np.where(xy[:, 1] > self.river_y(xy[:, 0]), 1, -1)
        return np.where(xy[:, 0] < self.river_x0, 0, s)

    def _place_towns(self, rng):
        # the largest town stands on the river; the others spread out over the land,
        # each the candidate farthest from the towns placed before it
        x = self.centre[0] + rng.uniform(-0.1, 0.15) * self.radii[0]
        towns = [np.array([x, float(self.river_y(np.array([x]))[0])])]
        cand = self.centre + rng.uniform(-0.8, 0.8, (400, 2)) * self.radii
        inland = self.mainland(self.centre + (cand - self.centre) / 0.8)
        off_river = np.abs(cand[:, 1] - self.river_y(cand[:, 0])) > 2_500
        cand = cand[inland & off_river]
        while len(towns) < N_TOWNS:
            gap = np.min([np.hypot(*(cand - t).T) for t in towns], axis=0)
            towns.append(cand[np.argmax(gap)])
        sigmas = np.concatenate([[2_000.0], rng.uniform(700.0, 1_400.0, N_TOWNS - 1)])
        return np.array(towns), sigmas

    def townness(self, xy: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(strongest town influence in 0..1, index of that town) per point."""
        d2 = ((xy[:, None, :] - self.towns[None]) ** 2).sum(axis=2)
        tau = np.exp(-d2 / (2 * self.sigmas**2))
        return tau.max(axis=1), tau.argmax(axis=1)


def _generators(layout: _Layout, n: int, rng: np.random.Generator):
    """Cell generators: countryside, towns, islands and pairs mirrored across the river."""
    probe = rng.uniform([0, 0], [WIDTH, HEIGHT], size=(20_000, 2))
    land_share = layout.mainland(probe).mean()
    n_country = int(0.45 * n / land_share)
    country = rng.uniform([0, 0], [WIDTH, HEIGHT], size=(n_country, 2))
    country = country[layout.island(country) < 0]

    n_town = int(0.5 * n)
    weight = np.concatenate([[0.3], np.full(N_TOWNS - 1, 0.7 / (N_TOWNS - 1))])
    town = []
    need = n_town
    while need > 0:
        which = rng.choice(N_TOWNS, size=2 * need, p=weight)
        p = layout.towns[which] + rng.normal(0, 1, (2 * need, 2)) * layout.sigmas[which, None]
        p = p[layout.mainland(p)][:need]
        town.append(p)
        need -= p.shape[0]
    town = np.concatenate(town)

    # islands: a village of a dozen cells on the first, a handful of farms on the second
    isle = []
    for k, count in ((0, 12), (1, 6)):
        c, r = layout.islands[k]
        ang = rng.uniform(0, 2 * np.pi, count)
        rad = r * np.sqrt(rng.uniform(0.02, 0.8, count)) * (0.6 if k == 0 else 1.0)
        isle.append(c + np.stack([np.cos(ang), np.sin(ang)], axis=1) * rad[:, None])
    isle = np.concatenate(isle)

    spacing = 400.0
    xs = np.arange(layout.river_x0, WIDTH, spacing / 4)
    ys = layout.river_y(xs)
    seg = np.hypot(np.diff(xs), np.diff(ys))
    s = np.concatenate([[0], np.cumsum(seg)])
    at = np.arange(0, s[-1], spacing)
    # a little jitter keeps four mirrored points from sitting on one circle
    at = at + rng.uniform(-0.1, 0.1, at.shape[0]) * spacing
    rx = np.interp(at, s, xs)
    ry = layout.river_y(rx)
    slope = np.gradient(ry, rx)
    normal = np.stack([-slope, np.ones_like(slope)], axis=1) / np.hypot(slope, 1)[:, None]
    half = 0.45 * spacing
    river = np.concatenate([np.stack([rx, ry], 1) + half * normal, np.stack([rx, ry], 1) - half * normal])
    river = river[layout.mainland(river)]

    others = np.concatenate([country, town])
    # clear a strip along the river so the mirrored pairs alone draw its line
    near = np.abs(others[:, 1] - layout.river_y(others[:, 0])) < 1.3 * half
    near &= others[:, 0] >= layout.river_x0
    others = others[~near]
    return np.concatenate([others, river, isle])


def demo_region(seed: int = 7, n: int = 5000) -> gpd.GeoDataFrame:
    """The invented demo region: about `n` areas with counts, attributes and districts.

    Columns: code ("A00001"...), district (fence code "D01"...), district_name, town
    (missing outside towns), persons, households, owner_share, flat_share; CRS
    EPSG:32631. The river banks and islands take a fixed ~240 areas, so below n = 2000
    the region holds noticeably more areas than asked for.
    """
    if n < 500:
        raise ValueError(f"the demo region needs n >= 500 areas, got {n}")
    rng = np.random.default_rng(seed)
    layout = _Layout(rng)
    xy = _generators(layout, n, rng)
    box = (0.0, 0.0, WIDTH, HEIGHT)
    cells = voronoi_cells(xy, box, grid=0.001)
    isle = layout.island(xy)
    land = layout.mainland(xy) | (isle >= 0)
    cells, xy, isle = cells[land], xy[land], isle[land]

    # drop land cut off by the sea (a cell on a spit whose neighbours are all sea)
    graph = rook_graph(cells)
    _, comp = components(graph)
    labs, counts = np.unique(comp, return_counts=True)
    mainland = labs[np.argmax(counts)]
    if np.isin(comp[isle >= 0], mainland).any():
        raise ValueError(f"seed {seed}, n {n}: an island touches the mainland; try another seed")
    keep_comp = {mainland} | set(np.unique(comp[isle >= 0]).tolist())
    keep = np.isin(comp, list(keep_comp))
    cells, xy, isle = cells[keep], xy[keep], isle[keep]
    graph = graph.subgraph(np.flatnonzero(keep))

    tau, town_of = layout.townness(xy)
    households, persons, owner, flat = _counts_and_shares(xy, tau, rng)

    side = layout.side(xy)
    district = _districts(graph, xy, isle, side, households.astype(np.float64), rng)

    names = invented_names(N_DISTRICTS + N_TOWNS, rng)
    district_names = names[:N_DISTRICTS]
    town_names = np.array(names[N_DISTRICTS:], dtype=object)
    town = np.where(tau > 0.2, town_names[town_of], None)

    # codes run district by district, and north to south in 1 km bands within each
    band = np.floor((HEIGHT - xy[:, 1]) / 1000.0)
    order = np.lexsort((xy[:, 0], band, district))
    codes = np.array([f"D{d + 1:02d}" for d in range(N_DISTRICTS)], dtype=object)
    geometry = shapely.transform(cells[order], lambda c: c + np.array(ORIGIN))
    return gpd.GeoDataFrame(
        {
            "code": [f"A{k + 1:05d}" for k in range(order.shape[0])],
            "district": codes[district[order]],
            "district_name": np.array(district_names, dtype=object)[district[order]],
            "town": town[order],
            "persons": persons[order],
            "households": households[order],
            "owner_share": owner[order],
            "flat_share": flat[order],
        },
        geometry=gpd.GeoSeries(geometry, crs=CRS),
        crs=CRS,
    )


def _districts(graph, xy, isle, side, weight, rng, tries: int = 6) -> np.ndarray:
    """Ten connected mainland districts that never cross the river.

    Centres come from k-means on each side of the river; districts then claim areas over
    the area graph (river crossings removed) nearest centre first, so each is connected
    and compact. Of several k-means starts the one whose households are most even across
    districts is kept. An island joins the district of the mainland area nearest to it.
    """
    main = isle < 0
    north = main & (side > 0)
    south = main & (side < 0)
    share = weight[north].sum() / (weight[north].sum() + weight[south].sum())
    k_north = min(max(int(round(N_DISTRICTS * share)), 3), N_DISTRICTS - 3)
    a, b, _ = graph.edges()
    crossing = side[a] * side[b] < 0
    a, b = a[~crossing], b[~crossing]
    best, best_spread = None, np.inf
    for _ in range(tries):
        centres, seeds = [], []
        for mask, k in ((north, k_north), (south, N_DISTRICTS - k_north)):
            pos = np.flatnonzero(mask)
            c = _weighted_kmeans(xy[pos], np.sqrt(weight[pos]), k, rng)
            d2 = ((xy[pos][:, None] - c[None]) ** 2).sum(axis=2)
            seeds.extend(pos[d2.argmin(axis=0)].tolist())
            centres.append(c)
        if len(set(seeds)) < N_DISTRICTS:
            continue
        label = _claim(graph.n, a, b, seeds, np.concatenate(centres), xy, main, weight)
        total = np.bincount(label[main], weights=weight[main], minlength=N_DISTRICTS)
        spread = total.max() / max(total.min(), 1.0)
        if spread < best_spread:
            best, best_spread = label, spread
    grown = best
    tree = shapely.STRtree(shapely.points(xy[main]))
    main_pos = np.flatnonzero(main)
    for k in np.unique(isle[isle >= 0]):
        pts = shapely.points(xy[isle == k])
        near, dist = tree.query_nearest(pts, return_distance=True, all_matches=False)
        grown[isle == k] = grown[main_pos[near[1][np.argmin(dist)]]]
    # districts numbered west to east by centre, so codes read across the map
    centre_x = np.array([xy[grown == d, 0].mean() for d in range(N_DISTRICTS)])
    rank = np.empty(N_DISTRICTS, dtype=np.int64)
    rank[np.argsort(centre_x, kind="stable")] = np.arange(N_DISTRICTS)
    return rank[grown]


def _claim(n, a, b, seeds, centres, xy, allowed, weight, push: float = GROWTH_PUSH) -> np.ndarray:
    """Multi-source growth over edges (a, b); a node goes to the first district reaching it.

    Each step the district whose nearest frontier node is cheapest takes it, the cost
    being the squared distance to the district's centre stretched by
    exp(push * households so far / mean households): heavy districts slow down and light
    ones spread, which evens households out while every district stays connected.
    """
    import heapq
    import math

    nbrs: list[list[int]] = [[] for _ in range(n)]
    for x, y in zip(a.tolist(), b.tolist(), strict=True):
        nbrs[x].append(y)
        nbrs[y].append(x)
    k = len(seeds)
    goal = float(weight[allowed].sum()) / k
    pts = xy.tolist()
    cen = np.asarray(centres).tolist()
    wt = weight.tolist()
    ok = allowed.tolist()
    label = [-1] * n
    total = [0.0] * k
    fronts: list[list[tuple[float, int]]] = [[] for _ in range(k)]

    def take(v: int, d: int) -> None:
        label[v] = d
        total[d] += wt[v]
        cx, cy = cen[d]
        for w in nbrs[v]:
            if label[w] < 0 and ok[w]:
                px, py = pts[w]
                heapq.heappush(fronts[d], ((px - cx) ** 2 + (py - cy) ** 2 + 1.0, w))

    # seeds are taken up front, so no district loses its seed to a faster neighbour
    for d, s in enumerate(seeds):
        label[s] = d
    for d, s in enumerate(seeds):
        label[s] = -1
        take(s, d)
    while True:
        best, best_cost = -1, math.inf
        for d in range(k):
            front = fronts[d]
            while front and label[front[0][1]] >= 0:
                heapq.heappop(front)
            if front:
                c = front[0][0] * math.exp(push * total[d] / goal)
                if c < best_cost:
                    best, best_cost = d, c
        if best < 0:
            break
        take(heapq.heappop(fronts[best])[1], best)
    return np.array(label)


def _weighted_kmeans(xy, weight, k, rng, rounds: int = 30) -> np.ndarray:
    """Centres of Lloyd's iterations with point weights, from k weighted random starts."""
    start = rng.choice(xy.shape[0], size=k, replace=False, p=weight / weight.sum())
    centres = xy[start].copy()
    for _ in range(rounds):
        label = ((xy[:, None] - centres[None]) ** 2).sum(axis=2).argmin(axis=1)
        for c in range(k):
            m = label == c
            if m.any():
                centres[c] = (xy[m] * weight[m, None]).sum(axis=0) / weight[m].sum()
    return centres


def _counts_and_shares(xy, tau, rng):
    n = xy.shape[0]
    mean = 8.0 + 40.0 * tau
    households = np.maximum(1, np.rint(mean * rng.gamma(6.0, 1 / 6.0, n))).astype(np.int64)
    ratio = np.clip(2.75 - 0.6 * tau + rng.normal(0, 0.08, n), 2.0, 2.8)
    persons = _persons(households, ratio)
    field = _field(xy, rng)
    flat = np.clip(0.04 + 0.75 * tau**0.8 + 0.1 * field + rng.normal(0, 0.04, n), 0.0, 0.98)
    owner = np.clip(0.85 - 0.55 * flat + 0.06 * _field(xy, rng) + rng.normal(0, 0.04, n), 0.05, 0.98)
    return households, persons, np.round(owner, 3), np.round(flat, 3)


def _persons(households: np.ndarray, ratio: np.ndarray) -> np.ndarray:
    """Persons from households at `ratio` per household, kept within 2.0-2.8 per household."""
    persons = np.rint(households * ratio)
    persons = np.clip(persons, np.ceil(2.0 * households), np.floor(2.8 * households))
    return persons.astype(np.int64)


def _field(xy, rng) -> np.ndarray:
    """A smooth field in -1..1: a few broad waves across the region."""
    f = np.zeros(xy.shape[0])
    for _ in range(4):
        k = rng.normal(0, 1, 2) * 2 * np.pi / 20_000.0
        f += np.sin(xy @ k + rng.uniform(0, 2 * np.pi))
    return f / 4.0


# ---------------------------------------------------------------- later counts


def later_counts(gdf: gpd.GeoDataFrame, seed: int = 11) -> gpd.GeoDataFrame:
    """The same areas ten years on.

    New suburbs on a few town edges grow (households x1.5-3), the old centres of the
    three largest towns decline (x0.5-0.8), and everywhere else counts drift by a few
    per cent, so that some zones of a design made on the first counts break their bounds.
    """
    rng = np.random.default_rng(seed)
    out = gdf.copy()
    xy = shapely.get_coordinates(shapely.point_on_surface(gdf.geometry.values))
    hh = gdf["households"].to_numpy(dtype=np.float64)
    factor = rng.normal(1.0, 0.04, hh.shape[0])
    town = gdf["town"].to_numpy(dtype=object)
    names = sorted({t for t in town if isinstance(t, str)})
    sizes = {t: hh[town == t].sum() for t in names}
    largest = sorted(names, key=lambda t: (-sizes[t], t))[:3]
    for t in names:
        member = town == t
        centre = (xy[member] * hh[member, None]).sum(axis=0) / hh[member].sum()
        dist = np.hypot(*(xy - centre).T)
        reach = np.quantile(dist[member], 0.9)
        if t in largest:
            old = member & (dist < 0.3 * reach)
            factor[old] = rng.uniform(0.5, 0.8, int(old.sum()))
        edge = np.flatnonzero((dist > 0.8 * reach) & (dist < 1.5 * reach))
        if edge.shape[0] and rng.random() < 0.8:
            seed_area = xy[edge[rng.integers(edge.shape[0])]]
            suburb = edge[np.hypot(*(xy[edge] - seed_area).T) < 900.0]
            factor[suburb] = rng.uniform(1.5, 3.0, suburb.shape[0])
    per_household = gdf["persons"].to_numpy(dtype=np.float64) / np.maximum(hh, 1.0)
    later_hh = np.maximum(np.rint(hh * factor), 0).astype(np.int64)
    ratio = per_household * rng.normal(1.0, 0.02, hh.shape[0])
    out["households"] = later_hh
    out["persons"] = _persons(later_hh, ratio)
    return out


# ---------------------------------------------------------------- links and files


def demo_links(gdf: gpd.GeoDataFrame | None = None, *, seed: int = 7, n: int = 5000) -> pd.DataFrame:
    """The ferries: one link from each island to the nearest area of its district.

    Neither island holds enough households for a zone of the middle tier on its own, so, as a statistician
    would, the demo links both rather than publish zones that break a floor; the summary
    still lists them as islands found before the links.
    """
    gdf = demo_region(seed, n) if gdf is None else gdf
    graph = rook_graph(gdf.geometry)
    found = islands(graph, gdf["district"].to_numpy(), gdf.geometry, gdf["code"].to_numpy())
    if not found:
        raise ValueError("the region has no island to link")
    ferries = sorted(found, key=lambda isl: (-len(isl.ids), list(isl.ids)))
    return pd.DataFrame({"from": [f.via for f in ferries], "to": [f.nearest for f in ferries]})


def write_gpkg(gdf: gpd.GeoDataFrame, path: Path, layer: str) -> None:
    """Write one GeoPackage layer whose bytes depend on the data alone."""
    from zonedesign.io.output import write_layers_gpkg

    write_layers_gpkg(path, {layer: gdf})


def write_demo_input(
    folder: str | Path, seed: int = 7, *, n: int = 5000, later: bool = False
) -> dict[str, Path]:
    """Write the demo's input: areas.gpkg (layer "areas"), rules.toml, links.csv and
    locked.csv (two agreed small zones).

    With `later`, areas.later.gpkg (layer "areas") holds the same areas ten years on, for
    a redraw. The same seed and n give byte-identical files. Returns the paths by name
    ("areas", "rules", "links", "locked" and, with `later`, "later").
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    gdf = demo_region(seed, n)
    paths = {
        "areas": folder / "areas.gpkg",
        "rules": folder / "rules.toml",
        "links": folder / "links.csv",
        "locked": folder / "locked.csv",
    }
    write_gpkg(gdf, paths["areas"], "areas")
    paths["rules"].write_text(demo_rules_text(), encoding="utf-8")
    demo_links(gdf).to_csv(paths["links"], index=False, lineterminator="\n")
    ten_years_on = later_counts(gdf, seed + 4)
    agreed_zones(gdf, [ten_years_on]).to_csv(paths["locked"], index=False, lineterminator="\n")
    if later:
        paths["later"] = folder / "areas.later.gpkg"
        write_gpkg(ten_years_on, paths["later"], "areas")
    return paths


