"""Compiled kernels (numba) of the way splitter (:func:`coverkit.network.osm_ways.ways_to_roads`): where the kept
references split into segments, and the vertices of the segments' lines.

Why compiled: in numpy each step was a handful of passes over the ten million references of a large county (split
flags, pairs of split points, a repeat and an arange per vertex), each with its own temporary array; here each is
one loop over the references, writing into arrays sized beforehand. The rules are those of the numpy code they
replace (the tests hold :func:`~coverkit.network.osm_ways.ways_to_roads` to the results of that code). Compiled on
first use, cached on disk (``cache=True``).
"""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True, nogil=True)
def _split_flags(way_of_ref, pos, marked, n_nodes):
    """Split points: a way's first and last reference, a node used more than once among the references, a node
    ``marked`` (by its place ``pos`` in the node table)."""
    n = len(pos)
    uses = np.zeros(n_nodes, np.int32)
    for i in range(n):
        uses[pos[i]] += 1
    split = np.empty(n, np.bool_)
    for i in range(n):
        p = pos[i]
        split[i] = (
            i == 0
            or i == n - 1
            or way_of_ref[i] != way_of_ref[i - 1]
            or way_of_ref[i] != way_of_ref[i + 1]
            or uses[p] > 1
            or marked[p]
        )
    return split


@njit(cache=True, nogil=True)
def segments_kernel(way_of_ref, pos, marked, n_nodes):
    """Start and end (reference positions, int64) of the segments of the references sorted by way.

    A segment runs between consecutive split points of one way (:func:`_split_flags`); a closed loop with no split
    point inside it (a loop road, a lone roundabout) is first split at its middle vertex; a segment starting and
    ending at the same node is then left out. Also returns the count of those left out."""
    split = _split_flags(way_of_ref, pos, marked, n_nodes)
    n = len(pos)
    # a loop between consecutive split points of one way gets its middle vertex as a split point too
    last = -1
    for i in range(n):
        if split[i]:
            if last >= 0 and way_of_ref[last] == way_of_ref[i] and pos[last] == pos[i] and i - last >= 2:
                split[(last + i) // 2] = True
            last = i
    n_seg = 0
    last = -1
    for i in range(n):
        if split[i]:
            if last >= 0 and way_of_ref[last] == way_of_ref[i]:
                n_seg += 1
            last = i
    starts = np.empty(n_seg, np.int64)
    ends = np.empty(n_seg, np.int64)
    k = 0
    n_loops = 0
    last = -1
    for i in range(n):
        if split[i]:
            if last >= 0 and way_of_ref[last] == way_of_ref[i]:
                if pos[last] == pos[i]:
                    n_loops += 1
                else:
                    starts[k] = last
                    ends[k] = i
                    k += 1
            last = i
    return starts[:k].copy(), ends[:k].copy(), n_loops


@njit(cache=True, nogil=True)
def segment_vertices_kernel(lon, lat, pos, starts, ends):
    """The vertices of the segments: references ``starts[i]`` to ``ends[i]`` (inclusive), shape (V, 2), and the
    segment of each vertex (intp), as ``shapely.linestrings(coords, indices=...)`` takes them."""
    total = 0
    for i in range(len(starts)):
        total += ends[i] - starts[i] + 1
    coords = np.empty((total, 2), np.float64)
    seg = np.empty(total, np.intp)
    k = 0
    for i in range(len(starts)):
        for j in range(starts[i], ends[i] + 1):
            p = pos[j]
            coords[k, 0] = lon[p]
            coords[k, 1] = lat[p]
            seg[k] = i
            k += 1
    return coords, seg


@njit(cache=True, nogil=True)
def kept_references_kernel(offsets, pos, keep_way):
    """The references of the usable kept ways, in order: their way (int64) and their place ``pos`` in the node
    table; and which ways are usable (bool).

    References with no place (``pos`` < 0: an unknown node) and consecutive repeats of one node are dropped; a kept
    way left with fewer than two references is unusable."""
    n_ways = len(offsets) - 1
    usable = np.zeros(n_ways, np.bool_)
    total = 0
    for w in range(n_ways):
        if keep_way[w]:
            count = 0
            last = -1
            for i in range(offsets[w], offsets[w + 1]):
                p = pos[i]
                if p >= 0 and p != last:
                    count += 1
                    last = p
            if count >= 2:
                usable[w] = True
                total += count
    way_of_ref = np.empty(total, np.int64)
    kept_pos = np.empty(total, pos.dtype)
    k = 0
    for w in range(n_ways):
        if usable[w]:
            last = -1
            for i in range(offsets[w], offsets[w + 1]):
                p = pos[i]
                if p >= 0 and p != last:
                    way_of_ref[k] = w
                    kept_pos[k] = p
                    k += 1
                    last = p
    return way_of_ref, kept_pos, usable
