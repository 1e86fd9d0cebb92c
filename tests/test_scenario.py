"""Scenarios and the quick what-if on the demo county (data/demo, invented) and a uniform grid.

Outside references: the demo's own OSM XML read with the standard library (which ways are the river bridges, by
their ``bridge:name`` tag), networkx Dijkstra (shortest times), scipy connected components (the river split),
shapely predicates (which roads touch the flood zone, which points lie in which polygon), the geometry fact that
scaling every edge weight by f scales every shortest path by f, and the physical bound "travel time >= straight-line
distance / top speed". The response standard is NFPA 1710's ALS travel objective (60 s turnout + 480 s travel,
90 %, as quoted in the trade) and its 240 s first-arriving travel objective.
"""

from __future__ import annotations

import bz2
import xml.etree.ElementTree as ET

import geopandas as gpd
import networkx as nx
import numpy as np
import pandas as pd
import pytest
import shapely
from scipy.sparse.csgraph import connected_components

from coverkit.compare_run import compare_study
from coverkit.coverage import Standard, evaluate_coverage, travel_table
from coverkit.errors import CoverkitError, StudyError
from coverkit.network import RoadNetwork, build_network
from coverkit.network.model import grid_network
from coverkit.scenario import (
    CHANGE_KINDS,
    apply_scenario,
    changed_areas,
    compare_results,
    load_scenario,
)
from coverkit.study import load_study
from coverkit.travel import read_points, snap_points
from coverkit.whatif import NO_REACH_NOTE, WhatIf

from .conftest import DEMO, same_table

ALS = Standard("ALS", 480, 60, 0.9, "NFPA 1710")
FIRST_DUE = Standard("First due", 240, 60, 0.9, "NFPA 1710")


# -- fixtures ---------------------------------------------------------------------------------------------------------
def _osm_bridges() -> dict[int, dict[str, str]]:
    """Ways of the demo OSM file tagged with a ``bridge:name``, read with the standard library only."""
    out = {}
    with bz2.open(DEMO / "varrowby.osm.bz2") as fh:
        for _, el in ET.iterparse(fh):
            if el.tag == "way":
                tags = {t.get("k"): t.get("v") for t in el.findall("tag")}
                if "bridge:name" in tags:
                    out[int(el.get("id"))] = tags
                el.clear()
    return out


@pytest.fixture(scope="module")
def demo():
    net, _ = build_network(DEMO / "varrowby.osm.bz2", "emergency", boundary=DEMO / "boundary.geojson")
    bases = read_points(DEMO / "stations.csv", net.crs, what="bases")
    from coverkit.demand import load_demand

    residents = load_demand(DEMO / "population.tif", net)
    calls = load_demand(DEMO / "incidents.csv", net)
    return {"net": net, "bases": bases, "residents": residents, "calls": calls, "bridges": _osm_bridges()}


@pytest.fixture(scope="module")
def whatif(demo):
    return WhatIf(demo["net"], demo["bases"], {"calls": demo["calls"]}, [ALS, FIRST_DUE], horizon_s=1800)


def _write(path, text):
    path.write_text(text, encoding="utf-8")
    return path


def _scenario(tmp_path, body, name="test"):
    return load_scenario(_write(tmp_path / "s.toml", f'[scenario]\nname = "{name}"\n{body}'))


def _without_edges(net: RoadNetwork, drop: np.ndarray) -> RoadNetwork:
    """The network rebuilt with the edges removed (renumbered), not closed: a different code path."""
    keep = np.setdiff1d(np.arange(net.n_edges), drop)
    edges = net.edges.iloc[keep].reset_index(drop=True)
    edges["edge_id"] = np.arange(len(edges))
    return RoadNetwork(net.nodes, edges, net.crs, net.profile, {"source": "test: edges removed"})


def _nx_node_times(net: RoadNetwork, base_snap, i: int, weight: np.ndarray) -> dict[int, float]:
    """networkx Dijkstra from base ``i`` (a virtual node joined to its seed nodes) with edge weights ``weight``."""
    g = nx.DiGraph()
    finite = np.isfinite(weight)
    for a, b, w in zip(net.u[finite], net.v[finite], weight[finite], strict=True):
        if not g.has_edge(a, b) or g[a][b]["w"] > w:
            g.add_edge(int(a), int(b), w=float(w))
    # leaving the base along each directed edge it lies on: the rest of the running time plus the end-node delay
    # (the documented convention), written here rather than taken from coverkit.travel.search.seeds
    delay = net.edges["delay_s"].to_numpy(dtype=float)
    mine = base_snap.entry_point == i
    for e, f in zip(base_snap.entry_edge[mine], base_snap.entry_frac[mine], strict=True):
        t = float((1.0 - f) * (weight[e] - delay[e]) + delay[e])
        n = int(net.v[e])
        if np.isfinite(t) and (not g.has_edge(-1, n) or g[-1][n]["w"] > t):
            g.add_edge(-1, n, w=t)
    return nx.single_source_dijkstra_path_length(g, -1, weight="w")


# -- the river bridges ------------------------------------------------------------------------------------------------
def test_demo_osm_has_three_named_river_bridges(demo):
    """The demo README says three road bridges cross the river, tagged bridge=yes and bridge:name."""
    names = sorted(t["bridge:name"] for t in demo["bridges"].values())
    assert names == ["Ambrel Bridge", "Ferry Bridge", "Oxle Bridge"]
    assert all(t.get("bridge") == "yes" for t in demo["bridges"].values())


def test_bridge_closure_equals_network_without_the_bridges(demo, tmp_path):
    """Closing the three bridges (the only crossings) by way id: coverage loss equals a recomputation on the network
    rebuilt without those edges (covered weight and per-point times to 1e-6 s); the closed network splits in two
    weakly connected parts (scipy), and no point is first-due from a base across the river."""
    net, bases, dem = demo["net"], demo["bases"], demo["residents"]
    ways = sorted(demo["bridges"])
    scen = _scenario(tmp_path, f"[[closure]]\nway_ids = {ways}\n", "bridges closed")
    net2, bases2, log = apply_scenario(net, bases, scen)
    closed = log.closed_edge_ids
    assert set(net.edges["source_id"].to_numpy()[closed]) == set(ways)
    # a bridge is named by its OSM bridge:name tag (the road's name tag otherwise)
    assert set(log.closed["name"]) == {demo["bridges"][w]["bridge:name"] for w in ways}
    before = evaluate_coverage(net, bases, dem, ALS)
    after = evaluate_coverage(net2, bases2, dem, ALS)
    ref = evaluate_coverage(_without_edges(net, closed), bases, dem, ALS)
    comp = compare_results(before, after)
    # a point on a closed bridge keeps its snap (design invariant: a closure never moves a point onto another
    # road) and is unreached; every other point gets the time of the network rebuilt without the bridges
    snap = before.extra["demand_snap"]
    on_bridge = np.zeros(len(dem), dtype=bool)
    on_bridge[snap.entry_point[np.isin(snap.entry_edge, closed)]] = True
    ta, tr = after.demand["travel_s"].to_numpy(), ref.demand["travel_s"].to_numpy()
    assert on_bridge.any() and np.isinf(ta[on_bridge]).all()
    ka, kr = ta[~on_bridge], tr[~on_bridge]
    assert np.array_equal(np.isinf(ka), np.isinf(kr))
    np.testing.assert_allclose(ka[np.isfinite(ka)], kr[np.isfinite(kr)], atol=1e-6, rtol=0)
    assert (after.demand["first_base"][~on_bridge] == ref.demand["first_base"][~on_bridge]).all()
    assert comp.lost_weight > 0 and comp.lost_weight == pytest.approx(
        before.summary()["covered"] - after.summary()["covered"] + comp.gained_weight
    )
    # the river split, by scipy on the closed network
    _, labels = connected_components(net2.csr(), directed=True, connection="weak")
    sizes = np.sort(np.bincount(labels))[::-1]
    assert sizes[1] > 0.2 * net.n_nodes  # two large banks
    base_part = labels[net2.u[snap_points(net2, bases2).edge]]
    d = after.demand
    on = d["on_network"].to_numpy() & np.isfinite(ta)
    point_part = labels[net2.u[after.extra["demand_snap"].edge[on]]]
    first = d["first_base"].to_numpy()[on]
    part_of_base = dict(zip(bases2["id"], base_part, strict=True))
    assert (np.array([part_of_base[b] for b in first]) == point_part).all()


def test_flood_zone_closes_the_roads_it_touches_or_only_its_bridge(demo, tmp_path):
    """flood_zone.geojson covers the Ambrel Bridge (demo README): with only_bridges the closure is exactly that
    bridge's way (by its OSM bridge:name); without, every edge intersecting the polygon (shapely.intersects)."""
    net = demo["net"]
    flood = DEMO / "flood_zone.geojson"
    scen = _scenario(tmp_path, f'[[closure]]\npolygon = "{flood}"\nonly_bridges = true\n')
    _, _, log = apply_scenario(net, demo["bases"], scen)
    ambrel = [w for w, t in demo["bridges"].items() if t["bridge:name"] == "Ambrel Bridge"]
    assert set(log.closed["way_id"]) == set(ambrel)
    scen = _scenario(tmp_path, f'[[closure]]\npolygon = "{flood}"\n')
    _, _, log = apply_scenario(net, demo["bases"], scen)
    poly = gpd.read_file(flood).to_crs(net.crs).union_all()
    expect = np.flatnonzero(shapely.intersects(net.edges.geometry.to_numpy(), poly))
    assert np.array_equal(log.closed_edge_ids, expect) and len(expect) > len(ambrel)


def test_closed_network_times_equal_networkx(demo, whatif):
    """After closing the Ambrel Bridge, base node times equal networkx Dijkstra on the open edges (1e-6 s)."""
    from coverkit.travel import node_times

    ambrel = [w for w, t in demo["bridges"].items() if t["bridge:name"] == "Ambrel Bridge"]
    out = whatif.close_ways(ambrel)
    net2 = out.network
    snap = snap_points(net2, out.bases)
    nt = node_times(net2, snap, whatif.horizon_s)
    for i in range(len(out.bases)):
        ref = _nx_node_times(net2, snap, i, np.maximum(net2.travel_s, 1e-9))
        ref = {n: t for n, t in ref.items() if n >= 0 and t <= whatif.horizon_s}
        row = nt[i].tocoo()
        assert sorted(row.col.tolist()) == sorted(ref)
        np.testing.assert_allclose(row.data, [ref[int(n)] for n in row.col], atol=1e-6, rtol=0)


# -- quick what-if equals the full recomputation ----------------------------------------------------------------------
def test_whatif_base_state_equals_travel_table(demo, whatif):
    """The what-if's base times (derived from stored node times) equal coverage.travel_table exactly."""
    ref = travel_table(demo["net"], demo["bases"], demo["calls"], whatif.horizon_s)
    assert same_table(whatif.tables["calls"].times, ref.times)


def _full(out, demo, std):
    return evaluate_coverage(out.network, out.bases, demo["calls"], std, horizon_s=1800)


@pytest.mark.parametrize(
    "change",
    ["ambrel", "bridges", "one_direction", "residential_slow", "speedup", "add", "remove", "move"],
)
def test_whatif_equals_full_recompute_exactly(demo, whatif, change):
    """Every what-if result equals evaluate_coverage on the changed inputs: the same sparse time table (structure
    and values, bit for bit) and the same per-point results."""
    net, bridges = demo["net"], demo["bridges"]
    cand = pd.read_csv(DEMO / "candidates.csv").iloc[0]
    if change == "ambrel":
        out = whatif.close_ways([w for w, t in bridges.items() if t["bridge:name"] == "Ambrel Bridge"])
    elif change == "bridges":
        out = whatif.close_ways(sorted(bridges))
    elif change == "one_direction":
        out = whatif.close_edges([int(np.flatnonzero(net.edges["source_id"] == sorted(bridges)[0])[0])])
    elif change == "residential_slow":
        out = whatif.slow_edges(np.flatnonzero(net.edges["road_class"] == "residential"), 1.5)
    elif change == "speedup":
        out = whatif.slow_edges(np.flatnonzero(net.edges["road_class"] == "primary"), 0.8)
    elif change == "add":
        out = whatif.change_base("add", "C01", float(cand["lon"]), float(cand["lat"]))
    elif change == "remove":
        out = whatif.change_base("remove", "S3")
        assert out.recomputed_bases == []
    else:
        out = whatif.change_base("move", "S2", float(cand["lon"]), float(cand["lat"]))
        assert out.recomputed_bases == ["S2"]
    for std in (ALS, FIRST_DUE):
        full = _full(out, demo, std)
        got = out.results[(std.name, "calls")]
        assert same_table(got.times, full.times)
        for col in ("travel_s", "second_travel_s", "snap_m"):
            assert np.array_equal(got.demand[col].to_numpy(), full.demand[col].to_numpy(), equal_nan=True), col
        for col in ("first_base", "second_base", "covered", "depth", "on_network"):
            assert (got.demand[col] == full.demand[col]).all(), col


def test_whatif_skipping_some_bases_is_still_exact(demo, whatif):
    """Single directed edges whose closure leaves some bases' searches untouched: the skipped bases keep their
    stored rows, and the whole result still equals the full recomputation bit for bit."""
    net = demo["net"]
    picked = []
    for e in range(0, net.n_edges, 7):
        t = net.travel_s.copy()
        t[e] = np.inf
        hit = whatif.affected_bases(t)
        if 0 < hit.sum() < len(hit):
            picked.append(e)
        if len(picked) == 3:
            break
    assert len(picked) == 3
    for e in picked:
        out = whatif.close_edges([e])
        assert 0 < len(out.recomputed_bases) < len(out.bases)
        full = _full(out, demo, ALS)
        assert same_table(out.results[(ALS.name, "calls")].times, full.times)
        assert np.array_equal(out.results[(ALS.name, "calls")].demand["travel_s"], full.demand["travel_s"])


def test_whatif_runs_a_whole_scenario_exactly(demo, whatif, tmp_path):
    """A scenario file with a flood closure, a slowdown and base changes (S3 removed and re-added elsewhere under
    the same id, which must be searched again): the what-if equals apply_scenario + evaluate_coverage."""
    cand = pd.read_csv(DEMO / "candidates.csv").iloc[1]
    scen = _scenario(
        tmp_path,
        f'[[closure]]\npolygon = "{DEMO / "flood_zone.geojson"}"\n'
        '[[slowdown]]\nroad_class = "residential"\nfactor = 1.3\n'
        '[[base_change]]\nremove = "S3"\n'
        f'[[base_change]]\nadd = {{ id = "S3", lon = {cand["lon"]}, lat = {cand["lat"]} }}\n',
    )
    out = whatif.run(scen)
    net2, bases2, _ = apply_scenario(demo["net"], demo["bases"], scen)
    assert "S3" in out.recomputed_bases and np.array_equal(net2.travel_s, out.network.travel_s)
    full = evaluate_coverage(net2, bases2, demo["calls"], ALS, horizon_s=1800)
    assert same_table(out.results[(ALS.name, "calls")].times, full.times)
    assert (out.results[(ALS.name, "calls")].demand["first_base"] == full.demand["first_base"]).all()


def test_whatif_inbound_direction_equals_full_recompute(demo):
    """Demand-to-base travel (direction "in", searched on the reversed graph): closure and slowdown what-ifs equal
    the full recomputation exactly."""
    net, bases, dem = demo["net"], demo["bases"], demo["calls"]
    wi = WhatIf(net, bases, dem, ALS, horizon_s=1200, direction="in")
    for out in (
        wi.close_ways(sorted(demo["bridges"])[:1]),
        wi.close_edges([int(np.flatnonzero(net.edges["bridge"])[0])]),
        wi.slow_edges(np.flatnonzero(net.edges["road_class"] == "tertiary"), 1.7),
    ):
        full = evaluate_coverage(out.network, out.bases, dem, ALS, horizon_s=1200, direction="in")
        assert same_table(out.result.times, full.times)


def test_closure_out_of_every_search_changes_nothing(demo):
    """Roads farther from every base than horizon x top speed cannot be reached (travel time >= straight-line
    distance / top speed); closing them recomputes no base, changes no result and says so."""
    net, bases = demo["net"], demo["bases"]
    horizon_s = 240.0
    wi = WhatIf(net, bases, demo["calls"], FIRST_DUE, horizon_s=horizon_s)
    top_mps = net.edges["speed_kph"].max() / 3.6
    dist = np.min([shapely.distance(net.edges.geometry.to_numpy(), g) for g in bases.to_crs(net.crs).geometry], axis=0)
    far = np.flatnonzero(dist > 1.2 * horizon_s * top_mps)
    assert len(far) > 10
    out = wi.close_edges(far)
    assert out.recomputed_bases == []
    assert NO_REACH_NOTE in out.changes.lines()
    full = evaluate_coverage(out.network, bases, demo["calls"], FIRST_DUE, horizon_s=horizon_s)
    before = wi.results[(FIRST_DUE.name, "demand")]
    np.testing.assert_array_equal(out.result.demand["travel_s"], before.demand["travel_s"])
    np.testing.assert_array_equal(full.demand["travel_s"], before.demand["travel_s"])
    comp = compare_results(before, out.result)
    assert comp.unchanged and comp.lost_points == 0 and comp.gained_points == 0


# -- slowdowns --------------------------------------------------------------------------------------------------------
def test_slowdown_by_class_multiplies_running_time(demo, tmp_path):
    """factor x running time + the unchanged signal delay on the named classes, every other edge bit-identical;
    shortest times on the slowed network equal networkx Dijkstra with those weights."""
    net, bases = demo["net"], demo["bases"]
    scen = _scenario(tmp_path, '[[slowdown]]\nroad_class = ["residential", "unclassified"]\nfactor = 1.5\n')
    net2, _, log = apply_scenario(net, bases, scen)
    e = net.edges
    cls = e["road_class"].isin(["residential", "unclassified"]).to_numpy()
    expect = np.where(cls, (e["travel_s"] - e["delay_s"]) * 1.5 + e["delay_s"], e["travel_s"])
    np.testing.assert_allclose(net2.travel_s[cls], expect[cls], rtol=1e-12)
    assert np.array_equal(net2.travel_s[~cls], net.travel_s[~cls])
    assert np.array_equal(log.slowed_edge_ids, np.flatnonzero(cls))
    from coverkit.travel import node_times

    snap = snap_points(net2, bases)
    nt = node_times(net2, snap, 1e9).toarray()
    ref = _nx_node_times(net2, snap, 0, np.maximum(expect, 1e-9))
    nodes = np.array([n for n in ref if n >= 0])
    np.testing.assert_allclose(nt[0, nodes], [ref[n] for n in nodes], atol=1e-6)


def test_uniform_slowdown_scales_every_time_on_a_grid():
    """No delays, every edge slowed by f: every shortest time is f times longer (scaling all weights scales all
    path lengths; geometry, exact)."""
    net = grid_network(15, 15, 100.0, 36.0)
    xy = net.xy
    bases = gpd.GeoDataFrame({"id": ["A", "B"]}, geometry=shapely.points(xy[[16, 200]] + 30.0), crs=net.crs)
    rng = np.random.default_rng(3)
    pts = rng.uniform(xy.min(axis=0), xy.max(axis=0), size=(300, 2))
    dem = gpd.GeoDataFrame({"id": np.arange(300).astype(str), "weight": 1.0}, geometry=shapely.points(pts), crs=net.crs)
    std = Standard("grid", 60.0)
    wi = WhatIf(net, bases, dem, std, horizon_s=10_000)
    out = wi.slow_edges(np.arange(net.n_edges), 2.5)
    t0 = wi.results[("grid", "demand")].demand["travel_s"].to_numpy()
    np.testing.assert_allclose(out.result.demand["travel_s"].to_numpy(), 2.5 * t0, rtol=1e-12)
    assert out.recomputed_bases == ["A", "B"]


def test_slowdown_inside_the_flood_polygon_only(demo, tmp_path):
    net = demo["net"]
    scen = _scenario(tmp_path, f'[[slowdown]]\npolygon = "{DEMO / "flood_zone.geojson"}"\nfactor = 2\n')
    net2, _, _ = apply_scenario(net, demo["bases"], scen)
    poly = gpd.read_file(DEMO / "flood_zone.geojson").to_crs(net.crs).union_all()
    inside = shapely.intersects(net.edges.geometry.to_numpy(), poly)
    assert (net2.travel_s[inside] > net.travel_s[inside]).all()
    assert np.array_equal(net2.travel_s[~inside], net.travel_s[~inside])


# -- base changes -----------------------------------------------------------------------------------------------------
def test_base_changes_add_remove_move_units(demo, tmp_path):
    """Add: no point gets slower (the nearest of more bases). Remove: nobody is first-due from the removed base,
    and the result equals coverage with the base dropped from the table. Move onto another base: the two rows of
    times are identical. Units: drive-time coverage unchanged, units column updated."""
    net, bases, dem = demo["net"], demo["bases"], demo["calls"]
    cand = pd.read_csv(DEMO / "candidates.csv").iloc[0]
    s3 = pd.read_csv(DEMO / "stations.csv").set_index("id").loc["S3"]
    body = (
        f'[[base_change]]\nadd = {{ id = "C01", lon = {cand["lon"]}, lat = {cand["lat"]}, units = 2 }}\n'
        '[[base_change]]\nremove = "S4"\n'
        f'[[base_change]]\nmove = {{ id = "S2", lon = {s3["lon"]}, lat = {s3["lat"]} }}\n'
        '[[base_change]]\nunits = { id = "S1", units = 2 }\n'
    )
    scen = _scenario(tmp_path, body)
    net2, bases2, log = apply_scenario(net, bases, scen)
    assert net2 is net and list(bases2["id"]) == ["S1", "S2", "S3", "C01"]
    assert dict(zip(bases2["id"], bases2["units"], strict=True)) == {"S1": 2, "S2": 2, "S3": 1, "C01": 2}
    assert list(log.base_changes["action"]) == ["added", "removed", "moved", "units"]
    after = evaluate_coverage(net2, bases2, dem, ALS)
    times = after.times.toarray()
    reached = after.times.copy()
    reached.data[:] = 1
    s2, s3i = 1, 2
    assert np.array_equal(times[s2], times[s3i]) and (reached[s2] != reached[s3i]).nnz == 0
    assert "S4" not in set(after.demand["first_base"])

    before = evaluate_coverage(net, bases, dem, ALS)
    _, only_add, _ = apply_scenario(net, bases, _scenario(tmp_path, body.split("[[base_change]]\nremove")[0]))
    added = evaluate_coverage(net, only_add, dem, ALS)
    assert (added.demand["travel_s"].to_numpy() <= before.demand["travel_s"].to_numpy()).all()
    removed = evaluate_coverage(net, bases[bases["id"] != "S4"].reset_index(drop=True), dem, ALS)
    _, rb, _ = apply_scenario(net, bases, _scenario(tmp_path, '[[base_change]]\nremove = "S4"\n'))
    np.testing.assert_array_equal(evaluate_coverage(net, rb, dem, ALS).demand["travel_s"], removed.demand["travel_s"])
    comp = compare_results(before, removed)
    row = comp.bases.set_index("base_id").loc["S4"]
    assert row["status"] == "removed" and row["first_due_demand_after"] == 0
    assert row["first_due_demand_change"] == pytest.approx(-row["first_due_demand_before"])
    _, ub, _ = apply_scenario(net, bases, _scenario(tmp_path, '[[base_change]]\nunits = { id = "S1", units = 2 }\n'))
    np.testing.assert_array_equal(evaluate_coverage(net, ub, dem, ALS).demand["travel_s"], before.demand["travel_s"])


# -- comparison and changed areas -------------------------------------------------------------------------------------
def test_comparison_tables_and_changed_areas_add_up(demo, whatif):
    """Per-point change kinds and delta_s follow their definitions; covered after - before = gained - lost; every
    point that lost (gained) coverage lies inside a lost (gained) polygon (shapely) and the polygon weights add up
    to the lost (gained) demand."""
    net = demo["net"]
    out = whatif.close_ways(sorted(demo["bridges"]))
    before, after = whatif.results[(FIRST_DUE.name, "calls")], out.results[(FIRST_DUE.name, "calls")]
    comp = compare_results(before, after)
    p = comp.points
    assert set(p["change"]) <= set(CHANGE_KINDS)
    assert ((p["change"] == "lost") == (p["covered_before"] & ~p["covered_after"])).all()
    fin = np.isfinite(p["travel_s_before"]) & np.isfinite(p["travel_s_after"])
    np.testing.assert_allclose(p["delta_s"][fin], (p["travel_s_after"] - p["travel_s_before"])[fin])
    assert comp.after["covered"] - comp.before["covered"] == pytest.approx(comp.gained_weight - comp.lost_weight)
    assert comp.lost_points > 0
    ca = changed_areas(net, out.network, before, after, incidents=demo["calls"])
    polys = ca.polygons
    for kind, n, w in (
        ("lost", comp.lost_points, comp.lost_weight),
        ("gained", comp.gained_points, comp.gained_weight),
    ):
        sel = polys[polys["change"] == kind]
        assert sel["points"].sum() == n and sel["weight"].sum() == pytest.approx(w)
        pts = p[p["change"] == kind].geometry.to_numpy()
        if len(pts):
            assert shapely.covered_by(pts, shapely.union_all(sel.geometry.to_numpy())).all()
    assert set(np.unique(ca.status_grid)) <= {-2, -1, 0, 1}


def test_compare_study_writes_layers_and_table(demo, tmp_path):
    """A study with one demand layer and one standard, compared with the three bridges closed."""
    study = _write(
        tmp_path / "study.toml",
        f"""[study]
name = "compare test"
[roads]
source = "{DEMO / "varrowby.osm.bz2"}"
boundary = "{DEMO / "boundary.geojson"}"
profile = "emergency"
[bases]
file = "{DEMO / "stations.csv"}"
[[demand]]
name = "calls"
points = "{DEMO / "incidents.csv"}"
[[standard]]
name = "First due"
turnout_s = 60
travel_s = 240
[outputs]
folder = "results"
grid_cell_m = 200
""",
    )
    # seed the study's network cache with the fixture network (the cache mechanism of coverkit.study)
    s = load_study(study)
    net = demo["net"]
    net.info["cache_key"] = s.network_cache_key()
    net.save(tmp_path / "results" / "network.gpkg")
    scen = _write(
        tmp_path / "scen.toml", f'[scenario]\nname = "bridges"\n[[closure]]\nway_ids = {sorted(demo["bridges"])}\n'
    )
    run = compare_study(study, scen, tmp_path / "cmp")
    import pyogrio

    layers = {n for n, _ in pyogrio.list_layers(run.outputs["layers"])}
    assert {"closed_roads", "comparison", "about", "change_points_calls_first_due", "changed_areas_first_due"} <= layers
    table = pd.read_csv(run.outputs["table"])
    comp = run.comparisons[("First due", "calls")]
    assert table.loc[0, "lost_points"] == comp.lost_points > 0
    assert table.loc[0, "covered_after"] == pytest.approx(
        table.loc[0, "covered_before"] - comp.lost_weight + comp.gained_weight
    )
    assert any("Planning estimates only" in line for line in run.lines())


# -- bad input --------------------------------------------------------------------------------------------------------
BAD_FILES = {
    "unknown key": ("[[closure]]\nway_ids = [90]\nclosed = true\n", "closure[0].closed"),
    "unknown section": ("[closures]\nway_ids = [90]\n", "[closures]"),
    "wrong type": ('[[slowdown]]\nroad_class = "residential"\nfactor = "fast"\n', "slowdown[0].factor"),
    "two selectors": ("[[closure]]\nway_ids = [90]\nedge_ids = [1]\n", "closure[0]"),
    "missing file": ('[[closure]]\npolygon = "nowhere.geojson"\n', "closure[0].polygon"),
    "bad factor": ('[[slowdown]]\nroad_class = "residential"\nfactor = 0\n', "slowdown[0].factor"),
    "nothing": ("", "changes nothing"),
    "bad base key": ('[[base_change]]\nmove = { id = "S1", lon = 1, lat = 2, units = 3 }\n', "move.units"),
}


@pytest.mark.parametrize("case", sorted(BAD_FILES))
def test_bad_scenario_files_give_one_line(tmp_path, case):
    body, needle = BAD_FILES[case]
    with pytest.raises(StudyError) as err:
        _scenario(tmp_path, body)
    assert needle in str(err.value) and "\n" not in str(err.value)


BAD_REFS = {
    "edge id": ("[[closure]]\nedge_ids = [99999]\n", "edge 99999"),
    "way id": ("[[closure]]\nway_ids = [777777]\n", "way id 777777"),
    "road name": ('[[closure]]\nroad_name = "Ambrel Viaduct"\n', "Ambrel Viaduct"),
    "base id": ('[[base_change]]\nremove = "S9"\n', "S9"),
    "road class": ('[[slowdown]]\nroad_class = ["residental"]\nfactor = 1.2\n', "residental"),
    "not a bridge": ("[[closure]]\nedge_ids = [0]\nonly_bridges = true\n", "bridge"),
    "duplicate base": ('[[base_change]]\nadd = { id = "S1", lon = -35.0, lat = 41.0 }\n', "S1"),
}


@pytest.mark.parametrize("case", sorted(BAD_REFS))
def test_scenario_naming_unknown_things_gives_one_line(demo, tmp_path, case):
    body, needle = BAD_REFS[case]
    scen = _scenario(tmp_path, body)
    with pytest.raises(StudyError) as err:
        apply_scenario(demo["net"], demo["bases"], scen)
    assert needle in str(err.value) and "\n" not in str(err.value)


def test_unknown_road_name_suggests_the_way_name(demo, tmp_path):
    """The bridge:name is not a road name; the way's name is (demo OSM): the message points to close names."""
    scen = _scenario(tmp_path, '[[closure]]\nroad_name = "Ambrel Wy"\n')
    with pytest.raises(StudyError, match="Ambrel Way"):
        apply_scenario(demo["net"], demo["bases"], scen)
    ok = _scenario(tmp_path, '[[closure]]\nroad_name = "ambrel way"\n')
    _, _, log = apply_scenario(demo["net"], demo["bases"], ok)
    assert set(log.closed["name"]) == {"Ambrel Way"}


@pytest.mark.parametrize("kind", ["empty", "points", "nowhere"])
def test_bad_flood_polygons(demo, tmp_path, kind):
    """An empty polygon file or a point file is refused at load; a polygon that holds no road at apply."""
    path = tmp_path / "flood.geojson"
    if kind == "empty":
        path.write_text('{"type": "FeatureCollection", "features": []}')
    elif kind == "points":
        gpd.GeoDataFrame({"n": [1]}, geometry=[shapely.Point(-35.0, 41.0)], crs="EPSG:4326").to_file(path)
    else:
        far = shapely.Point(-30.0, 30.0).buffer(0.01)
        gpd.GeoDataFrame({"n": [1]}, geometry=[far], crs="EPSG:4326").to_file(path)
    body = f'[[closure]]\npolygon = "{path.name}"\n'
    if kind == "nowhere":
        scen = _scenario(tmp_path, body)
        with pytest.raises(StudyError, match="holds no road"):
            apply_scenario(demo["net"], demo["bases"], scen)
    else:
        with pytest.raises(StudyError, match="no polygon" if kind == "empty" else "not polygons"):
            _scenario(tmp_path, body)


def test_whatif_rejects_bad_requests(whatif):
    with pytest.raises(CoverkitError, match="edge 10000000"):
        whatif.close_edges([10_000_000])
    with pytest.raises(StudyError, match="S9"):
        whatif.change_base("remove", "S9")
    with pytest.raises(StudyError, match="way id 777777"):
        whatif.close_ways([777777])


def test_closure_by_bridge_name(demo, tmp_path):
    """road_name = "Ambrel Bridge" closes exactly the way carrying that bridge:name in the OSM file."""
    scen = _scenario(tmp_path, '[[closure]]\nroad_name = "ambrel bridge"\n', "by name")
    _, _, log = apply_scenario(demo["net"], demo["bases"], scen)
    ambrel = [w for w, t in demo["bridges"].items() if t["bridge:name"] == "Ambrel Bridge"]
    assert set(demo["net"].edges["source_id"].to_numpy()[log.closed_edge_ids]) == set(ambrel)
