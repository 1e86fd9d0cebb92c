"""Road distance (m) from the nearest of several sources to every target point: one multi-source search on length.

Why: NFPA 1720 sets its remote zone by travel distance to the station (8 miles or more, from memory), not by travel
time, so the search runs on the edges' ``length_m`` instead of their times. It is the same kind of search as
:func:`coverkit.travel.reach.nearest_k_nodes` pass 1 (virtual source nodes joined to the sources' road ends,
:func:`coverkit.travel.search.augmented_graph`, one ``csgraph.dijkstra`` with ``min_only``), on the open edges
only (a closed road carries no one). Turn restrictions and costs are left out: a distance, not a time.

A source's trip starts at its snapped place on its edge (the rest of the edge to its end node); a target is
reached from an edge's start node plus the part of the edge up to it, or directly along the piece both share.
"""

from __future__ import annotations

import numpy as np
from scipy.sparse.csgraph import dijkstra

from coverkit.network.model import MIN_EDGE_S, RoadNetwork, min_weight_csr
from coverkit.travel.search import augmented_graph
from coverkit.travel.snap import Snapped


def nearest_distance_m(net: RoadNetwork, sources: Snapped, targets: Snapped, limit_m: float) -> np.ndarray:
    """Per target the road distance (m) from the nearest source, ``inf`` beyond ``limit_m`` or off the network.

    Parameters
    ----------
    net
        Road network (``length_m`` per edge; edges with an infinite travel time are closed).
    sources, targets
        Snapped sources (stations) and targets (cells, demand points), as :func:`coverkit.travel.snap_points`
        gives them.
    limit_m
        Search bound (m).
    """
    length = net.length_m.astype(float)
    open_ = np.isfinite(net.travel_s)
    # a zero length would read as a missing arc in csgraph: the times' floor, read as metres
    g = min_weight_csr(net.u[open_], net.v[open_], np.maximum(length[open_], MIN_EDGE_S), net.n_nodes)
    out = np.full(len(targets), np.inf)
    e, f = sources.entry_edge, sources.entry_frac
    if len(e) == 0 or len(targets) == 0:
        return out
    node = np.where(f <= 0.0, net.u[e], net.v[e])
    start = np.where(f <= 0.0, 0.0, (1.0 - f) * length[e])
    n = net.n_nodes
    aug = augmented_graph(g, sources.entry_point, node, start, len(sources))
    dist = dijkstra(aug, directed=True, indices=n + np.arange(len(sources)), limit=limit_m, min_only=True)[:n]
    te, tf = targets.entry_edge, targets.entry_frac
    via = np.where(tf >= 1.0, dist[net.v[te]], dist[net.u[te]] + tf * length[te])
    np.minimum.at(out, targets.entry_point, via)
    _along_shared_pieces(sources, targets, out, np.isfinite(net.travel_s))
    out[out > limit_m] = np.inf
    return out


def _along_shared_pieces(sources: Snapped, targets: Snapped, out: np.ndarray, open_: np.ndarray) -> None:
    """Lower ``out`` to the distance along the open road piece a target shares with a source (``edge`` names the
    piece): the gap between their offsets, either way (on a one-way piece too: a distance class, not a route)."""
    on = np.flatnonzero(sources.on_network)
    on = on[open_[sources.edge[on]]]
    if len(on) == 0:
        return
    order = np.argsort(sources.edge[on], kind="stable")
    s_edge, s_off = sources.edge[on][order], sources.offset_m[on][order]
    t_on = np.flatnonzero(targets.on_network)
    lo = np.searchsorted(s_edge, targets.edge[t_on], side="left")
    hi = np.searchsorted(s_edge, targets.edge[t_on], side="right")
    has = hi > lo
    for k in range(int((hi - lo).max(initial=0))):  # sources per piece: a handful at most
        ok = has & (lo + k < hi)
        idx = t_on[ok]
        gap = np.abs(targets.offset_m[idx] - s_off[lo[ok] + k])
        out[idx] = np.minimum(out[idx], gap)


__all__ = ["nearest_distance_m"]
