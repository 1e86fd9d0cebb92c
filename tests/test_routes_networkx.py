"""Shortest routes (``coverkit.travel.routes``, ``coverkit.travel.turn_routes``) against networkx.

Reference: ``networkx.single_source_dijkstra_path_length`` (reference library) on the network's own export
(``RoadNetwork.to_networkx``: open edges, weight ``travel_s``) with the snapped points inserted as nodes, built here
from the exported edge table and the snapped entries, by the search module's documented time conventions: leaving a
point part-way along edge ``e`` toward ``v`` costs the rest of the run plus the end-node delay, reaching one costs
``frac`` of the run from ``u``, a point snapped at a junction *is* that node, and two points on one edge are joined
by the direct trip along it. Every route must (a) be found exactly where networkx reaches the target within the
bound, (b) take networkx's time, and (c) re-priced edge by edge (``Routes.priced_s`` with the network's own running
times and delays) take that same time: the path traced is the one the search timed.
"""

from __future__ import annotations

import dataclasses
from unittest import mock

import networkx as nx
import numpy as np
import pytest
import shapely
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchmarks.bench_isochrones import synthetic_network
from coverkit.network.model import RoadNetwork, network_from_arrays
from coverkit.network.turn_rules import TurnRules
from coverkit.travel import turns
from coverkit.travel.routes import node_exits, shortest_routes
from coverkit.travel.search import entry_labels, point_times, run_s, seeds
from coverkit.travel.snap import snap_points

TOL_S = 1e-6


def reference_times(net, sources, targets, source_index, target_index, limit_s=np.inf) -> np.ndarray:
    """Per pair, the networkx shortest time (s) from source to target point; ``inf`` if unreached or beyond
    ``limit_s``. The graph is ``net.to_networkx()`` plus one node per source ("s", i) with out-arcs only and one per
    target ("t", j) with in-arcs only (so no path runs through a point)."""
    g = net.to_networkx()
    table = net.edges
    u, v = table["u"].to_numpy(), table["v"].to_numpy()
    travel = table["travel_s"].to_numpy()
    delay = table["delay_s"].to_numpy()
    run = travel - delay
    open_ = np.isfinite(travel)

    def entries(snapped, i):
        m = snapped.entry_point == i
        return list(zip(snapped.entry_edge[m].tolist(), snapped.entry_frac[m].tolist(), strict=True))

    def junction(e, f):
        return int(u[e]) if f <= 0.0 else int(v[e]) if f >= 1.0 else None

    for i in np.unique(source_index):
        g.add_node(("s", i))
        for e, f in entries(sources, i):
            node = junction(e, f)
            if node is not None:
                g.add_edge(("s", i), node, travel_s=0.0)
            elif open_[e]:
                g.add_edge(("s", i), int(v[e]), travel_s=(1.0 - f) * run[e] + delay[e])
    for j in np.unique(target_index):
        for e, f in entries(targets, j):
            node = junction(e, f)
            if node is not None:
                g.add_edge(node, ("t", j), travel_s=0.0)
            elif open_[e]:
                g.add_edge(int(u[e]), ("t", j), travel_s=f * run[e])
    # the direct trip along an edge shared by a source and a target part-way along it, target ahead
    for i in np.unique(source_index):
        for e, f in entries(sources, i):
            for j in np.unique(target_index):
                for e2, f2 in entries(targets, j):
                    if e2 == e and open_[e] and 0.0 < f <= f2 < 1.0:
                        w = (f2 - f) * run[e]
                        if not g.has_edge(("s", i), ("t", j)) or g[("s", i)][("t", j)][0]["travel_s"] > w:
                            g.add_edge(("s", i), ("t", j), key=0, travel_s=w)
    return _pair_times(g, source_index, target_index, limit_s, "travel_s")


def check_routes(net, routes, want) -> None:
    """(a) found where networkx reaches, (b) networkx's time, (c) re-priced path time = search time; not found:
    inf time and no edge at all."""
    found = np.isfinite(want)
    np.testing.assert_array_equal(routes.found, found)
    np.testing.assert_allclose(routes.time_s[found], want[found], rtol=0.0, atol=TOL_S)
    assert np.isinf(routes.time_s[~found]).all()
    priced = routes.priced_s(run_s(net), net.edges["delay_s"].to_numpy())
    np.testing.assert_allclose(priced[found], routes.time_s[found], rtol=0.0, atol=TOL_S)
    assert (np.diff(routes.run_use.indptr)[~found] == 0).all()
    assert (np.diff(routes.delay_use.indptr)[~found] == 0).all()
    assert not routes.direct[~found].any()


def with_turns(net: RoadNetwork, rules: TurnRules) -> RoadNetwork:
    """The same network and times with other turn rules."""
    prof = dataclasses.replace(net.profile, turns=rules, source_text="")
    return RoadNetwork(net.nodes, net.edges, net.crs, prof, net.info)


def turn_graph_forced():
    """Make every search run on the turn-aware graph, even with no turn costs and no restrictions (where it gives
    the node graph's times: the property checked below)."""
    return mock.patch.object(turns, "active", lambda net: True)


# -- bug 1: a pair with no route and no direct trip --------------------------------------------------------------


def _two_islands() -> RoadNetwork:
    """Two streets 1 km apart, not joined: nothing on one reaches the other."""
    xy = np.array([[0.0, 0.0], [200.0, 0.0], [0.0, 1000.0], [200.0, 1000.0]])
    return network_from_arrays(xy, np.array([0, 1, 2, 3]), np.array([1, 0, 3, 2]), 36.0)


@pytest.mark.parametrize("turn_aware", [False, True])
def test_unreachable_pairs_are_not_found_and_do_not_crash(turn_aware):
    """A pair with no route and no direct trip: not found (inf time, no path), never a "direct" trip along edge -1
    (networkx: no path between the islands)."""
    net = _two_islands()
    if turn_aware:
        net = with_turns(net, TurnRules(left_s=10.0, right_s=3.0, uturn_s=30.0))
        assert turns.active(net)
    pts = snap_points(net, np.array([[50.0, 0.0], [150.0, 0.0], [50.0, 1000.0], [0.0, 1000.0]]))
    si, ti = np.array([0, 0, 0, 1]), np.array([1, 2, 3, 0])
    routes = shortest_routes(net, pts, pts, si, ti)
    want = reference_times(net, pts, pts, si, ti)
    assert np.isinf(want[1:3]).all() and np.isfinite(want[[0, 3]]).all()
    check_routes(net, routes, want)
    if turn_aware:
        assert routes.turn_s is not None and (routes.turn_s[~routes.found] == 0.0).all()


def test_turn_aware_synthetic_network_with_a_bound():
    """The turn-aware synthetic network with a bound (the reported crash): pairs beyond the bound are not found.
    Turn costs are >= 0 and nothing is banned, so a found route is no faster than networkx's plain time, and a pair
    networkx cannot reach within the bound is never found; found routes re-price to their times, which are the
    engine's point times (checked against a networkx line graph in test_turns.py)."""
    plain = synthetic_network(25, seed=3)
    net = with_turns(plain, TurnRules(left_s=10.0, right_s=3.0, uturn_s=30.0))
    pts = snap_points(net, net.xy)
    rng = np.random.default_rng(5)
    si, ti = rng.integers(0, len(pts), 300), rng.integers(0, len(pts), 300)
    limit_s = 90.0
    routes = shortest_routes(net, pts, pts, si, ti, limit_s=limit_s)
    want_plain = reference_times(plain, pts, pts, si, ti)
    assert 20 < routes.found.sum() < 280  # some pairs each side of the bound
    assert not routes.found[want_plain > limit_s].any()
    f = routes.found
    assert (routes.time_s[f] <= limit_s).all()
    assert (routes.time_s[f] >= want_plain[f] - TOL_S).all()
    priced = routes.priced_s(run_s(net), net.edges["delay_s"].to_numpy())
    np.testing.assert_allclose(priced[f], routes.time_s[f], atol=TOL_S)
    table = point_times(net, pts, pts, limit_s)
    stored = np.array([t in table[s].indices for s, t in zip(si, ti, strict=True)])
    np.testing.assert_array_equal(stored, f)
    np.testing.assert_allclose(routes.time_s[f], np.asarray(table[si[f], ti[f]]).ravel(), atol=TOL_S)
    assert (np.diff(routes.run_use.indptr)[~f] == 0).all()


# -- bug 2: targets (and sources) standing at a junction ---------------------------------------------------------


@pytest.mark.parametrize("limit_s", [np.inf, 150.0])
def test_points_at_junctions_route_through_the_node_the_search_timed(limit_s):
    """Every point at a node of the plain synthetic network (a junction): the route is traced from the junction
    itself, so its re-priced time is its search time and networkx's; with a bound, no IndexError."""
    net = synthetic_network(25, seed=3)
    pts = snap_points(net, net.xy)
    rng = np.random.default_rng(8)
    si, ti = rng.integers(0, len(pts), 400), rng.integers(0, len(pts), 400)
    si[0], ti[0] = 5, 60
    at = np.isin(pts.entry_frac, [0.0, 1.0])
    assert at.mean() > 0.9  # the points do stand at the junctions
    routes = shortest_routes(net, pts, pts, si, ti, limit_s=limit_s)
    check_routes(net, routes, reference_times(net, pts, pts, si, ti, limit_s))


# -- bug 3: entries a closure drops stay in their rows -----------------------------------------------------------


def test_entry_rows_stay_in_line_with_the_snapped_entries():
    """On a two-way street with one direction closed, the closed direction's entry gives no label: it keeps its own
    row (inf time), the other entry keeps its row with its own edge, and routes to and from the point follow the
    open direction (networkx on the export, which leaves the closed edge out)."""
    xy = np.array([[0.0, 0.0], [200.0, 0.0], [400.0, 0.0], [200.0, 200.0]])
    u = np.array([0, 1, 1, 2, 1, 3])
    v = np.array([1, 0, 2, 1, 3, 1])
    open_net = network_from_arrays(xy, u, v, 36.0)
    travel = open_net.travel_s.copy()
    travel[0] = np.inf  # 0 -> 1 closed, 1 -> 0 open: the point's lower-id entry is the closed one
    net = open_net.with_travel_s(travel)
    pts = snap_points(net, np.array([[60.0, 0.0], [400.0, 0.0], [200.0, 200.0]]))
    m = pts.entry_point == 0
    assert pts.entry_edge[m].tolist() == [0, 1]
    for direction in ("out", "in"):
        lab = entry_labels(net, pts, direction)
        assert len(lab.time_s) == len(pts.entry_edge)
        assert np.isinf(lab.time_s[np.flatnonzero(m)[0]]) and np.isfinite(lab.time_s[np.flatnonzero(m)[1]])
        # seeds() keeps the usable rows only: exactly the finite ones, in order
        s_pt, _, s_t = seeds(net, pts, direction)
        np.testing.assert_array_equal(s_pt, pts.entry_point[lab.usable])
        np.testing.assert_array_equal(s_t, lab.time_s[lab.usable])
    layout = node_exits(net, pts)
    np.testing.assert_array_equal(layout.point, pts.entry_point)
    np.testing.assert_array_equal(layout.edge[m], [0, 1])  # each row its own edge
    assert np.isinf(layout.add_s[np.flatnonzero(m)[0]])
    si, ti = np.array([0, 0, 1, 2]), np.array([1, 2, 0, 0])
    routes = shortest_routes(net, pts, pts, si, ti)
    check_routes(net, routes, reference_times(net, pts, pts, si, ti))
    assert (routes.run_use[:, 0].toarray() == 0).all()  # nothing drives the closed edge


# -- the property: random small grids ----------------------------------------------------------------------------


@st.composite
def grid_case(draw):
    """A random small grid: random one-way streets, closures, speeds and signals; points at nodes, exactly at edge
    ends, part-way along edges and off the grid lines; random pairs; a bound or none."""
    nx_, ny_ = draw(st.integers(2, 5)), draw(st.integers(2, 4))
    seed = draw(st.integers(0, 2**31 - 1))
    rng = np.random.default_rng(seed)
    spacing_m = 100.0
    ix, iy = np.meshgrid(np.arange(nx_), np.arange(ny_), indexing="xy")
    ids = (iy * nx_ + ix).ravel()
    xy = np.column_stack([ix.ravel(), iy.ravel()]).astype(float) * spacing_m
    right, up = ids[ix.ravel() < nx_ - 1], ids[iy.ravel() < ny_ - 1]
    a, b = np.concatenate([right, up]), np.concatenate([right + 1, up + nx_])
    way = rng.integers(0, 3, len(a))  # 0: both ways, 1: a -> b only, 2: b -> a only
    u = np.concatenate([a[way != 2], b[way != 1]])
    v = np.concatenate([b[way != 2], a[way != 1]])
    net = network_from_arrays(
        xy, u, v, rng.uniform(20.0, 70.0, len(u)), signal=rng.random(len(xy)) < draw(st.sampled_from([0.0, 0.3]))
    )
    if draw(st.booleans()):
        travel = net.travel_s.copy()
        travel[rng.random(len(u)) < 0.15] = np.inf
        net = net.with_travel_s(travel)
    n_pts = draw(st.integers(2, 10))
    kind = rng.integers(0, 3, n_pts)
    e = rng.integers(0, len(u), n_pts)
    f = np.where(kind == 0, rng.choice([0.0, 1.0], n_pts), rng.uniform(0.05, 0.95, n_pts))
    geoms = net.edges.geometry.to_numpy()
    on_line = shapely.get_coordinates(shapely.line_interpolate_point(geoms[e], f, normalized=True))
    pts_xy = np.where((kind == 2)[:, None], on_line + rng.uniform(-20.0, 20.0, (n_pts, 2)), on_line)
    n_pairs = draw(st.integers(1, 15))
    si, ti = rng.integers(0, n_pts, n_pairs), rng.integers(0, n_pts, n_pairs)
    limit_s = draw(st.sampled_from([np.inf, 10.0, 30.0, 60.0]))
    return net, pts_xy, si, ti, limit_s


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(grid_case())
def test_route_times_equal_networkx_on_random_grids(case):
    """Plain graph and turn-aware graph (no turn costs, no restrictions: the same answer) on random small grids:
    found exactly where networkx reaches within the bound, networkx's time, re-priced path time = search time."""
    net, pts_xy, si, ti, limit_s = case
    pts = snap_points(net, pts_xy, max_snap_m=50.0)
    want = reference_times(net, pts, pts, si, ti, limit_s)
    plain = shortest_routes(net, pts, pts, si, ti, limit_s=limit_s)
    check_routes(net, plain, want)
    # the engine's point times agree with networkx too (stored exactly where reached)
    table = point_times(net, pts, pts, min(limit_s, 1e9)).tocsr()
    stored = np.array([t in table.indices[table.indptr[s] : table.indptr[s + 1]] for s, t in zip(si, ti, strict=True)])
    np.testing.assert_array_equal(stored, np.isfinite(want))
    if stored.any():
        got = np.asarray(table[si[stored], ti[stored]]).ravel()
        np.testing.assert_allclose(got, want[stored], rtol=0.0, atol=TOL_S)
    free = with_turns(net, TurnRules())
    with turn_graph_forced():
        turned = shortest_routes(free, pts, pts, si, ti, limit_s=limit_s)
    assert turned.turn_s is not None
    check_routes(free, turned, want)
    np.testing.assert_allclose(turned.turn_s, 0.0, atol=TOL_S)


# -- turn costs: a networkx line graph built here ----------------------------------------------------------------

#: Turn costs (s) of the checks below (invented for the test); on a square grid every turn is a multiple of 90
#: degrees, so its kind needs no threshold: straight on, left (counter-clockwise), right, or back (a U-turn).
GRID_TURNS = TurnRules(straight_s=0.0, left_s=10.0, right_s=3.0, uturn_s=30.0)


def _grid_turn_s(xy, u, v, e, h) -> float:
    """Cost of turning from edge ``e`` onto edge ``h`` on a straight-edged square grid (cross product sign)."""
    a, b = xy[v[e]] - xy[u[e]], xy[v[h]] - xy[u[h]]
    cross, dot = a[0] * b[1] - a[1] * b[0], a @ b
    if (u[h] == v[e] and v[h] == u[e]) or (abs(cross) < 1e-9 and dot < 0):
        return GRID_TURNS.uturn_s
    if abs(cross) < 1e-9:
        return GRID_TURNS.straight_s
    return GRID_TURNS.left_s if cross > 0 else GRID_TURNS.right_s


def reference_turn_times(net, pts, source_index, target_index, limit_s=np.inf) -> np.ndarray:
    """Per pair, the shortest time (s) on a networkx line graph (Caldwell 1961; Winter 2002): vertex ("e", h) is
    "on edge h at its start, the turn onto it paid", ("a", n) "arrived at node n"; ("e", e) -> ("e", h) weighs
    ``travel_s[e]`` plus the turn's cost, ("e", e) -> ("a", v[e]) weighs ``travel_s[e]``. A source at junction n
    starts free (no turn) onto every edge leaving n; one part-way along e drives the rest of e, then turns; a
    target at junction n is ("a", n); one part-way along e is ``frac`` of the run after ("e", e)."""
    xy = net.xy
    u, v = net.u, net.v
    travel = net.travel_s
    delay = net.edges["delay_s"].to_numpy()
    run = travel - delay
    open_ = np.isfinite(travel)
    g = nx.DiGraph()

    def arc(a, b, w):
        if not g.has_edge(a, b) or g[a][b]["w"] > w:
            g.add_edge(a, b, w=w)

    out_of = {n: [h for h in range(net.n_edges) if u[h] == n and open_[h]] for n in range(net.n_nodes)}
    for e in np.flatnonzero(open_):
        arc(("e", e), ("a", int(v[e])), travel[e])
        for h in out_of[int(v[e])]:
            arc(("e", e), ("e", h), travel[e] + _grid_turn_s(xy, u, v, e, h))

    def entries(i):
        m = pts.entry_point == i
        return list(zip(pts.entry_edge[m].tolist(), pts.entry_frac[m].tolist(), strict=True))

    for i in np.unique(source_index):
        g.add_node(("s", i))
        for e, f in entries(i):
            if f <= 0.0 or f >= 1.0:
                n = int(u[e] if f <= 0.0 else v[e])
                arc(("s", i), ("a", n), 0.0)
                for h in out_of[n]:
                    arc(("s", i), ("e", h), 0.0)
            elif open_[e]:
                rest = (1.0 - f) * run[e] + delay[e]
                arc(("s", i), ("a", int(v[e])), rest)
                for h in out_of[int(v[e])]:
                    arc(("s", i), ("e", h), rest + _grid_turn_s(xy, u, v, e, h))
            for j in np.unique(target_index):
                for e2, f2 in entries(j):
                    if e2 == e and open_[e] and 0.0 < f <= f2 < 1.0:
                        arc(("s", i), ("t", j), (f2 - f) * run[e])
    for j in np.unique(target_index):
        for e, f in entries(j):
            if f <= 0.0 or f >= 1.0:
                arc(("a", int(u[e] if f <= 0.0 else v[e])), ("t", j), 0.0)
            elif open_[e]:
                arc(("e", e), ("t", j), f * run[e])
    return _pair_times(g, source_index, target_index, limit_s, "w")


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(grid_case())
def test_turn_route_times_equal_a_networkx_line_graph_on_random_grids(case):
    """Turn costs on random small grids: found exactly where the networkx line graph reaches within the bound, its
    time, and the route's edges re-priced plus its turn costs give that time (turn costs a sum of the grid's)."""
    net, pts_xy, si, ti, limit_s = case
    net = with_turns(net, GRID_TURNS)
    pts = snap_points(net, pts_xy, max_snap_m=50.0)
    want = reference_turn_times(net, pts, si, ti, limit_s)
    routes = shortest_routes(net, pts, pts, si, ti, limit_s=limit_s)
    check_routes(net, routes, want)
    f = routes.found
    edges_s = routes.run_use @ run_s(net) + routes.delay_use @ net.edges["delay_s"].to_numpy()
    np.testing.assert_allclose(edges_s[f] + routes.turn_s[f], routes.time_s[f], atol=TOL_S)
    # every route's turn cost is a sum of 3, 10 and 30 s: a whole number of seconds
    np.testing.assert_allclose(routes.turn_s[f], np.round(routes.turn_s[f]), atol=TOL_S)


def _pair_times(g, source_index, target_index, limit_s: float, weight: str) -> np.ndarray:
    """networkx's shortest time from node ``("s", i)`` to ``("t", j)`` of each pair, inf beyond ``limit_s``."""
    out = np.full(len(source_index), np.inf)
    dist = {i: nx.single_source_dijkstra_path_length(g, ("s", i), weight=weight) for i in np.unique(source_index)}
    for k, (i, j) in enumerate(zip(source_index, target_index, strict=True)):
        t = dist[i].get(("t", j), np.inf)
        out[k] = t if t <= limit_s else np.inf
    return out
