"""Bounded multi-source shortest travel times on the CSR arrays (``scipy.sparse.csgraph.dijkstra``).

Sources are snapped points, so a search starts part-way along an edge. ``csgraph.dijkstra`` has no initial
distances, so each chunk of sources gets one *virtual node* per source, joined to the end node of each of its entry
edges by an arc carrying the partial-edge time; the search runs from the virtual nodes with ``limit``. The result is
exact (Dijkstra on the augmented graph equals Dijkstra with initial labels).

Time conventions (seconds): an edge's ``travel_s`` is its running time plus its ``delay_s`` (signal delay at the end
node). Running time is spread evenly along the edge; the delay is paid only when the end node is passed, never
for a point reached part-way along the edge.

``direction="out"`` gives times from sources to targets (base to demand); ``direction="in"`` gives times from
targets to sources (demand to base), searched on the transposed graph.

Results are sparse: a ``scipy.sparse.csr_matrix`` of shape (n_sources, n_targets) whose *stored* entries are the
reached times (stored zeros included, so test membership by the sparsity structure, never by ``!= 0``); anything
not stored lies beyond the limit.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import dijkstra

from coverkit.network.model import MIN_EDGE_S, RoadNetwork
from coverkit.travel import turns
from coverkit.travel.snap import Snapped

#: Upper bound on the cells of one chunk's dense distance block (float64): ~80 MB.
CHUNK_CELLS = 10_000_000

DIRECTIONS = ("out", "in")

#: Chunks handed to a cluster runner at a time (enough to keep its workers busy; the memory stop looks between).
CLUSTER_BATCH = 64

#: Up to this many cells (sources x targets), nearest sources are found on a dense array.
DENSE_NEAREST_CELLS = 20_000_000

#: Below this share of a chunk's (source, node) pairs reached, point times are gathered from the reached nodes only;
#: above it, from dense blocks (faster when nearly everything is reached). Both give the same numbers.
SPARSE_REACH_SHARE = 0.2

#: Peak bytes per stored entry of a sparse time table while it is built: a float64 time and an int64 index, held
#: twice while the chunks are assembled into one matrix.
TABLE_ENTRY_BYTES = 32
#: What to change when a time table would not fit (the library names no command-line flag).
TABLE_ADVICE = "a shorter horizon or travel standard, fewer demand points (a coarser raster or grid), or a cluster"


def run_s(net: RoadNetwork) -> np.ndarray:
    """Running time of each edge without its end-node delay (s); ``inf`` for closed edges."""
    delay = np.asarray(net.edge_values("delay_s"), dtype=float)
    t = net.travel_s
    return np.where(np.isfinite(t), np.maximum(t - delay, 0.0), np.inf)


def graph(net: RoadNetwork, direction: str = "out") -> sp.csr_matrix:
    """The CSR graph to search: ``net.csr()`` for ``"out"``, its transpose for ``"in"`` (cached); the turn-aware
    graph of :mod:`coverkit.travel.turns` when the network's profile models turns (its first ``N`` vertices are the
    nodes)."""
    _check_direction(direction)
    if turns.active(net):
        return turns.turn_graph(net, direction)
    if direction == "out":
        return net.csr()
    key = "coverkit.travel:csr_T"
    if key not in net._csr_cache:
        g = net.csr().T.tocsr()
        g.sort_indices()
        net._csr_cache[key] = g
    return net._csr_cache[key]


def partial_run_s(net: RoadNetwork) -> np.ndarray:
    """Running time of each edge for trips part-way along it (s): :func:`run_s`, and for an edge closed only in part
    the running time of its open stubs (``inf`` for an edge closed whole)."""
    run = run_s(net)
    stub = net.stub_run_s()
    return np.where(np.isfinite(run), run, stub)


@dataclass(frozen=True)
class EntryLabels:
    """The initial label of every entry of a snapped point set, one row per entry, in line with the ``Snapped``
    entry arrays (``entry_point``, ``entry_edge``, ``entry_frac``): row ``i`` is entry ``i``, always.

    Attributes
    ----------
    node
        The node the label is set at.
    time_s
        Time (s) of the label; ``inf`` where the entry gives none (cut off by a closed stretch, or on a closed
        edge): the row stays in its place, not reached.
    at_node
        ``True`` where the point stands at the junction ``node`` (no part of the entry's edge is driven).
    """

    node: np.ndarray
    time_s: np.ndarray
    at_node: np.ndarray

    @property
    def usable(self) -> np.ndarray:
        """Rows that give a label (finite time)."""
        return np.isfinite(self.time_s)


def entry_labels(net: RoadNetwork, snapped: Snapped, direction: str = "out") -> EntryLabels:
    """Initial labels of a node-graph search from snapped points, one row per entry of ``snapped`` (the rules of
    :func:`seeds`, with the entries that give no label kept in their place at ``inf``)."""
    _check_direction(direction)
    e, f = snapped.entry_edge, snapped.entry_frac
    run = partial_run_s(net)[e]
    lo, hi = (x[e] for x in net.closed_stretch())
    at_u, at_v = f <= 0.0, f >= 1.0
    at_node = at_u | at_v
    with np.errstate(invalid="ignore"):  # NaN stretch ends (open edges) compare False: nothing is cut off
        if direction == "out":
            node = np.where(at_u, net.u[e], net.v[e])
            t = np.where(at_node, 0.0, (1.0 - f) * run + np.asarray(net.edge_values("delay_s"), dtype=float)[e])
            cut = f < hi
        else:
            node = np.where(at_v, net.v[e], net.u[e])
            t = np.where(at_node, 0.0, f * run)
            cut = f > lo
    keep = at_node | (~cut & np.isfinite(t))
    return EntryLabels(node.astype(np.int64), np.where(keep, t, np.inf), at_node)


def seeds(
    net: RoadNetwork, snapped: Snapped, direction: str = "out", *, states: bool = False
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Initial labels of a search from snapped points: (point index, node, time s) per usable entry.

    ``"out"``: leaving the point toward the edge's end node ``v`` costs the rest of the run plus the end-node delay.
    ``"in"`` (reverse search): the point is reached from the edge's start ``u`` after ``frac`` of the run.
    A point at an end of its edge (``frac`` exactly 0 or 1, see :func:`coverkit.travel.snap.at_junctions`) is that
    junction: its label is the node itself at time 0, in both directions, so it gets the junction's time whichever
    street it was snapped to. On an edge closed in part (:meth:`RoadNetwork.closed_stretch`) a point is left toward
    ``v`` only from beyond the closed stretch and reached from ``u`` only before it; entries cut off that way are
    dropped (a point on a stretch closed from both sides has none).

    The rows are the usable entries only, so they are *not* in line with the ``Snapped`` entry arrays: a caller
    that needs an entry's edge or fraction takes :func:`entry_labels` (one row per entry) instead.

    With ``states``, the labels are vertices of :func:`graph` (:func:`coverkit.travel.turns.lift_seeds` when the
    network models turns; the nodes otherwise).
    """
    lab = entry_labels(net, snapped, direction)
    keep = lab.usable
    pt, node, t = snapped.entry_point[keep], lab.node[keep], lab.time_s[keep]
    if states and turns.active(net):
        e = snapped.entry_edge[keep]
        return turns.lift_seeds(net, direction, pt, node, t, e, lab.at_node[keep])
    return pt, node, t


def exits(
    net: RoadNetwork, snapped: Snapped, direction: str = "out", *, states: bool = True
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """How a search reaches snapped target points: (point index, node, added time s) per entry.

    ``"out"``: a target is reached from the edge's start ``u`` plus ``frac`` of the run (no end-node delay).
    ``"in"``: from the target the trip leaves toward ``v``: the rest of the run plus the end-node delay.
    With ``states`` (the default) the entries are vertices of :func:`graph` in the layout of a ``direction`` search
    (the nodes when turns are not modelled), as the columns of :func:`node_times` are; without, nodes.
    """
    _check_direction(direction)
    other = "in" if direction == "out" else "out"
    pt, node, t = seeds(net, snapped, other, states=states)
    if states and turns.active(net):
        # the other direction's seeds are laid out for its own search: swap the node blocks back
        node = turns.turn_structure(net).swap(node)
    return pt, node, t


def search_size(net: RoadNetwork) -> int:
    """Vertices of the search graph: the nodes, and with turns modelled the turn states after them."""
    return turns.turn_structure(net).out.shape[0] if turns.active(net) else net.n_nodes


def node_times(
    net: RoadNetwork,
    sources: Snapped,
    limit_s: float,
    direction: str = "out",
    chunk_size: int | None = None,
) -> sp.csr_matrix:
    """Shortest travel times between snapped sources and every node, within ``limit_s``.

    Parameters
    ----------
    net
        Road network.
    sources
        Snapped sources (bases); off-network sources get empty rows.
    limit_s
        Search bound (s); nodes farther than this are not stored.
    direction
        ``"out"`` (source to node) or ``"in"`` (node to source).
    chunk_size
        Sources per ``dijkstra`` call (default: keep a dense block under :data:`CHUNK_CELLS` cells).

    Returns
    -------
    scipy.sparse.csr_matrix
        Shape (n_sources, :func:`search_size`), stored entries = times (s): the nodes' times in the first
        ``n_nodes`` columns, then (turns modelled) the turn states', which :func:`exits` may name.
    """
    width = search_size(net)
    chunks, shared = _chunks(net, sources, limit_s, direction, chunk_size, width=width)
    watch = _TableWatch(len(sources), net.n_nodes, limit_s, "nodes")
    return _assemble(_row_blocks(_node_rows, chunks, shared, watch), (len(sources), width))


def node_time_blocks(
    net: RoadNetwork,
    sources: Snapped,
    limit_s: float,
    direction: str = "out",
    chunk_size: int | None = None,
    only: np.ndarray | None = None,
    predecessors: bool = False,
    *,
    states: bool = False,
):
    """Dense times between on-network sources and every node, chunk by chunk (for callers that use each source's
    row once and let it go: memory stays at one chunk).

    Parameters
    ----------
    net, sources, limit_s, direction, chunk_size
        As for :func:`node_times`.
    only
        Search from these source indices only (default: every on-network source).
    predecessors
        Also yield the shortest-path predecessors.
    states
        Yield every vertex of the search graph (:func:`search_size` columns: the nodes, then the turn states when
        turns are modelled), not the nodes only.

    Yields
    ------
    src_idx : numpy.ndarray
        Indices (into ``sources``) of the chunk's sources, increasing.
    block : numpy.ndarray
        Shape (len(src_idx), n_nodes): time (s) from each source (``"out"``) or to it (``"in"``); ``inf`` beyond
        ``limit_s``.
    pred : numpy.ndarray
        With ``predecessors`` only: shape (len(src_idx), n_nodes + len(src_idx)), the previous node on each
        shortest path; indices from ``n_nodes`` on are the chunk's virtual source nodes.
    """
    n = search_size(net) if states else net.n_nodes
    for out in _chunked_search(net, sources, limit_s, direction, chunk_size, n, only, predecessors):
        yield (out[0], out[1][:, :n], *out[2:])


def point_times(
    net: RoadNetwork,
    sources: Snapped,
    targets: Snapped,
    limit_s: float,
    direction: str = "out",
    chunk_size: int | None = None,
) -> sp.csr_matrix:
    """Shortest travel times between snapped sources and snapped target points, within ``limit_s``.

    Includes the partial edge at both ends (in each direction a two-way street allows) and the direct trip along a
    shared edge when source and target lie on the same edge in driving order.

    Parameters
    ----------
    net, sources, limit_s, direction, chunk_size
        As in :func:`node_times`.
    targets
        Snapped target points (demand); off-network targets get empty columns.

    Returns
    -------
    scipy.sparse.csr_matrix
        Shape (n_sources, n_targets), stored entries = times (s).
    """
    n_t = len(targets)
    t_pt, t_node, t_add = exits(net, targets, direction)
    # entries are sorted by point: reduceat boundaries per target with at least one entry
    starts = np.flatnonzero(np.r_[True, t_pt[1:] != t_pt[:-1]]) if len(t_pt) else np.zeros(0, dtype=np.int64)
    n_space = search_size(net)
    width = max(n_space, len(t_pt))
    # the target entries by node (to gather from the reached nodes only) and the same-edge trips, found once
    by_node = np.argsort(t_node, kind="stable")
    node_ptr = np.searchsorted(t_node[by_node], np.arange(n_space + 1))
    se_s, se_pt, se_t = same_edge_trips(net, sources, targets, direction)
    order = np.argsort(se_s, kind="stable")
    ends = _PointEnds(n_t, t_pt, t_node, t_add, starts, by_node, node_ptr, se_s[order], se_pt[order], se_t[order])
    chunks, shared = _chunks(net, sources, limit_s, direction, chunk_size, width=width)
    watch = _TableWatch(len(sources), n_t, limit_s, "points")
    return _assemble(_row_blocks(_point_rows, chunks, {**shared, "ends": ends}, watch), (len(sources), n_t))


@dataclass(frozen=True)
class _PointEnds:
    """How a search's nodes reach the target points (:func:`exits`, grouped) and the same-edge trips by source: the
    shared input of every chunk of :func:`point_times` (one object, so a cluster sends it whole, once)."""

    n_t: int
    t_pt: np.ndarray
    t_node: np.ndarray
    t_add: np.ndarray
    starts: np.ndarray
    by_node: np.ndarray
    node_ptr: np.ndarray
    se_s: np.ndarray
    se_pt: np.ndarray
    se_t: np.ndarray


def _point_rows(src_idx: np.ndarray, *, ends: _PointEnds, limit_s: float, **search) -> sp.csr_matrix:
    """One chunk of :func:`point_times`: its sources' times to the target points within ``limit_s`` (a block of
    :func:`coverkit.compute.map_blocks`; module level so a cluster worker runs it by name)."""
    dist = _search_block(src_idx, limit_s=limit_s, **search)
    local = np.full(search["n_sources"], -1, dtype=np.int64)
    local[src_idx] = np.arange(len(src_idx))
    trip = local[ends.se_s] >= 0
    trips = (local[ends.se_s[trip]], ends.se_pt[trip], ends.se_t[trip])
    reached = np.isfinite(dist)
    if reached.mean() > SPARSE_REACH_SHARE:
        block = np.full((len(src_idx), ends.n_t), np.inf)
        if len(ends.t_pt):
            block[:, ends.t_pt[ends.starts]] = _group_min(dist, ends.t_node, ends.t_add, ends.starts)
        np.minimum.at(block, trips[:2], trips[2])
        return dense_to_csr(block, limit_s)
    return _reached_points(dist, reached, ends.by_node, ends.node_ptr, ends.t_pt, ends.t_add, trips, ends.n_t, limit_s)


def _reached_points(
    dist: np.ndarray,
    reached: np.ndarray,
    by_node: np.ndarray,
    node_ptr: np.ndarray,
    t_pt: np.ndarray,
    t_add: np.ndarray,
    trips: tuple[np.ndarray, np.ndarray, np.ndarray],
    n_t: int,
    limit_s: float,
) -> sp.csr_matrix:
    """A chunk's point times from its reached nodes only: the same sums and minima as the dense block (so the same
    numbers), at a cost that follows the reached (source, node) pairs instead of sources x targets."""
    r, nd = np.nonzero(reached)
    lo = node_ptr[nd]
    cnt = node_ptr[nd + 1] - lo
    e = by_node[np.repeat(lo - (np.cumsum(cnt) - cnt), cnt) + np.arange(int(cnt.sum()))]
    rows = np.r_[np.repeat(r, cnt), trips[0]]
    cols = np.r_[t_pt[e], trips[1]]
    t = np.r_[np.repeat(dist[r, nd], cnt) + t_add[e], trips[2]]
    key = rows * n_t + cols
    order = np.argsort(key, kind="stable")
    key, t = key[order], t[order]
    first = np.flatnonzero(np.r_[True, key[1:] != key[:-1]]) if len(key) else np.zeros(0, dtype=np.int64)
    t = np.minimum.reduceat(t, first) if len(first) else t[:0]
    key = key[first]
    keep = t <= limit_s
    key, t = key[keep], t[keep]
    row, col = key // n_t, key % n_t
    indptr = np.concatenate([[0], np.cumsum(np.bincount(row, minlength=len(dist)))])
    return sp.csr_matrix((t, col, indptr), shape=(len(dist), n_t))


class _TableWatch:
    """Projects a table's stored entries from the chunks searched so far and stops (one line) when the whole table
    would not fit in the memory budget, before the rest is searched and assembled."""

    def __init__(self, n_sources: int, n_targets: int, limit_s: float, what: str) -> None:
        from coverkit import settings

        self.n_sources, self.n_targets, self.limit_s, self.what = n_sources, n_targets, limit_s, what
        self.budget = settings.memory_budget_bytes()
        self.entries = 0
        self.done = 0

    def add(self, src_idx: np.ndarray, nnz: int) -> None:
        from coverkit.memory import check_memory

        self.entries += int(nnz)
        self.done += len(src_idx)
        projected = self.entries * self.n_sources / max(self.done, 1)
        check_memory(
            f"the travel times of {self.n_sources:,} bases to {self.n_targets:,} {self.what} within "
            f"{self.limit_s:g} s ({projected:,.0f} pairs)",
            projected * TABLE_ENTRY_BYTES,
            TABLE_ADVICE,
            budget_bytes=self.budget,
        )


def nearest_node_times(
    net: RoadNetwork, sources: Snapped, limit_s: float, direction: str = "out", *, states: bool = False
) -> tuple[np.ndarray, np.ndarray]:
    """Time to (or from) the nearest source for every node, and which source, in one search.

    With ``states``, for every vertex of the search graph (the nodes first, then the turn states when turns are
    modelled), as :func:`node_time_blocks` gives them.

    Returns
    -------
    time_s
        Shape (n_nodes,), ``inf`` beyond ``limit_s``.
    source
        Shape (n_nodes,), index of the nearest source, ``-1`` where none is within the limit.
    """
    n = search_size(net) if states else net.n_nodes
    s_pt, s_node, s_t = seeds(net, sources, direction, states=True)
    if len(s_pt) == 0:
        return np.full(n, np.inf), np.full(n, -1, dtype=np.int64)
    g = graph(net, direction)
    aug = augmented_graph(g, s_pt, s_node, s_t, len(sources))
    dist, _, src = dijkstra(
        aug,
        directed=True,
        indices=g.shape[0] + np.arange(len(sources)),
        limit=limit_s,
        min_only=True,
        return_predecessors=True,
    )
    time_s = dist[:n].copy()
    source = np.where(np.isfinite(time_s), src[:n] - g.shape[0], -1).astype(np.int64)
    return time_s, source


def nearest_sources(times: sp.csr_matrix, k: int = 1) -> tuple[np.ndarray, np.ndarray]:
    """The ``k`` nearest sources of every target, from a (n_sources, n_targets) sparse time matrix.

    Ties are broken by the lower source index (deterministic).

    Returns
    -------
    source
        Shape (n_targets, k), source indices in order of time, ``-1`` where fewer than ``k`` were reached.
    time_s
        Shape (n_targets, k), times (s), ``inf`` where fewer than ``k`` were reached.
    """
    n_s, n_t = times.shape
    if n_s * n_t <= DENSE_NEAREST_CELLS:
        # few sources (bases): a dense stable sort down each column is faster than sorting all entries
        dense = np.full((n_s, n_t), np.inf)
        coo = times.tocoo()
        dense[coo.row, coo.col] = coo.data
        kk = min(k, n_s)
        order = np.argsort(dense, axis=0, kind="stable")[:kk]
        t_k = np.take_along_axis(dense, order, axis=0)
        source = np.full((n_t, k), -1, dtype=np.int64)
        time_s = np.full((n_t, k), np.inf)
        reached = np.isfinite(t_k)
        source[:, :kk] = np.where(reached, order, -1).T
        time_s[:, :kk] = t_k.T
        return source, time_s
    coo = times.tocoo()
    order = np.lexsort((coo.row, coo.data, coo.col))
    col, row, t = coo.col[order], coo.row[order], coo.data[order]
    counts = np.bincount(col, minlength=n_t)
    group_start = np.repeat(np.cumsum(counts) - counts, counts)
    rank = np.arange(len(col)) - group_start
    keep = rank < k
    source = np.full((n_t, k), -1, dtype=np.int64)
    time_s = np.full((n_t, k), np.inf)
    source[col[keep], rank[keep]] = row[keep]
    time_s[col[keep], rank[keep]] = t[keep]
    return source, time_s


def count_within(times: sp.csr_matrix, within_s: float) -> np.ndarray:
    """Coverage depth: how many sources reach each target within ``within_s`` seconds (shape (n_targets,))."""
    coo = times.tocoo()
    return np.bincount(coo.col[coo.data <= within_s], minlength=times.shape[1]).astype(np.int64)


# -- building blocks (also used by coverkit.travel.routes and coverkit.whatif) and internals --------------------------
def _group_min(dist: np.ndarray, node: np.ndarray, add: np.ndarray, starts: np.ndarray) -> np.ndarray:
    """Per group of entries (groups start at ``starts``): min over entries of ``dist[:, node] + add``.

    Most points have one or two entries (a one-way or a two-way street), so the first and last entry of each group
    are combined directly; only larger groups go through ``reduceat``.
    """
    ends = np.r_[starts[1:], len(node)] - 1
    out = dist[:, node[starts]] + add[starts]
    two = ends > starts
    if two.any():
        out[:, two] = np.minimum(out[:, two], dist[:, node[ends[two]]] + add[ends[two]])
    many = np.flatnonzero(ends - starts > 1)
    if len(many):
        vals = dist[:, node] + add[None, :]
        red = np.minimum.reduceat(vals, starts, axis=1)
        out[:, many] = red[:, many]
    return out


def _check_direction(direction: str) -> None:
    if direction not in DIRECTIONS:
        raise ValueError(f"direction must be 'out' or 'in', not {direction!r}")


def augmented_graph(g: sp.csr_matrix, pt: np.ndarray, node: np.ndarray, t: np.ndarray, n_virtual: int) -> sp.csr_matrix:
    """``g`` plus ``n_virtual`` virtual nodes; virtual node ``n + i`` has arcs to ``node`` with weights ``t``."""
    n = g.shape[0]
    # keep the smallest weight per (virtual, node): csr construction would otherwise hold duplicates
    order = np.lexsort((t, node, pt))
    pt, node, t = pt[order], node[order], t[order]
    first = np.ones(len(pt), dtype=bool)
    first[1:] = (pt[1:] != pt[:-1]) | (node[1:] != node[:-1])
    pt, node, t = pt[first], node[first], t[first]
    counts = np.bincount(pt, minlength=n_virtual)
    indptr = np.concatenate([g.indptr.astype(np.int64), g.indptr[-1] + np.cumsum(counts)])
    indices = np.concatenate([g.indices.astype(np.int64), node])
    # a zero weight would read as a missing arc in csgraph
    data = np.concatenate([g.data, np.maximum(t, MIN_EDGE_S)])
    size = n + n_virtual
    return sp.csr_matrix((data, indices, indptr), shape=(size, size))


def _chunks(net, sources, limit_s, direction, chunk_size, width, only=None):
    """The chunks of on-network source indices (``only``: these instead) of a search, and what every chunk shares:
    the graph to search (cached on the network, so a cluster sends it once per run), the sources' entries, the
    bound. A chunk's dense block has at most :data:`CHUNK_CELLS` cells of ``width`` columns."""
    _check_direction(direction)
    s_pt, s_node, s_t = seeds(net, sources, direction, states=True)
    src_all = np.flatnonzero(sources.on_network) if only is None else np.asarray(only, dtype=np.int64)
    if chunk_size is None:
        chunk_size = max(1, CHUNK_CELLS // max(width, 1))
    chunks = [src_all[start : start + chunk_size] for start in range(0, len(src_all), chunk_size)]
    shared = {"g": graph(net, direction), "entries": _Entries(s_pt, s_node, s_t), "n_sources": len(sources)}
    return chunks, {**shared, "limit_s": float(limit_s)}


@dataclass(frozen=True)
class _Entries:
    """The sources' entries into the graph (:func:`seeds`): point index, node, time (s)."""

    pt: np.ndarray
    node: np.ndarray
    t: np.ndarray


def _search_block(src_idx, *, g, entries: _Entries, n_sources: int, limit_s: float, predecessors: bool = False):
    """One chunk's search: the graph ``g`` plus one virtual node per source of ``src_idx`` (its entries as arcs),
    ``csgraph.dijkstra`` from the virtual nodes within ``limit_s``. Returns the dense times (chunk, n_nodes) and,
    with ``predecessors``, the predecessor block (chunk, n_nodes + chunk)."""
    n = g.shape[0]
    local = np.full(n_sources, -1, dtype=np.int64)
    local[src_idx] = np.arange(len(src_idx))
    sel = local[entries.pt] >= 0
    aug = augmented_graph(g, local[entries.pt[sel]], entries.node[sel], entries.t[sel], len(src_idx))
    indices = n + np.arange(len(src_idx))
    if predecessors:
        dist, pred = dijkstra(aug, directed=True, indices=indices, limit=limit_s, return_predecessors=True)
        return dist[:, :n], pred
    return dijkstra(aug, directed=True, indices=indices, limit=limit_s)[:, :n]


def _node_rows(src_idx: np.ndarray, *, limit_s: float, **search) -> sp.csr_matrix:
    """One chunk of :func:`node_times` as sparse rows (a block of :func:`coverkit.compute.map_blocks`)."""
    return dense_to_csr(_search_block(src_idx, limit_s=limit_s, **search), limit_s)


def _row_blocks(fn, chunks, shared, watch) -> list[tuple[np.ndarray, sp.csr_matrix]]:
    """``(chunk, fn(chunk, **shared))`` for every chunk, in chunk order, on the current runner: in this process one
    chunk at a time, on a cluster :data:`CLUSTER_BATCH` chunks at a time (the shared inputs go to each worker
    once). ``watch`` sees every block as it arrives, so the memory stop comes before the rest is searched."""
    from coverkit.compute import InProcess, current_runner, map_blocks

    batch = 1 if isinstance(current_runner(), InProcess) else CLUSTER_BATCH
    parts = []
    for lo in range(0, len(chunks), batch):
        some = chunks[lo : lo + batch]
        for src_idx, rows in zip(some, map_blocks(fn, some, shared=shared), strict=True):
            parts.append((src_idx, rows))
            watch.add(src_idx, rows.nnz)
    return parts


def _chunked_search(net, sources, limit_s, direction, chunk_size, width, only=None, predecessors=False):
    """Yield ``(source indices, dense times block (chunk, n_nodes))`` per chunk of on-network sources (``only``:
    these source indices instead); with ``predecessors``, also the predecessor block (chunk, n_nodes + chunk), in
    which indices from ``n_nodes`` on are the chunk's virtual source nodes. In this process: the dense blocks are
    the caller's, one chunk at a time."""
    chunks, shared = _chunks(net, sources, limit_s, direction, chunk_size, width, only)
    for src_idx in chunks:
        out = _search_block(src_idx, predecessors=predecessors, **shared)
        yield (src_idx, *out) if predecessors else (src_idx, out)


def same_edge_trips(
    net: RoadNetwork,
    sources: Snapped,
    targets: Snapped,
    direction: str,
    only: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The direct trips along an edge shared by a source and a target, in driving order: (source, target, time s).

    ``only``: the sources to consider (default every one).
    """
    sel = np.ones(len(sources.entry_point), dtype=bool)
    if only is not None:
        wanted = np.zeros(len(sources), dtype=bool)
        wanted[np.asarray(only, dtype=np.int64)] = True
        sel = wanted[sources.entry_point]
    s_pt, s_e, s_f = sources.entry_point[sel], sources.entry_edge[sel], sources.entry_frac[sel]
    t_pt, t_e, t_f = targets.entry_point, targets.entry_edge, targets.entry_frac
    empty = (np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64), np.zeros(0))
    if len(s_e) == 0 or len(t_e) == 0:
        return empty
    order = np.argsort(t_e, kind="stable")
    te_sorted = t_e[order]
    lo = np.searchsorted(te_sorted, s_e, side="left")
    hi = np.searchsorted(te_sorted, s_e, side="right")
    cnt = hi - lo
    if cnt.sum() == 0:
        return empty
    si = np.repeat(np.arange(len(s_e)), cnt)
    tj = order[np.repeat(lo, cnt) + (np.arange(cnt.sum()) - np.repeat(np.cumsum(cnt) - cnt, cnt))]
    e = s_e[si]
    # out: drive from source frac forward to target frac; in: from target frac forward to source frac
    first, last = (s_f[si], t_f[tj]) if direction == "out" else (t_f[tj], s_f[si])
    ok = same_edge_ok(net, e, first, last)
    t = (last - first)[ok] * partial_run_s(net)[e[ok]]
    return s_pt[si[ok]], t_pt[tj[ok]], t


def same_edge_ok(net: RoadNetwork, edge: np.ndarray, first: np.ndarray, last: np.ndarray) -> np.ndarray:
    """Whether the direct trip along ``edge`` from fraction ``first`` to ``last`` (in the edge's direction) exists
    and is timed as a direct trip: the one rule of :func:`same_edge_trips` and of the routes' direct trips."""
    lo, hi = (x[edge] for x in net.closed_stretch())
    with np.errstate(invalid="ignore"):
        # a trip ending at the edge's end node is a trip to that junction: the node path (with its delay) times it;
        # a trip across the closed stretch of a partly closed edge does not exist, nor one along an edge closed
        # whole (not even of length 0 at its start: that point is the junction, which the node path times)
        crosses = (hi > first) & (lo < last)
        return (last >= first) & (last < 1.0) & ~crosses & np.isfinite(partial_run_s(net)[edge])


def same_edge_min(
    net: RoadNetwork,
    sources: Snapped,
    targets: Snapped,
    src_idx: np.ndarray,
    block: np.ndarray,
    direction: str,
) -> None:
    """Lower ``block`` (chunk, n_targets) with the direct trip along an edge shared by source and target."""
    s, pt, t = same_edge_trips(net, sources, targets, direction, only=src_idx)
    if len(s):
        local = np.full(len(sources), -1, dtype=np.int64)
        local[src_idx] = np.arange(len(src_idx))
        np.minimum.at(block, (local[s], pt), t)


def dense_to_csr(dist: np.ndarray, limit_s: float) -> sp.csr_matrix:
    """CSR of the entries of ``dist`` that are <= ``limit_s`` (explicit zeros kept)."""
    mask = dist <= limit_s
    counts = mask.sum(axis=1)
    indptr = np.concatenate([[0], np.cumsum(counts)])
    r, c = np.nonzero(mask)
    return sp.csr_matrix((dist[r, c], c, indptr), shape=dist.shape)


def _assemble(parts: list[tuple[np.ndarray, sp.csr_matrix]], shape: tuple[int, int]) -> sp.csr_matrix:
    """Place per-chunk row blocks at their source rows; other rows empty (stored zeros are kept)."""
    counts = np.zeros(shape[0], dtype=np.int64)
    for src_idx, m in parts:
        counts[src_idx] = np.diff(m.indptr)
    indptr = np.concatenate([[0], np.cumsum(counts)])
    indices = np.empty(indptr[-1], dtype=np.int64)
    data = np.empty(indptr[-1])
    for src_idx, m in parts:
        # rows of a chunk are increasing source indices, so each row's slot is contiguous
        start = indptr[src_idx]
        n_row = np.diff(m.indptr)
        pos = np.repeat(start - m.indptr[:-1], n_row) + np.arange(m.nnz)
        indices[pos] = m.indices
        data[pos] = m.data
    return sp.csr_matrix((data, indices, indptr), shape=shape)
