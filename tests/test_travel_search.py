"""Travel times from snapped points against networkx Dijkstra on an independently built graph.

Reference library: networkx (``single_source_dijkstra_path_length``, ``multi_source_dijkstra``). The reference graph
is built here by hand from the edge table (``u``, ``v``, ``travel_s``; not ``RoadNetwork.to_networkx()``): each point
is found by a brute-force nearest-edge scan with shapely and inserted into every directed edge it lies on (edges split
in order along the edge, the end-node signal delay kept on the last piece), so it shares no code with
``coverkit.travel``.
"""

from __future__ import annotations

import itertools

import networkx as nx
import numpy as np
import pytest
import shapely

from coverkit.network.model import grid_network, network_from_arrays
from coverkit.travel.search import count_within, nearest_node_times, nearest_sources, node_times, point_times
from coverkit.travel.snap import snap_points

TOL_S = 1e-6  # required agreement with networkx (s)


def irregular_network(n_x: int = 9, n_y: int = 8, spacing_m: float = 200.0, seed: int = 3):
    """Perturbed grid with diagonals, curved edges, mixed speeds, one-way streets and signals."""
    rng = np.random.default_rng(seed)
    ix, iy = np.meshgrid(np.arange(n_x), np.arange(n_y), indexing="xy")
    ids = (iy * n_x + ix).ravel()
    xy = np.column_stack([ix.ravel() * spacing_m, iy.ravel() * spacing_m]) + 500000.0
    xy += rng.uniform(-0.25, 0.25, xy.shape) * spacing_m
    right = ids[ix.ravel() < n_x - 1]
    up = ids[iy.ravel() < n_y - 1]
    cell = ids[(ix.ravel() < n_x - 1) & (iy.ravel() < n_y - 1)]
    diag = cell[rng.random(len(cell)) < 0.15]
    a = np.concatenate([right, up, diag])
    b = np.concatenate([right + 1, up + n_x, diag + n_x + 1])
    keep = rng.random(len(a)) > 0.08  # a few missing blocks
    a, b = a[keep], b[keep]
    m = len(a)
    pa, pb = xy[a], xy[b]
    mid = (pa + pb) / 2
    normal = np.column_stack([-(pb - pa)[:, 1], (pb - pa)[:, 0]])
    bend = np.where(rng.random(m) < 0.3, rng.uniform(-0.2, 0.2, m), 0.0)
    mid = mid + normal * bend[:, None]
    fwd = shapely.linestrings(np.stack([pa, mid, pb], axis=1))
    rev = shapely.linestrings(np.stack([pb, mid, pa], axis=1))
    oneway = rng.random(m) < 0.15
    speed = rng.choice([30.0, 50.0, 70.0], m)
    u = np.concatenate([a, b[~oneway]])
    v = np.concatenate([b, a[~oneway]])
    geom = np.concatenate([fwd, rev[~oneway]])
    sp = np.concatenate([speed, speed[~oneway]])
    ow = np.concatenate([oneway, oneway[~oneway]])
    signal = rng.random(len(xy)) < 0.15
    return network_from_arrays(xy, u, v, sp, geometry=geom, oneway=ow, signal=signal)


def reference_graph(net, points_xy):
    """networkx graph of ``net`` with each point inserted as node ``("p", i)`` on every edge it lies on."""
    dg = nx.DiGraph()
    # straight from the edge table (u, v, travel_s), not RoadNetwork.to_networkx(); parallel edges collapse to the
    # fastest one, closed (inf) edges are left out
    for a, b, w in zip(net.u.tolist(), net.v.tolist(), net.travel_s.tolist(), strict=True):
        if np.isfinite(w) and (not dg.has_edge(a, b) or w < dg[a][b]["weight"]):
            dg.add_edge(a, b, weight=w)
    geoms = net.edges.geometry.to_numpy()
    open_e = np.flatnonzero(np.isfinite(net.travel_s))
    delay = net.edges["delay_s"].to_numpy()
    on_edge: dict[int, list[tuple[float, object]]] = {}
    for i, (x, y) in enumerate(points_xy):
        p = shapely.Point(x, y)
        d = np.array([geoms[e].distance(p) for e in open_e])
        best = open_e[np.abs(d - d.min()) < 1e-7]
        # the nearest piece only: edges joining the same node pair as the lowest-id best edge
        e0 = best.min()
        pair = {int(net.u[e0]), int(net.v[e0])}
        for e in best:
            if {int(net.u[e]), int(net.v[e])} == pair:
                frac = geoms[e].project(p) / geoms[e].length
                on_edge.setdefault(int(e), []).append((frac, ("p", i)))
    for e, pts in on_edge.items():
        run = net.travel_s[e] - delay[e]
        pts.sort(key=lambda t: t[0])
        chain = [(0.0, int(net.u[e])), *pts, (1.0, int(net.v[e]))]
        for k, ((f0, n0), (f1, n1)) in enumerate(itertools.pairwise(chain)):
            w = (f1 - f0) * run + (delay[e] if k == len(chain) - 2 else 0.0)
            if not dg.has_edge(n0, n1) or w < dg[n0][n1]["weight"]:
                dg.add_edge(n0, n1, weight=w)
    return dg


@pytest.fixture(scope="module")
def case():
    net = irregular_network()
    rng = np.random.default_rng(11)
    lo, hi = net.xy.min(axis=0), net.xy.max(axis=0)
    bases_xy = rng.uniform(lo, hi, (6, 2))
    targets_xy = rng.uniform(lo, hi, (40, 2))
    # a target on the same edge as base 0, just ahead of it and just behind it
    e0 = 5
    g0 = net.edges.geometry.iloc[e0]
    bases_xy[0] = shapely.get_coordinates(g0.interpolate(0.4, normalized=True))[0]
    targets_xy[0] = shapely.get_coordinates(g0.interpolate(0.7, normalized=True))[0]
    targets_xy[1] = shapely.get_coordinates(g0.interpolate(0.1, normalized=True))[0]
    return net, bases_xy, targets_xy


def test_node_times_match_networkx_including_partial_edges(case):
    """Source: networkx single_source_dijkstra_path_length on the hand-built split graph (to 1e-6 s)."""
    net, bases_xy, _ = case
    limit = 400.0
    bases = snap_points(net, bases_xy)
    t = node_times(net, bases, limit).toarray()
    stored = node_times(net, bases, limit)
    ref_g = reference_graph(net, bases_xy)
    for i in range(len(bases_xy)):
        ref = nx.single_source_dijkstra_path_length(ref_g, ("p", i), cutoff=limit, weight="weight")
        ref_nodes = {k: d for k, d in ref.items() if not isinstance(k, tuple)}
        got_nodes = set(stored.indices[stored.indptr[i] : stored.indptr[i + 1]].tolist())
        assert got_nodes == set(ref_nodes)
        for node, d in ref_nodes.items():
            assert abs(t[i, node] - d) < TOL_S


@pytest.mark.parametrize("direction", ["out", "in"])
def test_point_times_match_networkx(case, direction):
    """Source: networkx Dijkstra (outbound on the split graph; inbound on its reverse), to 1e-6 s."""
    net, bases_xy, targets_xy = case
    limit = 600.0
    bases = snap_points(net, bases_xy)
    targets = snap_points(net, targets_xy)
    got = point_times(net, bases, targets, limit, direction=direction, chunk_size=4).toarray()
    structure = point_times(net, bases, targets, limit, direction=direction)
    all_xy = np.vstack([bases_xy, targets_xy])
    ref_g = reference_graph(net, all_xy)
    if direction == "in":
        ref_g = ref_g.reverse(copy=True)
    n_b = len(bases_xy)
    for i in range(n_b):
        ref = nx.single_source_dijkstra_path_length(ref_g, ("p", i), cutoff=limit, weight="weight")
        reached = set(structure.indices[structure.indptr[i] : structure.indptr[i + 1]].tolist())
        expect = {j for j in range(len(targets_xy)) if ("p", n_b + j) in ref}
        assert reached == expect
        for j in expect:
            assert abs(got[i, j] - ref[("p", n_b + j)]) < TOL_S


def test_same_edge_shortcut_respects_driving_order(case):
    """Source: networkx on the split graph: the target ahead of the base on its edge is reached directly."""
    net, bases_xy, targets_xy = case
    bases = snap_points(net, bases_xy[:1])
    targets = snap_points(net, targets_xy[:2])
    t = point_times(net, bases, targets, 1e4).toarray()[0]
    e = 5
    run = net.travel_s[e] - net.edges["delay_s"].iloc[e]
    assert abs(t[0] - 0.3 * run) < 1e-3  # 0.4 -> 0.7 along the edge, float fraction from geometry
    assert t[1] > 0  # the point behind is never at time zero


def test_nearest_and_depth_match_dense_reference(case):
    """Source: numpy argsort / counting on the dense networkx-checked time matrix (independent of the sparse code)."""
    net, bases_xy, targets_xy = case
    bases = snap_points(net, bases_xy)
    targets = snap_points(net, targets_xy)
    times = point_times(net, bases, targets, 500.0)
    dense = np.full(times.shape, np.inf)
    coo = times.tocoo()
    dense[coo.row, coo.col] = coo.data
    src, tk = nearest_sources(times, k=3)
    for j in range(dense.shape[1]):
        order = np.lexsort((np.arange(dense.shape[0]), dense[:, j]))[:3]
        exp_t = dense[order, j]
        exp_s = np.where(np.isfinite(exp_t), order, -1)
        assert np.array_equal(src[j], exp_s)
        assert np.allclose(tk[j], exp_t)
    assert np.array_equal(count_within(times, 300.0), (dense <= 300.0).sum(axis=0))


def test_nearest_node_times_equal_multi_source_dijkstra(case):
    """Source: networkx multi_source_dijkstra from all base nodes of the split graph."""
    net, bases_xy, _ = case
    bases = snap_points(net, bases_xy)
    t, src = nearest_node_times(net, bases, 300.0)
    ref_g = reference_graph(net, bases_xy)
    dist, paths = nx.multi_source_dijkstra(ref_g, {("p", i) for i in range(len(bases_xy))}, cutoff=300.0)
    for node in range(net.n_nodes):
        if node in dist:
            assert abs(t[node] - dist[node]) < TOL_S
            assert (
                paths[node][0] == ("p", int(src[node]))
                or abs(node_times(net, bases.subset([src[node]]), 300.0).toarray()[0, node] - dist[node]) < TOL_S
            )
        else:
            assert not np.isfinite(t[node]) and src[node] == -1


def test_one_way_point_entered_from_start_only():
    """Geometry, exact: a point at 25 % of a one-way edge a->b is reached from a only, leaves toward b only."""
    xy = np.array([[0.0, 0.0], [1000.0, 0.0], [1000.0, 1000.0], [0.0, 1000.0]]) + 500000.0
    # one-way 0->1 along the bottom; the other three sides two-way
    u = np.array([0, 1, 2, 2, 3, 3, 0])
    v = np.array([1, 2, 1, 3, 2, 0, 3])
    net = network_from_arrays(xy, u, v, 36.0)  # 10 m/s: 1000 m = 100 s
    pt = snap_points(net, np.array([[500250.0, 500000.0]]))
    assert len(pt.entry_edge) == 1 and pt.entry_edge[0] == 0
    node0 = snap_points(net, xy[:1])
    t_out = point_times(net, node0, pt, 1e4).toarray()[0, 0]
    assert abs(t_out - 25.0) < 1e-6  # 0 -> point directly
    t_in = point_times(net, node0, pt, 1e4, direction="in").toarray()[0, 0]
    # point -> 1 (75 s) -> 2 (100 s) -> 3 (100 s) -> 0 (100 s): no way back against the one-way
    assert abs(t_in - 375.0) < 1e-6


def test_closed_edges_never_used_and_points_on_them_not_moved():
    """Geometry, exact: closing the middle edges of a 3x1 grid makes the far node unreachable; a point on the closed
    street keeps its street (design invariant: a closure never moves a point onto another road) and is unreached."""
    net = grid_network(3, 1, 100.0, 36.0)
    closed = np.isin(net.edges["u"].to_numpy(), [1]) | np.isin(net.edges["v"].to_numpy(), [1])
    closed &= (net.u == 1) & (net.v == 2) | (net.u == 2) & (net.v == 1)
    net2 = net.with_travel_s(np.where(closed, np.inf, net.travel_s))
    start = snap_points(net2, net2.xy[:1])
    t = node_times(net2, start, 1e4).toarray()[0]
    assert np.isclose(t[1], 10.0) and t[2] == 0.0  # not stored: beyond reach
    assert node_times(net2, start, 1e4)[0].nnz == 2
    p = snap_points(net2, np.array([[net2.xy[1, 0] + 50.0, net2.xy[1, 1] + 1.0]]), max_snap_m=100.0)
    assert set(p.entry_edge.tolist()) == set(np.flatnonzero(closed).tolist())
    assert point_times(net2, start, p, 1e4).nnz == 0


def test_signal_delay_only_when_end_node_passed():
    """Rule (model docs): the end-node delay counts only for a trip that passes the node."""
    xy = np.array([[0.0, 0.0], [1000.0, 0.0], [2000.0, 0.0]]) + 500000.0
    signal = np.array([False, True, False])
    net = network_from_arrays(xy, [0, 1], [1, 2], 36.0, signal=signal)
    d = net.profile.signal_delay_s
    assert d > 0
    src = snap_points(net, xy[:1])
    pts = snap_points(net, np.array([[500900.0, 500000.0], [501500.0, 500000.0]]))
    t = point_times(net, src, pts, 1e4).toarray()[0]
    assert np.allclose(t, [90.0, 150.0 + d])
