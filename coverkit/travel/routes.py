"""Shortest routes between snapped source/target pairs, as sparse edge-use matrices.

A route is kept as two rows of sparse (n_pairs, n_edges) matrices rather than as a list of edges: ``run_use`` holds
the share of each edge's running time that the route drives (1 for a whole edge, ``1 - frac`` for the partial edge
leaving the source, ``frac`` for the partial edge reaching the target) and ``delay_use`` holds 1 for every edge
whose end-node delay (signal) the route pays. Then, for any per-edge running times ``run_s`` and delays ``delay_s``,
the route's time is ``run_use @ run_s + delay_use @ delay_s`` and its length ``run_use @ length_m``: a calibration
can re-price a fixed set of routes with new speeds by one sparse product.

The search is :func:`scipy.sparse.csgraph.dijkstra` with predecessors on the same augmented graph as
:mod:`coverkit.travel.search` (one virtual node per source), so times equal :func:`~coverkit.travel.search.point_times`.
Paths are read back for all targets of a chunk of sources at once, one path step per numpy operation (the number
of operations is the depth of the deepest route, not the number of routes).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from coverkit.network.model import RoadNetwork
from coverkit.travel import turns
from coverkit.travel.search import entry_labels, node_time_blocks, partial_run_s, same_edge_ok
from coverkit.travel.snap import Snapped


@dataclass(frozen=True)
class Routes:
    """Shortest routes (outbound: source to target) for a list of pairs.

    Attributes
    ----------
    source, target
        Index of each pair's source and target point (into the ``Snapped`` objects given).
    found
        ``True`` where the target is reachable from the source.
    time_s
        Route travel time (s); ``inf`` where not found.
    run_use
        Sparse (n_pairs, n_edges): share of each edge's running time driven (see the module docstring).
    delay_use
        Sparse (n_pairs, n_edges): 1 where the route passes the edge's end node and pays its delay.
    direct
        ``True`` where the route is the direct trip along one edge shared by source and target.
    turn_s
        Turn costs (s) of each route when the network models turns (:mod:`coverkit.travel.turn_routes`); None
        otherwise. Part of ``time_s``, not of the edges' times.
    """

    source: np.ndarray
    target: np.ndarray
    found: np.ndarray
    time_s: np.ndarray
    run_use: sp.csr_matrix
    delay_use: sp.csr_matrix
    direct: np.ndarray
    turn_s: np.ndarray | None = None

    def __len__(self) -> int:
        return len(self.source)

    def length_m(self, net: RoadNetwork) -> np.ndarray:
        """Route length (m), partial edges included; NaN where not found."""
        out = self.run_use @ net.length_m
        return np.where(self.found, out, np.nan)

    def priced_s(self, run_edge_s: np.ndarray, delay_edge_s: np.ndarray) -> np.ndarray:
        """Time of each route (s) for other per-edge running times and delays (same edge set); NaN where not found."""
        out = self.run_use @ run_edge_s + self.delay_use @ delay_edge_s
        if self.turn_s is not None:
            out = out + self.turn_s
        return np.where(self.found, out, np.nan)

    def same_paths(self, other: Routes) -> bool:
        """Whether ``other`` drives the same edges, in the same shares, for every pair."""
        a, b = self.run_use, other.run_use
        return (
            a.shape == b.shape
            and np.array_equal(a.indptr, b.indptr)
            and np.array_equal(a.indices, b.indices)
            and np.allclose(a.data, b.data, rtol=0.0, atol=1e-12)
            and np.array_equal(self.direct, other.direct)
        )


def shortest_routes(
    net: RoadNetwork,
    sources: Snapped,
    targets: Snapped,
    source_index: np.ndarray,
    target_index: np.ndarray,
    chunk_size: int | None = None,
    *,
    limit_s: float = np.inf,
) -> Routes:
    """Shortest outbound routes from ``sources[source_index[k]]`` to ``targets[target_index[k]]``.

    Parameters
    ----------
    net
        Road network; routes minimise its ``travel_s``.
    sources, targets
        Snapped points (off-network points give routes that are not found).
    source_index, target_index
        One pair per position (int arrays of equal length).
    chunk_size
        Sources per ``dijkstra`` call (default: keep the dense block under the search module's cell budget).
    limit_s
        Search bound (s): targets farther than it give routes that are not found (default: none).

    Returns
    -------
    Routes
        Time conventions as in :mod:`coverkit.travel.search`: a partial edge is charged its share of the running
        time; an end-node delay is paid when the node is passed (also when leaving the source's edge), never at the
        target.
    """
    source_index = np.asarray(source_index, dtype=np.int64).reshape(-1)
    target_index = np.asarray(target_index, dtype=np.int64).reshape(-1)
    if source_index.shape != target_index.shape:
        raise ValueError("source_index and target_index must have the same length")
    if turns.active(net):
        from coverkit.travel.turn_routes import shortest_turn_routes

        return shortest_turn_routes(net, sources, targets, source_index, target_index, chunk_size, limit_s=limit_s)
    n = net.n_nodes
    edge_key, edge_of_key = _edge_lookup(net)
    start = _start_arcs(net, sources)
    layout = node_exits(net, targets)

    def walk(use: _UseParts, pred: np.ndarray, ent: np.ndarray, row_local: np.ndarray, row_pair: np.ndarray) -> None:
        # the path is read back from the node whose time the search found for the exit (the edge's start node for
        # a point part-way along it, the junction itself for a point standing there)
        cur = layout.vertex[ent]
        _walk_back(use, pred, (cur, row_local, row_pair), source_index, n, start, edge_key, edge_of_key)

    return walked_routes(net, sources, targets, source_index, target_index, chunk_size, limit_s, layout, walk)


@dataclass(frozen=True)
class ExitLayout:
    """How an outbound search reaches the target points, one row per exit entry (sorted by point).

    Attributes
    ----------
    point
        Target point index of the entry.
    vertex
        Search-graph column the entry is read from (a node, or a turn-graph vertex when turns are modelled).
    add_s
        Time (s) added to the vertex's time to reach the point.
    edge
        Edge the route drives in part to reach the point (-1: none, the point stands at the vertex).
    share
        Share of that edge's running time driven.
    """

    point: np.ndarray
    vertex: np.ndarray
    add_s: np.ndarray
    edge: np.ndarray
    share: np.ndarray


def node_exits(net: RoadNetwork, targets: Snapped) -> ExitLayout:
    """The exits of an outbound node-graph search, one row per entry of ``targets``, in line with its entry arrays.

    Row ``i`` is built from entry ``i`` alone (:func:`~coverkit.travel.search.entry_labels`), so its vertex, time
    and edge always belong together; an entry that gives no label (on a closed edge or stretch) keeps its row with
    ``add_s = inf`` and is never the cheapest exit. A point part-way along edge ``e`` is reached from ``u[e]``
    after ``frac`` of the run (share ``frac`` of ``e``); a point at a junction is the node itself (no edge).
    """
    lab = entry_labels(net, targets, "in")
    mid = ~lab.at_node
    return ExitLayout(
        point=targets.entry_point,
        vertex=lab.node,
        add_s=lab.time_s,
        edge=np.where(mid, targets.entry_edge, -1),
        share=np.where(mid, targets.entry_frac, 0.0),
    )


#: ``walk(use, pred, entry, local source row, pair)``: add to ``use`` the edges of each route, from its source to
#: the vertex of its exit entry (``entry`` indexes the :class:`ExitLayout`), read back from the predecessor block.
PathWalk = Callable[["_UseParts", np.ndarray, np.ndarray, np.ndarray, np.ndarray], None]


def walked_routes(
    net: RoadNetwork,
    sources: Snapped,
    targets: Snapped,
    source_index: np.ndarray,
    target_index: np.ndarray,
    chunk_size: int | None,
    limit_s: float,
    layout: ExitLayout,
    walk: PathWalk,
) -> Routes:
    """Shortest routes for the pairs, chunk of sources by chunk: the bookkeeping shared by the node graph and the
    turn-aware graph, which differ only in ``layout`` (their exits) and ``walk`` (how a path is read back).

    Per chunk: each pair's cheapest exit; the direct trip along a shared edge when it is no slower (it passes no
    node, so it wins ties); otherwise the partial edge reaching the target plus the walked path. ``turn_s`` is left
    None (the turn-aware caller fills it).
    """
    n_pairs = len(source_index)
    t_count = np.bincount(layout.point, minlength=len(targets))
    t_ptr = np.concatenate([[0], np.cumsum(t_count)])
    time_s = np.full(n_pairs, np.inf)
    direct = np.zeros(n_pairs, dtype=bool)
    use = _UseParts()
    direct_s, direct_edge, direct_share = _direct_trips(net, sources, targets, source_index, target_index)
    usable = sources.on_network[source_index] & targets.on_network[target_index]
    chunks = node_time_blocks(
        net,
        sources,
        limit_s,
        "out",
        chunk_size,
        only=np.unique(source_index[usable]),
        predecessors=True,
        states=True,
    )
    for src, dist, pred in chunks:
        local = np.full(len(sources), -1, dtype=np.int64)
        local[src] = np.arange(len(src))
        pairs = np.flatnonzero(usable & (local[source_index] >= 0))
        ls = local[source_index[pairs]]
        best, best_s = _best_exits(dist, ls, target_index[pairs], t_count, t_ptr, layout.vertex, layout.add_s)
        # beyond the bound is not found, as in point_times (a node within it plus a partial edge can pass it)
        best_s = np.where(best_s <= limit_s, best_s, np.inf)
        pair_direct_s = np.where(direct_s[pairs] <= limit_s, direct_s[pairs], np.inf)
        # the direct trip along a shared edge wins ties: it passes no node; a pair with neither has no route
        # (both times inf, and inf <= inf must not make it a direct trip along edge -1)
        use_direct = np.isfinite(pair_direct_s) & (pair_direct_s <= best_s)
        net_ok = np.isfinite(best_s) & ~use_direct
        time_s[pairs] = np.minimum(best_s, pair_direct_s)
        direct[pairs[use_direct]] = True
        dp = pairs[use_direct]
        use.add(dp, direct_edge[dp], direct_share[dp], np.zeros(len(dp)))
        p_idx = np.flatnonzero(net_ok)
        ent = best[p_idx]
        partial = layout.edge[ent] >= 0
        rows = pairs[p_idx][partial]
        use.add(rows, layout.edge[ent][partial], layout.share[ent][partial], np.zeros(len(rows)))
        walk(use, pred, ent, ls[p_idx], pairs[p_idx])

    run_use, delay_use = use.matrices(n_pairs, net.n_edges)
    return Routes(
        source=source_index,
        target=target_index,
        found=np.isfinite(time_s),
        time_s=time_s,
        run_use=run_use,
        delay_use=delay_use,
        direct=direct,
    )


class _UseParts:
    """Pieces of the route x edge use matrices: rows (pairs), columns (edges), running-time share, delay count."""

    def __init__(self) -> None:
        self.rows: list[np.ndarray] = []
        self.cols: list[np.ndarray] = []
        self.run_w: list[np.ndarray] = []
        self.delay_w: list[np.ndarray] = []

    def add(self, rows: np.ndarray, cols: np.ndarray, run_w: np.ndarray, delay_w: np.ndarray) -> None:
        self.rows.append(rows)
        self.cols.append(cols)
        self.run_w.append(run_w)
        self.delay_w.append(delay_w)

    def matrices(self, n_pairs: int, n_edges: int) -> tuple[sp.csr_matrix, sp.csr_matrix]:
        """The running-time share and delay matrices (pairs x edges; duplicates summed, indices sorted)."""
        r = np.concatenate(self.rows) if self.rows else np.zeros(0, dtype=np.int64)
        c = np.concatenate(self.cols) if self.cols else np.zeros(0, dtype=np.int64)
        run_data = np.concatenate(self.run_w) if self.run_w else np.zeros(0)
        delay_data = np.concatenate(self.delay_w) if self.delay_w else np.zeros(0)
        run_use = sp.csr_matrix((run_data, (r, c)), shape=(n_pairs, n_edges))
        delay_use = sp.csr_matrix((delay_data, (r, c)), shape=(n_pairs, n_edges))
        delay_use.eliminate_zeros()
        run_use.sort_indices()
        delay_use.sort_indices()
        return run_use, delay_use


def _start_arcs(net: RoadNetwork, sources: Snapped) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Sorted keys ``point * n_nodes + first node`` with the entry edge (-1: the source stands at that node, no edge
    is driven) and fraction each key's route starts on."""
    n = net.n_nodes
    # one row per entry, in line with the entry arrays, so each label keeps its own edge and fraction
    lab = entry_labels(net, sources, "out")
    ok = lab.usable
    s_key = sources.entry_point[ok] * np.int64(n) + lab.node[ok]
    s_edge = np.where(lab.at_node, -1, sources.entry_edge)[ok]
    s_frac = sources.entry_frac[ok]
    # the cheapest entry of each (source point, first node) pair: the arc the virtual node actually uses (ties: the
    # lowest edge, as augmented_graph keeps the first of the edge-sorted entries)
    s_t = lab.time_s[ok]
    order = np.lexsort((s_edge, s_t, s_key))
    first = np.r_[True, s_key[order][1:] != s_key[order][:-1]] if len(order) else np.zeros(0, dtype=bool)
    return s_key[order][first], s_edge[order][first], s_frac[order][first]


def _best_exits(
    dist: np.ndarray,
    ls: np.ndarray,
    pair_target: np.ndarray,
    t_count: np.ndarray,
    t_ptr: np.ndarray,
    t_node: np.ndarray,
    t_add: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """The cheapest exit entry of each pair's target (-1 if none) and its time (s; inf if none)."""
    # every exit entry of each pair's target; pick the cheapest (ties: lowest edge id, entries are edge-sorted)
    cnt = t_count[pair_target]
    rep = np.repeat(np.arange(len(ls)), cnt)
    ent = np.repeat(t_ptr[pair_target], cnt) + (np.arange(cnt.sum()) - np.repeat(np.cumsum(cnt) - cnt, cnt))
    cand = dist[ls[rep], t_node[ent]] + t_add[ent]
    best = np.full(len(ls), -1, dtype=np.int64)
    best_s = np.full(len(ls), np.inf)
    if len(rep):
        o = np.lexsort((ent, cand, rep))
        head = np.r_[True, rep[o][1:] != rep[o][:-1]]
        best[rep[o][head]] = ent[o][head]
        best_s[rep[o][head]] = cand[o][head]
    return best, best_s


def _walk_back(
    use: _UseParts,
    pred: np.ndarray,
    walk: tuple[np.ndarray, np.ndarray, np.ndarray],
    source_index: np.ndarray,
    n: int,
    start: tuple[np.ndarray, np.ndarray, np.ndarray],
    edge_key: np.ndarray,
    edge_of_key: np.ndarray,
) -> None:
    """Add the edges of each route, walking the predecessor arrays back from the exit node, one step for all routes
    at once. ``walk`` is (exit node, local source row, pair) per route; predecessors >= ``n`` are the sources."""
    start_key, start_edge, start_frac = start
    cur, row_local, row_pair = walk
    while len(cur):
        prev = pred[row_local, cur]
        at_source = prev >= n
        if at_source.any():
            key = source_index[row_pair[at_source]] * np.int64(n) + cur[at_source]
            k = np.searchsorted(start_key, key)
            # a source standing at the junction drives no part of an edge before it
            drove = start_edge[k] >= 0
            rows, k = row_pair[at_source][drove], k[drove]
            use.add(rows, start_edge[k], 1.0 - start_frac[k], np.ones(len(rows)))
        inner = ~at_source
        if inner.any():
            key = prev[inner] * np.int64(n) + cur[inner]
            n_inner = int(inner.sum())
            use.add(row_pair[inner], edge_of_key[np.searchsorted(edge_key, key)], np.ones(n_inner), np.ones(n_inner))
        cur, row_local, row_pair = prev[inner], row_local[inner], row_pair[inner]


def _edge_lookup(net: RoadNetwork) -> tuple[np.ndarray, np.ndarray]:
    """Sorted keys ``u * n + v`` of the edges the CSR graph keeps (lowest time among parallels), and their ids."""
    m = net.csr_edge_index().tocoo()
    key = m.row.astype(np.int64) * np.int64(net.n_nodes) + m.col.astype(np.int64)
    order = np.argsort(key, kind="stable")
    return key[order], m.data[order].astype(np.int64) - 1


def _direct_trips(
    net: RoadNetwork, sources: Snapped, targets: Snapped, source_index: np.ndarray, target_index: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per pair: time (s) of the direct trip along an edge shared by source and target (target ahead of source in
    the edge's direction, by the search's own rule :func:`~coverkit.travel.search.same_edge_ok`), the edge, and
    the share of its running time; ``inf`` / -1 / 0 where there is none."""
    run = partial_run_s(net)
    n_pairs = len(source_index)
    out_s = np.full(n_pairs, np.inf)
    out_e = np.full(n_pairs, -1, dtype=np.int64)
    out_w = np.zeros(n_pairs)
    s_count = np.bincount(sources.entry_point, minlength=len(sources))
    s_ptr = np.concatenate([[0], np.cumsum(s_count)])
    cnt = s_count[source_index]
    rep = np.repeat(np.arange(n_pairs), cnt)
    ent = np.repeat(s_ptr[source_index], cnt) + (np.arange(cnt.sum()) - np.repeat(np.cumsum(cnt) - cnt, cnt))
    if len(rep) == 0 or len(targets.entry_edge) == 0:
        return out_s, out_e, out_w
    # target entries keyed by (target point, edge): entries are sorted that way already
    t_key = targets.entry_point * np.int64(run.size) + targets.entry_edge
    s_edge = sources.entry_edge[ent]
    want = target_index[rep] * np.int64(run.size) + s_edge
    k = np.minimum(np.searchsorted(t_key, want), len(t_key) - 1)
    hit = t_key[k] == want
    share = targets.entry_frac[k] - sources.entry_frac[ent]
    ok = hit & same_edge_ok(net, s_edge, sources.entry_frac[ent], targets.entry_frac[k])
    t = np.where(ok, share * np.where(ok, run[s_edge], 0.0), np.inf)  # no inf * 0 where there is no trip
    o = np.lexsort((s_edge, t, rep))
    head = np.r_[True, rep[o][1:] != rep[o][:-1]]
    sel = o[head]
    good = np.isfinite(t[sel])
    pr = rep[sel][good]
    out_s[pr] = t[sel][good]
    out_e[pr] = s_edge[sel][good]
    out_w[pr] = share[sel][good]
    return out_s, out_e, out_w


__all__ = ["ExitLayout", "PathWalk", "Routes", "node_exits", "shortest_routes", "walked_routes"]
