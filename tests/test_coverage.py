"""Coverage against an independent computation, weighted fractiles, gap bookkeeping and standards."""

from __future__ import annotations

import geopandas as gpd
import networkx as nx
import numpy as np
import pytest
import shapely

from coverkit.coverage import Standard, area_layers, compliance_by, evaluate_coverage, per_base, weighted_fractile
from coverkit.errors import CoverkitError


# -- weighted fractile ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("q", [0.1, 0.5, 0.8, 0.9, 0.95, 1.0])
def test_fractile_equals_numpy_inverted_cdf_on_unweighted_data(q):
    """Unweighted: numpy.percentile(method="inverted_cdf") (Hyndman & Fan 1996, definition 1)."""
    rng = np.random.default_rng(11)
    values = rng.gamma(4.0, 90.0, size=997)
    assert weighted_fractile(values, None, q) == pytest.approx(np.percentile(values, 100 * q, method="inverted_cdf"))


def test_fractile_hand_worked_weighted_case():
    """Hand-worked: times 300, 420, 500, 700 s with weights 5, 3, 1, 1 (total 10). Cumulative shares 0.5, 0.8,
    0.9, 1.0, so the 80th percentile is 420 s, the 90th 500 s, the 85th 500 s and the 50th 300 s."""
    t = np.array([500.0, 300.0, 700.0, 420.0])
    w = np.array([1.0, 5.0, 1.0, 3.0])
    assert weighted_fractile(t, w, 0.5) == 300
    assert weighted_fractile(t, w, 0.8) == 420
    assert weighted_fractile(t, w, 0.85) == 500
    assert weighted_fractile(t, w, 0.9) == 500
    assert weighted_fractile(t, w, 0.91) == 700


def test_fractile_counts_unreached_demand_as_slowest():
    t = np.array([100.0, 200.0, np.inf])
    assert weighted_fractile(t, np.array([1, 1, 8.0]), 0.5) == np.inf
    assert weighted_fractile(t, np.array([8, 1, 1.0]), 0.8) == 100


def test_standard_validation():
    with pytest.raises(CoverkitError, match="fractile"):
        Standard("x", 480, 60, 90)
    with pytest.raises(CoverkitError, match="travel"):
        Standard("x", 0)
    assert "60 s turnout + 240 s travel, 90 %" in Standard("Engine", 240, 60, 0.9, "NFPA 1710").describe()


# -- independent computation ---------------------------------------------------------------------------------------
def _independent_times(net, base_xy, demand_xy):
    """Base -> demand travel times by a different code path: brute-force nearest edge with shapely.distance,
    partial edges by hand, networkx Dijkstra from a virtual source (same rules: both directions of a two-way
    street, signal delay only when the end node is passed)."""
    geoms = net.edges.geometry.to_numpy()
    e = net.edges
    run = (e["travel_s"] - e["delay_s"]).to_numpy()
    delay = e["delay_s"].to_numpy()
    u, v, src = e["u"].to_numpy(), e["v"].to_numpy(), e["source_id"].to_numpy()
    twin = {}
    index = {(a, b, s): i for i, (a, b, s) in enumerate(zip(u, v, src, strict=True))}
    for i, (a, b, s) in enumerate(zip(u, v, src, strict=True)):
        twin[i] = index.get((b, a, s))
    g = nx.DiGraph()
    for i in range(net.n_edges):
        w = float(net.travel_s[i])
        if not g.has_edge(int(u[i]), int(v[i])) or g[int(u[i])][int(v[i])]["w"] > w:
            g.add_edge(int(u[i]), int(v[i]), w=w)

    def entries(xy):
        p = shapely.Point(xy)
        d = shapely.distance(geoms, p)
        i = int(np.argmin(d))
        out = [(i, shapely.line_locate_point(geoms[i], p, normalized=True))]
        j = twin[i]
        if j is not None and abs(net.length_m[j] - net.length_m[i]) < 1e-6 * max(1.0, net.length_m[i]):
            out.append((j, shapely.line_locate_point(geoms[j], p, normalized=True)))
        return out

    demand_entries = [entries(xy) for xy in demand_xy]
    result = np.full((len(base_xy), len(demand_xy)), np.inf)
    for b, bxy in enumerate(base_xy):
        h = g.copy()
        h.add_node("S")
        b_entries = entries(bxy)
        for i, f in b_entries:
            h.add_edge("S", int(v[i]), w=(1 - f) * run[i] + delay[i])
        dist = nx.single_source_dijkstra_path_length(h, "S", weight="w")
        for k, ents in enumerate(demand_entries):
            best = np.inf
            for i, f in ents:
                if int(u[i]) in dist:
                    best = min(best, dist[int(u[i])] + f * run[i])
                for bi, bf in b_entries:
                    if bi == i and bf <= f:
                        best = min(best, (f - bf) * run[i])
            result[b, k] = best
    return result


@pytest.fixture(scope="module")
def demo_case():
    """The demo county: its four stations and 150 population cells drawn with probability by population."""
    from coverkit.demand import demand_from_raster
    from coverkit.network import build_network
    from coverkit.travel import read_points

    from .conftest import DEMO

    net, _ = build_network(DEMO / "varrowby.osm.bz2", "emergency", boundary=DEMO / "boundary.geojson")
    bases = read_points(DEMO / "stations.csv", net.crs, what="bases")
    cells = demand_from_raster(DEMO / "population.tif", net.crs)
    rng = np.random.default_rng(8)
    pick = rng.choice(len(cells), 150, replace=False, p=cells["weight"] / cells["weight"].sum())
    return net, bases, cells.iloc[np.sort(pick)].reset_index(drop=True), Standard("ALS", 480.0, 60.0, 0.9)


@pytest.fixture
def helsinki_case(helsinki_network):
    net, _ = helsinki_network
    rng = np.random.default_rng(5)
    x0, y0, x1, y1 = net.nodes.total_bounds
    bases_xy = net.xy[rng.choice(net.n_nodes, 3, replace=False)] + rng.normal(0, 15, (3, 2))
    demand_xy = np.column_stack([rng.uniform(x0, x1, 150), rng.uniform(y0, y1, 150)])
    bases = gpd.GeoDataFrame({"id": ["B1", "B2", "B3"]}, geometry=shapely.points(bases_xy), crs=net.crs)
    weights = rng.integers(1, 40, 150).astype(float)
    demand = gpd.GeoDataFrame(
        {"id": [f"d{i}" for i in range(150)], "weight": weights}, geometry=shapely.points(demand_xy), crs=net.crs
    )
    return net, bases, demand, Standard("test", travel_s=150.0, turnout_s=60.0, fractile=0.9)


@pytest.mark.parametrize("case", ["demo_case", "helsinki_case"])
def test_covered_population_and_depth_equal_independent_computation(case, request):
    """Covered weight, depth, first- and second-due times equal the networkx + shapely computation, on the demo
    county and on the Helsinki OSM extract."""
    net, bases, demand, std = request.getfixturevalue(case)
    bases_xy = shapely.get_coordinates(bases.geometry.to_numpy())
    demand_xy = shapely.get_coordinates(demand.geometry.to_numpy())
    weights = demand["weight"].to_numpy(dtype=float)
    res = evaluate_coverage(net, bases, demand, std, max_snap_m=5000)
    ref = _independent_times(net, bases_xy, demand_xy)
    ref_sorted = np.sort(ref, axis=0)
    ref_sorted = np.where(ref_sorted <= res.horizon_s, ref_sorted, np.inf)
    np.testing.assert_allclose(res.demand["travel_s"], ref_sorted[0], rtol=1e-9, atol=1e-6)
    np.testing.assert_allclose(res.demand["second_travel_s"], ref_sorted[1], rtol=1e-9, atol=1e-6)
    ref_depth = (ref <= std.travel_s).sum(axis=0)
    np.testing.assert_array_equal(res.demand["depth"], ref_depth)
    ref_covered = weights[ref_sorted[0] <= std.travel_s].sum()
    assert res.summary()["covered"] == pytest.approx(ref_covered)
    assert 0 < res.summary()["covered_share"] < 1  # the case is not trivial
    np.testing.assert_allclose(res.demand["response_s"], res.demand["travel_s"] + 60.0)


def test_gap_populations_add_up_to_uncovered(helsinki_network):
    net, _ = helsinki_network
    rng = np.random.default_rng(9)
    x0, y0, x1, y1 = net.nodes.total_bounds
    bases = gpd.GeoDataFrame({"id": ["A"]}, geometry=shapely.points(net.xy[[7]]), crs=net.crs)
    n = 2000
    demand = gpd.GeoDataFrame(
        {"id": [str(i) for i in range(n)], "weight": rng.uniform(0, 10, n), "priority": rng.integers(1, 4, n)},
        geometry=shapely.points(np.column_stack([rng.uniform(x0, x1, n), rng.uniform(y0, y1, n)])),
        crs=net.crs,
    )
    res = evaluate_coverage(net, bases, demand, Standard("s", 120.0))
    areas = area_layers(net, res)
    summary = res.summary()
    assert summary["uncovered"] > 0
    assert areas.gaps["uncovered_demand"].sum() == pytest.approx(summary["uncovered"], rel=1e-9)
    assert (areas.demand_gap_id[~res.demand["covered"].to_numpy()] > 0).all()
    assert (areas.demand_gap_id[res.demand["covered"].to_numpy()] == 0).all()
    assert list(areas.gaps["gap_id"]) == list(range(1, len(areas.gaps) + 1))
    assert areas.gaps["uncovered_demand"].is_monotonic_decreasing
    assert shapely.is_valid(areas.gaps.geometry.to_numpy()).all()
    # every first-due area belongs to the single base; the per-base table agrees with the demand table
    assert set(areas.first_due["base_id"]) == {"A"}
    pb = per_base(res)
    assert pb["first_due_demand"].sum() == pytest.approx(res.demand.loc[res.demand["first_base"] != "", "weight"].sum())
    by_priority = compliance_by(res, "priority")
    assert by_priority["demand"].sum() == pytest.approx(summary["demand_total"])


def test_off_network_demand_is_counted_not_dropped(helsinki_network):
    net, _ = helsinki_network
    x0, y0, x1, y1 = net.nodes.total_bounds
    bases = gpd.GeoDataFrame({"id": ["A"]}, geometry=shapely.points(net.xy[[7]]), crs=net.crs)
    pts = shapely.points([[x0 - 3000, y0 - 3000], [(x0 + x1) / 2, (y0 + y1) / 2]])
    demand = gpd.GeoDataFrame({"id": ["far", "mid"], "weight": [5.0, 1.0]}, geometry=pts, crs=net.crs)
    res = evaluate_coverage(net, bases, demand, Standard("s", 600.0))
    s = res.summary()
    assert s["off_network_points"] == 1 and s["off_network"] == 5.0
    assert len(res.demand) == 2 and not res.demand.loc[0, "covered"]
