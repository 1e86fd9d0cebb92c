"""Closures cut at polygon boundaries, and the invariant that a closure or a slowdown never shortens a time.

Outside references: plane geometry worked by hand (a straight two-way street at 36 km/h = 10 m/s), shapely's
intersection length (how much road lies inside the demo flood zone, data/demo, invented), and the design invariants
(a closure or a slowdown never shortens any travel time; adding a base never lengthens one), checked with
hypothesis over random closures and slowdowns on a 1,600-node synthetic county (benchmarks/bench_isochrones.py).
"""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
import shapely
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchmarks.bench_isochrones import synthetic_network
from coverkit.coverage import Standard, evaluate_coverage
from coverkit.network.model import grid_network
from coverkit.scenario import Closure, Scenario, Slowdown, apply_scenario, load_scenario
from coverkit.travel import node_times, point_times, snap_points
from coverkit.whatif import WhatIf

from .conftest import DEMO

X0, Y0 = 500000.0, 5000000.0
ALS = Standard("ALS", 480, 60, 0.9, "NFPA 1710")


def _box_scenario(net, box, kind="closure", factor=2.0):
    poly = shapely.box(*box)
    item = (
        Closure(0, "polygon", ("box",), poly, net.crs) if kind == "closure" else Slowdown(0, factor, (), poly, net.crs)
    )
    closures, slowdowns = ((item,), ()) if kind == "closure" else ((), (item,))
    return Scenario(Path("test.toml"), "box", "", closures, slowdowns, ())


def test_polygon_closes_only_the_stretch_inside_and_keeps_the_stubs():
    """Street 0-1-2 (100 m edges, 10 m/s), a polygon over x = 140..160 m: 20 m closed (not 100 m); a point at
    120 m is still reached from node 1 (12 s from node 0), a point at 180 m only from node 2 (2 s), never across."""
    net = grid_network(3, 1, 100.0, 36.0)
    scen = _box_scenario(net, (X0 + 140.0, Y0 - 10.0, X0 + 160.0, Y0 + 10.0))
    net2, _, log = apply_scenario(net, gpd.GeoDataFrame({"id": []}, geometry=[], crs=net.crs), scen)
    # (the grid gives each direction its own source id, so the log lists both directions of the street)
    assert np.allclose(log.closed["length_m"], 20.0) and np.allclose(log.closed["edge_length_m"], 100.0)
    pts = snap_points(net2, np.array([[X0 + 120.0, Y0], [X0 + 180.0, Y0]]))
    from_0 = point_times(net2, snap_points(net2, net2.xy[:1]), pts, 1e4)
    assert from_0.nnz == 1 and from_0[0, 0] == pytest.approx(12.0)
    from_2 = point_times(net2, snap_points(net2, net2.xy[2:]), pts, 1e4)
    assert from_2.nnz == 1 and from_2[0, 1] == pytest.approx(2.0)
    # the nodes beyond the cut are not reached through it
    assert node_times(net2, snap_points(net2, net2.xy[:1]), 1e4)[0].nnz == 2


def test_polygon_slowdown_slows_the_part_inside_only():
    """Half of the 100 m edge 1-2 inside a factor-2 slowdown: 50 m at 10 m/s + 50 m at 5 m/s = 15 s (not 20 s)."""
    net = grid_network(3, 1, 100.0, 36.0)
    scen = _box_scenario(net, (X0 + 150.0, Y0 - 10.0, X0 + 250.0, Y0 + 10.0), kind="slowdown", factor=2.0)
    net2, _, log = apply_scenario(net, gpd.GeoDataFrame({"id": []}, geometry=[], crs=net.crs), scen)
    e = np.flatnonzero((net.u == 1) & (net.v == 2))[0]
    assert net2.travel_s[e] == pytest.approx(15.0)
    assert np.allclose(log.slowed["length_m"], 50.0)  # both directions listed (grid source ids)


def test_demo_flood_closes_the_road_length_inside_the_zone(demo_net, tmp_path):
    """The flood scenario's closed length equals the road length inside the zone (shapely intersection, each street
    once), and is much less than the length of the edges the zone touches."""
    net = demo_net
    flood = DEMO / "flood_zone.geojson"
    path = tmp_path / "s.toml"
    path.write_text(f'[scenario]\nname = "flood"\n[[closure]]\npolygon = "{flood}"\n', encoding="utf-8")
    _, _, log = apply_scenario(net, gpd.GeoDataFrame({"id": []}, geometry=[], crs=net.crs), load_scenario(path))
    poly = gpd.read_file(flood).to_crs(net.crs).union_all()
    lines = net.road_lines().geometry.to_numpy()
    inside_km = shapely.length(shapely.intersection(lines, poly)).sum() / 1000.0
    touched_km = net.road_lines()["length_m"].to_numpy()[shapely.intersects(lines, poly)].sum() / 1000.0
    assert log.closed_km == pytest.approx(inside_km, rel=1e-3)
    assert log.closed_km < 0.5 * touched_km


@pytest.fixture(scope="module")
def demo_net():
    from coverkit.network import build_network

    net, _ = build_network(DEMO / "varrowby.osm.bz2", "emergency", boundary=DEMO / "boundary.geojson")
    return net


# -- the invariant, over random closures and slowdowns -----------------------------------------------------------------
@pytest.fixture(scope="module")
def county():
    net = synthetic_network(n_side=40, seed=3)
    rng = np.random.default_rng(1)
    lo, hi = net.xy.min(axis=0), net.xy.max(axis=0)
    bases = gpd.GeoDataFrame({"id": ["A", "B", "C"]}, geometry=shapely.points(rng.uniform(lo, hi, (3, 2))), crs=net.crs)
    extra = gpd.GeoDataFrame({"id": ["D"]}, geometry=shapely.points(rng.uniform(lo, hi, (1, 2))), crs=net.crs)
    demand = gpd.GeoDataFrame(
        {"id": np.arange(600).astype(str), "weight": np.ones(600)},
        geometry=shapely.points(rng.uniform(lo, hi, (600, 2))),
        crs=net.crs,
    )
    wi = WhatIf(net, bases, {"d": demand}, ALS, horizon_s=1500)
    return {"net": net, "bases": bases, "extra": extra, "demand": demand, "whatif": wi, "lo": lo, "hi": hi}


@st.composite
def _changes(draw, n_edges, lo, hi):
    closures, slowdowns = [], []
    for i in range(draw(st.integers(0, 2))):
        if draw(st.booleans()):
            ids = draw(st.lists(st.integers(0, n_edges - 1), min_size=1, max_size=30, unique=True))
            closures.append(Closure(i, "edge_ids", tuple(ids)))
        else:
            cx, cy = draw(st.floats(0.1, 0.9)), draw(st.floats(0.1, 0.9))
            r = draw(st.floats(50.0, 900.0))
            c = lo + (hi - lo) * np.array([cx, cy])
            poly = shapely.Point(*c).buffer(r, quad_segs=4)
            closures.append(Closure(i, "polygon", ("p",), poly, "EPSG:32633"))
    for i in range(draw(st.integers(0, 2))):
        cx, cy = draw(st.floats(0.1, 0.9)), draw(st.floats(0.1, 0.9))
        c = lo + (hi - lo) * np.array([cx, cy])
        poly = shapely.box(c[0] - 700.0, c[1] - 500.0, c[0] + 700.0, c[1] + 500.0)
        slowdowns.append(Slowdown(i, draw(st.floats(1.0, 3.0)), (), poly, "EPSG:32633"))
    return Scenario(Path("random.toml"), "random", "", tuple(closures), tuple(slowdowns), ())


def _nearest(result):
    return result.demand["travel_s"].to_numpy(dtype=float)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_closures_and_slowdowns_never_shorten_and_whatif_equals_full(county, data):
    """Invariant (design card): no node or demand-point time decreases under random closures (edge sets and
    polygons) and slowdowns; the incremental what-if equals apply_scenario + evaluate_coverage; adding a base after
    the change lengthens no time."""
    net, bases, demand, wi = county["net"], county["bases"], county["demand"], county["whatif"]
    scen = data.draw(_changes(net.n_edges, county["lo"], county["hi"]))
    if not scen.closures and not scen.slowdowns:
        return
    try:
        net2, bases2, _ = apply_scenario(net, bases, scen)
    except Exception as exc:  # a random polygon may hold no road: the scenario is refused, nothing to check
        assert "holds no road" in str(exc)
        return
    b_snap = snap_points(net, bases)
    reach_b = node_times(net, b_snap, 1500)
    reach_a = node_times(net2, snap_points(net2, bases), 1500)
    for i in range(len(bases)):
        rb, ra = reach_b[i].tocoo(), reach_a[i].tocoo()
        tb = dict(zip(rb.col.tolist(), rb.data.tolist(), strict=True))
        for n, t in zip(ra.col.tolist(), ra.data.tolist(), strict=True):
            assert n in tb and t >= tb[n] - 1e-9
    full = evaluate_coverage(net2, bases2, demand, ALS, horizon_s=1500)
    tb, ta = _nearest(wi.results[(ALS.name, "d")]), _nearest(full)
    assert not (ta < tb - 1e-9).any()
    out = wi.run(scen)
    got = out.results[(ALS.name, "d")]
    assert np.array_equal(_nearest(got), ta, equal_nan=True)
    assert (got.demand["first_base"] == full.demand["first_base"]).all()
    more = gpd.GeoDataFrame(
        {"id": [*bases["id"], "D"]},
        geometry=[*bases.geometry, *county["extra"].geometry],
        crs=net.crs,
    )
    with_more = _nearest(evaluate_coverage(net2, more, demand, ALS, horizon_s=1500))
    assert not (with_more > ta + 1e-9).any()
