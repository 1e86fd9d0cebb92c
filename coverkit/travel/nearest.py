"""Exact nearest road piece for many points, vectorised: a k-d tree over short segment midpoints, then exact
point-to-segment distances in numpy, with a proof of exactness per point (and a fallback where it fails).

Why: GEOS' nearest query costs tens of microseconds per point; demand layers have 10^5 points or more.

Exactness: every piece is cut into straight sub-segments no longer than ``max_len_m``. Any point of a sub-segment
lies within ``max_len_m / 2`` of its midpoint, so the sub-segment nearest to a point p (distance d*) has its midpoint
within d* + max_len_m / 2. Querying the k nearest midpoints and computing exact distances to those k sub-segments
gives the minimum d; it is the true minimum whenever the k-th midpoint lies farther than d + max_len_m / 2 (no
unseen sub-segment can be closer). Points that fail this check go to the STRtree nearest query.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import shapely

if TYPE_CHECKING:  # imported where a tree is built: scipy.spatial costs a tenth of a second to import, and the
    # snap kernels (coverkit.travel.grid_index) use this module's distances without any tree
    from scipy.spatial import cKDTree

#: Longest sub-segment (m). Shorter means more midpoints but fewer candidates needed per point.
MAX_SUBSEGMENT_M = 50.0
#: Midpoints examined per point before falling back.
K_CANDIDATES = 8
#: Points whose candidates are examined together (bounds the memory of one step).
POINT_BLOCK = 100_000


@dataclass(frozen=True)
class SegmentIndex:
    """Sub-segments of the piece geometries and a k-d tree over their midpoints."""

    a: np.ndarray  # (S, 2) start
    b: np.ndarray  # (S, 2) end
    piece: np.ndarray  # (S,) piece index
    max_len_m: float
    tree: cKDTree


def cut_segments(coords: np.ndarray, owner: np.ndarray, max_len_m: float) -> tuple[np.ndarray, ...]:
    """Straight sub-segments no longer than ``max_len_m`` of the lines whose vertices are ``coords`` (line ``owner``
    of each vertex, non-decreasing): ends ``a``, ``b`` and the line of each."""
    same = owner[1:] == owner[:-1]
    a, b, line = coords[:-1][same], coords[1:][same], owner[1:][same]
    seg_len = np.hypot(*(b - a).T)
    parts = np.maximum(1, np.ceil(seg_len / max_len_m).astype(np.int64))
    rep = np.repeat(np.arange(len(a)), parts)
    k = np.arange(parts.sum()) - np.repeat(np.cumsum(parts) - parts, parts)
    t0 = (k / parts[rep])[:, None]
    t1 = ((k + 1) / parts[rep])[:, None]
    d = (b - a)[rep]
    return a[rep] + t0 * d, a[rep] + t1 * d, line[rep]


def cut_segments_compiled(coords: np.ndarray, owner: np.ndarray, max_len_m: float) -> tuple[np.ndarray, ...]:
    """:func:`cut_segments`, bit for bit, filled by a compiled loop: at millions of vertices the numpy version's
    repeated index and fraction arrays cost about a gigabyte (the network save builds the snap index this way)."""
    from coverkit.travel.kernels import cut_segments_kernel

    coords = np.ascontiguousarray(coords, dtype=float)
    owner = np.ascontiguousarray(owner)
    start = np.flatnonzero(owner[1:] == owner[:-1])
    step = coords[start + 1] - coords[start]
    parts = np.maximum(1, np.ceil(np.hypot(*step.T) / max_len_m).astype(np.int64))
    del step
    total = int(parts.sum())
    out_a, out_b = np.empty((total, 2)), np.empty((total, 2))
    out_line = np.empty(total, dtype=owner.dtype)
    cut_segments_kernel(coords, start, parts, owner, out_a, out_b, out_line)
    return out_a, out_b, out_line


def segment_index(geoms: np.ndarray, max_len_m: float = MAX_SUBSEGMENT_M) -> SegmentIndex:
    """Cut line geometries into straight sub-segments of at most ``max_len_m`` and index their midpoints."""
    from scipy.spatial import cKDTree

    coords, owner = shapely.get_coordinates(geoms, return_index=True)
    sa, sb, piece = cut_segments(coords, owner, max_len_m)
    return SegmentIndex(sa, sb, piece, float(max_len_m), cKDTree((sa + sb) / 2.0))


def point_segment_distance(p: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Distance from points ``p`` to segments ``a``-``b`` (arrays ending in x, y; broadcast), in the plane."""
    # x and y apart: the two-term sums in the same order as a dot product, without einsum's overhead on (n, k, 2)
    abx, aby = b[..., 0] - a[..., 0], b[..., 1] - a[..., 1]
    pax, pay = p[..., 0] - a[..., 0], p[..., 1] - a[..., 1]
    denom = abx * abx + aby * aby
    pos = denom > 0
    t = np.where(pos, (pax * abx + pay * aby) / np.where(pos, denom, 1.0), 0.0)
    t = np.clip(t, 0.0, 1.0)
    dx = p[..., 0] - (a[..., 0] + t * abx)
    dy = p[..., 1] - (a[..., 1] + t * aby)
    return np.sqrt(dx * dx + dy * dy)


def _best_of(index: SegmentIndex, xy: np.ndarray, k: int, bound_m: float) -> tuple[np.ndarray, ...]:
    """Per point, from its ``k`` nearest midpoints within ``bound_m``: the smallest segment distance, the lowest piece
    at it (ties within 1e-9 m), and whether that is proven the nearest of all pieces."""
    n = len(xy)
    half = index.max_len_m / 2.0
    dk, ik = index.tree.query(xy, k=k, distance_upper_bound=bound_m, workers=-1)
    dk = dk.reshape(n, k)
    ik = ik.reshape(n, k)
    valid = ik < len(index.piece)
    safe = np.where(valid, ik, 0)
    seg_d = point_segment_distance(xy[:, None, :], index.a[safe], index.b[safe])
    seg_d = np.where(valid, seg_d, np.inf)
    cand_piece = np.where(valid, index.piece[safe], np.iinfo(np.int64).max)
    best = seg_d.min(axis=1)
    # lowest piece index among candidates at the minimum distance (ties within 1e-9 m)
    at_min = seg_d <= best[:, None] + 1e-9
    best_piece = np.where(at_min, cand_piece, np.iinfo(np.int64).max).min(axis=1)
    # proven exact when the k-th midpoint is beyond best + half (or the query ran out of midpoints in range)
    proven = (dk[:, -1] > best + half + 1e-9) | ~valid[:, -1]
    return best, best_piece, proven


def nearest_pieces(
    index: SegmentIndex, xy: np.ndarray, max_distance_m: float, tree: shapely.STRtree, geoms: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Nearest piece (lowest index among equidistant ones) and its distance for each point within the limit.

    Returns
    -------
    piece
        Shape (n,), ``-1`` where no piece lies within ``max_distance_m``.
    dist_m
        Shape (n,), distance to that piece, ``inf`` where none.
    """
    n = len(xy)
    piece = np.full(n, -1, dtype=np.int64)
    dist = np.full(n, np.inf)
    if n == 0 or len(index.piece) == 0:
        return piece, dist
    half = index.max_len_m / 2.0
    k = min(K_CANDIDATES, len(index.piece))
    best, best_piece = np.empty(n), np.empty(n, dtype=np.int64)
    proven = np.empty(n, dtype=bool)
    # in blocks of points: the candidate arrays (points x k x 2) stay tens of MB however many points there are
    for lo in range(0, n, POINT_BLOCK):
        hi = min(lo + POINT_BLOCK, n)
        best[lo:hi], best_piece[lo:hi], proven[lo:hi] = _best_of(index, xy[lo:hi], k, max_distance_m + half)
    within = best <= max_distance_m
    ok = proven & within
    piece[ok] = best_piece[ok]
    dist[ok] = best[ok]
    # points with nothing in range: proven off-network when the nearest midpoint is beyond the limit + half
    redo = np.flatnonzero(~proven & (best <= max_distance_m + half))
    if len(redo):
        (pi, ti), d = tree.query_nearest(shapely.points(xy[redo]), max_distance=max_distance_m, return_distance=True)
        order = np.lexsort((ti, pi))
        first = np.ones(len(order), dtype=bool)
        first[1:] = pi[order][1:] != pi[order][:-1]
        sel = order[first]
        piece[redo[pi[sel]]] = ti[sel]
        dist[redo[pi[sel]]] = d[sel]
    return piece, dist
