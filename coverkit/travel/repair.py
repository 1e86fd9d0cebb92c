"""Node times after edge times rise (a closure or a slowdown), repaired from the times before, not searched again.

When edge times only rise, a node's time can change only if every shortest path to it uses a raised edge. Those
nodes (the *affected* set) lie downstream of a raised edge in the graph of tight edges (``t[tail] + w = t[head]``);
every other node keeps its time exactly. The affected nodes are then labelled by one Dijkstra search started from
the boundary of the set: each gets, as its first label, the best time from an unaffected neighbour over the raised
edge times. This is the incremental shortest-path update of G. Ramalingam and T. Reps, "An incremental algorithm for
a generalization of the shortest-path problem", *Journal of Algorithms* 21(2), 1996, 267-305, done for many sources
at once: the sources' copies of the graph are stacked as one block-diagonal graph, so the tight-edge sweep and the
repair search are one call each.

The repaired times are those of a full search bit for bit: every time is the same left-to-right sum of edge times
along a shortest path (floating-point addition of non-negative times is monotone, so Dijkstra's labels are the
minimum over paths of those sums, whichever way they are reached).
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import dijkstra

from coverkit.network.model import MIN_EDGE_S, RoadNetwork, min_weight_csr
from coverkit.travel.search import CHUNK_CELLS, DIRECTIONS, augmented_graph, graph, seeds
from coverkit.travel.snap import Snapped


def can_repair(before: RoadNetwork, after: RoadNetwork, direction: str = "out") -> bool:
    """Can :func:`repaired_node_times` update searches on ``before`` to ``after``? True when the searched graph is
    the node graph of both and no edge time falls (a closure or a slowdown, not a speed-up or an opened road)."""
    if direction not in DIRECTIONS or before.n_edges != after.n_edges or before.n_nodes != after.n_nodes:
        return False
    if graph(before, direction).shape[0] != before.n_nodes or graph(after, direction).shape[0] != after.n_nodes:
        return False
    old, new = before.travel_s, after.travel_s
    with np.errstate(invalid="ignore"):
        return bool(np.all((new >= old) | (np.isnan(old) & np.isnan(new))))


def repaired_node_times(
    before: RoadNetwork,
    after: RoadNetwork,
    sources: Snapped,
    times_before: sp.csr_matrix,
    limit_s: float,
    direction: str = "out",
    *,
    return_affected: bool = False,
) -> sp.csr_matrix | tuple[sp.csr_matrix, np.ndarray]:
    """Node times from ``sources`` on ``after``, repaired from their times on ``before``.

    Parameters
    ----------
    before, after
        The network before and after edge times rose (:func:`can_repair` must hold).
    sources
        Snapped sources, none of them on an edge whose time changed (their starting labels are then the same).
    times_before
        Shape (len(sources), n_nodes): node times (s) on ``before`` within ``limit_s``, as
        :func:`coverkit.travel.node_times` gives them.
    limit_s
        Search bound (s).
    direction
        ``"out"`` or ``"in"``, as for the search that gave ``times_before``.
    return_affected
        Also return the entries that were relabelled, as flat keys ``row x n_nodes + node``.

    Returns
    -------
    scipy.sparse.csr_matrix
        Shape of ``times_before``: equal to ``node_times(after, sources, limit_s, direction)``.
    affected : numpy.ndarray
        With ``return_affected``: the relabelled entries (int64 keys, increasing); every node whose time changed
        is among them, the others keep their times before.
    """
    n = before.n_nodes
    old = np.maximum(before.travel_s, MIN_EDGE_S)
    new = np.maximum(after.travel_s, MIN_EDGE_S)
    changed = np.flatnonzero(old != new)
    times = sp.csr_matrix(times_before, copy=True)
    times.sort_indices()
    if not len(changed):
        return (times, np.zeros(0, dtype=np.int64)) if return_affected else times
    u, v = before.u, before.v
    tail, head = (u, v) if direction == "out" else (v, u)
    table = _Lookup(times)
    base_seeds = (*seeds(after, sources, direction), len(sources))
    gone, fresh_key, fresh_t = [], [], []
    chunk = max(1, CHUNK_CELLS // max(n, 1))
    for start in range(0, times.shape[0], chunk):
        rows = np.arange(start, min(start + chunk, times.shape[0]))
        keys, t = _repair_rows(table, rows, before, direction, tail, head, old, new, changed, base_seeds, limit_s)
        gone.append(keys)
        kept = t <= limit_s
        fresh_key.append(keys[kept])
        fresh_t.append(t[kept])
    gone = np.concatenate(gone)
    out = table.replaced(gone, np.concatenate(fresh_key), np.concatenate(fresh_t))
    if not return_affected:
        return out
    return out, gone


class _Lookup:
    """A sparse time matrix (sorted indices) read by flat key ``row x n_cols + col``; inf where nothing is stored."""

    def __init__(self, m: sp.csr_matrix) -> None:
        self.m = m
        self.n = m.shape[1]
        self.row = np.repeat(np.arange(m.shape[0], dtype=np.int64), np.diff(m.indptr))
        self.keys = self.row * self.n + m.indices

    def at(self, key: np.ndarray) -> np.ndarray:
        i = np.minimum(np.searchsorted(self.keys, key), max(len(self.keys) - 1, 0))
        found = self.keys[i] == key if len(self.keys) else np.zeros(len(key), dtype=bool)
        return np.where(found, self.m.data[i] if len(self.keys) else np.inf, np.inf)

    def replaced(self, gone: np.ndarray, key: np.ndarray, t: np.ndarray) -> sp.csr_matrix:
        """The matrix with the entries at keys ``gone`` dropped and entries ``key`` (sorted) set to ``t``."""
        drop = np.searchsorted(self.keys, gone)
        drop = drop[(drop < len(self.keys)) & (self.keys[np.minimum(drop, len(self.keys) - 1)] == gone)]
        keys = np.delete(self.keys, drop)
        order = np.argsort(key, kind="stable")
        key, t = key[order], t[order]
        at = np.searchsorted(keys, key)
        rows, cols = np.divmod(key, self.n)
        data = np.insert(np.delete(self.m.data, drop), at, t)
        indices = np.insert(np.delete(self.m.indices, drop), at, cols)
        n_rows = self.m.shape[0]
        counts = np.diff(self.m.indptr) - np.bincount(self.row[drop], minlength=n_rows)
        counts += np.bincount(rows, minlength=n_rows)
        indptr = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
        return sp.csr_matrix((data, indices, indptr), shape=self.m.shape)


def _edges_from(order: np.ndarray, indptr: np.ndarray, nodes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The edges leaving (or entering) ``nodes``, from edges ``order``-ed by their tail (head) with CSR ``indptr``:
    (index into ``nodes``, edge id) per edge."""
    lo, hi = indptr[nodes], indptr[nodes + 1]
    counts = hi - lo
    which = np.repeat(np.arange(len(nodes)), counts)
    at = np.repeat(lo - np.cumsum(counts) + counts, counts) + np.arange(int(counts.sum()))
    return which, order[at]


def _by_node(net: RoadNetwork, ends: np.ndarray, key: str) -> tuple[np.ndarray, np.ndarray]:
    """Edge ids sorted by ``ends`` (stable) and their CSR row pointer over nodes, cached on the network under
    ``key`` (which names the end: tail or head in the search's direction)."""
    key = f"coverkit.travel.repair:{key}"
    if key not in net._csr_cache:
        order = np.argsort(ends, kind="stable")
        indptr = np.concatenate([[0], np.cumsum(np.bincount(ends, minlength=net.n_nodes))]).astype(np.int64)
        net._csr_cache[key] = (order, indptr)
    return net._csr_cache[key]


def _repair_rows(table, rows, net, direction, tail, head, old, new, changed, base_seeds, limit_s):
    """The affected entries of sources ``rows``: (flat keys, repaired times s, inf beyond ``limit_s``)."""
    n = table.n
    k = len(rows)
    tol_s = 1e-9  # a superset of the tight edges is safe (a larger affected set), a subset is not
    rb = np.repeat(rows, len(changed))
    ce = np.tile(changed, k)
    with np.errstate(invalid="ignore"):
        dt, dh = table.at(rb * n + tail[ce]), table.at(rb * n + head[ce])
        hit = np.isfinite(dt) & (dt + old[ce] <= dh + tol_s)
    if not hit.any():
        return np.zeros(0, dtype=np.int64), np.zeros(0)
    out_order, out_ptr = _by_node(net, tail, f"tail:{direction}")
    affected = np.zeros((k, n), dtype=bool)
    front = np.unique((rb[hit] - rows[0]) * n + head[ce[hit]])
    # sweep the tight edges level by level: the work follows the affected nodes, not sources x edges
    while len(front):
        fb, fx = np.divmod(front, n)
        affected[fb, fx] = True
        which, e = _edges_from(out_order, out_ptr, fx)
        b, h = fb[which], head[e]
        with np.errstate(invalid="ignore"):
            dt, dh = table.at((b + rows[0]) * n + tail[e]), table.at((b + rows[0]) * n + h)
            ok = np.isfinite(dh) & (dt + old[e] <= dh + tol_s) & ~affected[b, h]
        front = np.unique(b[ok] * n + h[ok])
    flat = np.flatnonzero(affected.ravel())
    t = _relabel(table, flat, affected, net, direction, tail, head, new, rows, base_seeds, limit_s)
    return flat + rows[0] * n, t


def _relabel(table, flat, affected, net, direction, tail, head, new, src_rows, base_seeds, limit_s) -> np.ndarray:
    """One Dijkstra search over the affected nodes ``flat`` of every source, from the boundary labels."""
    k, n = affected.shape
    in_order, in_ptr = _by_node(net, head, f"head:{direction}")
    fb, fx = np.divmod(flat, n)
    which, e = _edges_from(in_order, in_ptr, fx)
    b = fb[which]
    keep = np.isfinite(new[e])
    b, e = b[keep], e[keep]
    inner = affected[b, tail[e]]
    bi, ei = b[inner], e[inner]
    g = min_weight_csr(
        np.searchsorted(flat, bi * n + tail[ei]), np.searchsorted(flat, bi * n + head[ei]), new[ei], len(flat)
    )
    # labels entering the affected set: from an unaffected neighbour over the new edge time, or the source itself
    ob, oe = b[~inner], e[~inner]
    enter_t = table.at((ob + src_rows[0]) * n + tail[oe]) + new[oe]
    s_pt, s_node, s_t, n_src = base_seeds
    local = np.full(n_src, -1, dtype=np.int64)
    local[src_rows] = np.arange(k)
    s_b = local[s_pt]
    own = (s_b >= 0) & affected[np.maximum(s_b, 0), s_node]
    node = np.searchsorted(flat, np.concatenate([ob * n + head[oe], s_b[own] * n + s_node[own]]))
    t = np.concatenate([enter_t, s_t[own]])
    ok = np.isfinite(t)
    aug = augmented_graph(g, np.zeros(int(ok.sum()), dtype=np.int64), node[ok], t[ok], 1)
    return dijkstra(aug, directed=True, indices=len(flat), limit=limit_s)[: len(flat)]
