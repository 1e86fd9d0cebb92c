"""Point times at junctions and part-way along edges, against an independent search.

Outside reference: a plain binary-heap Dijkstra (``heapq``, written here) over the exported edge table (``u``,
``v``, ``travel_s``, ``delay_s``) only; no coverkit search, seed or graph code is used for it. The time
conventions it applies are the model's stated ones: an edge's ``travel_s`` is its running time (spread evenly along
it) plus the delay at its end node; a point at the end of an edge is that junction (common practice: the junction
is one place, whichever street the point is filed under). Networks: the perturbed synthetic county of
``benchmarks/bench_isochrones.py`` (one-way streets, diagonals, curved streets, signals), small and at full size.
"""

from __future__ import annotations

import heapq

import numpy as np
import pytest
import shapely

from benchmarks.bench_isochrones import synthetic_network
from coverkit.network.model import RoadNetwork
from coverkit.travel import nearest_sources, point_times, snap_points

LIMIT_S = 3600.0


def reference_times(edges, n_nodes: int, start: dict[int, float], reverse: bool = False) -> np.ndarray:
    """Least time (s) from the start labels to every node (``reverse``: from every node to them), heapq Dijkstra
    on the edge table's ``u``, ``v``, ``travel_s`` columns."""
    u = edges["u"].to_numpy(dtype=np.int64)
    v = edges["v"].to_numpy(dtype=np.int64)
    w = edges["travel_s"].to_numpy(dtype=float)
    if reverse:
        u, v = v, u
    adj: list[list[tuple[int, float]]] = [[] for _ in range(n_nodes)]
    for a, b, t in zip(u.tolist(), v.tolist(), w.tolist(), strict=True):
        if t < float("inf"):
            adj[a].append((b, t))
    dist = np.full(n_nodes, np.inf)
    heap = [(t, n) for n, t in start.items()]
    heapq.heapify(heap)
    while heap:
        t, n = heapq.heappop(heap)
        if t >= dist[n]:
            continue
        dist[n] = t
        for b, wt in adj[n]:
            if t + wt < dist[b]:
                heapq.heappush(heap, (t + wt, b))
    return dist


def _twin_of(edges) -> np.ndarray:
    """The opposite directed edge of every edge (-1 for a one-way street), from the ``u``/``v`` columns."""
    u = edges["u"].to_numpy(dtype=np.int64)
    v = edges["v"].to_numpy(dtype=np.int64)
    where = {(a, b): i for i, (a, b) in enumerate(zip(u.tolist(), v.tolist(), strict=True))}
    return np.array([where.get((b, a), -1) for a, b in zip(u.tolist(), v.tolist(), strict=True)], dtype=np.int64)


def _point_reference(edges, twin, e, f, node_t, direction):
    """Reference time of points at fraction ``f`` of edge ``e`` (or of its twin at ``1 - f``)."""
    u = edges["u"].to_numpy(dtype=np.int64)
    v = edges["v"].to_numpy(dtype=np.int64)
    delay = edges["delay_s"].to_numpy(dtype=float)
    run = edges["travel_s"].to_numpy(dtype=float) - delay
    tw = np.maximum(twin[e], 0)
    has = twin[e] >= 0
    if direction == "out":  # enter at the start, drive f of the run
        own = node_t[u[e]] + f * run[e]
        other = node_t[u[tw]] + (1.0 - f) * run[tw]
    else:  # drive the rest of the run, pass the end node (its delay), go on to the bases
        own = (1.0 - f) * run[e] + delay[e] + node_t[v[e]]
        other = f * run[tw] + delay[tw] + node_t[v[tw]]
    return np.where(has, np.minimum(own, other), own)


def _first_due(net: RoadNetwork, base_xy: np.ndarray, pts: np.ndarray, direction: str) -> np.ndarray:
    bases = snap_points(net, base_xy, what="bases")
    snapped = snap_points(net, pts, off_network="mask")
    times = point_times(net, bases, snapped, LIMIT_S, direction=direction)
    return nearest_sources(times, k=1)[1][:, 0]


def _check(net: RoadNetwork, n_points: int, n_bases: int, seed: int) -> dict[str, int]:
    """Junction points and part-way points against the reference; returns the counts of late and early points."""
    rng = np.random.default_rng(seed)
    edges = net.edges
    xy = net.xy
    # junctions: nodes with a road (the synthetic county drops some streets, which can leave a node without any)
    with_road = np.flatnonzero(np.bincount(np.concatenate([net.u, net.v]), minlength=net.n_nodes) > 0)
    base_nodes = rng.choice(with_road, n_bases, replace=False)
    junctions = rng.choice(with_road, n_points, replace=False)
    twin = _twin_of(edges)
    oneway = np.flatnonzero(twin < 0)
    twoway = np.flatnonzero(twin >= 0)
    pick = np.concatenate([rng.choice(oneway, n_points // 2), rng.choice(twoway, n_points // 2)])
    f = rng.uniform(0.05, 0.95, len(pick))
    mid = shapely.get_coordinates(shapely.line_interpolate_point(edges.geometry.to_numpy()[pick], f, normalized=True))
    counts = {}
    for direction in ("out", "in"):
        node_t = reference_times(edges, net.n_nodes, {int(b): 0.0 for b in base_nodes}, reverse=direction == "in")
        got = _first_due(net, xy[base_nodes], np.vstack([xy[junctions], mid]), direction)
        ref = np.concatenate([node_t[junctions], _point_reference(edges, twin, pick, f, node_t, direction)])
        ref = np.where(ref <= LIMIT_S, ref, np.inf)
        both = np.isfinite(ref) & np.isfinite(got)
        assert both.sum() > 0.5 * len(ref)  # most of the county is within the limit: the check is not empty
        late = (got > ref + 1e-6) | (np.isinf(got) & np.isfinite(ref))
        early = (got < ref - 1e-6) | (np.isfinite(got) & np.isinf(ref))
        counts[f"{direction}_late_junction"] = int(late[:n_points].sum())
        counts[f"{direction}_early_junction"] = int(early[:n_points].sum())
        counts[f"{direction}_wrong_midway"] = int((late | early)[n_points:].sum())
    return counts


def test_junction_and_midway_points_match_reference_small():
    """900-node synthetic county: every junction point gets its junction's time and every part-way point (one-way
    and two-way streets) its partial-edge time, base to point and point to base, to 1e-6 s."""
    net = synthetic_network(n_side=30, seed=11)
    counts = _check(net, n_points=300, n_bases=4, seed=3)
    assert all(c == 0 for c in counts.values()), counts


@pytest.mark.size
def test_junction_and_midway_points_match_reference_at_size():
    """90,000-node synthetic county, 30 bases, 2,000 points exactly on junctions and 2,000 part-way along edges."""
    net = synthetic_network()
    counts = _check(net, n_points=2000, n_bases=30, seed=5)
    assert all(c == 0 for c in counts.values()), counts
