"""The shipped demo county equals a fresh generation, and its files pass checks made with outside libraries.

The generator is run once into a temporary folder. The OSM file is read back with pyosmium (and once with osmnx's
XML reader), projected with pyproj, measured with shapely and searched with networkx; none of these checks reuses
the generator's own geometry.
"""

from __future__ import annotations

import itertools
import math
from collections import Counter
from pathlib import Path

import geopandas as gpd
import networkx as nx
import numpy as np
import osmium
import pandas as pd
import pytest
import rasterio
import shapely
from pyproj import Transformer
from pyproj.aoi import AreaOfInterest
from pyproj.database import query_utm_crs_info

from coverkit import demo

SHIPPED = Path(__file__).resolve().parents[1] / "data" / "demo"
BYTE_EQUAL = [
    "roads",
    "boundary",
    "districts",
    "flood_zone",
    "stations",
    "units",
    "candidates",
    "incidents",
    "observed_times",
    "readme",
]
DRIVE = {"motorway", "motorway_link", "primary", "secondary", "tertiary", "unclassified", "residential"}


@pytest.fixture(scope="module")
def fresh(tmp_path_factory) -> dict[str, Path]:
    return demo.generate_demo(tmp_path_factory.mktemp("demo"), seed=demo.DEFAULT_SEED)


class _Reader(osmium.SimpleHandler):
    def __init__(self) -> None:
        super().__init__()
        self.nodes: dict[int, tuple[float, float]] = {}
        self.signals: list[int] = []
        self.ways: list[tuple[int, dict[str, str], list[int]]] = []

    def node(self, n) -> None:
        self.nodes[n.id] = (n.location.lon, n.location.lat)
        if n.tags.get("highway") == "traffic_signals":
            self.signals.append(n.id)

    def way(self, w) -> None:
        self.ways.append((w.id, dict(w.tags), [nd.ref for nd in w.nodes]))


@pytest.fixture(scope="module")
def osm():
    """The shipped OSM file read with pyosmium, node positions projected to the county's UTM zone (pyproj)."""
    reader = _Reader()
    reader.apply_file(str(SHIPPED / demo.OSM_NAME))
    lonlat = np.array(list(reader.nodes.values()))
    utm = _utm_epsg(lonlat)
    tr = Transformer.from_crs("EPSG:4326", f"EPSG:{utm}", always_xy=True)
    x, y = tr.transform(lonlat[:, 0], lonlat[:, 1])
    reader.xy = dict(zip(reader.nodes, zip(x, y, strict=True), strict=True))
    reader.utm = utm
    reader.to_utm = tr
    reader.lines = {wid: shapely.LineString([reader.xy[n] for n in nds]) for wid, _, nds in reader.ways}
    return reader


def _utm_epsg(lonlat: np.ndarray) -> int:
    """UTM zone of the data's bounding box from the PROJ database (pyproj), not from the generator."""
    lo, hi = lonlat.min(axis=0), lonlat.max(axis=0)
    (info,) = query_utm_crs_info(
        datum_name="WGS 84",
        area_of_interest=AreaOfInterest(
            (lo[0] + hi[0]) / 2, (lo[1] + hi[1]) / 2, (lo[0] + hi[0]) / 2, (lo[1] + hi[1]) / 2
        ),
    )
    return int(info.code)


def _points_utm(osm, csv: Path) -> np.ndarray:
    df = pd.read_csv(csv)
    return np.column_stack(osm.to_utm.transform(df["lon"].to_numpy(), df["lat"].to_numpy()))


def _drive_graph(osm, drop_bridges: bool = False) -> nx.Graph:
    g = nx.Graph()
    for _, tags, nds in osm.ways:
        if tags.get("highway") not in DRIVE or (drop_bridges and tags.get("bridge") == "yes"):
            continue
        nx.add_path(g, nds)
    return g


# ------------------------------------------------------------------------------------- reproducibility


@pytest.mark.parametrize("kind", BYTE_EQUAL)
def test_shipped_text_files_equal_fresh_generation(fresh, kind):
    assert (SHIPPED / demo.FILE_NAMES[kind]).read_bytes() == fresh[kind].read_bytes()


def test_shipped_raster_equals_fresh_generation(fresh):
    with rasterio.open(SHIPPED / demo.FILE_NAMES["population"]) as a, rasterio.open(fresh["population"]) as b:
        assert a.crs == b.crs and a.transform == b.transform and a.nodata == b.nodata
        np.testing.assert_array_equal(a.read(1), b.read(1))


def test_shipped_blocks_equal_fresh_generation(fresh):
    # A GeoPackage stores write timestamps, so compare the table content, not the bytes.
    a = gpd.read_file(SHIPPED / demo.FILE_NAMES["blocks"], layer="blocks")
    b = gpd.read_file(fresh["blocks"], layer="blocks")
    assert list(a.columns) == list(b.columns) and a.crs == b.crs
    pd.testing.assert_frame_equal(a.drop(columns="geometry"), b.drop(columns="geometry"))
    assert shapely.equals_exact(a.geometry.values, b.geometry.values, tolerance=0.0).all()


def test_all_files_together_are_small():
    total = sum((SHIPPED / name).stat().st_size for name in demo.FILE_NAMES.values())
    assert total < 10 * 1024 * 1024


# ------------------------------------------------------------------------------------------ the roads


def test_osmnx_xml_reader_reads_every_node(osm):
    # osmnx's own OSM XML reader (the path the network builder takes) sees the same nodes as pyosmium.
    import osmnx as ox

    g = ox.graph_from_xml(SHIPPED / demo.OSM_NAME, simplify=False, retain_all=True)
    referenced = {n for _, _, nds in osm.ways for n in nds}
    assert set(g.nodes) == referenced
    assert 15_000 <= len(referenced) <= 40_000


def test_county_is_in_open_ocean_and_about_30_by_25_km(osm):
    # Fictional on purpose: far from any coast (the Azores, the nearest land, lie east of 31.3 W; from memory).
    b = gpd.read_file(SHIPPED / demo.FILE_NAMES["boundary"])
    assert b.crs.to_epsg() == 4326
    lon0, lat0, lon1, lat1 = b.total_bounds
    assert -36.0 < lon0 < lon1 < -34.0 and 40.5 < lat0 < lat1 < 41.5
    utm = b.to_crs(osm.utm)
    x0, y0, x1, y1 = utm.total_bounds
    assert 29_000 < x1 - x0 < 32_000 and 24_000 < y1 - y0 < 27_000


def test_exactly_three_bridges_cross_the_river_and_closing_them_splits_the_county(osm):
    (river_id,) = [wid for wid, tags, _ in osm.ways if tags.get("waterway") == "river"]
    river = osm.lines[river_id]
    crossing = [(wid, tags) for wid, tags, _ in osm.ways if wid != river_id and osm.lines[wid].intersects(river)]
    assert len(crossing) == 3
    assert all(t.get("bridge") == "yes" and t.get("layer") == "1" and t["highway"] in DRIVE for _, t in crossing)
    # networkx: stations on both banks share one piece of the road graph, and not once the bridges are removed.
    stations = _points_utm(osm, SHIPPED / demo.FILE_NAMES["stations"])
    ids = np.array(list(osm.xy))
    xy = np.array(list(osm.xy.values()))
    full, cut = _drive_graph(osm), _drive_graph(osm, drop_bridges=True)
    in_full = np.isin(ids, list(full.nodes))
    near = [ids[in_full][np.argmin(np.hypot(*(xy[in_full] - p).T))] for p in stations]
    north = [shapely.Point(p).y > np.interp(p[0], *shapely.get_coordinates(river).T) for p in stations]
    assert any(north) and not all(north)
    comp_full = {n: k for k, c in enumerate(nx.connected_components(full)) for n in c}
    comp_cut = {n: k for k, c in enumerate(nx.connected_components(cut)) for n in c}
    assert len({comp_full[n] for n in near}) == 1
    pairs = [(a, b) for a in range(len(near)) for b in range(a)]
    for a, b in pairs:
        same_bank = north[a] == north[b]
        assert (comp_cut[near[a]] == comp_cut[near[b]]) == same_bank


def test_roads_meet_only_at_shared_nodes_unless_one_is_a_bridge(osm):
    # Topology check with shapely: wherever two ways cross, they share a node there, or one passes over on a
    # bridge (layer 1). The river way is left out (it is not a road).
    items = [(wid, tags, nds) for wid, tags, nds in osm.ways if "highway" in tags]
    lines = np.array([osm.lines[wid] for wid, _, _ in items], dtype=object)
    tree = shapely.STRtree(lines)
    left, right = tree.query(lines, predicate="intersects")
    for i, j in zip(left, right, strict=True):
        if i >= j:
            continue
        (_, ti, ni), (_, tj, nj) = items[i], items[j]
        if ti.get("bridge") == "yes" or tj.get("bridge") == "yes":
            continue
        shared = np.array([osm.xy[n] for n in set(ni) & set(nj)]).reshape(-1, 2)
        for p in shapely.get_coordinates(shapely.intersection(lines[i], lines[j])):
            assert len(shared) and np.hypot(*(shared - p).T).min() < 0.01, (ti, tj, p)


def test_motorway_carriageways_ramps_and_isolated_piece(osm):
    mway = [(t, n) for _, t, n in osm.ways if t.get("highway") == "motorway"]
    links = [(t, n) for _, t, n in osm.ways if t.get("highway") == "motorway_link"]
    assert mway and all(t.get("oneway") == "yes" and "maxspeed" in t for t, _ in mway)
    ramps = [t for t, _ in links if "Spur" not in t.get("name", "")]
    assert len(ramps) >= 8 and all(t.get("oneway") == "yes" for t in ramps)
    # the two terminal spurs tie the carriageway ends to local roads; they are two-way
    assert sorted(t["name"] for t, _ in links if "Spur" in t.get("name", "")) == [
        "Expressway East Spur",
        "Expressway West Spur",
    ]
    # Both directions exist: some carriageway ways run east, some west.
    dx = [osm.xy[n[-1]][0] - osm.xy[n[0]][0] for _, n in mway]
    assert min(dx) < 0 < max(dx)
    # The motorway shares nodes only with ramps and with itself (grade separated from every other road).
    mway_nodes = {x for _, n in mway for x in n}
    for _, t, n in osm.ways:
        if t.get("highway") not in {"motorway", "motorway_link"}:
            assert not mway_nodes & set(n), t
    # Exactly one small piece of road is joined to nothing else (networkx components of the drivable graph).
    pieces = sorted(nx.connected_components(_drive_graph(osm)), key=len, reverse=True)
    assert len(pieces) == 2 and len(pieces[1]) < 100


def test_downtown_one_way_pair_runs_in_opposite_directions(osm):
    pair = [(t, n) for _, t, n in osm.ways if t.get("oneway") == "yes" and not t["highway"].startswith("motorway")]
    assert len({t["name"] for t, _ in pair}) == 2
    vec = [np.subtract(osm.xy[n[-1]], osm.xy[n[0]]) for _, n in pair]
    unit = [v / np.hypot(*v) for v in vec]
    assert min(float(np.dot(unit[0], u)) for u in unit) < -0.99  # antiparallel
    # Parallel streets a few hundred metres apart at most.
    a, b = (shapely.LineString([osm.xy[x] for x in n]) for _, n in pair[:2])
    assert a.distance(b) < 500


def test_signals_sit_on_junctions_of_arterials(osm):
    arterial = Counter(
        n for _, t, nds in osm.ways if t.get("highway") in {"primary", "secondary", "tertiary"} for n in set(nds)
    )
    assert len(osm.signals) >= 10
    assert all(arterial[n] >= 2 for n in osm.signals)


def test_tag_mix_includes_non_drivable_ways_and_odd_maxspeed_values(osm):
    tags = [t for _, t, _ in osm.ways]
    kinds = Counter(t.get("highway") for t in tags)
    for k in ("footway", "cycleway", "track", "construction", "service", "residential", "unclassified"):
        assert kinds[k] >= 1, k
    assert any(t.get("access") == "private" for t in tags)
    speeds = Counter(t.get("maxspeed") for t in tags if t.get("highway") in DRIVE)
    assert speeds[None] >= 10 and speeds["50;70"] >= 1 and speeds["none"] >= 1
    assert all(t.get("name") for t in tags if t.get("highway") in DRIVE - {"motorway_link"})


def test_stations_and_candidates_lie_within_100_m_of_a_road(osm):
    roads = shapely.MultiLineString(
        [osm.lines[wid] for wid, t, _ in osm.ways if t.get("highway") in DRIVE - {"motorway", "motorway_link"}]
    )
    for kind, expected in (("stations", 4), ("candidates", 12)):
        pts = _points_utm(osm, SHIPPED / demo.FILE_NAMES[kind])
        assert len(pts) == expected
        assert shapely.distance(shapely.points(pts), roads).max() <= 100.0


def test_flood_zone_covers_exactly_one_river_bridge(osm):
    zone = gpd.read_file(SHIPPED / demo.FILE_NAMES["flood_zone"]).to_crs(osm.utm).union_all()
    (river_id,) = [wid for wid, tags, _ in osm.ways if tags.get("waterway") == "river"]
    river_bridges = [wid for wid, t, _ in osm.ways if t.get("bridge") == "yes" and osm.lines[wid].intersects(
        osm.lines[river_id])]  # fmt: skip
    assert sum(zone.contains(osm.lines[wid]) for wid in river_bridges) == 1


# --------------------------------------------------------------------------------------- demand layers


def test_population_raster_grid_units_and_total(osm):
    with rasterio.open(SHIPPED / demo.FILE_NAMES["population"]) as src:
        band = src.read(1, masked=True)
        assert src.crs.to_epsg() == osm.utm  # the county's own UTM zone (PROJ database)
        assert (src.transform.a, -src.transform.e) == (100.0, 100.0)  # 100 m cells
        assert src.dtypes[0] == "float32" and src.nodata is not None
        assert band.mask.any() and (~band.mask).any()
        assert band.min() >= 0.0
        total = float(band.sum())
    assert 60_000 <= total <= 90_000
    # Concentrated in towns: the densest 2 % of cells hold over a third of the residents.
    values = np.sort(band.compressed())[::-1]
    assert values[: len(values) // 50].sum() > total / 3


def test_blocks_cover_the_county_and_agree_with_the_raster():
    blocks = gpd.read_file(SHIPPED / demo.FILE_NAMES["blocks"], layer="blocks")
    boundary = gpd.read_file(SHIPPED / demo.FILE_NAMES["boundary"])
    with rasterio.open(SHIPPED / demo.FILE_NAMES["population"]) as src:
        total = float(src.read(1, masked=True).sum())
        crs = src.crs
    assert blocks["block_id"].is_unique and pd.api.types.is_integer_dtype(blocks["residents"])
    # Each block's count is its cells' sum rounded, so the totals differ by at most half a resident per block.
    assert abs(int(blocks["residents"].sum()) - total) <= 0.5 * len(blocks)
    area_blocks = blocks.to_crs(crs).area.sum()
    area_county = boundary.to_crs(crs).area.sum()
    assert area_blocks == pytest.approx(area_county, rel=1e-3)


def test_districts_cover_the_county_without_overlap(osm):
    zones = gpd.read_file(SHIPPED / demo.FILE_NAMES["districts"]).to_crs(osm.utm)
    county = gpd.read_file(SHIPPED / demo.FILE_NAMES["boundary"]).to_crs(osm.utm).union_all()
    assert zones["district"].is_unique and len(zones) >= 3
    assert zones.area.sum() == pytest.approx(county.area, rel=1e-3)
    assert zones.union_all().symmetric_difference(county).area < 1e-3 * county.area


def test_incidents_year_priorities_and_daily_pattern():
    inc = pd.read_csv(SHIPPED / demo.FILE_NAMES["incidents"])
    t = pd.to_datetime(inc["received_at"], format="ISO8601")
    assert 5_000 <= len(inc) <= 7_000 and inc["id"].is_unique
    assert (t.dt.year == 2026).all() and t.is_monotonic_increasing
    assert set(inc["priority"]) == {1, 2, 3}
    # Daily pattern of EMS demand: fewest calls before dawn, most in the afternoon (common practice, no source).
    per_hour = np.bincount(t.dt.hour, minlength=24)
    assert 10 <= int(np.argmax(per_hour)) <= 19
    assert per_hour[12:18].mean() > 2.0 * per_hour[2:6].mean()
    # Calls happen in every month (a whole calendar year).
    assert set(t.dt.month) == set(range(1, 13))


def test_incidents_inside_the_county_and_denser_in_towns(osm):
    inc = pd.read_csv(SHIPPED / demo.FILE_NAMES["incidents"])
    county = gpd.read_file(SHIPPED / demo.FILE_NAMES["boundary"]).union_all()
    assert shapely.contains_xy(county, inc["lon"], inc["lat"]).all()
    # More calls near the populous cells: sample the raster at each incident (rasterio) and compare with the mean.
    with rasterio.open(SHIPPED / demo.FILE_NAMES["population"]) as src:
        pts = _points_utm(osm, SHIPPED / demo.FILE_NAMES["incidents"])
        at_calls = np.array([v[0] for v in src.sample(pts)])
        band = src.read(1, masked=True)
    assert np.median(at_calls) > 5 * float(band.mean())


def test_observed_times_follow_shortest_paths_on_the_written_roads(osm):
    """Observed times against networkx Dijkstra on the written OSM roads with the generator's hidden speeds.

    Off-peak rows only (no slowdown); the noise is lognormal with median 1, so the median ratio sits near 1.
    The generator's own graph is not used: the graph here is built from the OSM file read with pyosmium.
    """
    obs = pd.read_csv(SHIPPED / demo.FILE_NAMES["observed_times"])
    assert 200 <= len(obs) <= 500 and obs["hour"].between(0, 23).all() and (obs["observed_s"] > 0).all()
    stations = pd.read_csv(SHIPPED / demo.FILE_NAMES["stations"])
    assert set(obs["base_id"]) <= set(stations["id"])
    signals = set(osm.signals)
    g = nx.DiGraph()
    for _, t, nds in osm.ways:
        hw = t.get("highway")
        if hw not in demo.TRUE_SPEED_KPH or t.get("access") == "private":
            continue
        mps = demo.TRUE_SPEED_KPH[hw] / 3.6
        for a, b in itertools.pairwise(nds):
            d = math.dist(osm.xy[a], osm.xy[b])
            g.add_edge(a, b, w=d / mps + demo.TRUE_SIGNAL_DELAY_S * (b in signals))
            if t.get("oneway") != "yes":
                g.add_edge(b, a, w=d / mps + demo.TRUE_SIGNAL_DELAY_S * (a in signals))
    main = max(nx.strongly_connected_components(g), key=len)
    ids = np.array(sorted(main))
    xy = np.array([osm.xy[n] for n in ids])

    def nearest(p):
        d = np.hypot(*(xy - p).T)
        return ids[np.argmin(d)], float(d.min())

    st_xy = dict(zip(stations["id"], _points_utm(osm, SHIPPED / demo.FILE_NAMES["stations"]), strict=True))
    tables = {s: nx.single_source_dijkstra_path_length(g, nearest(p)[0], weight="w") for s, p in st_xy.items()}
    off_peak = obs[~obs["hour"].isin([7, 8, 16, 17])]
    pts = np.column_stack(osm.to_utm.transform(off_peak["lon"].to_numpy(), off_peak["lat"].to_numpy()))
    ratios = []
    for base, p, observed in zip(off_peak["base_id"], pts, off_peak["observed_s"], strict=True):
        node, access_m = nearest(p)
        ratios.append(observed / (tables[base][node] + access_m / (20.0 / 3.6)))
    ratios = np.array(ratios)
    assert 0.9 < np.median(ratios) < 1.1
    assert 0.08 < np.std(np.log(ratios)) < 0.25  # the lognormal sigma of 0.15, loosely
