"""Shortest routes on the turn-aware graph (:mod:`coverkit.travel.turns`), as the same edge-use matrices as
:mod:`coverkit.travel.routes`, plus each route's turn costs.

The search is the engine's own (:func:`coverkit.travel.search._chunked_search` with predecessors on the turn-aware
graph), so route times equal :func:`~coverkit.travel.search.point_times`. A route is read back vertex by vertex for
all routes of a chunk at once: every edge state ``E_g`` passed (or a via-way copy of it) is edge ``g`` driven whole
with its end-node delay; the target's edge state is the share ``frac`` of its edge; the source's first arc is the
rest of the source's edge. What the edges do not account for is the turns' cost, kept per route in ``turn_s``
(route time minus its edges' time) so a calibration can re-price the routes with new speeds.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from coverkit.network.model import MIN_EDGE_S, RoadNetwork
from coverkit.travel import turns
from coverkit.travel.snap import Snapped


def turn_exits(net: RoadNetwork, targets: Snapped) -> tuple[np.ndarray, ...]:
    """Target entries of an outbound search: (point, vertex, added s, edge, share of the edge's run).

    A point part-way along edge ``e`` is reached from ``E_e`` after ``frac`` of the run (share ``frac``); a point at
    a junction ``n`` is ``A_n`` (or ``S_n``, when the source stands there) with no edge (-1).
    """
    from coverkit.travel.search import partial_run_s

    tg = turns.turn_structure(net)
    n, e_count = tg.n_nodes, tg.n_edges
    pt, e, f = targets.entry_point, targets.entry_edge, targets.entry_frac
    at_u, at_v = f <= 0.0, f >= 1.0
    mid = ~(at_u | at_v)
    node = np.where(at_u, net.u[e], net.v[e])
    run = partial_run_s(net)[e]
    at, k = ~mid, int((~mid).sum())
    none, zero = np.full(k, -1), np.zeros(k)
    parts = [
        (pt[at], node[at], zero, none, zero),
        (pt[at], node[at] + n + e_count, zero, none, zero),
        (pt[mid], e[mid] + n, f[mid] * run[mid], e[mid], f[mid]),
    ]
    out = [np.concatenate([p[k] for p in parts]) for k in range(5)]
    keep = np.isfinite(out[2])
    out = [x[keep] for x in out]
    order = np.argsort(out[0], kind="stable")
    return tuple(x[order] for x in out)


def start_arcs(net: RoadNetwork, sources: Snapped) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Sorted keys ``point * M + vertex`` of the sources' first arcs, with the source edge (-1 at a junction) and
    the share of its run driven (``1 - frac``); the cheapest entry per key, as the search's virtual arcs keep."""
    from coverkit.travel.search import seeds

    tg = turns.turn_structure(net)
    m = tg.out.shape[0]
    pt, vx, t = seeds(net, sources, "out", states=True)
    # the source edge of each lifted entry: a point part-way along e leaves through E_e's arcs
    e, f = sources.entry_edge, sources.entry_frac
    mid = (f > 0.0) & (f < 1.0)
    g = tg.out
    row = e[mid] + tg.n_nodes
    lo, cnt = g.indptr[row], g.indptr[row + 1] - g.indptr[row]
    take = np.repeat(lo - (np.cumsum(cnt) - cnt), cnt) + np.arange(int(cnt.sum()))
    mid_key = np.repeat(sources.entry_point[mid], cnt) * np.int64(m) + g.indices[take]
    mid_edge = np.repeat(e[mid], cnt)
    mid_share = np.repeat(1.0 - f[mid], cnt)
    key = pt * np.int64(m) + vx
    # entries at a junction have no edge; the others take theirs from the arcs they came by
    order = np.argsort(mid_key, kind="stable")
    mid_key, mid_edge, mid_share = mid_key[order], mid_edge[order], mid_share[order]
    k = np.minimum(np.searchsorted(mid_key, key), max(len(mid_key) - 1, 0))
    hit = (len(mid_key) > 0) & (mid_key[k] == key) if len(mid_key) else np.zeros(len(key), dtype=bool)
    edge = np.where(hit, mid_edge[k] if len(mid_key) else -1, -1)
    share = np.where(hit, mid_share[k] if len(mid_key) else 0.0, 0.0)
    order = np.lexsort((edge, np.maximum(t, MIN_EDGE_S), key))
    first = np.r_[True, key[order][1:] != key[order][:-1]] if len(order) else np.zeros(0, dtype=bool)
    return key[order][first], edge[order][first], share[order][first]


def walk_back(use, pred, walk, source_index, start, m: int) -> None:
    """Add the edges of each route, walking the predecessors back from the vertex before the exit, one step for all
    routes at once. ``walk`` is (vertex, child vertex, local source row, pair); predecessors >= ``m`` are the
    sources' virtual vertices."""
    tg_edge = walk[4]
    start_key, start_edge, start_share = start
    cur, child, row_local, row_pair = walk[:4]
    while len(cur):
        at_source = cur >= m
        if at_source.any():
            key = source_index[row_pair[at_source]] * np.int64(m) + child[at_source]
            k = np.minimum(np.searchsorted(start_key, key), len(start_key) - 1)
            ok = start_edge[k] >= 0
            rows = row_pair[at_source][ok]
            use.add(rows, start_edge[k][ok], start_share[k][ok], np.ones(len(rows)))
        inner = ~at_source
        edge = tg_edge(cur[inner])
        driven = edge >= 0
        rows = row_pair[inner][driven]
        use.add(rows, edge[driven], np.ones(len(rows)), np.ones(len(rows)))
        nxt = pred[row_local[inner], cur[inner]]
        cur, child, row_local, row_pair = nxt, cur[inner], row_local[inner], row_pair[inner]
        # a vertex with no predecessor (-9999) is never on a found route's path
        alive = cur >= 0
        cur, child, row_local, row_pair = cur[alive], child[alive], row_local[alive], row_pair[alive]


def edge_of_vertex(net: RoadNetwork):
    """A function mapping turn-graph vertices to the edge they stand for (an edge state or a via-way copy of one;
    -1 for the node vertices)."""
    tg = turns.turn_structure(net)
    n, e = tg.n_nodes, tg.n_edges
    copy_edge = tg.copy_edge

    def of(vertex: np.ndarray) -> np.ndarray:
        vertex = np.asarray(vertex, dtype=np.int64)
        out = np.full(len(vertex), -1, dtype=np.int64)
        is_e = (vertex >= n) & (vertex < n + e)
        out[is_e] = vertex[is_e] - n
        is_copy = vertex >= 2 * n + e
        out[is_copy] = copy_edge[vertex[is_copy] - 2 * n - e]
        return out

    return of


def shortest_turn_routes(net, sources, targets, source_index, target_index, chunk_size=None, *, limit_s=np.inf):
    """:func:`coverkit.travel.routes.shortest_routes` on the turn-aware graph (same arguments and result, with
    ``turn_s`` filled)."""
    from coverkit.travel.routes import ExitLayout, walked_routes

    m = turns.turn_structure(net).out.shape[0]
    layout = ExitLayout(*turn_exits(net, targets))
    start = start_arcs(net, sources)
    edge_of = edge_of_vertex(net)

    def walk(use, pred, ent, row_local, row_pair) -> None:
        # the exit vertex is the target's edge state (or junction vertex): its edge is the layout's partial edge
        exit_vx = layout.vertex[ent]
        walk_back(use, pred, (pred[row_local, exit_vx], exit_vx, row_local, row_pair, edge_of), source_index, start, m)

    routes = walked_routes(net, sources, targets, source_index, target_index, chunk_size, limit_s, layout, walk)
    delay_s = np.asarray(net.edge_values("delay_s"), dtype=float)
    edges_s = routes.run_use @ run_s_finite(net) + routes.delay_use @ delay_s
    turn_s = np.where(routes.found & ~routes.direct, np.maximum(routes.time_s - edges_s, 0.0), 0.0)
    return dataclasses.replace(routes, turn_s=turn_s)


def run_s_finite(net: RoadNetwork) -> np.ndarray:
    """Running time of each edge (s), 0 for closed ones (no found route drives them)."""
    from coverkit.travel.search import run_s

    run = run_s(net)
    return np.where(np.isfinite(run), run, 0.0)
