"""Fictional demo county: roads as OSM XML plus population, blocks, zones, stations, sites and incidents.

The county (Varrowby County) is invented. It sits in open ocean (about 40.9-41.2 N, 35.2-34.8 W) so that it can
never be mistaken for a real place; it is projected to its UTM zone (EPSG:32625). Every file is generated from one
seeded ``numpy.random.default_rng`` stream, so the same seed always gives the same bytes (the GeoPackage differs
only in its internal timestamps).

Layout, in local metres from the south-west corner (x east 0-30 km, y north 0-25 km):

- the Ambrel River runs west to east through the middle and is crossed by exactly three road bridges;
- Quenhallow (north bank) and Corrowick (south bank, grid turned by 10 degrees) are grid towns with arterials,
  signals, and a one-way pair downtown in Quenhallow;
- seven villages are joined by winding rural roads;
- the Varrowby Expressway (two one-way carriageways) runs west to east in the south with three diamond
  interchanges; every other road crossing it does so on an overpass.

Run ``python -m coverkit.demo --out data/demo`` to write the shipped files.
"""

from __future__ import annotations

import argparse
import bz2
import itertools
import json
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from pathlib import Path
from xml.sax.saxutils import quoteattr

import numpy as np
import shapely
from pyproj import Transformer
from shapely.geometry import mapping
from shapely.geometry.polygon import orient

from coverkit.atomic import atomic_path, write_bytes_atomic, write_text_atomic
from coverkit.progress import Steps, set_quiet

COUNTY_NAME = "Varrowby County"
DEFAULT_SEED = 2026
UTM_EPSG = 32625
WIDTH_M = 30_000.0
HEIGHT_M = 25_000.0
CELL_M = 100.0
NODATA = -9999.0
YEAR = 2026
TOTAL_RESIDENTS = 75_000.0

OSM_NAME = "varrowby.osm.bz2"
FILE_NAMES = {
    "roads": OSM_NAME,
    "boundary": "boundary.geojson",
    "population": "population.tif",
    "blocks": "blocks.gpkg",
    "districts": "districts.geojson",
    "stations": "stations.csv",
    "units": "units.csv",
    "candidates": "candidates.csv",
    "incidents": "incidents.csv",
    "observed_times": "observed_times.csv",
    "flood_zone": "flood_zone.geojson",
    "readme": "README.md",
}

# South-west corner of the county (lon, lat); snapped to the 100 m grid of its UTM zone so raster cells align.
_ORIGIN_LONLAT = (-35.18, 40.89)

# Hidden "true" driving speeds (km/h) used only to make observed_times.csv; the calibration work later should
# recover roughly these. Invented planning values (common practice ranges, no source).
TRUE_SPEED_KPH = {
    "motorway": 108.0,
    "motorway_link": 52.0,
    "primary": 66.0,
    "secondary": 57.0,
    "tertiary": 48.0,
    "unclassified": 43.0,
    "residential": 28.0,
    "service": 16.0,
}
TRUE_SIGNAL_DELAY_S = 6.0
TRUE_PEAK_SLOWDOWN = 0.85  # speed factor at 07-09 h and 16-18 h
OBSERVED_NOISE_SIGMA = 0.15  # sigma of the lognormal noise on observed travel times

# Relative incident rate by hour of day (local time). EMS demand is lowest before dawn and peaks in the
# afternoon (common practice, no source); the values are invented.
HOURLY_WEIGHT = np.array(
    [2.0, 1.7, 1.5, 1.3, 1.2, 1.3, 1.8, 2.8, 3.6, 4.1, 4.4, 4.6,
     4.8, 4.9, 5.0, 5.1, 5.0, 4.8, 4.5, 4.1, 3.7, 3.2, 2.8, 2.4]
)  # fmt: skip

DRIVABLE = frozenset(TRUE_SPEED_KPH)
_ARTERIAL = frozenset({"primary", "secondary", "tertiary"})

_GROUND, _MOTORWAY, _LINK, _BRIDGE = "ground", "motorway", "link", "bridge"


@dataclass
class _Way:
    """One OSM way in local metres; ``level`` decides which other ways it may meet at grade."""

    coords: np.ndarray
    tags: dict[str, str]
    level: str = _GROUND
    river_crossing: bool = False
    meta: dict[str, object] = field(default_factory=dict)


# --------------------------------------------------------------------------------------------- geometry helpers


def _cumlen(coords: np.ndarray) -> np.ndarray:
    seg = np.hypot(*np.diff(coords, axis=0).T)
    return np.concatenate([[0.0], np.cumsum(seg)])


def _densify(points: Sequence[Sequence[float]], step_m: float) -> np.ndarray:
    pts = np.asarray(points, dtype=float)
    out = [pts[:1]]
    for p0, p1 in itertools.pairwise(pts):
        n = max(1, math.ceil(math.hypot(*(p1 - p0)) / step_m))
        t = np.arange(1, n + 1)[:, None] / n
        out.append(p0 + t * (p1 - p0))
    return np.vstack(out)


def _chaikin(points: np.ndarray, rounds: int = 2) -> np.ndarray:
    """Corner cutting (G. Chaikin, 1974, "An algorithm for high-speed curve generation"); ends are kept."""
    pts = np.asarray(points, dtype=float)
    for _ in range(rounds):
        if len(pts) < 3:
            return pts
        q = 0.75 * pts[:-1] + 0.25 * pts[1:]
        r = 0.25 * pts[:-1] + 0.75 * pts[1:]
        mid = np.empty((2 * (len(pts) - 1), 2))
        mid[0::2], mid[1::2] = q, r
        pts = np.vstack([pts[:1], mid[1:-1], pts[-1:]])
    return pts


def _winding(points, rng: np.random.Generator, amp_m: float = 110.0, step_m: float = 20.0) -> np.ndarray:
    """A rural road through ``points``: smoothed, then displaced sideways by a few sines; the ends stay put."""
    base = _densify(_chaikin(np.asarray(points, dtype=float)), step_m)
    s = _cumlen(base)
    total = s[-1]
    tangent = np.gradient(base, axis=0)
    k = np.ones(15) / 15.0
    tangent = np.column_stack([np.convolve(np.pad(t, 7, mode="edge"), k, "valid") for t in tangent.T])
    tangent /= np.hypot(*tangent.T)[:, None]
    normal = np.column_stack([-tangent[:, 1], tangent[:, 0]])
    disp = np.zeros_like(s)
    for j in range(3):
        wavelength = rng.uniform(700.0, 2600.0)
        disp += amp_m * rng.uniform(0.3, 1.0) / (j + 1) * np.sin(2 * np.pi * s / wavelength + rng.uniform(0, 6.3))
    envelope = np.clip(np.minimum(s, total - s) / 300.0, 0.0, 1.0)
    return base + normal * (disp * envelope)[:, None]


def _join(*parts: np.ndarray) -> np.ndarray:
    out = [parts[0]]
    for p in parts[1:]:
        out.append(p[1:] if np.allclose(p[0], out[-1][-1]) else p)
    return np.vstack(out)


def _vertex_near(coords: np.ndarray, xy: Sequence[float]) -> tuple[float, float]:
    """The vertex of ``coords`` nearest to ``xy`` (an exact vertex, so a junction there shares the node)."""
    i = int(np.argmin(np.hypot(*(coords - np.asarray(xy)).T)))
    return float(coords[i, 0]), float(coords[i, 1])


def _cut(coords: np.ndarray, s_cuts: Sequence[float]) -> list[np.ndarray]:
    """Split a polyline at the along-distances ``s_cuts`` (metres); neighbouring pieces share the cut point."""
    s = _cumlen(coords)
    pieces, start_pt, start_i = [], coords[0], 0
    for c in sorted(s_cuts):
        i = int(np.searchsorted(s, c))
        pt = np.array([np.interp(c, s, coords[:, 0]), np.interp(c, s, coords[:, 1])])
        pieces.append(np.vstack([start_pt, coords[start_i:i], pt]))
        start_pt, start_i = pt, i
    pieces.append(np.vstack([start_pt, coords[start_i:]]))
    return [_dedupe(p) for p in pieces]


def _dedupe(coords: np.ndarray) -> np.ndarray:
    keep = np.ones(len(coords), dtype=bool)
    keep[1:] = np.any(np.abs(np.diff(coords, axis=0)) > 1e-6, axis=1)
    return coords[keep]


def _quantize(coords: np.ndarray) -> np.ndarray:
    """Round to whole centimetres so that points computed once and copied into two ways stay identical."""
    return np.round(np.asarray(coords, dtype=float) * 100.0) / 100.0


# ------------------------------------------------------------------------------------------------ the layout


class _River:
    """The Ambrel River centre line y(x), in local metres."""

    def y(self, x):
        x = np.asarray(x, dtype=float)
        return 12500.0 + 900.0 * np.sin(2 * np.pi * x / 9000.0 + 0.4) + 400.0 * np.sin(2 * np.pi * x / 3700.0 + 1.3)

    def slope(self, x):
        x = np.asarray(x, dtype=float)
        return 900.0 * 2 * np.pi / 9000.0 * np.cos(2 * np.pi * x / 9000.0 + 0.4) + 400.0 * 2 * np.pi / 3700.0 * np.cos(
            2 * np.pi * x / 3700.0 + 1.3
        )

    def coords(self) -> np.ndarray:
        x = np.arange(-3000.0, 33000.0 + 1, 40.0)
        return np.column_stack([x, self.y(x)])

    def gentle_x(self, x_wanted: float) -> float:
        """Where near ``x_wanted`` the river runs most nearly west-east (a bridge crosses it square there)."""
        x = np.arange(x_wanted - 700.0, x_wanted + 701.0, 10.0)
        return float(x[np.argmin(np.abs(self.slope(x)))])


def _motorway_y(x):
    return 5200.0 + 600.0 * np.sin(2 * np.pi * np.asarray(x, dtype=float) / 26000.0 + 0.3)


def _normal_offset(coords: np.ndarray, offset_m: float) -> np.ndarray:
    """Offset a polyline to its left by ``offset_m`` (negative: right)."""
    t = np.gradient(coords, axis=0)
    t /= np.hypot(*t.T)[:, None]
    return coords + offset_m * np.column_stack([-t[:, 1], t[:, 0]])


@dataclass
class _Town:
    name: str
    center: tuple[float, float]
    half_w_m: float
    half_h_m: float
    angle_deg: float
    spacing_m: float = 150.0

    def to_world(self, pts) -> np.ndarray:
        pts = np.atleast_2d(np.asarray(pts, dtype=float))
        a = math.radians(self.angle_deg)
        rot = np.array([[math.cos(a), -math.sin(a)], [math.sin(a), math.cos(a)]])
        return pts @ rot.T + np.asarray(self.center)

    def to_local(self, pts) -> np.ndarray:
        pts = np.atleast_2d(np.asarray(pts, dtype=float)) - np.asarray(self.center)
        a = math.radians(self.angle_deg)
        rot = np.array([[math.cos(a), -math.sin(a)], [math.sin(a), math.cos(a)]])
        return pts @ rot

    def polygon(self) -> shapely.Polygon:
        w, h = self.half_w_m, self.half_h_m
        return shapely.Polygon(self.to_world([(-w, -h), (w, -h), (w, h), (-w, h)]))


_ROW_NAMES = [
    "Alder", "Birch", "Cedar", "Damson", "Elm", "Fir", "Gorse", "Hazel", "Ivy", "Juniper", "Larch", "Maple",
    "Oak", "Pine", "Rowan", "Sloe", "Thorn", "Willow", "Yew", "Aspen", "Bramble",
]  # fmt: skip
_COL_NAMES = [
    "Abbot", "Baker", "Carter", "Draper", "Fuller", "Glover", "Hooper", "Joiner", "Mason", "Potter", "Sawyer",
    "Tanner", "Thatcher", "Turner", "Weaver", "Webster", "Wright", "Cooper", "Chandler", "Fletcher", "Miller",
    "Shepherd", "Carver", "Tyler", "Warden",
]  # fmt: skip


def _town_grid(
    town: _Town,
    rng: np.random.Generator,
    arterial_rows: dict[int, tuple[str, str, str]],
    arterial_cols: dict[int, tuple[str, str, str]],
    residential_speeds: Sequence[str | None],
    oneway_pair: tuple[int, int, int, int, str, str] | None = None,
) -> list[_Way]:
    """Grid streets of a town: arterials span the full grid, residential streets are clipped to an ellipse.

    ``arterial_rows``/``arterial_cols`` map an index to (highway, name, maxspeed). ``oneway_pair`` is
    (row_east, row_west, col_from, col_to, name_east, name_west): the two rows run one way in opposite
    directions between the two columns.
    """
    sp = town.spacing_m
    w, h = town.half_w_m, town.half_h_m
    xs = np.arange(-w, w + 1e-6, sp)
    ys = np.arange(-h, h + 1e-6, sp)
    ways: list[_Way] = []

    def add(local_pts, tags):
        coords = _densify(local_pts, 60.0)
        ways.append(_Way(town.to_world(coords), {k: v for k, v in tags.items() if v is not None}))

    def clip(extent, other_half, pos, other_pos_grid):
        # Half-length of a street at ``pos`` inside an ellipse 1.1 times the grid, snapped to grid lines.
        frac = 1.0 - (pos / (other_half * 1.15)) ** 2
        if frac <= 0:
            return None
        half = min(extent, extent * 1.12 * math.sqrt(frac))
        lo = other_pos_grid[np.searchsorted(other_pos_grid, -half - 1e-6)]
        hi = other_pos_grid[np.searchsorted(other_pos_grid, half + 1e-6) - 1]
        return (lo, hi) if hi - lo >= sp else None

    for i, y in enumerate(ys):
        name = f"{_ROW_NAMES[i % len(_ROW_NAMES)]} Street"
        if i in arterial_rows:
            hw, nm, ms = arterial_rows[i]
            add([(xs[0], y), (xs[-1], y)], {"highway": hw, "name": nm, "maxspeed": ms})
            continue
        span = clip(w, h, y, xs)
        if span is None:
            continue
        ms = residential_speeds[int(rng.integers(len(residential_speeds)))]
        if oneway_pair and i in oneway_pair[:2]:
            row_e, _row_w, c0, c1, name_e, name_w = oneway_pair
            x0, x1 = xs[c0], xs[c1]
            name = name_e if i == row_e else name_w
            if span[0] < x0:
                add([(span[0], y), (x0, y)], {"highway": "residential", "name": name, "maxspeed": ms})
            seg = [(x0, y), (x1, y)] if i == row_e else [(x1, y), (x0, y)]
            add(seg, {"highway": "tertiary", "name": name, "maxspeed": "40", "oneway": "yes"})
            if span[1] > x1:
                add([(x1, y), (span[1], y)], {"highway": "residential", "name": name, "maxspeed": ms})
            continue
        add([(span[0], y), (span[1], y)], {"highway": "residential", "name": name, "maxspeed": ms})
    for j, x in enumerate(xs):
        name = f"{_COL_NAMES[j % len(_COL_NAMES)]} Avenue"
        if j in arterial_cols:
            hw, nm, ms = arterial_cols[j]
            add([(x, ys[0]), (x, ys[-1])], {"highway": hw, "name": nm, "maxspeed": ms})
            continue
        span = clip(h, w, x, ys)
        if span is None:
            continue
        ms = residential_speeds[int(rng.integers(len(residential_speeds)))]
        add([(x, span[0]), (x, span[1])], {"highway": "residential", "name": name, "maxspeed": ms})
    for way in ways:
        way.meta["town"] = town.name
    return ways


@dataclass
class _Village:
    name: str
    center: tuple[float, float]
    residents: float


def _village_streets(v: _Village, rng: np.random.Generator) -> list[_Way]:
    """A cross of two lanes through the centre plus two short side lanes."""
    a = rng.uniform(0, np.pi)
    d1 = np.array([math.cos(a), math.sin(a)])
    d2 = np.array([-d1[1], d1[0]])
    c = np.asarray(v.center)
    l1, l2 = rng.uniform(320, 420), rng.uniform(220, 320)
    ms = [None, "50", "50", "40"]
    specs = [
        ([c - l1 * d1, c, c + l1 * d1], "Main Street"),
        ([c - l2 * d2, c, c + l2 * d2], "Church Lane"),
        ([c + 140 * d2 - 200 * d1, c + 140 * d2 + 200 * d1], "Back Lane"),
        ([c - 140 * d2 - 160 * d1, c - 140 * d2 + 160 * d1], "Well Row"),
    ]
    ways = []
    for pts, nm in specs:
        tags = {"highway": "residential", "name": f"{v.name} {nm}"}
        speed = ms[int(rng.integers(len(ms)))]
        if speed:
            tags["maxspeed"] = speed
        ways.append(_Way(_densify(pts, 40.0), tags, meta={"village": v.name}))
    return ways


@dataclass
class _Layout:
    ways: list[_Way]
    river: np.ndarray
    towns: list[_Town]
    villages: list[_Village]
    bridges_x: dict[str, float]


def _rural(coords, highway: str, name: str, maxspeed: str | None, **extra) -> _Way:
    tags = {"highway": highway, "name": name}
    if maxspeed:
        tags["maxspeed"] = maxspeed
    tags.update(extra)
    return _Way(np.asarray(coords, dtype=float), tags)


def _build_layout(rng: np.random.Generator) -> _Layout:
    """Every way of the county, in a fixed order (the OSM ids and the random stream depend on it)."""
    river = _River()
    quen = _Town("Quenhallow", (9000.0, 17450.0), 1500.0, 1200.0, 0.0)
    corr = _Town("Corrowick", (21500.0, 8500.0), 1800.0, 1500.0, 10.0)
    villages = [
        _Village("Fennick Green", (3500.0, 21500.0), 1700.0),
        _Village("Widdon Ash", (18500.0, 22000.0), 2100.0),
        _Village("Tarn Oxle", (26000.0, 18000.0), 1400.0),
        _Village("Stalbury Cross", (5500.0, 8500.0), 1500.0),
        _Village("Harl End", (3000.0, 2500.0), 800.0),
        _Village("Mirefold", (13000.0, 2500.0), 1100.0),
        _Village("Ostry Mill", (27000.0, 2500.0), 900.0),
    ]
    vc = {v.name: v.center for v in villages}
    ways = _town_ways(quen, corr, rng)
    # Interchanges: crossing roads run straight north-south through them (Stalbury, Mirefold, Corrowick).
    interchanges = [6000.0, 14300.0, _town_end(corr, "south")[0]]
    # River crossings, where the river runs nearly west-east.
    bx = {
        "Ferry Bridge": river.gentle_x(5000.0),
        "Ambrel Bridge": river.gentle_x(14600.0),
        "Oxle Bridge": river.gentle_x(25200.0),
    }
    trunk_ways, lines = _trunk_roads(rng, river, quen, corr, vc, bx, interchanges)
    ways += trunk_ways
    ways += _north_roads(rng, quen, vc, lines)
    ways += _south_roads(rng, corr, vc, lines)
    for v in villages:
        ways += _village_streets(v, rng)
    ways += _expressway_ways(ways, river, interchanges)
    ways += _minor_ways(rng, quen, corr, river, lines)
    # One small road piece that touches nothing else (the network builder should report and drop it).
    ang = np.linspace(0.0, 2 * np.pi, 40)
    loop = np.column_stack([28500.0 + 300.0 * np.cos(ang), 23700.0 + 220.0 * np.sin(ang)])
    loop[-1] = loop[0]
    ways.append(_Way(loop, {"highway": "residential", "name": "Gorse Loop", "maxspeed": "30"}))
    return _Layout(ways, river.coords(), [quen, corr], villages, bx)


def _town_ways(quen: _Town, corr: _Town, rng: np.random.Generator) -> list[_Way]:
    """The street grids of Quenhallow and Corrowick with their arterials (and Quenhallow's one-way pair)."""
    ways = _town_grid(
        quen,
        rng,
        arterial_rows={
            3: ("tertiary", "South Parade", "50"),
            8: ("primary", "Ambrel Way", "50"),
            13: ("tertiary", "North Parade", None),
        },
        arterial_cols={
            4: ("tertiary", "West Avenue", "50"),
            10: ("secondary", "High Street", "40"),
            16: ("tertiary", "East Avenue", "50;70"),
        },
        residential_speeds=["30", "30", None, "40"],
        oneway_pair=(9, 7, 7, 13, "Market Street", "Chapel Street"),
    )
    ways += _town_grid(
        corr,
        rng,
        arterial_rows={
            4: ("tertiary", "Canal Street", "50"),
            10: ("primary", "Ambrel Way", "50"),
            16: ("tertiary", "Bell Street", "50"),
        },
        arterial_cols={
            5: ("tertiary", "Foundry Road", None),
            12: ("secondary", "Mill Street", "50"),
            19: ("tertiary", "Station Road", "50"),
        },
        residential_speeds=["40", None, "30"],
    )
    return ways


def _town_end(town: _Town, side: str) -> tuple[float, float]:
    """Where a rural road leaves a town's grid: the middle of a side, or a corner street ("sw", "ne")."""
    w, h = town.half_w_m, town.half_h_m
    pts = {
        "east": (w, 0.0),
        "west": (-w, 0.0),
        "north": (0.0, h),
        "south": (0.0, -h),
        "sw": (-w + 4 * 150.0, -h),
        "ne": (-w + 19 * 150.0, h),
    }
    p = town.to_world(pts[side])[0]
    return float(p[0]), float(p[1])


def _straight_through(x0: float, y0: float, half_m: float = 260.0) -> np.ndarray:
    """A north-south piece through an interchange at (x0, y0)."""
    return _densify([(x0, y0 + half_m), (x0, y0 - half_m)], 20.0)


def _across_river(river: _River, x0: float) -> np.ndarray:
    """A north-south bridge piece over the river at x0."""
    y0 = float(river.y(x0))
    return _densify([(x0, y0 + 600.0), (x0, y0 - 600.0)], 20.0)


def _trunk_roads(
    rng: np.random.Generator,
    river: _River,
    quen: _Town,
    corr: _Town,
    vc: dict[str, tuple[float, float]],
    bx: dict[str, float],
    interchanges: list[float],
) -> tuple[list[_Way], dict[str, np.ndarray]]:
    """The roads over the bridges and through the interchanges, and the lines later roads branch from."""
    x_stal, x_mire, x_corr = interchanges
    ways: list[_Way] = []
    # Ambrel Way (primary) from Quenhallow over the Ambrel Bridge to junction J, then on to Corrowick.
    xb = bx["Ambrel Bridge"]
    rb = _across_river(river, xb)
    p1_north = _join(
        _winding([_town_end(quen, "east"), (12300.0, 16600.0), (xb - 300.0, 15000.0), tuple(rb[0])], rng, 90.0),
        rb,
        _winding([tuple(rb[-1]), (xb + 150.0, 10700.0), (14900.0, 10000.0)], rng, 60.0),
    )
    ways.append(_rural(p1_north, "primary", "Ambrel Way", "80", ref="B12"))
    ways[-1].river_crossing = True
    junction_j = tuple(p1_north[-1])
    p1_east = _winding([junction_j, (17300.0, 9300.0), _town_end(corr, "west")], rng, 70.0)
    ways.append(_rural(p1_east, "primary", "Ambrel Way", "80", ref="B12"))

    # Mire Road (secondary) from J south through interchange 2 to Mirefold.
    ym = float(_motorway_y(x_mire))
    st = _straight_through(x_mire, ym)
    mire = _join(
        _winding([junction_j, (14700.0, 8000.0), tuple(st[0])], rng, 60.0),
        st,
        _winding([tuple(st[-1]), (13600.0, 3600.0), vc["Mirefold"]], rng, 60.0),
    )
    ways.append(_rural(mire, "secondary", "Mire Road", "70"))

    # South Road (unclassified) along the south through Harl End, Mirefold and Ostry Mill.
    south_w = _winding([vc["Harl End"], (7500.0, 1700.0), vc["Mirefold"]], rng, 120.0)
    south_e = _winding([vc["Mirefold"], (18000.0, 1500.0), (22000.0, 2000.0), vc["Ostry Mill"]], rng, 120.0)
    ways.append(_rural(south_w, "unclassified", "South Road", "60"))
    ways.append(_rural(south_e, "unclassified", "South Road", None))

    # Mill Road (secondary) from Corrowick south through interchange 3 to South Road.
    ym = float(_motorway_y(x_corr))
    st = _straight_through(x_corr, ym)
    mill = _join(
        _winding([_town_end(corr, "south"), tuple(st[0])], rng, 30.0),
        st,
        _winding([tuple(st[-1]), _vertex_near(south_e, (x_corr, 2000.0))], rng, 60.0),
    )
    ways.append(_rural(mill, "secondary", "Mill Road", "60"))

    # Stalbury Road (tertiary) from Stalbury Cross south through interchange 1 to South Road.
    ym = float(_motorway_y(x_stal))
    st = _straight_through(x_stal, ym)
    stal = _join(
        _winding([vc["Stalbury Cross"], (6100.0, 7000.0), tuple(st[0])], rng, 60.0),
        st,
        _winding([tuple(st[-1]), (5600.0, 3600.0), _vertex_near(south_w, (5400.0, 2000.0))], rng, 70.0),
    )
    ways.append(_rural(stal, "tertiary", "Stalbury Road", "60"))

    # Ferry Road (tertiary) from Quenhallow over the Ferry Bridge to Stalbury Cross.
    rb = _across_river(river, bx["Ferry Bridge"])
    ferry = _join(
        _winding([_town_end(quen, "sw"), (6900.0, 15400.0), tuple(rb[0])], rng, 90.0),
        rb,
        _winding([tuple(rb[-1]), (bx["Ferry Bridge"] - 200.0, 10400.0), vc["Stalbury Cross"]], rng, 80.0),
    )
    ways.append(_rural(ferry, "tertiary", "Ferry Road", "60"))
    ways[-1].river_crossing = True

    # Oxle Road (secondary) from Corrowick over the Oxle Bridge to Tarn Oxle.
    rb = _across_river(river, bx["Oxle Bridge"])
    oxle = _join(
        _winding([_town_end(corr, "ne"), (24200.0, 10800.0), tuple(rb[-1])], rng, 70.0),
        rb[::-1],
        _winding([tuple(rb[0]), (bx["Oxle Bridge"] + 300.0, 15600.0), vc["Tarn Oxle"]], rng, 90.0),
    )
    ways.append(_rural(oxle, "secondary", "Oxle Road", "50;70"))
    ways[-1].river_crossing = True
    lines = {"p1_east": p1_east, "mire": mire, "ferry": ferry, "oxle": oxle}
    return ways, lines


def _north_roads(
    rng: np.random.Generator, quen: _Town, vc: dict[str, tuple[float, float]], lines: dict[str, np.ndarray]
) -> list[_Way]:
    """The rural roads north of the river; adds the lines that farm tracks branch from to ``lines``."""
    ways: list[_Way] = []
    fennick = _winding([_town_end(quen, "west"), (5800.0, 18700.0), vc["Fennick Green"]], rng, 100.0)
    ways.append(_rural(fennick, "secondary", "Fennick Road", "70"))
    widdon_pts = [_town_end(quen, "north"), (11500.0, 20600.0), (15200.0, 21400.0), vc["Widdon Ash"]]
    widdon = _winding(widdon_pts, rng, 110.0)
    ways.append(_rural(widdon, "tertiary", "Widdon Road", "60"))
    gill = _winding(
        [vc["Fennick Green"], (2300.0, 18500.0), (3600.0, 16200.0), _vertex_near(lines["ferry"], (6400.0, 15300.0))],
        rng,
        120.0,
    )
    ways.append(_rural(gill, "unclassified", "Gill Lane", "60"))
    moor = _winding(
        [vc["Fennick Green"], (5500.0, 23600.0), (9000.0, 23300.0), _vertex_near(widdon, (11500.0, 20600.0))],
        rng,
        130.0,
    )
    ways.append(_rural(moor, "unclassified", "Moor Lane", None))
    ridge = _winding(
        [_vertex_near(widdon, (15200.0, 21400.0)), (16600.0, 17600.0), (19300.0, 15700.0), (22600.0, 15500.0),
         _vertex_near(lines["oxle"], (25600.0, 15400.0))],
        rng,
        130.0,
    )  # fmt: skip
    ways.append(_rural(ridge, "unclassified", "Ridge Road", "70"))
    oxle_lane = _winding([vc["Widdon Ash"], (22500.0, 20500.0), vc["Tarn Oxle"]], rng, 120.0)
    ways.append(_rural(oxle_lane, "unclassified", "Oxle Lane", "60"))
    ways.append(_rural(_winding([vc["Widdon Ash"], (20500.0, 24300.0)], rng, 80.0), "unclassified", "Top Lane", None))
    ways.append(
        _rural(_winding([vc["Tarn Oxle"], (29400.0, 19300.0)], rng, 80.0), "unclassified", "Saltings Lane", "60")
    )
    ways.append(
        _rural(_winding([(1200.0, 24400.0), vc["Fennick Green"]], rng, 80.0), "unclassified", "Heath Lane", None)
    )
    quarry = _winding([_vertex_near(ridge, (19300.0, 15700.0)), (19800.0, 19500.0), (18800.0, 21600.0)], rng, 90.0)
    ways.append(_rural(quarry, "unclassified", "Quarry Lane", None))
    lines["ridge"] = ridge
    return ways


def _south_roads(
    rng: np.random.Generator, corr: _Town, vc: dict[str, tuple[float, float]], lines: dict[str, np.ndarray]
) -> list[_Way]:
    """The rural roads south of the river and north of the motorway; adds the lines later ways branch from."""
    ways: list[_Way] = []
    cross_lane = _winding(
        [vc["Stalbury Cross"], (8500.0, 9800.0), (11500.0, 9200.0), _vertex_near(lines["mire"], (14700.0, 8300.0))],
        rng,
        120.0,
    )
    ways.append(_rural(cross_lane, "unclassified", "Cross Lane", "60"))
    eastfield_pts = [_town_end(corr, "east"), (27200.0, 8400.0), (28400.0, 5600.0), vc["Ostry Mill"]]
    eastfield = _winding(eastfield_pts, rng, 100.0)
    ways.append(_rural(eastfield, "tertiary", "Eastfield Road", "60"))
    harl = _winding([vc["Stalbury Cross"], (2600.0, 7200.0), (2300.0, 4400.0), vc["Harl End"]], rng, 110.0)
    ways.append(_rural(harl, "unclassified", "Harl Lane", "60"))
    brook = _winding(
        [vc["Mirefold"], (10300.0, 4300.0), (9700.0, 7300.0), _vertex_near(cross_lane, (9800.0, 9600.0))], rng, 110.0
    )
    ways.append(_rural(brook, "unclassified", "Brook Lane", None))
    marsh_pts = [_vertex_near(lines["p1_east"], (17300.0, 9300.0)), (17600.0, 6500.0), (18300.0, 1700.0)]
    marsh = _winding(marsh_pts, rng, 100.0)
    ways.append(_rural(marsh, "unclassified", "Marsh Lane", "60"))
    lines.update(cross_lane=cross_lane, brook=brook, harl=harl)
    return ways


def _expressway_ways(ground_ways: list[_Way], river: _River, interchanges: list[float]) -> list[_Way]:
    """The motorway carriageways, split at each interchange (different posted speeds per section), with the spurs
    that tie their ends to ``ground_ways`` and the ramps."""
    ways: list[_Way] = []
    # Two carriageways, east-bound on the south side (traffic keeps right).
    mx = np.arange(-1500.0, 31500.0 + 1, 50.0)
    centre = np.column_stack([mx, _motorway_y(mx)])
    eb = _normal_offset(centre, -15.0)
    wb = _normal_offset(centre, 15.0)[::-1]
    sections = ["100", "110", "110", "none"]
    terminal = {
        "west": (wb[-1] + eb[0]) / 2 + np.array([-60.0, 0.0]),
        "east": (eb[-1] + wb[0]) / 2 + np.array([60.0, 0.0]),
    }
    barriers = shapely.MultiLineString([eb, wb, river.coords()])
    ground = np.vstack([w.coords for w in ground_ways if w.level == _GROUND and w.tags.get("highway") in DRIVABLE])
    for side, point in terminal.items():
        for k in np.argsort(np.hypot(*(ground - point).T), kind="stable"):
            if not shapely.LineString([point, ground[k]]).intersects(barriers):
                break
        spur_tags = {"highway": "motorway_link", "oneway": "no", "name": f"Expressway {side.title()} Spur"}
        ways.append(_Way(_densify([point, ground[k]], 40.0), spur_tags, _LINK))
    for cw, direction in ((eb, "east"), (wb, "west")):
        s = _cumlen(cw)
        cuts = [float(s[np.argmin(np.abs(cw[:, 0] - x0))]) for x0 in interchanges]
        pieces = _cut(cw, cuts)
        speeds = sections if direction == "east" else sections[::-1]
        # Where the expressway leaves the county its carriageways meet at a terminal vertex tied to the local
        # roads, so that no carriageway end is a one-way dead end (the network builder would drop it).
        pieces[0] = np.vstack([terminal["west" if direction == "east" else "east"], pieces[0]])
        pieces[-1] = np.vstack([pieces[-1], terminal["east" if direction == "east" else "west"]])
        for piece, ms in zip(pieces, speeds, strict=True):
            tags = {"highway": "motorway", "name": "Varrowby Expressway", "ref": "V1", "oneway": "yes",
                    "lanes": "2", "maxspeed": ms}  # fmt: skip
            ways.append(_Way(piece, tags, level=_MOTORWAY))
    return ways + _ramp_ways(eb, wb, interchanges)


def _ramp_ways(eb: np.ndarray, wb: np.ndarray, interchanges: list[float]) -> list[_Way]:
    """The four one-way ramps of each diamond interchange."""

    def on_carriageway(cw: np.ndarray, x: float) -> tuple[float, float]:
        order = np.argsort(cw[:, 0])
        return x, float(np.interp(x, cw[order, 0], cw[order, 1]))

    ways: list[_Way] = []
    for x0 in interchanges:
        y0 = float(_motorway_y(x0))
        south_pt, north_pt = (x0, y0 - 80.0), (x0, y0 + 80.0)
        ramps = [
            (on_carriageway(eb, x0 - 420.0), south_pt, eb),  # east-bound off
            (south_pt, on_carriageway(eb, x0 + 420.0), eb),  # east-bound on
            (on_carriageway(wb, x0 + 420.0), north_pt, wb),  # west-bound off
            (north_pt, on_carriageway(wb, x0 - 420.0), wb),  # west-bound on
        ]
        for p_from, p_to, cw in ramps:
            ways.append(_Way(_ramp_curve(p_from, p_to, cw), {"highway": "motorway_link", "oneway": "yes"}, _LINK))
    return ways


def _minor_ways(
    rng: np.random.Generator, quen: _Town, corr: _Town, river: _River, lines: dict[str, np.ndarray]
) -> list[_Way]:
    """Ways that are not roads for a vehicle, and a few service ways."""
    ways: list[_Way] = []
    path = _densify([quen.to_world((-600, -750))[0], quen.to_world((300, 150))[0]], 30.0)
    ways.append(_Way(path, {"highway": "footway", "name": "Orchard Walk"}))
    xs = np.arange(12000.0, 16501.0, 30.0)
    ways.append(_Way(np.column_stack([xs, river.y(xs) + 90.0]), {"highway": "cycleway", "name": "Ambrel Towpath"}))
    farm_tracks = [
        (lines["cross_lane"], (8500.0, 9800.0), (8900.0, 11000.0)),
        (lines["ridge"], (22600.0, 15500.0), (22100.0, 17300.0)),
        (lines["brook"], (10300.0, 4300.0), (11300.0, 3700.0)),
    ]
    for owner, start, end in farm_tracks:
        ways.append(_Way(_winding([_vertex_near(owner, start), end], rng, 40.0), {"highway": "track"}))
    drive = _densify([_vertex_near(lines["harl"], (2400.0, 5800.0)), (1500.0, 6000.0)], 25.0)
    ways.append(_Way(drive, {"highway": "service", "access": "private", "name": "Lowfield Farm"}))
    for a, b in (((-400, -1400), (-400, -1100)), ((-1000, -1250), (-400, -1250))):
        lot = _densify([corr.to_world(a)[0], corr.to_world(b)[0]], 25.0)
        ways.append(_Way(lot, {"highway": "service", "service": "parking_aisle", "maxspeed": "walk"}))
    bypass = _densify([corr.to_world((1800, -900))[0], (24300.0, 7200.0), corr.to_world((1800, 900))[0]], 30.0)
    bypass_tags = {"highway": "construction", "construction": "tertiary", "name": "Corrowick Bypass"}
    ways.append(_Way(_chaikin(bypass), bypass_tags))
    return ways


def _ramp_curve(p_from, p_to, carriageway: np.ndarray) -> np.ndarray:
    """A ramp between a carriageway point and a crossing-road point, easing away from the carriageway."""
    t = np.linspace(0.0, 1.0, 26)
    x = p_from[0] + (p_to[0] - p_from[0]) * t
    order = np.argsort(carriageway[:, 0])
    y_cw = np.interp(x, carriageway[order, 0], carriageway[order, 1])
    on_cw_at_start = abs(p_from[1] - y_cw[0]) < 1e-6
    # ease = 0 at the carriageway end, 1 at the crossing-road end
    u = t if on_cw_at_start else 1.0 - t
    ease = 3 * u**2 - 2 * u**3
    road_end = p_to if on_cw_at_start else p_from
    cw_y_at_road = float(np.interp(road_end[0], carriageway[order, 0], carriageway[order, 1]))
    y = y_cw + (road_end[1] - cw_y_at_road) * ease
    out = np.column_stack([x, y])
    out[0], out[-1] = p_from, p_to
    return out


# -------------------------------------------------------------------------------------------- topology


def _split_bridges(layout: _Layout) -> list[_Way]:
    """Cut every road where it crosses the river or the motorway; the middle piece becomes a bridge way."""
    river_line = shapely.LineString(layout.river)
    mx = np.arange(-1500.0, 31500.0 + 1, 50.0)
    motorway_line = shapely.LineString(np.column_stack([mx, _motorway_y(mx)]))
    names = {v: k for k, v in layout.bridges_x.items()}
    out: list[_Way] = []
    for way in layout.ways:
        if way.level != _GROUND:
            out.append(way)
            continue
        line = shapely.LineString(way.coords)
        cuts: list[tuple[float, float, str]] = []
        hits_river = shapely.get_coordinates(shapely.intersection(line, river_line))
        if len(hits_river) and not way.river_crossing:
            raise RuntimeError(f"demo layout error: {way.tags.get('name')} crosses the river without a bridge")
        for pt in hits_river:
            s = float(shapely.line_locate_point(line, shapely.Point(pt)))
            bx = min(layout.bridges_x.values(), key=lambda b: abs(b - pt[0]))
            cuts.append((s, 40.0, names[bx]))
        for pt in shapely.get_coordinates(shapely.intersection(line, motorway_line)):
            cuts.append((float(shapely.line_locate_point(line, shapely.Point(pt))), 60.0, ""))
        if not cuts:
            out.append(way)
            continue
        cuts.sort()
        bounds = [b for s, half, _ in cuts for b in (s - half, s + half)]
        pieces = _cut(way.coords, bounds)
        for k, piece in enumerate(pieces):
            if k % 2 == 1:
                tags = dict(way.tags, bridge="yes", layer="1")
                bridge_name = cuts[k // 2][2]
                if bridge_name:
                    tags["bridge:name"] = bridge_name
                out.append(_Way(piece, tags, _BRIDGE, bool(bridge_name), dict(way.meta, river=bool(bridge_name))))
            else:
                out.append(_Way(piece, dict(way.tags), _GROUND, False, dict(way.meta)))
    return out


def _may_join_at_end(end_level: str, other_level: str) -> bool:
    return not ({end_level, other_level} == {_GROUND, _MOTORWAY} or {end_level, other_level} == {_BRIDGE, _MOTORWAY})


def _connect(ways: list[_Way]) -> None:
    """Give ways shared vertices where they meet: T-junction ends, ramp ends and at-grade crossings.

    Grade-separated pairs (a bridge over the motorway, the motorway and any road) never share a vertex except
    where a ramp ends on a carriageway. Raises ``RuntimeError`` if the layout has a crossing it cannot resolve.
    """
    for w in ways:
        w.coords = _quantize(w.coords)
    lines = np.array([shapely.LineString(w.coords) for w in ways], dtype=object)
    tree = shapely.STRtree(lines)
    inserts: list[list[np.ndarray]] = [[] for _ in ways]

    # 1. Ends that lie on another way (within 0.5 m) snap onto it.
    ends = np.array([w.coords[k] for w in ways for k in (0, -1)])
    owner = np.repeat(np.arange(len(ways)), 2)
    pairs = tree.query(shapely.points(ends), predicate="dwithin", distance=0.5)
    for e, j in zip(*pairs, strict=True):
        i = owner[e]
        if i == j or not _may_join_at_end(ways[i].level, ways[j].level):
            continue
        p = ends[e]
        dist = np.hypot(*(ways[j].coords - p).T)
        k = int(np.argmin(dist))
        if dist[k] < 0.05:
            q = ways[j].coords[k]
        else:
            q = _quantize(shapely.get_coordinates(shapely.line_interpolate_point(
                lines[j], shapely.line_locate_point(lines[j], shapely.Point(p))))[0])  # fmt: skip
            inserts[j].append(q)
        ways[i].coords[0 if e % 2 == 0 else -1] = q
    _apply_inserts(ways, inserts)

    # 2. At-grade crossings get a shared vertex; any other crossing is a layout error.
    lines = np.array([shapely.LineString(w.coords) for w in ways], dtype=object)
    tree = shapely.STRtree(lines)
    inserts = [[] for _ in ways]
    left, right = tree.query(lines, predicate="intersects")
    for i, j in zip(left, right, strict=True):
        if i >= j:
            continue
        inter = shapely.intersection(lines[i], lines[j])
        kinds = {g.geom_type for g in shapely.get_parts(inter)}
        if kinds - {"Point"}:
            raise RuntimeError(f"demo layout error: ways {ways[i].tags} and {ways[j].tags} overlap")
        pts = _quantize(shapely.get_coordinates(inter))
        a, b = ways[i], ways[j]
        if a.level == b.level == _GROUND:
            inserts[i].extend(pts)
            inserts[j].extend(pts)
            continue
        if {a.level, b.level} == {_BRIDGE, _MOTORWAY}:
            continue
        shared = {tuple(p) for p in a.coords[[0, -1]]} | {tuple(p) for p in b.coords[[0, -1]]}
        if all(tuple(p) in shared for p in pts):
            continue  # they meet at an end (a ramp end, a bridge end, consecutive motorway sections)
        raise RuntimeError(
            f"demo layout error: {a.tags.get('name', a.tags['highway'])} ({a.level}) crosses "
            f"{b.tags.get('name', b.tags['highway'])} ({b.level}) at {pts[0]}"
        )
    _apply_inserts(ways, inserts)


def _apply_inserts(ways: list[_Way], inserts: list[list[np.ndarray]]) -> None:
    for w, pts in zip(ways, inserts, strict=True):
        if not pts:
            continue
        pts = np.unique(_quantize(np.asarray(pts)), axis=0)
        line = shapely.LineString(w.coords)
        s_new = shapely.line_locate_point(line, shapely.points(pts))
        s_old = _cumlen(w.coords)
        allc = np.vstack([w.coords, pts])
        alls = np.concatenate([s_old, s_new])
        order = np.lexsort((np.r_[np.zeros(len(s_old)), np.ones(len(s_new))], alls))
        merged = allc[order]
        keep = np.ones(len(merged), dtype=bool)
        keep[1:] = np.any(merged[1:] != merged[:-1], axis=1)
        w.coords = merged[keep]


# ------------------------------------------------------------------------------------------- projection


@dataclass
class _Frame:
    """Local metres <-> UTM <-> lon/lat."""

    e0: float
    n0: float

    @classmethod
    def make(cls) -> _Frame:
        fwd = Transformer.from_crs("EPSG:4326", f"EPSG:{UTM_EPSG}", always_xy=True)
        e, n = fwd.transform(*_ORIGIN_LONLAT)
        return cls(round(e / CELL_M) * CELL_M, round(n / CELL_M) * CELL_M)

    def lonlat(self, xy: np.ndarray) -> np.ndarray:
        inv = Transformer.from_crs(f"EPSG:{UTM_EPSG}", "EPSG:4326", always_xy=True)
        xy = np.atleast_2d(np.asarray(xy, dtype=float))
        lon, lat = inv.transform(xy[:, 0] + self.e0, xy[:, 1] + self.n0)
        return np.column_stack([lon, lat])

    def geom_lonlat(self, geom, digits: int = 7):
        return shapely.transform(geom, lambda c: np.round(self.lonlat(c), digits))


# -------------------------------------------------------------------------------------------- OSM writing


@dataclass
class _Osm:
    node_xy: np.ndarray  # (n, 2) local metres, index = node id - 1
    way_nodes: list[np.ndarray]  # node ids per way
    ways: list[_Way]
    signals: np.ndarray  # node ids with highway=traffic_signals
    river_nodes: np.ndarray


def _assign_nodes(ways: list[_Way], river: np.ndarray) -> _Osm:
    keys: dict[tuple[int, int], int] = {}
    xy: list[tuple[float, float]] = []

    def ids(coords: np.ndarray) -> np.ndarray:
        out = np.empty(len(coords), dtype=np.int64)
        for k, (x, y) in enumerate(coords):
            key = (round(x * 100), round(y * 100))
            nid = keys.get(key)
            if nid is None:
                nid = len(xy) + 1
                keys[key] = nid
                xy.append((key[0] / 100.0, key[1] / 100.0))
            out[k] = nid
        keep = np.ones(len(out), dtype=bool)
        keep[1:] = out[1:] != out[:-1]
        return out[keep]

    way_nodes = [ids(w.coords) for w in ways]
    river_nodes = ids(_quantize(river))
    node_xy = np.asarray(xy)

    # Signals where two differently named arterials meet inside a town.
    names_at: dict[int, set[str]] = {}
    for w, nds in zip(ways, way_nodes, strict=True):
        if w.tags.get("highway") in _ARTERIAL and w.level == _GROUND and "town" in w.meta:
            for n in nds.tolist():
                names_at.setdefault(n, set()).add(w.tags.get("name", ""))
    signals = np.array(sorted(n for n, names in names_at.items() if len(names) >= 2), dtype=np.int64)
    return _Osm(node_xy, way_nodes, ways, signals, river_nodes)


def _osm_xml(osm: _Osm, frame: _Frame) -> bytes:
    ll = np.round(frame.lonlat(osm.node_xy), 7)
    lo, hi = ll.min(axis=0), ll.max(axis=0)
    signal = set(osm.signals.tolist())
    out = [
        "<?xml version='1.0' encoding='UTF-8'?>",
        '<osm version="0.6" generator="coverkit demo county (fictional data)">',
        f'  <bounds minlat="{lo[1]:.7f}" minlon="{lo[0]:.7f}" maxlat="{hi[1]:.7f}" maxlon="{hi[0]:.7f}"/>',
    ]
    for nid, (lon, lat) in enumerate(ll.tolist(), start=1):
        if nid in signal:
            out.append(f'  <node id="{nid}" version="1" lat="{lat:.7f}" lon="{lon:.7f}">')
            out.append('    <tag k="highway" v="traffic_signals"/>')
            out.append("  </node>")
        else:
            out.append(f'  <node id="{nid}" version="1" lat="{lat:.7f}" lon="{lon:.7f}"/>')

    def way_xml(wid: int, nds: np.ndarray, tags: dict[str, str]) -> None:
        out.append(f'  <way id="{wid}" version="1">')
        out.extend(f'    <nd ref="{n}"/>' for n in nds.tolist())
        out.extend(f"    <tag k={quoteattr(k)} v={quoteattr(v)}/>" for k, v in sorted(tags.items()))
        out.append("  </way>")

    for wid, (w, nds) in enumerate(zip(osm.ways, osm.way_nodes, strict=True), start=1):
        way_xml(wid, nds, w.tags)
    way_xml(len(osm.ways) + 1, osm.river_nodes, {"waterway": "river", "name": "Ambrel River"})
    out.append("</osm>")
    # bz2 output holds no timestamp or file name, so equal text gives equal bytes.
    return bz2.compress(("\n".join(out) + "\n").encode("utf-8"), 9)


# ------------------------------------------------------------------------------------------- road graph


@dataclass
class _Graph:
    """Directed drivable road graph in memory (local metres), with hidden true travel times."""

    tail: np.ndarray
    head: np.ndarray
    length_m: np.ndarray
    true_s: np.ndarray
    n_nodes: int
    main: np.ndarray  # bool per node: in the largest strongly connected piece


def _road_graph(osm: _Osm) -> _Graph:
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    tails, heads, speeds = [], [], []
    for w, nds in zip(osm.ways, osm.way_nodes, strict=True):
        hw = w.tags.get("highway")
        if hw not in DRIVABLE or w.tags.get("access") == "private":
            continue
        a, b = nds[:-1] - 1, nds[1:] - 1
        tails.append(a)
        heads.append(b)
        speeds.append(np.full(len(a), TRUE_SPEED_KPH[hw]))
        if w.tags.get("oneway") != "yes":
            tails.append(b)
            heads.append(a)
            speeds.append(np.full(len(a), TRUE_SPEED_KPH[hw]))
    tail, head, speed = np.concatenate(tails), np.concatenate(heads), np.concatenate(speeds)
    length = np.hypot(*(osm.node_xy[head] - osm.node_xy[tail]).T)
    is_signal = np.zeros(len(osm.node_xy), dtype=bool)
    is_signal[osm.signals - 1] = True
    true_s = length / (speed / 3.6) + TRUE_SIGNAL_DELAY_S * is_signal[head]
    n = len(osm.node_xy)
    adj = coo_matrix((np.ones(len(tail)), (tail, head)), shape=(n, n)).tocsr()
    ncomp, labels = connected_components(adj, directed=True, connection="strong")
    used = np.zeros(n, dtype=bool)
    used[tail] = True
    counts = np.bincount(labels[used], minlength=ncomp)
    main = labels == int(np.argmax(counts))
    return _Graph(tail, head, length, true_s, n, main & used)


def _shortest_s(graph: _Graph, sources: np.ndarray, hour_factor: float = 1.0) -> np.ndarray:
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import dijkstra

    w = coo_matrix((graph.true_s / hour_factor, (graph.tail, graph.head)), shape=(graph.n_nodes,) * 2).tocsr()
    return dijkstra(w, directed=True, indices=sources)


# --------------------------------------------------------------------------------------------- population


@dataclass
class _Grid:
    x0: float  # local metres, west edge
    y1: float  # local metres, north edge
    ncols: int
    nrows: int

    def centres(self) -> tuple[np.ndarray, np.ndarray]:
        x = self.x0 + CELL_M * (np.arange(self.ncols) + 0.5)
        y = self.y1 - CELL_M * (np.arange(self.nrows) + 0.5)
        return np.meshgrid(x, y)


def _population(layout: _Layout, ways: list[_Way], boundary: shapely.Polygon, rng: np.random.Generator):
    from affine import Affine
    from rasterio.features import rasterize
    from scipy.ndimage import distance_transform_edt

    grid = _Grid(-1000.0, 26100.0, 320, 272)
    xx, yy = grid.centres()
    inside = shapely.contains_xy(boundary, xx, yy)
    transform = Affine(CELL_M, 0.0, grid.x0, 0.0, -CELL_M, grid.y1)

    parts: list[tuple[float, np.ndarray]] = []
    town_mask = np.zeros(xx.shape, dtype=bool)
    for town, total in zip(layout.towns, (33_500.0, 25_800.0), strict=True):
        loc = town.to_local(np.column_stack([xx.ravel(), yy.ravel()]))
        r2 = ((loc[:, 0] / (town.half_w_m * 1.1)) ** 2 + (loc[:, 1] / (town.half_h_m * 1.1)) ** 2).reshape(xx.shape)
        in_town = (r2 <= 1.0) & (np.abs(loc[:, 0]) <= town.half_w_m).reshape(xx.shape)
        in_town &= (np.abs(loc[:, 1]) <= town.half_h_m).reshape(xx.shape)
        town_mask |= in_town
        parts.append((total, np.where(in_town, 0.25 + np.exp(-1.6 * r2), 0.0)))
    for v in layout.villages:
        d2 = (xx - v.center[0]) ** 2 + (yy - v.center[1]) ** 2
        parts.append((v.residents, np.where(d2 < 700.0**2, np.exp(-d2 / 280.0**2), 0.0)))
    roads = [
        shapely.LineString(w.coords) for w in ways if w.tags.get("highway") in DRIVABLE - {"motorway", "motorway_link"}
    ]
    on_road = rasterize(roads, out_shape=xx.shape, transform=transform, all_touched=True) > 0
    dist_m = distance_transform_edt(~on_road) * CELL_M
    rural_total = TOTAL_RESIDENTS - sum(t for t, _ in parts)
    parts.append((rural_total, np.where((dist_m < 600.0) & ~town_mask, np.exp(-dist_m / 150.0), 0.0)))

    river = shapely.buffer(shapely.LineString(layout.river), 30.0)
    wet = rasterize([river], out_shape=xx.shape, transform=transform, all_touched=True) > 0
    mx = np.arange(-1500.0, 31500.0 + 1, 50.0)
    motorway = shapely.buffer(shapely.LineString(np.column_stack([mx, _motorway_y(mx)])), 40.0)
    verge = rasterize([motorway], out_shape=xx.shape, transform=transform, all_touched=True) > 0

    pop = np.zeros(xx.shape)
    for total, shape in parts:
        noisy = shape * rng.lognormal(0.0, 0.35, size=shape.shape) * inside * ~wet * np.where(verge, 0.1, 1.0)
        pop += total * noisy / noisy.sum()
    pop = np.where(inside, pop, NODATA).astype(np.float32)
    return grid, pop, inside


def _write_tif(path: Path, grid: _Grid, pop: np.ndarray, frame: _Frame) -> None:
    import rasterio
    from affine import Affine

    profile = {
        "driver": "GTiff",
        "width": grid.ncols,
        "height": grid.nrows,
        "count": 1,
        "dtype": "float32",
        "crs": f"EPSG:{UTM_EPSG}",
        "transform": Affine(CELL_M, 0.0, frame.e0 + grid.x0, 0.0, -CELL_M, frame.n0 + grid.y1),
        "nodata": NODATA,
        "compress": "deflate",
        "predictor": 3,
        "tiled": False,
    }
    with atomic_path(path) as tmp, rasterio.open(tmp, "w", **profile) as dst:
        dst.write(pop, 1)
        dst.set_band_description(1, "residents per 100 m cell")
        dst.update_tags(units="residents per cell", source="coverkit demo county (fictional)")


# ---------------------------------------------------------------------------------------------- blocks


def _blocks(grid: _Grid, pop: np.ndarray, inside: np.ndarray, boundary: shapely.Polygon):
    """Census-like blocks: a quadtree on the raster grid, split while a block holds more than 1,200 residents."""
    val = np.where(inside, pop.astype(np.float64), 0.0)
    out: list[tuple[shapely.Geometry, float]] = []

    def visit(r0: int, c0: int, size: int) -> None:
        r1, c1 = min(r0 + size, grid.nrows), min(c0 + size, grid.ncols)
        if r0 >= r1 or c0 >= c1:
            return
        total = float(val[r0:r1, c0:c1].sum())
        if total > 1200.0 and size > 2:
            half = size // 2
            for dr, dc in ((0, 0), (0, half), (half, 0), (half, half)):
                visit(r0 + dr, c0 + dc, half)
            return
        box = shapely.box(grid.x0 + c0 * CELL_M, grid.y1 - r1 * CELL_M, grid.x0 + c1 * CELL_M, grid.y1 - r0 * CELL_M)
        piece = shapely.intersection(box, boundary)
        if not piece.is_empty and piece.area > 1.0:
            out.append((piece, total))

    for r in range(0, grid.nrows, 16):
        for c in range(0, grid.ncols, 16):
            visit(r, c, 16)
    return out


def _write_blocks(path: Path, blocks, frame: _Frame) -> None:
    import geopandas as gpd

    geoms = [orient(frame.geom_lonlat(g), 1.0) for g, _ in blocks]
    gdf = gpd.GeoDataFrame(
        {
            "block_id": [f"B{k:04d}" for k in range(1, len(blocks) + 1)],
            "residents": np.array([round(t) for _, t in blocks], dtype=np.int32),
        },
        geometry=geoms,
        crs="EPSG:4326",
    )
    with atomic_path(path) as tmp:
        gdf.to_file(tmp, layer="blocks", driver="GPKG", engine="pyogrio")


# ---------------------------------------------------------------------------------------------- polygons


def _boundary(rng: np.random.Generator) -> shapely.Polygon:
    """The county outline: the 30 x 25 km rectangle pushed out by 100-450 m at each kilometre."""
    pts = []
    for x in np.arange(0.0, WIDTH_M, 1000.0):
        pts.append((x, -rng.uniform(100, 450)))
    for y in np.arange(0.0, HEIGHT_M, 1000.0):
        pts.append((WIDTH_M + rng.uniform(100, 450), y))
    for x in np.arange(WIDTH_M, 0.0, -1000.0):
        pts.append((x, HEIGHT_M + rng.uniform(100, 450)))
    for y in np.arange(HEIGHT_M, 0.0, -1000.0):
        pts.append((-rng.uniform(100, 450), y))
    return shapely.Polygon(pts)


def _orient_any(geom):
    if geom.geom_type == "MultiPolygon":
        return shapely.MultiPolygon([orient(p, 1.0) for p in geom.geoms])
    return orient(geom, 1.0)


def _geojson(features: list[tuple[dict, object]], frame: _Frame, name: str) -> str:
    feats = []
    for props, geom in features:
        g = _orient_any(frame.geom_lonlat(geom))
        feats.append({"type": "Feature", "properties": props, "geometry": mapping(g)})
    doc = {"type": "FeatureCollection", "name": name, "features": feats}
    return json.dumps(doc, separators=(",", ":")) + "\n"


def _districts(layout: _Layout, boundary: shapely.Polygon) -> list[tuple[dict, object]]:
    river = layout.river
    north_half = shapely.Polygon(np.vstack([river, [[river[-1, 0], 40000.0], [river[0, 0], 40000.0]]]))
    north = shapely.intersection(boundary, north_half)
    south = shapely.difference(boundary, north_half)

    def strip(x0: float, x1: float) -> shapely.Polygon:
        return shapely.box(x0, -5000.0, x1, 40000.0)

    zones = [
        ("Quenhallow", north, -5000.0, 16500.0),
        ("Upper Ambrel", north, 16500.0, 40000.0),
        ("Stalbury", south, -5000.0, 10000.0),
        ("Mirefold", south, 10000.0, 18500.0),
        ("Corrowick", south, 18500.0, 40000.0),
    ]
    return [({"district": nm}, shapely.intersection(part, strip(a, b))) for nm, part, a, b in zones]


# ------------------------------------------------------------------------------------------ point layers


def _near_road(ways: list[_Way], targets: np.ndarray, offsets_m: np.ndarray) -> np.ndarray:
    """Move each target to within ``offsets_m`` of the nearest ordinary drivable road (not motorway, bridge or
    the isolated piece), keeping it on its own side of the road."""
    ok = [
        w
        for w in ways
        if w.tags.get("highway") in DRIVABLE - {"motorway", "motorway_link", "service"}
        and w.level == _GROUND
        and w.tags.get("name") != "Gorse Loop"
    ]
    lines = np.array([shapely.LineString(w.coords) for w in ok], dtype=object)
    tree = shapely.STRtree(lines)
    pts = shapely.points(targets)
    idx = tree.nearest(pts)
    near = shapely.get_coordinates(
        shapely.line_interpolate_point(lines[idx], shapely.line_locate_point(lines[idx], pts))
    )
    vec = targets - near
    dist = np.hypot(*vec.T)
    scale = np.where(dist > 0, np.minimum(dist, offsets_m) / np.maximum(dist, 1e-9), 0.0)
    moved = near + vec * scale[:, None]
    # A target sitting on the road is pushed sideways to the north.
    return np.where((dist > 0)[:, None], moved, near + np.column_stack([np.zeros_like(dist), offsets_m]))


_STATIONS = [
    ("S1", "Quenhallow Central", (9080.0, 17510.0), 3),
    ("S2", "Corrowick", (21400.0, 8420.0), 2),
    ("S3", "Stalbury Cross", (5620.0, 8580.0), 1),
    ("S4", "Widdon Ash", (18420.0, 21930.0), 1),
]
#: The mixed fleet: (unit_id, base_id, type, staffing, hours). As many units per station as its ``units``; invented
#: crews of common sizes (4 on an engine or ladder, 2 on a medic unit, 2 in the command car; common practice).
_UNITS = [
    ("E1", "S1", "engine", 4, ""),
    ("L1", "S1", "ladder", 4, ""),
    ("C1", "S1", "command", 2, ""),
    ("E2", "S2", "engine", 4, ""),
    ("M2", "S2", "medic-als", 2, ""),
    ("E3", "S3", "engine", 3, ""),
    ("M4", "S4", "medic-als", 2, "07-19"),
]
_CANDIDATES = [
    ("C01", "Fennick Green hall", (3600.0, 21380.0)),
    ("C02", "Harl End yard", (3100.0, 2620.0)),
    ("C03", "Mirefold depot", (13150.0, 2650.0)),
    ("C04", "Ostry Mill works", (26900.0, 2600.0)),
    ("C05", "Tarn Oxle green", (26100.0, 18100.0)),
    ("C06", "Quenhallow north", (9100.0, 18500.0)),
    ("C07", "Quenhallow west", (7700.0, 17200.0)),
    ("C08", "Corrowick east", (23100.0, 8900.0)),
    ("C09", "Ambrel Way south", (14950.0, 10400.0)),
    ("C10", "Mire Road interchange", (14400.0, 5700.0)),
    ("C11", "Ferry Road north", (6700.0, 15300.0)),
    ("C12", "Ridge Road crossing", (19300.0, 15800.0)),
]


def _csv(header: Sequence[str], rows: Sequence[Sequence[object]]) -> str:
    def cell(v: object) -> str:
        s = str(v)
        return '"' + s.replace('"', '""') + '"' if any(c in s for c in ',"\n') else s

    return "".join(",".join(cell(v) for v in row) + "\n" for row in [header, *rows])


def _sample_along(lines: list[np.ndarray], n: int, rng: np.random.Generator, jitter_m: float) -> np.ndarray:
    lengths = np.array([_cumlen(c)[-1] for c in lines])
    pick = rng.choice(len(lines), size=n, p=lengths / lengths.sum())
    out = np.empty((n, 2))
    for k, (li, u) in enumerate(zip(pick, rng.uniform(size=n), strict=True)):
        c = lines[li]
        s = _cumlen(c)
        out[k] = np.interp(u * s[-1], s, c[:, 0]), np.interp(u * s[-1], s, c[:, 1])
    return out + rng.normal(0.0, jitter_m, size=(n, 2))


def _incidents(grid, pop, inside, ways, boundary, rng: np.random.Generator):
    """Incident points and times: 90 % follow residents, 7 % on the motorway, 3 % along other roads."""
    n = int(rng.poisson(6000))
    n_mway, n_road = round(0.07 * n), round(0.03 * n)
    n_pop = n - n_mway - n_road
    weights = np.where(inside, pop, 0.0).astype(np.float64).ravel()
    cell = rng.choice(weights.size, size=n_pop, p=weights / weights.sum())
    xx, yy = grid.centres()
    base = np.column_stack([xx.ravel()[cell], yy.ravel()[cell]])
    jit = base + rng.uniform(-CELL_M / 2, CELL_M / 2, size=base.shape)
    pts_pop = np.where(shapely.contains_xy(boundary, jit[:, 0], jit[:, 1])[:, None], jit, base)
    mway = [np.clip(w.coords, [200.0, -1e9], [WIDTH_M - 200.0, 1e9]) for w in ways if w.level == _MOTORWAY]
    pts_mway = _sample_along([c for c in mway if _cumlen(c)[-1] > 1.0], n_mway, rng, 3.0)
    rural = [w.coords for w in ways if w.tags.get("highway") in {"primary", "secondary", "tertiary", "unclassified"}
             and "town" not in w.meta and "village" not in w.meta]  # fmt: skip
    pts_road = _sample_along(rural, n_road, rng, 5.0)
    xy = np.vstack([pts_pop, pts_mway, pts_road])
    where = np.array(["population"] * n_pop + ["motorway"] * n_mway + ["road"] * n_road)

    day_w = 1.0 + 0.12 * np.cos(2 * np.pi * (np.arange(365) - 15) / 365.0)  # a little busier in winter
    day = rng.choice(365, size=n, p=day_w / day_w.sum())
    hour = rng.choice(24, size=n, p=HOURLY_WEIGHT / HOURLY_WEIGHT.sum())
    sec = rng.integers(0, 3600, size=n)
    priority = rng.choice([1, 2, 3], size=n, p=[0.25, 0.40, 0.35])
    priority = np.where(where == "motorway", np.minimum(priority, 2), priority)
    t_s = day * 86400 + hour * 3600 + sec
    order = np.lexsort((xy[:, 1], xy[:, 0], t_s))
    return xy[order], t_s[order], priority[order]


def _observed(graph: _Graph, osm: _Osm, stations_xy, inc_xy, inc_t_s, rng: np.random.Generator):
    """Observed travel times from the hidden true speeds: first-due (sometimes second-due) base to a sample of
    incidents, shortest path on the road graph, slower at peak hours, times lognormal noise."""
    from scipy.spatial import cKDTree

    main_ids = np.flatnonzero(graph.main)
    tree = cKDTree(osm.node_xy[main_ids])
    _, st_k = tree.query(stations_xy)
    st_nodes = main_ids[st_k]
    pick = np.sort(rng.choice(len(inc_xy), size=320, replace=False))
    d_m, inc_k = tree.query(inc_xy[pick])
    inc_nodes = main_ids[inc_k]
    hours = (inc_t_s[pick] // 3600) % 24
    peak = np.isin(hours, [7, 8, 16, 17])
    rows = []
    tables = {f: _shortest_s(graph, st_nodes, f) for f in (1.0, TRUE_PEAK_SLOWDOWN)}
    second = rng.uniform(size=len(pick)) < 0.15
    noise = rng.lognormal(0.0, OBSERVED_NOISE_SIGMA, size=len(pick))
    for k in range(len(pick)):
        tab = tables[TRUE_PEAK_SLOWDOWN if peak[k] else 1.0][:, inc_nodes[k]]
        order = np.argsort(tab)
        base = int(order[1] if second[k] else order[0])
        access_s = d_m[k] / (20.0 / 3.6)  # last stretch off the graph at 20 km/h
        t = (tab[base] + access_s) * noise[k]
        if not np.isfinite(t) or t > 1800.0:
            continue
        rows.append((base, pick[k], round(float(t)), int(hours[k])))
    return rows


# ------------------------------------------------------------------------------------------------ README


def _readme(facts: dict[str, object]) -> str:
    rows = [
        (
            f"`{OSM_NAME}`",
            f"roads as OSM XML 0.6 (bzip2): {facts['nodes']:,} nodes, {facts['ways']} ways, {facts['signals']} "
            "traffic-signal nodes (`highway=traffic_signals`), and the river as a `waterway=river` way. Tags: "
            "`highway`, `name`, `ref`, `maxspeed` (km/h; some missing, some `50;70`, `none` or `walk`), `oneway`, "
            "`lanes`, `bridge`, `layer`, `bridge:name`, `access`, `service`, `construction`",
        ),
        ("`boundary.geojson`", "the county polygon (`name`)"),
        (
            "`population.tif`",
            f"residents per 100 m cell, float32, EPSG:{UTM_EPSG}, nodata {NODATA:g} outside the county; "
            f"total {facts['residents']:,.0f}",
        ),
        (
            "`blocks.gpkg`",
            f"layer `blocks`: {facts['blocks']} census-like polygons, `block_id` (text), `residents` (integer, "
            f"sum {facts['block_residents']:,})",
        ),
        ("`districts.geojson`", f"{facts['districts']} planning zones, field `district` (name)"),
        ("`stations.csv`", "existing stations: `id,name,lon,lat,units` (units: vehicles based there)"),
        (
            "`units.csv`",
            "the mixed fleet: `unit_id,base_id,type,staffing,hours` (engines, one ladder, medic units, a command "
            "car; hours `07-19`: a peak-time unit)",
        ),
        ("`candidates.csv`", "candidate station sites: `id,name,lon,lat` (each within 100 m of a road)"),
        (
            "`incidents.csv`",
            f"{facts['incidents']:,} incidents in {YEAR}: `id,lon,lat,priority,received_at` (priority 1 most "
            "urgent to 3; local time, ISO 8601, no zone)",
        ),
        (
            "`observed_times.csv`",
            f"{facts['observed']} observed travel times: `base_id,lon,lat,observed_s,hour` (station id, incident "
            "position, seconds from leaving the station to arrival, hour of day 0-23)",
        ),
        ("`flood_zone.geojson`", "a flood zone along the Ambrel River covering the Ambrel Bridge (`name`)"),
    ]
    table = "\n".join(f"| {a} | {b} |" for a, b in rows)
    stations = ", ".join(f"{sid} {name} ({units})" for sid, name, _, units in _STATIONS)
    return f"""# {COUNTY_NAME}: demo data (invented)

Every place, road, station, person and incident in this folder is invented. {COUNTY_NAME} lies in open ocean
(about 40.9-41.1 N, 35.2-34.8 W) so it cannot be taken for a real place. The files are written by
`python -m coverkit.demo --out data/demo` (seed {facts["seed"]}); `tests/test_demo_data.py` checks that the
shipped files equal a fresh generation. Licence: the same as the coverkit project (MIT); no third-party data.

Distances are metres, times seconds, lon/lat in EPSG:4326; the raster is in UTM zone 25 N (EPSG:{UTM_EPSG}).

| file | holds |
| --- | --- |
{table}

## The county

- **Towns**: Quenhallow (north bank; one-way pair downtown: Market Street east-bound, Chapel Street west-bound)
  and Corrowick (south bank).
- **Villages**: {", ".join(facts["villages"])}.
- **Stations** (units): {stations}.
- **River**: the Ambrel River, crossed by exactly three road bridges: {", ".join(facts["bridges"])}
  (ways tagged `bridge=yes`, `layer=1`, `bridge:name`). No other way crosses it, so closing the three splits the
  county in two. The other `bridge=yes` ways are overpasses over the expressway.
- **Expressway**: the Varrowby Expressway (`ref=V1`, `highway=motorway`), two one-way carriageways with diamond
  interchanges (`highway=motorway_link`) at Stalbury Road, Mire Road and Mill Road.
- **Not for vehicles, or special**: a footway, a cycleway, farm tracks, a private farm drive (`access=private`),
  parking aisles, the Corrowick Bypass under construction (`highway=construction`), and Gorse Loop, a small
  road piece joined to nothing (a network builder should report and drop it).

Observed travel times come from hidden per-class speeds on the road graph, slower at 07-09 h and 16-18 h, with
lognormal noise; they are for trying out calibration, not a statement about real driving.
"""


# ----------------------------------------------------------------------------------------------- driver


def generate_demo(folder: Path, seed: int = DEFAULT_SEED) -> dict[str, Path]:
    """Write the fictional demo county into ``folder``.

    Parameters
    ----------
    folder
        Output folder (created if missing). Existing files of the same names are replaced atomically.
    seed
        Seed of the random generator; the same seed gives the same files.

    Returns
    -------
    dict
        File kind -> path, keys as in ``FILE_NAMES``.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    paths = {k: folder / v for k, v in FILE_NAMES.items()}
    rng = np.random.default_rng(seed)
    steps = Steps(6, "demo")
    frame = _Frame.make()

    steps.step("laying out roads")
    boundary = _boundary(rng)
    layout = _build_layout(rng)
    ways = _split_bridges(layout)
    _connect(ways)
    osm = _assign_nodes(ways, layout.river)
    write_bytes_atomic(paths["roads"], _osm_xml(osm, frame))

    steps.step("writing boundary, districts and flood zone")
    write_text_atomic(paths["boundary"], _geojson([({"name": COUNTY_NAME}, boundary)], frame, "boundary"))
    write_text_atomic(paths["districts"], _geojson(_districts(layout, boundary), frame, "districts"))
    xb = layout.bridges_x["Ambrel Bridge"]
    river_line = shapely.LineString(layout.river)
    reach = shapely.intersection(river_line, shapely.box(xb - 1800.0, -1e5, xb + 1800.0, 1e5))
    flood = shapely.simplify(shapely.buffer(reach, 350.0, quad_segs=4), 5.0)
    write_text_atomic(
        paths["flood_zone"],
        _geojson([({"name": "Ambrel lowlands flood zone"}, flood)], frame, "flood_zone"),
    )

    steps.step("population raster and blocks")
    grid, pop, inside = _population(layout, ways, boundary, rng)
    _write_tif(paths["population"], grid, pop, frame)
    blocks = _blocks(grid, pop, inside, boundary)
    _write_blocks(paths["blocks"], blocks, frame)

    steps.step("stations and candidate sites")
    st_xy = _near_road(ways, np.array([p for _, _, p, _ in _STATIONS]), rng.uniform(20.0, 35.0, len(_STATIONS)))
    cand_xy = _near_road(ways, np.array([p for _, _, p in _CANDIDATES]), rng.uniform(15.0, 70.0, len(_CANDIDATES)))
    st_ll, cand_ll = frame.lonlat(st_xy), frame.lonlat(cand_xy)
    write_text_atomic(
        paths["stations"],
        _csv(
            ["id", "name", "lon", "lat", "units"],
            [(s[0], s[1], f"{ll[0]:.6f}", f"{ll[1]:.6f}", s[3]) for s, ll in zip(_STATIONS, st_ll, strict=True)],
        ),
    )
    write_text_atomic(paths["units"], _csv(["unit_id", "base_id", "type", "staffing", "hours"], _UNITS))
    write_text_atomic(
        paths["candidates"],
        _csv(
            ["id", "name", "lon", "lat"],
            [(c[0], c[1], f"{ll[0]:.6f}", f"{ll[1]:.6f}") for c, ll in zip(_CANDIDATES, cand_ll, strict=True)],
        ),
    )

    steps.step("incidents")
    inc_xy, inc_t, inc_pri = _incidents(grid, pop, inside, ways, boundary, rng)
    inc_ll = frame.lonlat(inc_xy)
    start = datetime(YEAR, 1, 1)
    rows = [
        (k + 1, f"{ll[0]:.6f}", f"{ll[1]:.6f}", int(p), (start + timedelta(seconds=int(t))).isoformat())
        for k, (ll, p, t) in enumerate(zip(inc_ll, inc_pri, inc_t, strict=True))
    ]
    write_text_atomic(paths["incidents"], _csv(["id", "lon", "lat", "priority", "received_at"], rows))

    steps.step("observed travel times")
    graph = _road_graph(osm)
    obs = _observed(graph, osm, st_xy, inc_xy, inc_t, rng)
    write_text_atomic(
        paths["observed_times"],
        _csv(
            ["base_id", "lon", "lat", "observed_s", "hour"],
            [(_STATIONS[b][0], f"{inc_ll[i][0]:.6f}", f"{inc_ll[i][1]:.6f}", t, h) for b, i, t, h in obs],
        ),
    )

    facts = {
        "seed": seed,
        "nodes": len(osm.node_xy) + 0,
        "ways": len(osm.ways) + 1,
        "signals": len(osm.signals),
        "residents": float(pop[inside].astype(np.float64).sum()),
        "blocks": len(blocks),
        "block_residents": int(sum(round(t) for _, t in blocks)),
        "districts": 5,
        "incidents": len(rows),
        "observed": len(obs),
        "villages": [v.name for v in layout.villages],
        "bridges": list(layout.bridges_x),
    }
    write_text_atomic(paths["readme"], _readme(facts))
    return paths


#: The demo study file; ``{data}`` is the folder of the demo files and ``{out}`` the output folder, both relative
#: to the study file. ``examples/demo-study.toml`` is this text with the repository's paths.
DEMO_STUDY_TEMPLATE = """# The demo study on the fictional Varrowby County (all data invented; see data/demo/README.md).
# `coverkit run examples/demo-study.toml --out results/` runs it; `coverkit demo` does the same on a fresh copy
# of the data. Paths are relative to this file.

[study]
name = "Varrowby County station coverage review (demo)"

[roads]
source = "{data}varrowby.osm.bz2"
boundary = "{data}boundary.geojson"
buffer_m = 3000
profile = "emergency"

[bases]
file = "{data}stations.csv"

[[demand]]
name = "residents"
raster = "{data}population.tif"

[[demand]]
name = "calls"
points = "{data}incidents.csv"
kind = "incidents"

[[standard]]
name = "ALS 8 min"
turnout_s = 60
travel_s = 480
fractile = 0.9
source = "NFPA 1710: ALS unit travel 480 s, EMS turnout 60 s, 90 %"

[[standard]]
name = "First due 4 min"
turnout_s = 60
travel_s = 240
fractile = 0.9
source = "NFPA 1710: first-arriving travel 240 s, 60 s turnout, 90 %"

[[standard]]
name = "Rural 12 min"
turnout_s = 60
travel_s = 720
fractile = 0.8
source = "example local standard for the rural districts"

[zones]
file = "{data}districts.geojson"
id_field = "district"

[siting]
candidates = "{data}candidates.csv"
model = "mclp"
add = 2
standard = "ALS 8 min"
demand = "residents"

[availability]
service_min = 45
queue = "infinite"
demand = "calls"
standard = "ALS 8 min"

[calibration]
observed = "{data}observed_times.csv"

[outputs]
folder = "{out}"
isochrone_minutes = [4, 8, 12]
surface_cell_m = 50
"""


def demo_study_toml(data_prefix: str = "../data/demo/", out_folder: str = "../results") -> str:
    """The demo study TOML text with the given data folder prefix and output folder."""
    return DEMO_STUDY_TEMPLATE.replace("{data}", data_prefix).replace("{out}", out_folder)


def write_demo_study(out: Path, seed: int = DEFAULT_SEED) -> Path:
    """Generate the demo county into ``out/data`` and write ``out/demo-study.toml`` that runs into ``out``."""
    from coverkit.atomic import write_text_atomic

    out = Path(out)
    generate_demo(out / "data", seed)
    return write_text_atomic(out / "demo-study.toml", demo_study_toml("data/", "."))


def main(argv: Sequence[str] | None = None) -> int:
    """Command line: ``python -m coverkit.demo --out data/demo [--seed N] [--quiet]``."""
    parser = argparse.ArgumentParser(prog="python -m coverkit.demo", description="Write the fictional demo county.")
    parser.add_argument("--out", type=Path, default=Path("data/demo"), help="output folder (default data/demo)")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help=f"random seed (default {DEFAULT_SEED})")
    parser.add_argument("--quiet", action="store_true", help="no progress messages")
    args = parser.parse_args(argv)
    set_quiet(args.quiet)
    paths = generate_demo(args.out, args.seed)
    for kind, path in paths.items():
        print(f"{kind:15s} {path}  {path.stat().st_size:,} bytes")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
