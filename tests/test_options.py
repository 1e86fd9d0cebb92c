"""Command-line options that had no test, each checked by a figure against an outside reference.

Sources named per test: pyproj (coordinates), the exact mile (1609.344 m), the OpenStreetMap wiki (keys oneway,
junction, access, motor_vehicle), hand-worked geometry on small layers written here, exhaustive enumeration, and the
Erlang/Larson queueing results in ../shared/REFERENCES.md.
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pyogrio
import pyproj
import pytest
import shapely

from coverkit.cli import main
from coverkit.network import RoadNetwork, load_profile

from .conftest import DEMO

MILE_M = 1609.344  # exact definition
X0, Y0 = 500_000.0, 5_000_000.0  # EPSG:32633, a UTM zone's central meridian (scale factor 0.9996)


@pytest.fixture(scope="module")
def demo_net(tmp_path_factory):
    out = tmp_path_factory.mktemp("net") / "net.gpkg"
    assert main(["network", str(DEMO / "varrowby.osm.bz2"), "--out", str(out), "-q"]) == 0
    return out


# --- network --------------------------------------------------------------------------------------------------


def test_network_crs_option_projects_nodes_as_pyproj_does(demo_net, tmp_path):
    """``--crs EPSG:32626`` (the next UTM zone) writes the network in that CRS; every node, taken back to lon/lat with
    pyproj, lies where the default build's node with the same OSM id lies (to 1e-7 degrees)."""
    out = tmp_path / "n26.gpkg"
    assert main(["network", str(DEMO / "varrowby.osm.bz2"), "--crs", "EPSG:32626", "--out", str(out), "-q"]) == 0
    a, b = RoadNetwork.load(demo_net), RoadNetwork.load(out)
    assert b.crs.to_epsg() == 32626 and a.crs.to_epsg() != 32626
    to_ll_a = pyproj.Transformer.from_crs(a.crs, "EPSG:4326", always_xy=True)
    to_ll_b = pyproj.Transformer.from_crs(b.crs, "EPSG:4326", always_xy=True)
    na = a.nodes.set_index("node_id").sort_index()
    nb = b.nodes.set_index("node_id").sort_index()
    assert list(na.index) == list(nb.index)
    la = np.column_stack(to_ll_a.transform(na["x"].to_numpy(), na["y"].to_numpy()))
    lb = np.column_stack(to_ll_b.transform(nb["x"].to_numpy(), nb["y"].to_numpy()))
    np.testing.assert_allclose(la, lb, atol=1e-7)
    assert not np.allclose(na["x"].to_numpy(), nb["x"].to_numpy(), atol=1000.0)


def _centerlines(path, gap_m: float = 0.6) -> None:
    """A 2 km x 1 km ladder in EPSG:32633 (metres), two layers. Codes are a county's own: LOC/COL classes, speeds in
    mph, one-way WITH (digitised direction) / AGAINST / BOTH. The middle rung's south end stops ``gap_m`` short of
    the junction it should meet (the usual defect)."""
    p = {k: (X0 + x, Y0 + y) for k, (x, y) in {"a": (0, 0), "b": (1000, 0), "c": (2000, 0)}.items()}
    p.update({k: (X0 + x, Y0 + y) for k, (x, y) in {"d": (0, 1000), "e": (1000, 1000), "f": (2000, 1000)}.items()})
    rows = [
        ("L1", "a", "b", "LOC", 25, "BOTH"),
        ("L2", "b", "c", "COL", 35, "WITH"),
        ("L3", "d", "e", "LOC", 25, "BOTH"),
        ("L4", "e", "f", "COL", 35, "AGAINST"),  # drawn e -> f, driven f -> e
        ("L5", "a", "d", "LOC", 25, "BOTH"),
        ("L6", "b", "e", "LOC", 25, "BOTH"),
        ("L7", "c", "f", "LOC", 25, "BOTH"),
    ]
    geoms = []
    for rid, s, t, *_ in rows:
        start = p[s]
        if rid == "L6":
            start = (start[0], start[1] + gap_m)
        geoms.append(shapely.LineString([start, p[t]]))
    gdf = gpd.GeoDataFrame(
        {
            "RID": [r[0] for r in rows],
            "FCODE": [r[3] for r in rows],
            "SPD_LIMIT": [r[4] for r in rows],
            "DIR": [r[5] for r in rows],
        },
        geometry=geoms,
        crs="EPSG:32633",
    )
    decoy = gpd.GeoDataFrame({"RID": ["X"]}, geometry=[shapely.LineString([(X0, Y0 - 5000), (X0 + 10, Y0 - 5000)])])
    decoy = decoy.set_crs("EPSG:32633")
    pyogrio.write_dataframe(decoy, path, layer="survey_marks", driver="GPKG")
    pyogrio.write_dataframe(gdf, path, layer="streets", driver="GPKG", append=True)


FIELDS = (
    "class=FCODE,speed=SPD_LIMIT,oneway=DIR,id=RID,speed_unit=mph,oneway_forward=WITH,oneway_backward=AGAINST,"
    "class_map=LOC:residential;COL:tertiary"
)


def _build(src, out, *extra):
    return main(["network", str(src), "--profile", "normal", "--fields", FIELDS, "--out", str(out), "-q", *extra])


def test_centerline_fields_layer_and_snap_tolerance(tmp_path):
    """The ladder built with ``--layer streets --fields ... --snap-tolerance-m 1``: class codes mapped by class_map,
    mph speeds timed with the exact mile, WITH and AGAINST honoured as one-way in and against the digitised
    direction, the 0.6 m gap joined (6 junctions). Times: length / (mph x 1609.344 m / 3600 s), capped by the
    normal profile's class cap (worked by hand from the layer)."""
    src = tmp_path / "county.gpkg"
    _centerlines(src)
    out = tmp_path / "net.gpkg"
    assert _build(src, out, "--layer", "streets", "--snap-tolerance-m", "1") == 0
    net = RoadNetwork.load(out)
    assert net.n_nodes == 6
    e = net.edges
    prof = load_profile("normal")
    xy = net.xy - [X0, Y0]

    def edges_between(a, b):
        ia = int(np.argmin(np.hypot(*(xy - a).T)))
        ib = int(np.argmin(np.hypot(*(xy - b).T)))
        return e[(e["u"] == ia) & (e["v"] == ib)]

    # L2, WITH: b -> c only
    assert len(edges_between((1000, 0), (2000, 0))) == 1 and len(edges_between((2000, 0), (1000, 0))) == 0
    # L4, AGAINST: f -> e only
    assert len(edges_between((2000, 1000), (1000, 1000))) == 1 and len(edges_between((1000, 1000), (2000, 1000))) == 0
    # L6 joined at b across the 0.6 m gap, two-way
    assert len(edges_between((1000, 0), (1000, 1000))) == 1 and len(edges_between((1000, 1000), (1000, 0))) == 1
    for (a, b), cls, mph in [(((0, 0), (1000, 0)), "residential", 25), (((1000, 0), (2000, 0)), "tertiary", 35)]:
        row = edges_between(a, b).iloc[0]
        assert row["road_class"] == cls
        rule = prof.speeds[cls]
        kph = min(mph * MILE_M / 1000.0 * rule.factor, rule.cap_kph if rule.cap_kph else np.inf)
        assert row["speed_kph"] == pytest.approx(kph, rel=1e-9)
        assert row["travel_s"] == pytest.approx(row["length_m"] / (kph / 3.6) + row["delay_s"], rel=1e-9)
        # length within the UTM scale factor of the planar 1000 m (0.9996 on the central meridian)
        assert row["length_m"] == pytest.approx(1000.0, rel=1e-3)


def test_centerline_snap_tolerance_below_the_gap_leaves_it_open(tmp_path):
    """With ``--snap-tolerance-m 0.1`` the 0.6 m gap stays open: L6's south end is its own dead-end node (7 nodes)
    and no edge joins b to it (hand-worked from the layer)."""
    src = tmp_path / "county.gpkg"
    _centerlines(src)
    out = tmp_path / "net.gpkg"
    assert _build(src, out, "--layer", "streets", "--snap-tolerance-m", "0.1") == 0
    net = RoadNetwork.load(out)
    assert net.n_nodes == 7
    xy = net.xy - [X0, Y0]
    south = np.hypot(*(xy - (1000, 0.6)).T) < 1e-3
    assert south.sum() == 1


def test_centerline_speed_unit_kph_scales_times_by_the_mile(tmp_path):
    """The same layer read with speed_unit=kph: every uncapped edge's running time is 1.609344 times longer
    (exact mile)."""
    src = tmp_path / "county.gpkg"
    _centerlines(src)
    mph, kph = tmp_path / "mph.gpkg", tmp_path / "kph.gpkg"
    assert _build(src, mph, "--layer", "streets", "--snap-tolerance-m", "1") == 0
    fields_kph = FIELDS.replace("speed_unit=mph", "speed_unit=kph")
    args = ["network", str(src), "--profile", "normal", "--fields", fields_kph, "--out", str(kph), "-q"]
    assert main([*args, "--layer", "streets", "--snap-tolerance-m", "1"]) == 0
    a, b = RoadNetwork.load(mph), RoadNetwork.load(kph)
    ra = a.edges["travel_s"] - a.edges["delay_s"]
    rb = b.edges["travel_s"] - b.edges["delay_s"]
    uncapped = np.isclose(a.edges["speed_kph"], a.edges["posted_kph"])
    assert uncapped.any()
    np.testing.assert_allclose((rb / ra)[uncapped], MILE_M / 1000.0, rtol=1e-9)


def test_centerline_without_layer_reads_the_named_one_only(tmp_path):
    """``--layer survey_marks`` reads that layer (no road class field there: one clear line, exit 2), proving the
    option picks the layer; the default is not silently the streets."""
    src = tmp_path / "county.gpkg"
    _centerlines(src)
    assert _build(src, tmp_path / "x.gpkg", "--layer", "survey_marks") == 2


# --- OSM tags, hand-written XML -------------------------------------------------------------------------------


def _osm(path, ways: list[tuple[int, list[int], dict]]) -> None:
    """An OSM XML file: nodes on a 400 m grid near 0.5 E 0.5 N, the given ways."""
    lon0, lat0, step = 0.5, 0.5, 400.0 / 111_320.0
    nodes = {
        1: (0, 0),
        2: (1, 0),
        3: (2, 0),
        4: (0, 1),
        5: (1, 1),
        6: (2, 1),
    }
    lines = ['<?xml version="1.0" encoding="UTF-8"?>', '<osm version="0.6" generator="coverkit tests">']
    for nid, (i, j) in nodes.items():
        lines.append(f'<node id="{nid}" version="1" lat="{lat0 + j * step:.7f}" lon="{lon0 + i * step:.7f}"/>')
    for wid, refs, tags in ways:
        lines.append(f'<way id="{wid}" version="1">')
        lines += [f'<nd ref="{r}"/>' for r in refs]
        lines += [f'<tag k="{k}" v="{v}"/>' for k, v in tags.items()]
        lines.append("</way>")
    lines.append("</osm>")
    path.write_text("\n".join(lines))


def _directed(net: RoadNetwork) -> set[tuple[int, int, int]]:
    nid = net.nodes["node_id"].to_numpy()
    return {
        (int(w), int(nid[u]), int(nid[v]))
        for w, u, v in zip(net.edges["source_id"], net.edges["u"], net.edges["v"], strict=True)
    }


def test_osm_oneway_minus_one_roundabout_motorway_and_motor_vehicle(tmp_path):
    """Tag meanings from the OpenStreetMap wiki: oneway=-1 is one-way against the drawing order; junction=roundabout
    and highway=motorway imply oneway=yes; oneway=no on a motorway makes it two-way; motor_vehicle=yes overrides
    access=no (the more specific mode wins), and access=no alone closes a way under the normal profile."""
    ways = [
        (10, [1, 2], {"highway": "residential"}),
        (11, [2, 3], {"highway": "residential", "oneway": "-1"}),  # driven 3 -> 2
        (12, [3, 6, 5, 2, 3], {"highway": "tertiary", "junction": "roundabout"}),  # loop, implied one-way
        (13, [4, 5], {"highway": "motorway"}),  # implied one-way 4 -> 5
        (14, [5, 4], {"highway": "motorway", "oneway": "no"}),  # explicitly two-way
        (15, [1, 4], {"highway": "residential", "access": "no", "motor_vehicle": "yes"}),
        (16, [4, 1], {"highway": "service", "access": "no"}),
    ]
    src = tmp_path / "tags.osm"
    _osm(src, ways)
    out = tmp_path / "net.gpkg"
    assert main(["network", str(src), "--profile", "normal", "--out", str(out), "-q"]) == 0
    d = _directed(RoadNetwork.load(out))
    assert {(10, 1, 2), (10, 2, 1)} <= d
    assert (11, 3, 2) in d and (11, 2, 3) not in d
    ring = [(a, b) for w, a, b in d if w == 12]
    assert len(ring) >= 3 and not {(b, a) for a, b in ring} & set(ring)
    assert (12, 5, 2) in d and (12, 2, 5) not in d
    assert (13, 4, 5) in d and (13, 5, 4) not in d
    assert {(14, 5, 4), (14, 4, 5)} <= d
    assert {(15, 1, 4), (15, 4, 1)} <= d
    assert not {e for e in d if e[0] == 16}
