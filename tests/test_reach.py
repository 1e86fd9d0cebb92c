"""Nearest bases from multi-source searches equal per-base searches; tables grow with reached pairs; a clear stop
when memory runs short.

The reference for the nodes is a plain ``scipy.sparse.csgraph.dijkstra`` per base at the horizon, written here on
the graph with each base's entry arcs (Dijkstra 1959; scipy's implementation), sorted stably per node so that ties
go to the lower base index. The reference for the points is the engine's dense-horizon path (every base's times to
every point within the horizon, then a stable sort per point), itself checked against networkx and an independent
heap Dijkstra in tests/test_coverage.py and tests/test_size.py. Equality is exact (bit for bit): float rounding is
monotone, so the minimum over per-base searches is what one multi-source search computes.
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pytest
import scipy.sparse as sp
import shapely
from scipy.sparse.csgraph import dijkstra

from coverkit.coverage import (
    DUE_ORDERS,
    Standard,
    area_grid,
    area_layers,
    default_horizon_s,
    evaluate_coverage,
    times_within,
    travel_table,
)
from coverkit.errors import CoverkitError
from coverkit.network.model import MIN_EDGE_S, network_from_arrays
from coverkit.settings import MEMORY_ENV
from coverkit.travel import count_within, nearest_sources, snap_points
from coverkit.travel.reach import nearest_k_nodes
from coverkit.travel.search import graph, seeds

from .conftest import DEMO

COLUMNS_EXACT = ("travel_s", "second_travel_s", "response_s", "first_base", "second_base", "depth", "covered")


def per_base_node_times(net, base_snap, limit_s, direction):
    """Dense (n_bases, n_nodes) node times, one csgraph search per base from a virtual node joined to its entry
    nodes (written here; the smallest entry weight per node, MIN_EDGE_S for a zero, as csgraph needs)."""
    g = graph(net, direction).tocoo()
    pt, node, t = seeds(net, base_snap, direction)
    n = net.n_nodes
    out = np.full((len(base_snap), n), np.inf)
    for b in range(len(base_snap)):
        mine = pt == b
        w = {}
        for j, tj in zip(node[mine].tolist(), t[mine].tolist(), strict=True):
            w[j] = min(w.get(j, np.inf), max(tj, MIN_EDGE_S))
        rows = np.concatenate([g.row, np.full(len(w), n)])
        cols = np.concatenate([g.col, np.array(list(w), dtype=np.int64)])
        data = np.concatenate([g.data, np.array(list(w.values()))])
        aug = sp.csr_matrix((data, (rows, cols)), shape=(n + 1, n + 1))
        out[b] = dijkstra(aug, directed=True, indices=n, limit=limit_s)[:n]
    return out


def stable_top(dense: np.ndarray, k: int):
    """The k nearest sources per column (ties: lower index), -1 / inf where fewer."""
    order = np.argsort(dense, axis=0, kind="stable")[:k]
    t = np.take_along_axis(dense, order, axis=0)
    return np.where(np.isfinite(t), order, -1).T, t.T


@pytest.fixture(scope="module")
def demo():
    from coverkit.demand import demand_from_raster
    from coverkit.network import build_network
    from coverkit.travel import read_points

    net, _ = build_network(DEMO / "varrowby.osm.bz2", "emergency", boundary=DEMO / "boundary.geojson")
    bases = read_points(DEMO / "stations.csv", net.crs, what="bases")
    cells = demand_from_raster(DEMO / "population.tif", net.crs)
    return net, bases, cells, Standard("ALS", 480.0, 60.0, 0.9)


@pytest.mark.parametrize("direction", ["out", "in"])
def test_node_nearest_equal_per_base_searches(demo, direction):
    """The three nearest bases of every node and their times equal per-base csgraph searches at the horizon,
    sorted stably (exact equality; reference: scipy.sparse.csgraph.dijkstra per base)."""
    net, bases, _, std = demo
    snap = snap_points(net, bases, off_network="raise", what="bases")
    horizon = default_horizon_s(std)
    reach = nearest_k_nodes(net, snap, horizon, direction, k=3)
    want_s, want_t = stable_top(per_base_node_times(net, snap, horizon, direction), 3)
    np.testing.assert_array_equal(reach.time_s, want_t)
    np.testing.assert_array_equal(reach.source, want_s)
    assert np.isfinite(reach.time_s[:, 2]).mean() > 0.5  # the third order is not empty


def test_ties_go_to_the_lower_base_index():
    """On a grid of equal 10 s edges, with bases on junctions placed so that many nodes are equidistant from two or
    three of them, every tie goes to the lower base index, as a stable sort of per-base searches gives (reference:
    per-base csgraph searches); the ties are real (hundreds of nodes)."""
    side, spacing = 30, 100.0
    ix, iy = np.meshgrid(np.arange(side), np.arange(side), indexing="xy")
    ids = (iy * side + ix).ravel()
    xy = np.column_stack([ix.ravel(), iy.ravel()]) * spacing + 500000.0
    right, up = ids[ix.ravel() < side - 1], ids[iy.ravel() < side - 1]
    a = np.concatenate([right, up])
    b = np.concatenate([right + 1, up + side])
    net = network_from_arrays(xy, np.r_[a, b], np.r_[b, a], 36.0)  # 100 m at 36 km/h: 10 s
    for order in ([4, 10, 16, 22], [22, 16, 10, 4]):
        nodes = np.array([ids[(side // 2) * side + c] for c in order] + [ids[5 * side + 5]])
        bases = gpd.GeoDataFrame({"id": [f"B{i}" for i in range(len(nodes))]}, geometry=shapely.points(xy[nodes]))
        bases = bases.set_crs(net.crs)
        snap = snap_points(net, bases, off_network="raise", what="bases")
        reach = nearest_k_nodes(net, snap, 3600.0, "out", k=3)
        dense = per_base_node_times(net, snap, 3600.0, "out")
        want_s, want_t = stable_top(dense, 3)
        np.testing.assert_array_equal(reach.time_s, want_t)
        np.testing.assert_array_equal(reach.source, want_s)
        srt = np.sort(dense, axis=0)
        tied = ((srt[0] == srt[1]) | (srt[1] == srt[2])).sum()
        assert tied > 100, tied


def _compare_with_dense(net, bases, demand, std, direction):
    new = evaluate_coverage(net, bases, demand, std, direction=direction)
    horizon = default_horizon_s(std)
    full = travel_table(net, bases, demand, horizon, direction=direction)
    src, t = nearest_sources(full.times, k=2)
    ids = bases["id"].astype(str).to_numpy()
    want = {
        "travel_s": t[:, 0],
        "second_travel_s": t[:, 1],
        "response_s": t[:, 0] + std.turnout_s,
        "first_base": np.where(src[:, 0] >= 0, ids[np.maximum(src[:, 0], 0)], ""),
        "second_base": np.where(src[:, 1] >= 0, ids[np.maximum(src[:, 1], 0)], ""),
        "depth": count_within(full.times, std.travel_s),
        "covered": t[:, 0] <= std.travel_s,
    }
    for col in COLUMNS_EXACT:
        np.testing.assert_array_equal(new.demand[col].to_numpy(), np.asarray(want[col]), err_msg=col)
    return new, full


@pytest.mark.parametrize("direction", ["out", "in"])
def test_demo_results_equal_the_dense_horizon_path(demo, direction):
    """On the demo county (25,441 population cells, 4 stations): first and second due, their times, depth, covered
    and the fractile equal the dense-horizon computation exactly, and some second-due times lie beyond the
    standard (so the multi-source second-due pass is exercised)."""
    net, bases, cells, std = demo
    new, full = _compare_with_dense(net, bases, cells, std, direction)
    w = cells["weight"].to_numpy(dtype=float)
    _, t = nearest_sources(full.times, k=1)
    from coverkit.coverage import weighted_fractile

    assert new.summary()["fractile_response_s"] == weighted_fractile(t[:, 0] + std.turnout_s, w, std.fractile)
    second = new.demand["second_travel_s"].to_numpy()
    assert ((second > std.travel_s) & np.isfinite(second)).any()


def test_demo_area_layers_equal_the_dense_horizon_path(demo):
    """First-, second- and third-due areas, the depth grid and the gaps equal those built from the dense-horizon
    tables (exact geometry and figures)."""
    net, bases, cells, std = demo
    new = evaluate_coverage(net, bases, cells, std)
    old = evaluate_coverage(net, bases, cells, std, table=travel_table(net, bases, cells, default_horizon_s(std)))
    la_new, la_old = area_layers(net, new), area_layers(net, old)
    assert la_new.grid.table.within_s == std.travel_s and la_old.grid.table.within_s is None
    np.testing.assert_array_equal(la_new.depth_grid, la_old.depth_grid)
    for k in range(DUE_ORDERS):
        a, b = la_new.due[k], la_old.due[k]
        assert list(a["base_id"]) == list(b["base_id"])
        assert all(x.equals_exact(y, 0.0) for x, y in zip(a.geometry, b.geometry, strict=True))
    assert len(la_new.gaps) == len(la_old.gaps) > 0
    np.testing.assert_array_equal(la_new.demand_gap_id, la_old.demand_gap_id)
    np.testing.assert_array_equal(la_new.gaps["area_km2"], la_old.gaps["area_km2"])


def test_stored_entries_grow_with_reached_pairs(demo, monkeypatch):
    """The stored tables hold exactly the (base, point) pairs within the standard - bases x points reached, not
    bases x points - for the demand and the area grid; the per node arrays hold three orders per node. The
    reference horizon table is built from dense blocks only, the bounded one from the reached nodes only."""
    import coverkit.travel.search as search

    net, bases, cells, std = demo
    monkeypatch.setattr(search, "SPARSE_REACH_SHARE", 2.0)  # always gather from the reached nodes
    new = evaluate_coverage(net, bases, cells, std)
    table = new.extra["table"]
    monkeypatch.setattr(search, "SPARSE_REACH_SHARE", -1.0)  # always dense blocks
    full = travel_table(net, bases, cells, default_horizon_s(std))
    within = int((full.times.data <= std.travel_s).sum())
    assert table.times.nnz == within
    # and the very same entries (structure and values, bit for bit) as the horizon table cut at the standard
    cut = times_within(full.times, std.travel_s)
    for a, b in ((table.times, cut),):
        assert np.array_equal(a.indptr, b.indptr) and np.array_equal(a.indices, b.indices)
        assert np.array_equal(a.data, b.data)
    assert table.times.nnz < 0.3 * full.times.nnz  # the horizon table is several times larger
    assert table.node_reach.time_s.shape == (net.n_nodes, DUE_ORDERS)
    grid = area_grid(net, new)
    old_grid = area_grid(net, evaluate_coverage(net, bases, cells, std, table=full))
    assert grid.table.times.nnz == int((old_grid.table.times.data <= std.travel_s).sum())
    assert grid.table.times.nnz < 0.3 * old_grid.table.times.nnz


def test_memory_stop_says_what_it_needs_and_what_to_change(demo, monkeypatch):
    """With a budget smaller than the time table, coverage stops before assembling it, in one line naming the
    memory needed and what to change; the area grid likewise names a coarser cell (design invariant, issue 13)."""
    net, bases, cells, std = demo
    monkeypatch.setenv(MEMORY_ENV, "0.00001")  # 10 kB
    with pytest.raises(CoverkitError) as err:
        evaluate_coverage(net, bases, cells, std)
    text = str(err.value)
    assert "\n" not in text and "needs about" in text and "GB of memory" in text
    assert "shorter horizon" in text and "fewer demand points" in text and "cluster" in text
    monkeypatch.setenv(MEMORY_ENV, "1000")
    res = evaluate_coverage(net, bases, cells, std)
    monkeypatch.setenv(MEMORY_ENV, "0.001")  # 1 MB: the 100 m grid of the county (~70,000 cells) needs more
    with pytest.raises(CoverkitError, match=r"area grid of .* cells .* needs about .* coarser grid cell"):
        area_grid(net, res)


def test_cover_command_exits_2_on_the_memory_stop(demo_net_path, tmp_path, monkeypatch, capsys):
    """`coverkit cover` with too small a memory budget exits 2 with the one-line message, writing nothing."""
    from coverkit.cli import main

    monkeypatch.setenv(MEMORY_ENV, "0.00001")
    out = tmp_path / "cover.gpkg"
    code = main(
        [
            "cover", str(demo_net_path), "--bases", str(DEMO / "stations.csv"), "--demand",
            str(DEMO / "population.tif"), "--minutes", "8", "--out", str(out), "--quiet",
        ]
    )  # fmt: skip
    assert code == 2 and not out.exists()
    assert "needs about" in capsys.readouterr().err


@pytest.mark.size
def test_synthetic_county_equals_the_dense_horizon_path():
    """The 90,000-node synthetic county (benchmarks/bench_isochrones.py), 30 bases, 50,000 random points: every
    exact column equals the dense-horizon path, both directions."""
    import sys
    from pathlib import Path

    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "benchmarks"))
    from bench_isochrones import synthetic_network

    net = synthetic_network()
    rng = np.random.default_rng(3)
    x0, y0, x1, y1 = net.nodes.total_bounds
    bxy = np.column_stack([rng.uniform(x0, x1, 30), rng.uniform(y0, y1, 30)])
    bases = gpd.GeoDataFrame({"id": [f"B{i}" for i in range(30)]}, geometry=shapely.points(bxy), crs=net.crs)
    pxy = np.column_stack([rng.uniform(x0, x1, 50_000), rng.uniform(y0, y1, 50_000)])
    demand = gpd.GeoDataFrame(
        {"id": np.arange(50_000), "weight": rng.integers(1, 9, 50_000).astype(float)},
        geometry=shapely.points(pxy),
        crs=net.crs,
    )
    std = Standard("ALS", 480.0, 60.0, 0.9)
    for direction in ("out", "in"):
        new, full = _compare_with_dense(net, bases, demand, std, direction)
        assert new.extra["table"].times.nnz == int((full.times.data <= std.travel_s).sum())


def test_k_best_kernel_ranks_candidates_as_the_two_sorts_do():
    """The compiled ranking equals the numpy one (each source's best time, then time and source index) on random
    candidates with repeated sources, tied times, unreached (-1) and over-limit entries; a worked case by hand."""
    from coverkit.travel.kernels import k_best_kernel
    from coverkit.travel.reach import k_best_numpy

    rng = np.random.default_rng(5)
    n, k = 400, 3
    for cut in (0, 1500):
        pt = np.sort(rng.integers(0, n, 3000))
        t = rng.integers(0, 40, 3000).astype(float)  # whole seconds: many ties
        s = rng.integers(-1, 12, 3000)
        ref_s, ref_t = np.full((n, k), -1), np.full((n, k), np.inf)
        k_best_numpy(pt, t, s, 30.0, ref_s, ref_t)
        got_s, got_t = np.full((n, k), -1), np.full((n, k), np.inf)
        a, b = slice(0, cut), slice(cut, None)  # two lists grouped by point, as exits and same-edge trips come
        ptr_a = np.searchsorted(pt[a], np.arange(n + 1))
        ptr_b = np.searchsorted(pt[b], np.arange(n + 1))
        k_best_kernel(ptr_a, t[a], s[a], ptr_b, t[b], s[b], 30.0, got_s, got_t)
        np.testing.assert_array_equal(got_s, ref_s)
        np.testing.assert_array_equal(got_t, ref_t)
    # by hand: source 4 at 7 s and 5 s keeps 5 s; 2 and 1 tie at 6 s, the lower index first; 9 is over the limit
    out_s, out_t = np.full((1, 3), -1), np.full((1, 3), np.inf)
    k_best_kernel(np.array([0, 4]), np.array([7.0, 6.0, 5.0, 6.0]), np.array([4, 2, 4, 1]), np.array([0, 1]),
                  np.array([31.0]), np.array([9]), 30.0, out_s, out_t)  # fmt: skip
    assert out_s.tolist() == [[4, 1, 2]] and out_t.tolist() == [[5.0, 6.0, 6.0]]
