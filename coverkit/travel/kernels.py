"""Compiled kernels (numba) of the point steps at scale: the nearest road piece from the bucket grid, and the k best
sources of every point from its candidates.

Why compiled: in numpy both steps build candidate arrays of tens of millions of rows per pass (every sub-segment of
every ring cell of every point; every (point, source) candidate twice sorted), which costs seconds and gigabytes at
a million points. Here each point is one loop over its own few candidates, with no temporary arrays.

Each kernel does the same floating-point operations, in the same order, as the numpy code it replaces
(:func:`coverkit.travel.nearest.point_segment_distance`, the ring search of :mod:`coverkit.travel.grid_index`,
the candidate ranking of :mod:`coverkit.travel.reach`), so the answers are identical, bit for bit; the tests hold
them to the numpy versions and, through them, to the per-source searches. Compiled on first use, cached on disk
(``cache=True``).
"""

from __future__ import annotations

import numpy as np
from numba import njit

_TIE_M = 1e-9
_BIG = np.iinfo(np.int64).max


@njit(cache=True, nogil=True)
def _seg_dist(px, py, ax, ay, bx, by):
    """Distance from (px, py) to segment a-b: the operations of ``point_segment_distance``, in its order."""
    abx = bx - ax
    aby = by - ay
    pax = px - ax
    pay = py - ay
    denom = abx * abx + aby * aby
    t = 0.0
    if denom > 0:
        t = (pax * abx + pay * aby) / denom
    if t < 0.0:
        t = 0.0
    elif t > 1.0:
        t = 1.0
    dx = px - (ax + t * abx)
    dy = py - (ay + t * aby)
    return np.sqrt(dx * dx + dy * dy)


@njit(cache=True, nogil=True)
def _ring_best(x, y, ix, iy, r, a, b, piece, cell_ptr, nx, ny, buf_d, buf_p):
    """Smallest distance from (x, y) to the sub-segments filed in the cells at Chebyshev distance ``r`` around
    (ix, iy), and the lowest piece within the tie tolerance of it (``inf``, ``_BIG`` when the ring is empty).

    The distances of the first sweep are kept in ``buf_d``/``buf_p`` for the second (the lowest piece at the
    minimum, as the numpy ring finds it); a ring with more sub-segments than the buffer holds is swept again."""
    ring_d = np.inf
    n = 0
    for sweep in range(2):
        ring_p = _BIG
        for dy in range(-r, r + 1):
            step = 1 if (dy == -r or dy == r) else 2 * r
            dx = -r
            while dx <= r:
                cx, cy = ix + dx, iy + dy
                if 0 <= cx < nx and 0 <= cy < ny:
                    cell = cy * nx + cx
                    for s in range(cell_ptr[cell], cell_ptr[cell + 1]):
                        d = _seg_dist(x, y, a[s, 0], a[s, 1], b[s, 0], b[s, 1])
                        if sweep == 0:
                            if d < ring_d:
                                ring_d = d
                            if n < len(buf_d):
                                buf_d[n] = d
                                buf_p[n] = piece[s]
                            n += 1
                        elif d <= ring_d + _TIE_M and piece[s] < ring_p:
                            ring_p = piece[s]
                dx += max(step, 1)
        if sweep == 0 and n <= len(buf_d):
            for j in range(n):
                if buf_d[j] <= ring_d + _TIE_M and buf_p[j] < ring_p:
                    ring_p = buf_p[j]
            return ring_d, ring_p
    return ring_d, ring_p


@njit(cache=True, nogil=True)
def grid_nearest_kernel(xy, ix, iy, a, b, piece, cell_ptr, ox, oy, c, nx, ny, half, max_d, out_p, out_d):
    """Nearest piece of every point by rings of cells (see :mod:`coverkit.travel.grid_index` for the proof and
    the stopping rule); ``ix``, ``iy`` are the points' (clipped) cells. Fills ``out_p`` (-1 none within ``max_d``)
    and ``out_d`` (``inf`` none)."""
    buf_d = np.empty(4096)
    buf_p = np.empty(4096, dtype=np.int64)
    for i in range(len(xy)):
        x, y = xy[i, 0], xy[i, 1]
        best_d = np.inf
        best_p = _BIG
        r = 0
        while True:
            ring_d, ring_p = _ring_best(x, y, ix[i], iy[i], r, a, b, piece, cell_ptr, nx, ny, buf_d, buf_p)
            if ring_d < np.inf:
                new_d = min(best_d, ring_d)
                keep_old = best_d <= new_d + _TIE_M
                take_new = ring_d <= new_d + _TIE_M
                best_p = min(best_p if keep_old else _BIG, ring_p if take_new else _BIG)
                best_d = new_d
            x0 = ox + (ix[i] - r) * c
            x1 = ox + (ix[i] + r + 1) * c
            y0 = oy + (iy[i] - r) * c
            y1 = oy + (iy[i] + r + 1) * c
            m = min(min(x - x0, x1 - x), min(y - y0, y1 - y))
            covers = (ix[i] - r <= 0) and (ix[i] + r >= nx - 1) and (iy[i] - r <= 0) and (iy[i] + r >= ny - 1)
            if covers or (best_d + _TIE_M < m - half) or ((m - half > max_d) and (best_d > max_d)):
                break
            r += 1
        if best_d <= max_d:
            out_p[i] = best_p
            out_d[i] = best_d
        else:
            out_p[i] = -1
            out_d[i] = np.inf


@njit(cache=True, nogil=True)
def _offer(t, s, k, bt, bs, n):
    """Offer candidate (t, s) to a point's list (bt, bs) of ``n`` entries ordered by (time, source), one entry per
    source holding its best time; the new count."""
    for j in range(n):
        if bs[j] == s:
            if t >= bt[j]:
                return n
            # a better time for a listed source: move it up
            while j > 0 and (t < bt[j - 1] or (t == bt[j - 1] and s < bs[j - 1])):
                bt[j], bs[j] = bt[j - 1], bs[j - 1]
                j -= 1
            bt[j], bs[j] = t, s
            return n
    if n == k and not (t < bt[k - 1] or (t == bt[k - 1] and s < bs[k - 1])):
        return n
    j = n if n < k else k - 1
    while j > 0 and (t < bt[j - 1] or (t == bt[j - 1] and s < bs[j - 1])):
        bt[j], bs[j] = bt[j - 1], bs[j - 1]
        j -= 1
    bt[j], bs[j] = t, s
    return min(n + 1, k)


@njit(cache=True, nogil=True)
def k_best_kernel(ptr_a, t_a, s_a, ptr_b, t_b, s_b, limit_s, out_s, out_t):
    """The k best (time, source) of every point from two candidate lists grouped by point (``ptr_a``/``ptr_b``:
    CSR starts, one more than the points): each source's best time, then by time and source index, candidates
    with ``s < 0`` or ``t > limit_s`` left out. Fills rows of ``out_s``/``out_t`` (k columns) from the front."""
    k = out_s.shape[1]
    bt = np.empty(k)
    bs = np.empty(k, dtype=np.int64)
    for p in range(len(ptr_a) - 1):
        n = 0
        for i in range(ptr_a[p], ptr_a[p + 1]):
            if s_a[i] >= 0 and t_a[i] <= limit_s:
                n = _offer(t_a[i], s_a[i], k, bt, bs, n)
        for i in range(ptr_b[p], ptr_b[p + 1]):
            if s_b[i] >= 0 and t_b[i] <= limit_s:
                n = _offer(t_b[i], s_b[i], k, bt, bs, n)
        for j in range(n):
            out_s[p, j] = bs[j]
            out_t[p, j] = bt[j]


@njit(cache=True, nogil=True)
def cut_segments_kernel(coords, start, parts, owner, out_a, out_b, out_line):
    """Fill the straight sub-segments of the segments ``coords[start[i]] -> coords[start[i] + 1]``, each cut into
    ``parts[i]`` equal pieces: the operations of :func:`coverkit.travel.nearest.cut_segments`, in its order."""
    j = 0
    for i in range(len(start)):
        s = start[i]
        p = parts[i]
        ax, ay = coords[s, 0], coords[s, 1]
        dx, dy = coords[s + 1, 0] - ax, coords[s + 1, 1] - ay
        line = owner[s + 1]
        for k in range(p):
            t0 = k / p
            t1 = (k + 1) / p
            out_a[j, 0] = ax + t0 * dx
            out_a[j, 1] = ay + t0 * dy
            out_b[j, 0] = ax + t1 * dx
            out_b[j, 1] = ay + t1 * dy
            out_line[j] = line
            j += 1
