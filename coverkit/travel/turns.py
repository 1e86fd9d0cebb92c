"""The turn-aware search graph: edge-based (a line graph of the road graph) with turn costs and banned turns.

When a network's profile obeys turn restrictions (and the network has some) or sets turn costs, every search runs on
this graph instead of the node graph, so all commands see the same times. Its vertices, in the order a search sees
them (``"out"``; ``"in"`` swaps the first and last block so that the first ``N`` are again the nodes' times):

- ``A_n`` (``0 .. N-1``): arrived at node ``n`` (a sink): its time is the node's time; arcs ``E_e -> A_v[e]``
  weigh ``travel_s[e]``;
- ``E_e`` (``N + e``): on edge ``e`` at its start, the turn onto it paid; arcs ``E_e -> E_h`` for every allowed turn
  at ``v[e] = u[h]`` weigh ``travel_s[e] + turn_s(e, h)``;
- ``S_n`` (``N + E + n``): starting free at node ``n``; arcs ``S_n -> E_h`` for ``u[h] = n`` (no turn is made);
- one copy of ``E_b`` per (``a``, ``b``) of a via-way ban ``a -> b -> c``: the turn ``a -> b`` leads to the copy,
  which has ``b``'s arcs without the banned ones.

A search in the reverse direction (``"in"``) runs on the transpose, where ``S_n`` collects the time from ``n`` to
the sources. Zero-weight arcs read as missing in ``csgraph``, so the ``S_n`` arcs weigh
:data:`~coverkit.network.model.MIN_EDGE_S`, as the engine's virtual source arcs do.

Turn kinds come from the change of heading at the junction (:mod:`coverkit.network.turn_rules`); the edge-based
formulation is the standard one for turn costs and bans (Caldwell 1961, "Graphic methods for the analysis of
transportation networks"; Winter 2002, "Modeling costs of turns in route planning", GeoInformatica 6(4)).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import shapely

from coverkit.network.model import MIN_EDGE_S, RoadNetwork

_CACHE = "coverkit.travel.turns"


@dataclass(frozen=True)
class TurnGraph:
    """The edge-based graph of a network (``"out"`` layout) and its allowed turns.

    Attributes
    ----------
    out, rev
        CSR graphs (M x M) for ``"out"`` searches and for ``"in"`` searches (the transpose, first and last node
        blocks swapped).
    n_nodes, n_edges
        ``N`` and ``E`` of the road network.
    turn_from, turn_to, turn_s
        Allowed turns ``e -> h`` (sorted by ``e``) and their cost (s).
    via_edges
        Edges a via-way ban starts from or passes (their arcs also run through copies), sorted.
    copy_edge
        The edge each via-way copy (vertex ``2N + E + k``) stands for.
    """

    out: sp.csr_matrix
    rev: sp.csr_matrix
    n_nodes: int
    n_edges: int
    turn_from: np.ndarray
    turn_to: np.ndarray
    turn_s: np.ndarray
    via_edges: np.ndarray
    copy_edge: np.ndarray

    def swap(self, index: np.ndarray) -> np.ndarray:
        """Map ``"out"`` layout vertices to the ``"in"`` layout (the ``A`` and ``S`` blocks swapped)."""
        n, e = self.n_nodes, self.n_edges
        index = np.asarray(index, dtype=np.int64)
        return np.where(
            index < n, index + n + e, np.where((index >= n + e) & (index < 2 * n + e), index - n - e, index)
        )


def active(net: RoadNetwork) -> bool:
    """Whether searches on ``net`` use the turn-aware graph: turn costs set, or restrictions obeyed and present."""
    rules = getattr(net.profile, "turns", None)
    if rules is None:
        return False
    bans = net.turn_bans
    return rules.has_costs or (rules.obeys and bans is not None and len(bans) > 0)


def turn_graph(net: RoadNetwork, direction: str = "out") -> sp.csr_matrix:
    """The edge-based CSR graph to search in ``direction`` (cached on the network)."""
    tg = turn_structure(net)
    return tg.out if direction == "out" else tg.rev


def turn_structure(net: RoadNetwork) -> TurnGraph:
    """The network's :class:`TurnGraph`, built once (vectorised: every turn at once) and cached."""
    if _CACHE not in net._csr_cache:
        net._csr_cache[_CACHE] = _build(net)
    return net._csr_cache[_CACHE]


def turn_costs_s(net: RoadNetwork, turn_from: np.ndarray, turn_to: np.ndarray) -> np.ndarray:
    """Cost (s) of each turn ``turn_from -> turn_to`` (edges meeting at a node) under the network's profile.

    A U-turn is a turn back onto the same road piece or a heading change of at least ``uturn_deg``; straight on is
    within ``straight_deg``; otherwise left (heading turns counter-clockwise) or right.

    Examples
    --------
    Driving east along edge 0 (node 0 to 1), then north (edge 1: a left turn) or back west (edge 2: a U-turn):

    >>> import dataclasses
    >>> from coverkit.network.model import network_from_arrays
    >>> from coverkit.network.turn_rules import TurnRules
    >>> xy = np.array([[0.0, 0.0], [100.0, 0.0], [100.0, 100.0]])
    >>> net = network_from_arrays(xy, np.array([0, 1, 1]), np.array([1, 2, 0]), 36.0)
    >>> net.profile = dataclasses.replace(net.profile, turns=TurnRules(left_s=10.0, right_s=5.0, uturn_s=30.0))
    >>> turn_costs_s(net, np.array([0, 0]), np.array([1, 2])).tolist()
    [10.0, 30.0]
    """
    rules = net.profile.turns
    u, v = net.u, net.v
    h_in, h_out = _headings(net)
    delta = np.degrees(np.angle(np.exp(1j * (h_out[turn_to] - h_in[turn_from]))))
    back = (u[turn_to] == v[turn_from]) & (v[turn_to] == u[turn_from])
    uturn = back | (np.abs(delta) >= rules.uturn_deg)
    straight = ~uturn & (np.abs(delta) <= rules.straight_deg)
    # headings are counter-clockwise from east in a projected CRS: a positive change is a left turn
    left = ~uturn & ~straight & (delta > 0)
    return np.select([straight, uturn, left], [rules.straight_s, rules.uturn_s, rules.left_s], rules.right_s)


def _headings(net: RoadNetwork) -> tuple[np.ndarray, np.ndarray]:
    """Heading (rad, counter-clockwise from east) of each edge's last piece (driving in) and first piece (out)."""
    key = "geometry:turn_headings"
    if key not in net._csr_cache:
        coords, index = shapely.get_coordinates(net.edge_geometry(), return_index=True)
        first = np.searchsorted(index, np.arange(net.n_edges))
        last = np.searchsorted(index, np.arange(net.n_edges), side="right") - 1
        ok = last > first
        xy = net.xy
        a0 = np.where(ok[:, None], coords[np.minimum(first, len(coords) - 1)], xy[net.u])
        a1 = np.where(ok[:, None], coords[np.minimum(first + 1, len(coords) - 1)], xy[net.v])
        b0 = np.where(ok[:, None], coords[np.maximum(last - 1, 0)], xy[net.u])
        b1 = np.where(ok[:, None], coords[np.maximum(last, 0)], xy[net.v])
        h_out = np.arctan2(a1[:, 1] - a0[:, 1], a1[:, 0] - a0[:, 0])
        h_in = np.arctan2(b1[:, 1] - b0[:, 1], b1[:, 0] - b0[:, 0])
        net._csr_cache[key] = (h_in, h_out)
    return net._csr_cache[key]


def _all_turns(u: np.ndarray, v: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Every pair ``e -> h`` with ``v[e] = u[h]`` (sorted by ``e``, then ``h``), without a loop over edges."""
    out_order = np.argsort(u, kind="stable")
    out_ptr = np.searchsorted(u[out_order], np.arange(n + 1))
    lo = out_ptr[v]
    cnt = out_ptr[v + 1] - lo
    frm = np.repeat(np.arange(len(v)), cnt)
    to = out_order[np.repeat(lo - (np.cumsum(cnt) - cnt), cnt) + np.arange(int(cnt.sum()))]
    return frm.astype(np.int64), to.astype(np.int64)


def _build(net: RoadNetwork) -> TurnGraph:
    n, e = net.n_nodes, net.n_edges
    u, v = net.u, net.v
    travel = np.maximum(net.travel_s, MIN_EDGE_S)
    frm, to = _all_turns(u, v, n)
    cost = turn_costs_s(net, frm, to)
    bans = net.turn_bans if net.profile.turns.obeys and net.turn_bans is not None else None
    via = np.zeros((0, 3), dtype=np.int64)
    if bans is not None and len(bans):
        b = bans[["from_edge", "via_edge", "to_edge"]].to_numpy(dtype=np.int64)
        pair = b[b[:, 1] < 0]
        keep = ~np.isin(frm * e + to, pair[:, 0] * e + pair[:, 2])
        frm, to, cost = frm[keep], to[keep], cost[keep]
        via = b[b[:, 1] >= 0]
    rows = [frm + n, np.arange(e) + n, n + e + u]
    cols = [to + n, v, np.arange(e) + n]
    data = [travel[frm] + cost, travel, np.full(e, MIN_EDGE_S)]
    size = 2 * n + e
    copy_edge = np.unique(via[:, :2], axis=0)[:, 1] if len(via) else np.zeros(0, dtype=np.int64)
    if len(via):
        size, rows, cols, data = _via_copies(via, frm, to, cost, travel, v, n, e, rows, cols, data)
    r, c, w = np.concatenate(rows), np.concatenate(cols), np.concatenate(data)
    finite = np.isfinite(w)
    out = sp.csr_matrix((w[finite], (r[finite], c[finite])), shape=(size, size))
    out.sum_duplicates()
    swap = np.arange(size)
    swap[:n], swap[n + e : 2 * n + e] = np.arange(n) + n + e, np.arange(n)
    coo = out.tocoo()
    rev = sp.csr_matrix((coo.data, (swap[coo.col], swap[coo.row])), shape=(size, size))
    rev.sort_indices()
    return TurnGraph(out, rev, n, e, frm, to, cost, np.unique(via[:, :2]), copy_edge)


def _via_copies(via, frm, to, cost, travel, v, n, e, rows, cols, data):
    """Add one copy of the via edge per (from, via) pair of the via-way bans and route that turn to it."""
    pairs, inverse = np.unique(via[:, :2], axis=0, return_inverse=True)
    k = len(pairs)
    base = 2 * n + e
    copy_of = base + np.arange(k)
    # the copy's arcs: the via edge's turns and its arrival, less the banned continuations
    ptr = np.searchsorted(frm, np.arange(e + 1))
    lo, cnt = ptr[pairs[:, 1]], ptr[pairs[:, 1] + 1] - ptr[pairs[:, 1]]
    take = np.repeat(lo - (np.cumsum(cnt) - cnt), cnt) + np.arange(int(cnt.sum()))
    owner = np.repeat(np.arange(k), cnt)
    banned = np.isin(owner * e + to[take], inverse.ravel() * e + via[:, 2])
    owner, take = owner[~banned], take[~banned]
    rows += [copy_of[owner], copy_of]
    cols += [to[take] + n, v[pairs[:, 1]]]
    data += [travel[frm[take]] + cost[take], travel[pairs[:, 1]]]
    # the turn from -> via now leads to the copy (the plain arc is dropped)
    r0, c0, d0 = rows[0], cols[0], data[0]
    redirect = np.isin((r0 - n) * e + (c0 - n), pairs[:, 0] * e + pairs[:, 1])
    rows[0], cols[0], data[0] = r0[~redirect], c0[~redirect], d0[~redirect]
    key = pairs[:, 0] * e + pairs[:, 1]
    hit = np.searchsorted(key, (r0[redirect] - n) * e + (c0[redirect] - n))
    rows.append(r0[redirect])
    cols.append(copy_of[hit])
    data.append(d0[redirect])
    return base + k, rows, cols, data


def lift_seeds(
    net: RoadNetwork,
    direction: str,
    point: np.ndarray,
    node: np.ndarray,
    time_s: np.ndarray,
    edge: np.ndarray,
    at_node: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The engine's seeds (point, node, time) as seeds of the turn-aware graph: (point, vertex, time s).

    ``"out"``: a point part-way along edge ``e`` reaches ``A_v[e]`` and, through each allowed turn ``e -> h``,
    ``E_h`` (the turn's cost added): the arcs out of ``E_e`` less the part of ``e`` behind the point. ``"in"``:
    it is reached from ``E_e``. A point at a junction is ``A_n`` and ``S_n`` at its time, in both directions.
    """
    tg = turn_structure(net)
    n, e = tg.n_nodes, tg.n_edges
    mid = ~at_node
    parts = [
        (point[at_node], node[at_node], time_s[at_node]),
        (point[at_node], node[at_node] + n + e, time_s[at_node]),
    ]
    if direction == "out":
        # leaving along the rest of edge e: the arcs out of E_e (its arrival, its allowed turns, a via-way copy's
        # redirection) less the part of e already behind the point
        g = tg.out
        row = edge[mid] + n
        lo, cnt = g.indptr[row], g.indptr[row + 1] - g.indptr[row]
        take = np.repeat(lo - (np.cumsum(cnt) - cnt), cnt) + np.arange(int(cnt.sum()))
        behind = np.repeat(np.maximum(net.travel_s[edge[mid]], MIN_EDGE_S) - time_s[mid], cnt)
        parts.append((np.repeat(point[mid], cnt), g.indices[take], g.data[take] - behind))
    else:
        parts.append((point[mid], edge[mid] + n, time_s[mid]))
    pt = np.concatenate([p[0] for p in parts]).astype(np.int64)
    vx = np.concatenate([p[1] for p in parts]).astype(np.int64)
    t = np.concatenate([p[2] for p in parts]).astype(float)
    if direction == "in":
        vx = tg.swap(vx)
    order = np.argsort(pt, kind="stable")
    return pt[order], vx[order], t[order]


def changed_arcs(
    net: RoadNetwork, changed: np.ndarray, edge_s: np.ndarray, direction: str
) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """The arcs of the turn-aware graph whose weight is edge ``changed``'s time, as (tail, head, weight) in the
    layout of a ``direction`` search, with ``edge_s`` (s, one per changed edge) as the edge's time: the arcs a
    what-if tests for tightness. None when a changed edge takes part in a via-way ban (its arcs also run through
    copies): then every base counts as touched.

    The turns are enumerated from the allowed-turn list rather than from the graph, so an edge closed before (whose
    arcs the graph leaves out) is covered too.
    """
    tg = turn_structure(net)
    n, e = tg.n_nodes, tg.n_edges
    changed = np.asarray(changed, dtype=np.int64)
    if np.isin(changed, tg.via_edges).any():
        return None
    ptr = np.searchsorted(tg.turn_from, np.arange(e + 1))
    lo, cnt = ptr[changed], ptr[changed + 1] - ptr[changed]
    take = np.repeat(lo - (np.cumsum(cnt) - cnt), cnt) + np.arange(int(cnt.sum()))
    tail = np.concatenate([np.repeat(changed, cnt) + n, changed + n])
    head = np.concatenate([tg.turn_to[take] + n, net.v[changed]])
    w = np.concatenate([np.repeat(edge_s, cnt) + tg.turn_s[take], edge_s])
    if direction == "out":
        return tail, head, w
    return tg.swap(head), tg.swap(tail), w


def edge_anchor_s(net: RoadNetwork, vertex_s: np.ndarray, direction: str) -> np.ndarray | None:
    """Per edge, the time a stretch along it is measured from, given a search's times at the turn-aware graph's
    vertices (``vertex_s``, :func:`coverkit.travel.search.search_size` long); None for node times.

    ``"out"``: the time at the edge's start with the turn onto it paid (its state ``E_e``); a point at ``frac`` is
    reached at that plus ``frac`` of the run. ``"in"``: the time from the edge's end node onward, through the best
    allowed turn (the least over ``E_e``'s arcs of arc plus head time, less the edge's own time); a point at
    ``frac`` needs that plus the end-node delay plus the rest of the run, as with a node time. (``E_e``'s own time
    is not used for ``"in"``: a bounded search leaves it unset when the edge's far end lies beyond the limit.)
    """
    vertex_s = np.asarray(vertex_s, dtype=float)
    if not active(net) or len(vertex_s) == net.n_nodes:
        return None
    n, e = net.n_nodes, net.n_edges
    if direction == "out":
        return vertex_s[n : n + e]
    tg = turn_structure(net)
    g = tg.out
    lo, hi = g.indptr[n : n + e], g.indptr[n + 1 : n + e + 1]
    val = g.data[lo[0] : hi[-1]] + vertex_s[tg.swap(g.indices[lo[0] : hi[-1]])]
    best = np.full(e, np.inf)
    has = hi > lo
    if has.any():
        best[has] = np.minimum.reduceat(val, (lo - lo[0])[has])
    with np.errstate(invalid="ignore"):  # a closed edge (inf time) has no arcs: its anchor stays inf
        return np.where(np.isfinite(best), best - np.maximum(net.travel_s, MIN_EDGE_S), np.inf)
