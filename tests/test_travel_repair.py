"""Repairing stored searches after a closure or a slowdown instead of searching again (coverkit.travel.repair).

Outside references: networkx's Dijkstra (an independent shortest-path implementation) on a small hand-made street
grid; a detour worked by hand; and, at county size, the full search itself (scipy.sparse.csgraph's Dijkstra on the
changed graph) on the 90,000-node synthetic county of benchmarks/bench_isochrones.py. The incremental rule is that
of G. Ramalingam and T. Reps, J. Algorithms 21(2), 1996: only nodes downstream of a raised tight edge can change.
"""

from __future__ import annotations

import geopandas as gpd
import networkx as nx
import numpy as np
import pytest
import shapely
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from coverkit.coverage import Standard, evaluate_coverage
from coverkit.network.model import MIN_EDGE_S, grid_network, min_weight_csr, updated_min_weight_csr
from coverkit.travel import node_times, snap_points
from coverkit.travel.repair import can_repair, repaired_node_times
from coverkit.whatif import WhatIf

from .conftest import same_table
from .reference_search import synthetic_network

X0, Y0 = 500000.0, 5000000.0


@pytest.fixture(scope="module")
def small():
    net = synthetic_network(n_side=40, spacing_m=150.0, seed=3)
    rng = np.random.default_rng(5)
    pick = rng.choice(net.n_nodes, 6, replace=False)
    bases = snap_points(net, net.xy[pick] + 11.0)
    return net, bases


def test_detour_worked_by_hand():
    """A 3 x 2 grid of 100 m streets at 36 km/h (10 m/s, 10 s per block). From node 0 (bottom left) node 2 (bottom
    right) is 20 s along the bottom; with block 1-2 closed the trip goes 0-1-4-5-2 or 0-3-4-5-2: 40 s. Node 5
    (top right) stays 30 s; only node 2 changes. Node 5 is also reached at 30 s over 2-5 (a tie), so it is
    relabelled too (to the same time): the relabelled set may be larger than the changed one, never smaller."""
    net = grid_network(3, 2, 100.0, 36.0)
    src = snap_points(net, net.xy[:1])
    before = node_times(net, src, 1e4)
    t = net.travel_s.copy()
    t[(net.u == 1) & (net.v == 2)] = np.inf
    after_net = net.with_travel_s(t)
    out, touched = repaired_node_times(net, after_net, src, before, 1e4, return_affected=True)
    row = out.toarray()[0]
    assert row[2] == pytest.approx(40.0) and row[5] == pytest.approx(30.0) and row[1] == pytest.approx(10.0)
    assert touched.tolist() == [2, 5]
    assert same_table(out, node_times(after_net, src, 1e4))


def test_against_networkx_on_a_closed_grid():
    """Repaired times equal networkx's Dijkstra on the changed graph (a 6 x 5 grid, two streets closed and one
    slowed), from two junction sources."""
    net = grid_network(6, 5, 120.0, 40.0)
    src = snap_points(net, net.xy[[0, 17]])
    before = node_times(net, src, 1e4)
    t = net.travel_s.copy()
    t[[3, 4, 20]] = np.inf
    t[[9, 30]] *= 2.5
    after_net = net.with_travel_s(t)
    out = repaired_node_times(net, after_net, src, before, 1e4).toarray()
    g = nx.DiGraph()
    for a, b, w in zip(after_net.u.tolist(), after_net.v.tolist(), after_net.travel_s.tolist(), strict=True):
        if np.isfinite(w) and (not g.has_edge(a, b) or g[a][b]["w"] > w):
            g.add_edge(a, b, w=w)
    for row, node in enumerate((0, 17)):
        ref = nx.single_source_dijkstra_path_length(g, node, weight="w")
        for other in range(net.n_nodes):
            expect = ref.get(other, np.inf) if other != node else 0.0
            if other == node:
                continue
            assert out[row, other] == pytest.approx(expect, abs=1e-6), (node, other)  # seeds start at MIN_EDGE_S


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    seed=st.integers(0, 10_000),
    n_changed=st.integers(1, 40),
    factor=st.sampled_from([np.inf, 1.3, 4.0]),
    direction=st.sampled_from(["out", "in"]),
    limit_s=st.sampled_from([300.0, 900.0, 1e5]),
)
def test_repair_equals_a_full_search(small, seed, n_changed, factor, direction, limit_s):
    """Any closure or slowdown (random edges) of a 1,600-node county: the repaired times are the full search's
    bit for bit, in both directions and at any bound; the nodes not reported as relabelled keep their times."""
    net, bases = small
    rng = np.random.default_rng(seed)
    ids = rng.choice(net.n_edges, n_changed, replace=False)
    ids = ids[~np.isin(ids, bases.entry_edge)]
    t = net.travel_s.copy()
    t[ids] = t[ids] * factor
    after_net = net.with_travel_s(t)
    assert can_repair(net, after_net, direction)
    before = node_times(net, bases, limit_s, direction)
    out, touched = repaired_node_times(net, after_net, bases, before, limit_s, direction, return_affected=True)
    full = node_times(after_net, bases, limit_s, direction)
    assert same_table(out, full)
    keep = np.ones(before.shape, dtype=bool)
    keep.ravel()[touched] = False
    a, b = before.toarray(), full.toarray()
    a[before.toarray() == 0] = 0
    assert np.array_equal(np.where(keep, a, 0), np.where(keep, b, 0))


def test_a_speed_up_is_not_repaired(small):
    """A fall in any edge time is outside the incremental rule: can_repair says so."""
    net, _ = small
    t = net.travel_s.copy()
    t[10] *= 0.5
    assert not can_repair(net, net.with_travel_s(t))


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(seed=st.integers(0, 10_000), n_changed=st.integers(1, 300), kind=st.sampled_from(["close", "slow", "fast"]))
def test_patched_search_graph_equals_a_rebuilt_one(small, seed, n_changed, kind):
    """The search graph patched for changed edges (RoadNetwork.with_travel_s) equals the graph built from every
    edge again: same structure, same smallest weight per (u, v) pair over parallel edges."""
    net, _ = small
    rng = np.random.default_rng(seed)
    ids = rng.choice(net.n_edges, n_changed, replace=False)
    t = net.travel_s.copy()
    t[ids] = {"close": np.inf, "slow": 2.0, "fast": 0.5}[kind] * t[ids]
    patched = updated_min_weight_csr(net.csr(), net.u, net.v, net.travel_s, t)
    rebuilt = min_weight_csr(net.u, net.v, np.maximum(t, MIN_EDGE_S), net.n_nodes)
    assert patched is not None and same_table(patched, rebuilt)


def test_county_size_closure_equals_a_full_recomputation():
    """At county size (90,000 nodes, 30 bases, 20,000 calls), a what-if closure of every road at a junction answered
    by repair equals a full recomputation of coverage on the closed network: every call's time and first-due base."""
    net = synthetic_network()
    rng = np.random.default_rng(11)
    base_xy = net.xy[rng.choice(net.n_nodes, 30, replace=False)] + 9.0
    bases = gpd.GeoDataFrame(
        {"id": [f"S{i:02d}" for i in range(30)], "units": 1}, geometry=shapely.points(base_xy), crs=net.crs
    )
    lo, hi = net.xy.min(axis=0), net.xy.max(axis=0)
    calls = gpd.GeoDataFrame(
        {"id": np.arange(20_000), "weight": 1.0}, geometry=shapely.points(rng.uniform(lo, hi, (20_000, 2))), crs=net.crs
    )
    std = Standard("ALS", 480, 60, 0.9, "NFPA 1710 (from memory)")
    wi = WhatIf(net, bases, calls, std, horizon_s=1800)
    centre = int(np.argmin(np.linalg.norm(net.xy - (lo + hi) / 2, axis=1)))
    edges = np.flatnonzero((net.u == centre) | (net.v == centre))
    out = wi.close_edges(edges)
    assert out.recomputed_bases, "the junction lies on some base's shortest paths"
    assert set(out.moved_nodes) == set(out.recomputed_bases)  # every one of them repaired, none searched again
    full = evaluate_coverage(out.network, bases, calls, std, horizon_s=1800)
    np.testing.assert_array_equal(out.result.demand["travel_s"].to_numpy(), full.demand["travel_s"].to_numpy())
    assert (out.result.demand["first_base"] == full.demand["first_base"]).all()
    assert same_table(out.result.times, full.times)
