"""The k nearest sources of every node and point from k multi-source searches, not one search per source.

Why: a table of every source's times to every target holds sources x targets entries at a long horizon; the k
nearest need only k numbers per target. Pass 1 is one ``csgraph.dijkstra`` with ``min_only=True`` from the
virtual nodes of all sources (:func:`coverkit.travel.search.augmented_graph`): its times are exactly the minimum
over the per-source searches (float rounding is monotone, so ``fl(min(a, b) + w) = min(fl(a + w), fl(b + w))``).

Pass j + 1 (the (j+1)-th nearest source) runs on the graph cut into regions of equal top-j source set ``T``: an
edge is kept only inside a region, and each region is entered from a super-source with, at node ``y``, the best of
``d_a(x) + w(x, y)`` over edges ``(x, y)`` and sources ``a`` in ``T(x)`` but not in ``T(y)`` (and of the entry
arcs of the sources not in ``T(y)``). Exact: follow the (j+1)-th source's shortest path to ``v`` back to the first
node ``y`` after which every node has ``T = T(v)``; its predecessor ``x`` has ``T(x) != T(v)``, and the source is
either in ``T(x)`` (its time there is stored) or slower there than every member of ``T(x)``; every candidate is a
real path of a source outside ``T(v)``. (The argument is the k-th nearest Voronoi cell construction in graphs;
written here from first principles, no formula taken from elsewhere.)

Ties break as :func:`coverkit.travel.search.nearest_sources` breaks them, by the lower source index: of the sources
achieving a node's time, the lowest is found by propagating the minimum source label along the *tight* edges
(``fl(d(u) + w) == d(v)``), which hold every shortest path. Two paths whose sums differ by one floating-point
rounding step and meet one rounding step later would read as different there and equal here; nothing else can
differ (tested for equality against per-source searches).

Points (demand, grid cells) take their k nearest from the k nearest of the nodes their road pieces end at (the
partial edge of :func:`coverkit.travel.search.exits`) and the trips along a shared edge: the k-th nearest source of
a point is among the k nearest of the node through which it reaches the point, else k sources would precede it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import dijkstra

from coverkit.network.model import MIN_EDGE_S, RoadNetwork
from coverkit.travel.search import augmented_graph, exits, graph, same_edge_trips, seeds
from coverkit.travel.snap import Snapped

#: Points handled together when their nearest sources are picked from their road ends' (bounds the candidates).
POINT_BLOCK = 500_000
#: Sentinel source label above every real source index (int64), for the minimum-label propagation.
_NO_SOURCE = np.iinfo(np.int64).max


@dataclass(frozen=True)
class NodeReach:
    """The k nearest sources of every node within a limit.

    Attributes
    ----------
    time_s
        Shape (n, k): travel time (s) from (``"out"``) or to (``"in"``) the j-th nearest source, ``inf``
        where fewer than j + 1 sources lie within ``limit_s``. Rows are the search graph's vertices: the nodes
        (``n_nodes``) and, with turns modelled (:mod:`coverkit.travel.turns`), the turn states after them.
    source
        Shape (n, k): index of that source, ``-1`` where none.
    limit_s
        The search bound (s).
    direction
        ``"out"`` or ``"in"``.
    """

    time_s: np.ndarray
    source: np.ndarray
    limit_s: float
    direction: str

    @property
    def k(self) -> int:
        """How many nearest sources are held per node."""
        return self.time_s.shape[1]


def nearest_k_nodes(
    net: RoadNetwork,
    sources: Snapped,
    limit_s: float,
    direction: str = "out",
    *,
    k: int = 2,
    start: NodeReach | None = None,
) -> NodeReach:
    """The ``k`` nearest sources of every node within ``limit_s``, from ``k`` multi-source searches.

    Equal, node by node, to sorting the per-source searches of :func:`coverkit.travel.search.node_times` at the
    same limit (ties by the lower source index); see the module notes for why.

    Parameters
    ----------
    net
        Road network.
    sources
        Snapped sources (bases); off-network ones take no part.
    limit_s
        Search bound (s).
    direction
        ``"out"`` (source to node) or ``"in"`` (node to source).
    k
        How many nearest sources per node (>= 1).
    start
        The nearest sources of every node already found for these ``sources``, ``limit_s`` and ``direction``
        (fewer than ``k``): only the passes after them run.
    """
    n_src = len(sources)
    s_pt, s_node, s_t = seeds(net, sources, direction, states=True)
    if len(s_pt) == 0 or net.n_nodes == 0:
        empty = np.full((net.n_nodes, k), np.inf), np.full((net.n_nodes, k), -1, dtype=np.int64)
        return NodeReach(*empty, float(limit_s), direction)
    # the search graph's vertices (the nodes first; more with turns modelled, see coverkit.travel.turns)
    g = graph(net, direction)
    n = g.shape[0]
    time_s = np.full((n, k), np.inf)
    source = np.full((n, k), -1, dtype=np.int64)
    aug = augmented_graph(g, s_pt, s_node, s_t, n_src)
    coo = aug.tocoo()
    g_coo = g.tocoo()
    # the entry arcs of the sources as they enter the graph (the virtual nodes' arcs, smallest weight per node)
    arc = coo.row >= n
    entry = (coo.row[arc] - n, coo.col[arc], coo.data[arc])
    j0 = _start_passes(start, time_s, source, limit_s, direction)
    if j0 == 0:
        time_s[:, 0], source[:, 0] = _first_nearest(aug, coo, n, n_src, limit_s)
    for j in range(max(j0, 1), k):
        time_s[:, j], source[:, j] = _next_nearest(g_coo, entry, time_s[:, :j], source[:, :j], limit_s, n_src)
    return NodeReach(time_s, source, float(limit_s), direction)


def _start_passes(start: NodeReach | None, time_s: np.ndarray, source: np.ndarray, limit_s: float, direction: str):
    """Copy the nearest sources of ``start`` into ``time_s``/``source``; how many passes they stand for."""
    if start is None:
        return 0
    if start.limit_s != float(limit_s) or start.direction != direction or start.time_s.shape[0] != len(time_s):
        raise ValueError("the nearest sources to start from were searched at another limit, direction or graph")
    j0 = min(start.k, time_s.shape[1])
    time_s[:, :j0], source[:, :j0] = start.time_s[:, :j0], start.source[:, :j0]
    return j0


def _first_nearest(aug: sp.csr_matrix, coo: sp.coo_matrix, n: int, n_src: int, limit_s: float):
    """The nearest source of every vertex: one multi-source search, ties to the lowest source index."""
    dist, _, reached_from = dijkstra(
        aug, directed=True, indices=n + np.arange(n_src), limit=limit_s, min_only=True, return_predecessors=True
    )
    label = np.where(reached_from >= 0, reached_from - n, _NO_SOURCE).astype(np.int64)
    label[n:] = np.arange(n_src)
    tight = np.isfinite(dist[coo.row]) & (dist[coo.row] + coo.data == dist[coo.col])
    label = lowest_labels(label, coo.row[tight], coo.col[tight], n + n_src)
    d1 = dist[:n]
    return d1, np.where(np.isfinite(d1), label[:n], -1)


def _region_keys(source: np.ndarray, n_src: int) -> np.ndarray:
    """One integer per node naming its set of nearest sources (order-free); -1 where any is missing."""
    s = np.sort(source, axis=1)
    key = np.zeros(len(s), dtype=np.int64)
    for col in range(s.shape[1]):
        key = key * (n_src + 1) + s[:, col]
    return np.where((source >= 0).all(axis=1), key, -1)


def _next_nearest(
    g: sp.coo_matrix,
    entry: tuple[np.ndarray, np.ndarray, np.ndarray],
    time_j: np.ndarray,
    source_j: np.ndarray,
    limit_s: float,
    n_src: int,
) -> tuple[np.ndarray, np.ndarray]:
    """The (j+1)-th nearest source of every node given the j nearest (``time_j``, ``source_j``, shape (n, j))."""
    n, j = time_j.shape
    key = _region_keys(source_j, n_src)
    full = key >= 0  # nodes with j sources: the only ones that can have a (j+1)-th
    u, v, w = g.row, g.col, g.data
    inside = full[u] & full[v] & (key[u] == key[v])
    # candidates at region entries: a source of T(x) outside T(y), over an edge (x, y) leaving another region
    cu, cv, cw = u[~inside & full[v]], v[~inside & full[v]], w[~inside & full[v]]
    cand_y, cand_t, cand_s = [], [], []
    for i in range(j):
        a = source_j[cu, i]
        ok = (a >= 0) & ~(source_j[cv] == a[:, None]).any(axis=1)
        cand_y.append(cv[ok])
        cand_t.append(time_j[cu[ok], i] + cw[ok])
        cand_s.append(a[ok])
    # and the entry arcs of sources outside the node's set
    e_src, e_node, e_w = entry
    ok = full[e_node] & ~(source_j[e_node] == e_src[:, None]).any(axis=1)
    cand_y.append(e_node[ok])
    cand_t.append(e_w[ok])
    cand_s.append(e_src[ok])
    y, t, s = np.concatenate(cand_y), np.concatenate(cand_t), np.concatenate(cand_s)
    keep = t <= limit_s
    y, t, s = y[keep], t[keep], s[keep]
    out_t, out_s = np.full(n, np.inf), np.full(n, -1, dtype=np.int64)
    if len(y) == 0:
        return out_t, out_s
    # the best (time, source) per entry node
    order = np.lexsort((s, t, y))
    y, t, s = y[order], t[order], s[order]
    first = np.r_[True, y[1:] != y[:-1]]
    y, t, s = y[first], t[first], s[first]
    # the regions as one graph (no edge between regions) plus a super-source (node n) with an arc to each entry
    rows = np.concatenate([u[inside], np.full(len(y), n)])
    cols = np.concatenate([v[inside], y])
    data = np.concatenate([w[inside], np.maximum(t, MIN_EDGE_S)])
    sub = sp.csr_matrix((data, (rows, cols)), shape=(n + 1, n + 1))
    dist, pred = dijkstra(sub, directed=True, indices=n, limit=limit_s, return_predecessors=True)
    seed_src = np.full(n + 1, _NO_SOURCE, dtype=np.int64)
    seed_src[y] = s
    # an achieving source for every reached node: the source of the entry its shortest-path tree hangs from
    root = np.where((pred == n) | (pred < 0), np.arange(n + 1), pred)
    while True:  # pointer jumping: log2(tree depth) steps
        nxt = root[root]
        if np.array_equal(nxt, root):
            break
        root = nxt
    label = seed_src[root]
    # ...then the lowest achieving source, along the tight edges (an entry arc is tight when its time stands)
    tight_seed = dist[y] == np.maximum(t, MIN_EDGE_S)
    label[y[tight_seed]] = np.minimum(label[y[tight_seed]], s[tight_seed])
    ru, rv, rw = u[inside], v[inside], w[inside]
    tight = np.isfinite(dist[ru]) & (dist[ru] + rw == dist[rv])
    label = lowest_labels(label, ru[tight], rv[tight], n + 1)
    d = dist[:n]
    reached = np.isfinite(d)
    out_t[reached] = d[reached]
    out_s[reached] = label[:n][reached]
    return out_t, out_s


def lowest_labels(label: np.ndarray, tail: np.ndarray, head: np.ndarray, n: int) -> np.ndarray:
    """Lower ``label`` to the minimum label of every node from which it is reached along edges ``(tail, head)``.

    The edges are the tight edges of a search (a DAG, weights > 0), and ``label`` starts at an achieving source of
    every node; only nodes whose label drops pass it on, so the work follows the ties, not the graph.
    """
    label = label.copy()
    if len(tail) == 0:
        return label
    order = np.argsort(tail, kind="stable")
    tail, head = tail[order], head[order]
    indptr = np.searchsorted(tail, np.arange(n + 1))
    frontier = tail[np.r_[True, tail[1:] != tail[:-1]]]  # tail is sorted: its distinct values without a hash
    while len(frontier):
        start = indptr[frontier]
        cnt = indptr[frontier + 1] - start
        e = np.repeat(start - (np.cumsum(cnt) - cnt), cnt) + np.arange(int(cnt.sum()))
        cand, to = label[tail[e]], head[e]
        better = cand < label[to]
        if not better.any():
            break
        to, cand = to[better], cand[better]
        np.minimum.at(label, to, cand)
        if len(to) > n // 64:  # a wide front: a mask over the nodes is cheaper than sorting it
            mark = np.zeros(n, dtype=bool)
            mark[to] = True
            frontier = np.flatnonzero(mark)
        else:
            frontier = np.unique(to)
    return label


def nearest_k_points(
    net: RoadNetwork, sources: Snapped, targets: Snapped, reach: NodeReach, *, k: int = 2
) -> tuple[np.ndarray, np.ndarray]:
    """The ``k`` nearest sources of every snapped target point, from the nodes' nearest (``reach``, k or more).

    Equal to :func:`coverkit.travel.search.nearest_sources` of :func:`coverkit.travel.search.point_times` at
    ``reach.limit_s`` (same partial-edge and same-edge arithmetic, ties by the lower source index).

    Returns
    -------
    source
        Shape (n_targets, k), source indices in order of time, ``-1`` where fewer than ``k`` were reached.
    time_s
        Shape (n_targets, k), times (s), ``inf`` where fewer than ``k`` were reached.
    """
    if reach.k < k:
        raise ValueError(f"the nodes hold {reach.k} nearest sources; {k} are asked for")
    n_t = len(targets)
    out_s = np.full((n_t, k), -1, dtype=np.int64)
    out_t = np.full((n_t, k), np.inf)
    t_pt, t_node, t_add = exits(net, targets, reach.direction)
    se_s, se_pt, se_t = same_edge_trips(net, sources, targets, reach.direction)
    order = np.argsort(se_pt, kind="stable")
    se_s, se_pt, se_t = se_s[order], se_pt[order], se_t[order]
    from coverkit.travel.kernels import k_best_kernel

    # points in blocks, so the candidates stay a few hundred MB whatever the number of points
    for lo in range(0, n_t, POINT_BLOCK):
        hi = min(lo + POINT_BLOCK, n_t)
        a, b = np.searchsorted(t_pt, [lo, hi])
        c, d = np.searchsorted(se_pt, [lo, hi])
        node = t_node[a:b]
        # each exit's k candidates, grouped by point (t_pt is sorted), and the same-edge trips (se_pt sorted)
        ptr_a = np.searchsorted(t_pt[a:b], np.arange(lo, hi + 1)) * k
        ptr_b = np.searchsorted(se_pt[c:d], np.arange(lo, hi + 1))
        t = (reach.time_s[node, :k] + t_add[a:b, None]).ravel()
        s = np.ascontiguousarray(reach.source[node, :k]).ravel()
        k_best_kernel(ptr_a, t, s, ptr_b, se_t[c:d], se_s[c:d], float(reach.limit_s), out_s[lo:hi], out_t[lo:hi])
    return out_s, out_t


def k_best_numpy(
    pt: np.ndarray, t: np.ndarray, s: np.ndarray, limit_s: float, out_s: np.ndarray, out_t: np.ndarray
) -> None:
    """The candidate ranking of :func:`nearest_k_points` in numpy (two sorts): the reference the compiled kernel
    (:func:`coverkit.travel.kernels.k_best_kernel`) is held to in the tests."""
    _k_best(pt, t, s, limit_s, out_s, out_t)


def _k_best(pt: np.ndarray, t: np.ndarray, s: np.ndarray, limit_s: float, out_s: np.ndarray, out_t: np.ndarray):
    """Fill ``out_s``/``out_t`` (n, k) with the k best (time, source) per point of the candidates (pt, t, s): each
    source's best time first, then ordered by time and source index."""
    keep = (s >= 0) & (t <= limit_s)
    pt, t, s = pt[keep], t[keep], s[keep]
    if len(pt) == 0:
        return
    order = np.lexsort((t, s, pt))
    pt, t, s = pt[order], t[order], s[order]
    first = np.r_[True, (pt[1:] != pt[:-1]) | (s[1:] != s[:-1])]
    pt, t, s = pt[first], t[first], s[first]
    order = np.lexsort((s, t, pt))
    pt, t, s = pt[order], t[order], s[order]
    counts = np.bincount(pt, minlength=len(out_s))
    rank = np.arange(len(pt)) - np.repeat(np.cumsum(counts) - counts, counts)
    keep = rank < out_s.shape[1]
    out_s[pt[keep], rank[keep]] = s[keep]
    out_t[pt[keep], rank[keep]] = t[keep]


__all__ = ["NodeReach", "lowest_labels", "nearest_k_nodes", "nearest_k_points"]
