"""Compiled kernels (numba) for the fast drive-time polygons: road on a grid and per-band distance fields.

The fast path of :mod:`coverkit.isochrones` needs, per base and band, the distance from the nodes of a square grid
to the reached road, exact near the ``reach_m`` level line that is traced. Done in numpy this costs many full
passes over every grid node per band; here it is one pass per band in compiled code:

1. :func:`road_grid` puts the reached segments on the grid: a node whose cell a segment passes through is a
   *road node*, labelled with the earliest band reaching it, and keeps the list of segments through its cell.
2. :func:`band_distance` runs the Felzenszwalb-Huttenlocher lower-envelope transform (P. F. Felzenszwalb,
   D. P. Huttenlocher (2012), "Distance transforms of sampled functions", Theory of Computing 8, 415-428) over the
   road nodes of a band, which gives every grid node its nearest road node. Only nodes whose distance to the road
   can lie within a cell of the level get their exact distance, to the band's segments listed in the 3 x 3 cells
   around that nearest road node; nodes clearly inside or outside get stand-in values on the right side of the
   level, which is all that linear-interpolation contouring of the level needs (see :func:`band_distance`).

Kernels are compiled on first use and cached on disk by numba (``cache=True``).
"""

from __future__ import annotations

import numpy as np
from numba import njit

#: Stand-in distance (m) for grid nodes clearly beyond the level line.
FAR_M = 1e9
#: Bands below this one are treated one increment at a time (a bit each in a 64-bit mask); later ones cumulatively.
MAX_BAND_BIT = 63


@njit(cache=True, nogil=True)
def _cells_of_segment(x0, y0, x1, y1, inv_cell, out_x, out_y, at):
    """Cells a segment passes through, in order, by grid traversal (J. Amanatides, A. Woo (1987), "A fast voxel
    traversal algorithm for ray tracing", Eurographics); a cell is the square around a grid node, ``(ix, iy)`` the
    node at ``(ix * cell, iy * cell)``. Writes them to ``out_x, out_y`` from position ``at`` (which must have room
    for ``|dix| + |diy| + 1`` cells) and returns how many."""
    fx = x0 * inv_cell + 0.5
    fy = y0 * inv_cell + 0.5
    ex = x1 * inv_cell + 0.5
    ey = y1 * inv_cell + 0.5
    ix = int(np.floor(fx))
    iy = int(np.floor(fy))
    n = abs(int(np.floor(ex)) - ix) + abs(int(np.floor(ey)) - iy) + 1
    dx = ex - fx
    dy = ey - fy
    step_x = 1 if dx > 0 else -1
    step_y = 1 if dy > 0 else -1
    t_dx = abs(1.0 / dx) if dx != 0.0 else np.inf
    t_dy = abs(1.0 / dy) if dy != 0.0 else np.inf
    t_x = (((ix + 1 - fx) if dx > 0 else (fx - ix)) * t_dx) if dx != 0.0 else np.inf
    t_y = (((iy + 1 - fy) if dy > 0 else (fy - iy)) * t_dy) if dy != 0.0 else np.inf
    for m in range(n):
        out_x[at + m] = ix
        out_y[at + m] = iy
        if t_x < t_y:
            t_x += t_dx
            ix += step_x
        else:
            t_y += t_dy
            iy += step_y
    return n


@njit(cache=True, nogil=True)
def _cell_count(x0, y0, x1, y1, inv_cell):
    """Upper bound on the cells :func:`_cells_of_segment` writes."""
    return int(abs(x1 - x0) * inv_cell + abs(y1 - y0) * inv_cell) + 3


@njit(cache=True, nogil=True)
def segment_cells(seg_xy, cell_m):
    """Cells each segment passes through (see :func:`_cells_of_segment`): segment ``s`` has the cells
    ``ix[ptr[s]:ptr[s + 1]], iy[...]`` (grid nodes counted from the CRS origin). Computed once per network and
    cell size, so that per base only the partly reached segments are traversed."""
    inv = 1.0 / cell_m
    n_seg = seg_xy.shape[0]
    ptr = np.zeros(n_seg + 1, dtype=np.int64)
    for s in range(n_seg):
        ptr[s + 1] = ptr[s] + _cell_count(seg_xy[s, 0], seg_xy[s, 1], seg_xy[s, 2], seg_xy[s, 3], inv)
    ix = np.empty(ptr[n_seg], dtype=np.int64)
    iy = np.empty(ptr[n_seg], dtype=np.int64)
    end = np.empty(n_seg + 1, dtype=np.int64)
    end[0] = 0
    m = 0
    for s in range(n_seg):
        m += _cells_of_segment(seg_xy[s, 0], seg_xy[s, 1], seg_xy[s, 2], seg_xy[s, 3], inv, ix, iy, m)
        end[s + 1] = m
    return end, ix[:m], iy[:m]


@njit(cache=True, nogil=True)
def road_grid(seg_xy, seg_band, seg_src, seg_whole, cell_ptr, cell_x, cell_y, n_bands, cell_m, gx0, gy0, gnx, gny):
    """Road nodes of a grid, the segments through each cell, and each band's extent.

    Parameters
    ----------
    seg_xy : float64 array (S, 4)
        Segments ``x0, y0, x1, y1`` (m, network CRS).
    seg_band : int64 array (S,)
        Band (0-based) from which each segment is reached.
    seg_src, seg_whole : arrays (S,)
        The network segment each one was cut from, and whether it is the whole of it.
    cell_ptr, cell_x, cell_y : int64 arrays
        Cells of the network segments, as from :func:`segment_cells` (used for whole segments).
    n_bands : int
        Number of bands; the label of a node that is not a road node.
    cell_m : float
        Grid spacing (m); node ``(i, j)`` lies at ``((gx0 + j) * cell_m, (gy0 + i) * cell_m)``.
    gx0, gy0, gnx, gny : int
        Grid origin (in cells) and size.

    Returns
    -------
    label : int16 array (gny, gnx)
        Earliest band reaching each node's cell, ``n_bands`` if none.
    bits : uint64 array (gny, gnx)
        The bands with segments in each cell, one bit per band (bit :data:`MAX_BAND_BIT` for that band and later).
    head, link, link_seg : int32 arrays
        Segments through cell ``c``, as a linked list: ``t = head[c]``, then ``link_seg[t]`` while ``t >= 0``,
        ``t = link[t]``.
    extent : int64 array (n_bands, 4)
        Per band, the least and greatest column and row of the road nodes of that band and the earlier ones
        (``-1`` rows for a band without road).
    """
    inv = 1.0 / cell_m
    n_cells = gnx * gny
    n_seg = seg_xy.shape[0]
    label = np.full(n_cells, n_bands, dtype=np.int16)
    bits = np.zeros(n_cells, dtype=np.uint64)
    head = np.full(n_cells, -1, dtype=np.int32)
    # sized once (arrays regrown inside the loop keep numba from optimising it)
    cap = 0
    need_max = 0
    for s in range(n_seg):
        if seg_whole[s]:
            cap += cell_ptr[seg_src[s] + 1] - cell_ptr[seg_src[s]]
        else:
            need = _cell_count(seg_xy[s, 0], seg_xy[s, 1], seg_xy[s, 2], seg_xy[s, 3], inv)
            cap += need
            need_max = max(need_max, need)
    link = np.empty(cap, dtype=np.int32)
    link_seg = np.empty(cap, dtype=np.int32)
    bx = np.empty(need_max, dtype=np.int64)
    by = np.empty(need_max, dtype=np.int64)
    n_pair = 0
    for s in range(n_seg):
        whole = seg_whole[s]
        if whole:
            lo = cell_ptr[seg_src[s]]
            m = cell_ptr[seg_src[s] + 1] - lo
        else:
            lo = 0
            m = _cells_of_segment(seg_xy[s, 0], seg_xy[s, 1], seg_xy[s, 2], seg_xy[s, 3], inv, bx, by, 0)
        b = seg_band[s]
        for j in range(m):
            x = (cell_x[lo + j] if whole else bx[j]) - gx0
            y = (cell_y[lo + j] if whole else by[j]) - gy0
            if x < 0 or y < 0 or x >= gnx or y >= gny:
                continue
            c = y * gnx + x
            link[n_pair] = head[c]
            link_seg[n_pair] = s
            head[c] = n_pair
            n_pair += 1
            if b < label[c]:
                label[c] = b
            bits[c] |= np.uint64(1) << np.uint64(min(b, MAX_BAND_BIT))
    extent = np.full((n_bands, 4), -1, dtype=np.int64)
    big = 1 << 40
    lo_x = np.full(n_bands, big, dtype=np.int64)
    lo_y = np.full(n_bands, big, dtype=np.int64)
    hi_x = np.full(n_bands, -big, dtype=np.int64)
    hi_y = np.full(n_bands, -big, dtype=np.int64)
    for y in range(gny):
        for x in range(gnx):
            b = label[y * gnx + x]
            if b < n_bands:
                lo_x[b] = min(lo_x[b], x)
                hi_x[b] = max(hi_x[b], x)
                lo_y[b] = min(lo_y[b], y)
                hi_y[b] = max(hi_y[b], y)
    for b in range(1, n_bands):
        lo_x[b] = min(lo_x[b], lo_x[b - 1])
        lo_y[b] = min(lo_y[b], lo_y[b - 1])
        hi_x[b] = max(hi_x[b], hi_x[b - 1])
        hi_y[b] = max(hi_y[b], hi_y[b - 1])
    for b in range(n_bands):
        if hi_x[b] >= 0:
            extent[b, 0] = lo_x[b]
            extent[b, 1] = lo_y[b]
            extent[b, 2] = hi_x[b]
            extent[b, 3] = hi_y[b]
    return label.reshape(gny, gnx), bits.reshape(gny, gnx), head, link, link_seg, extent


@njit(cache=True, nogil=True)
def _segment_distance(px, py, x0, y0, x1, y1):
    """Distance (m) from a point to a segment."""
    dx = x1 - x0
    dy = y1 - y0
    qx = px - x0
    qy = py - y0
    den = dx * dx + dy * dy
    t = 0.0
    if den > 0.0:
        t = (qx * dx + qy * dy) / den
        if t < 0.0:
            t = 0.0
        elif t > 1.0:
            t = 1.0
    ex = qx - t * dx
    ey = qy - t * dy
    return np.sqrt(ex * ex + ey * ey)


@njit(cache=True, nogil=True)
def _cell_distance(px, py, c, band, only, head, link, link_seg, seg_xy, seg_band, best):
    """Least of ``best`` and the distances (m) from a point to the segments through cell ``c`` of band ``band``
    (``only``) or of bands ``<= band``."""
    t = head[c]
    while t >= 0:
        s = link_seg[t]
        if seg_band[s] == band or (not only and seg_band[s] < band):
            d = _segment_distance(px, py, seg_xy[s, 0], seg_xy[s, 1], seg_xy[s, 2], seg_xy[s, 3])
            if d < best:
                best = d
        t = link[t]
    return best


@njit(cache=True, nogil=True)
def _nearest_in_disc(
    px,
    py,
    row,
    col,
    g2,
    best,
    cap_m,
    road_count,
    wx0,
    wy0,
    gnx,
    band,
    only,
    head,
    link,
    link_seg,
    seg_xy,
    seg_band,
    cell_m,
):
    """Distance (m) from window node ``(row, col)`` at ``(px, py)`` to the band's segments, exact up to ``cap_m``,
    given an upper bound ``best`` and the squared grid distance ``g2`` (cells²) to the band's nearest road node.

    Road in a cell whose node is ``rho`` cells away lies at least ``rho - 0.71`` cells away, so only road cells with
    ``rho < min(best, cap_m) / cell + 0.71`` can hold anything nearer than both; the disc shrinks as nearer road is
    found. A result above ``cap_m`` is only known to be above it. ``road_count[i, j]`` counts the band's road nodes
    in row ``i`` of the window before column ``j`` (so runs without road are skipped at once); the window's node
    ``(0, 0)`` is grid node ``(wy0, wx0)`` of a grid ``gnx`` nodes wide.
    """
    wny = road_count.shape[0]
    wnx = road_count.shape[1] - 1
    lim = min(best, cap_m) / cell_m + 0.7072
    r = int(lim)
    for dy in range(max(-r, -row), min(r, wny - 1 - row) + 1):
        w2 = lim * lim - dy * dy
        if w2 <= 0.0:
            continue
        half = int(np.sqrt(w2))
        # no road node of the band lies nearer than the grid distance ``g2`` (squared cells): skip that inner part
        inner = g2 - dy * dy
        skip = int(np.sqrt(inner - 1)) if inner > 0 else -1
        y = row + dy
        counts = road_count[y]
        for side in range(2):
            if side == 0:
                x_lo, x_hi = max(col - half, 0), min(col - skip - 1, wnx - 1)
            else:
                x_lo, x_hi = max(col + skip + 1, 0), min(col + half, wnx - 1)
            if x_hi < x_lo or counts[x_hi + 1] == counts[x_lo]:
                continue
            for x in range(x_lo, x_hi + 1):
                if counts[x + 1] == counts[x]:
                    continue
                dx = x - col
                if dy * dy + dx * dx >= lim * lim:
                    continue
                c = (wy0 + y) * gnx + wx0 + x
                best = _cell_distance(px, py, c, band, only, head, link, link_seg, seg_xy, seg_band, best)
                lim = min(best, cap_m) / cell_m + 0.7072
    return best


@njit(cache=True, nogil=True)
def band_distance(
    label,
    bits,
    band,
    wx0,
    wy0,
    wnx,
    wny,
    head,
    link,
    link_seg,
    seg_xy,
    seg_band,
    gx0,
    gy0,
    cell_m,
    reach_m,
    prev_field,
    prev_dx,
    prev_dy,
):
    """Distance (m) from the nodes of a window of the grid to the road first reached in band ``band`` (its
    increment; for bands from :data:`MAX_BAND_BIT` on, to the road of all bands up to it), exact near ``reach_m``.

    The field of a band is the least of this and the previous band's field (see ``reach_fields``): each road's
    exact distances are worked out once, in the band that first reaches it.

    Parameters
    ----------
    label, bits, head, link, link_seg
        As from :func:`road_grid` (grid origin ``gx0, gy0`` in cells).
    band : int
        The band (0-based).
    wx0, wy0, wnx, wny : int
        The window, in grid cells relative to the grid origin; it must lie inside the grid with at least one
        cell to spare around every road node in it.
    seg_xy, seg_band
        The segments (as for :func:`road_grid`).
    cell_m, reach_m : float
        Grid spacing and the traced level (m).
    prev_field : float32 array; prev_dx, prev_dy : int
        The previous band's field, its node ``(0, 0)`` at window node ``(prev_dy, prev_dx)`` (a 0 x 0 array for
        none): where it is 0 (surely inside), this band is too, and nothing is worked out there.

    Returns
    -------
    float32 array (wny, wnx)
        Where the distance may lie within a cell of ``reach_m``: the distance to the band's segments in the 3 x 3
        cells around the nearest road node (nearly always the distance itself, never below it), made exact
        wherever that bound alone could leave the node on the wrong side of ``reach_m``; so every node is on its
        right side. 0 where it is surely more than a cell inside, :data:`FAR_M` where surely more than a cell
        beyond (so no grid edge crossing the level touches a stand-in).

    Notes
    -----
    Bounds, for a node at true distance ``D`` from the road and grid distance ``G`` to its nearest road node:
    ``D <= G + 0.71 cell`` (a road node's cell holds road, half a diagonal away) and
    ``G <= D + 0.71 cell`` (the cell of the foot point is a road node: the traversal visits every cell the road
    passes through). A grid edge is
    crossed by the level only if one end has ``D`` within a cell of ``reach_m``.
    """
    out = np.empty((wny, wnx), dtype=np.float32)
    lo_c = reach_m / cell_m - 1.71
    hi_c = reach_m / cell_m + 1.72
    lo2 = lo_c * lo_c if lo_c > 0.0 else -1.0
    hi2 = hi_c * hi_c
    deep_m = reach_m - cell_m
    # only grid distances up to ``reach`` cells matter (beyond ``hi_c`` a node is outside): the transform is
    # bounded, which turns its row pass into a few contiguous (vectorised) min passes
    reach = int(np.ceil(hi_c))
    # "no road within reach" sentinel: above every squared distance that matters ((reach + 1)^2, with room for
    # adding d^2 <= reach^2 in int32); a fixed 1 << 20 is below reach^2 once reach_m / cell_m > 1022
    big = max(1 << 20, 2 * (reach + 2) * (reach + 2))
    # signed vertical offset to the nearest road node in the column (road at row ``i - vert``), in two sweeps
    # written as contiguous selects so that they vectorise
    only = band < MAX_BAND_BIT
    bit = np.uint64(1) << np.uint64(min(band, MAX_BAND_BIT))
    is_road = np.empty(wnx, dtype=np.bool_)
    road_count = np.empty((wny, wnx + 1), dtype=np.int32)
    vert = np.empty((wny, wnx), dtype=np.int32)
    for i in range(wny):
        if only:
            row_bits = bits[wy0 + i, wx0 : wx0 + wnx]
            for j in range(wnx):
                is_road[j] = (row_bits[j] & bit) != 0
        else:
            lab = label[wy0 + i, wx0 : wx0 + wnx]
            for j in range(wnx):
                is_road[j] = lab[j] <= band
        counts = road_count[i]
        counts[0] = 0
        for j in range(wnx):
            counts[j + 1] = counts[j] + (1 if is_road[j] else 0)
        cur = vert[i]
        if i == 0:
            for j in range(wnx):
                cur[j] = 0 if is_road[j] else big
        else:
            prev = vert[i - 1]
            for j in range(wnx):
                cur[j] = 0 if is_road[j] else min(prev[j] + 1, big)
    carry = np.full(wnx, big, dtype=np.int32)
    for i in range(wny - 1, -1, -1):
        cur = vert[i]
        for j in range(wnx):
            cj = 0 if cur[j] == 0 else min(carry[j] + 1, big)
            carry[j] = cj
            cur[j] = -cj if cj < cur[j] else cur[j]
    pad = np.empty(wnx + 2 * reach, dtype=np.int32)
    pad[:] = big
    acc_pad = np.empty(wnx + 2 * reach, dtype=np.int32)
    gnx = label.shape[1]
    for i in range(wny):
        cur = vert[i]
        row_pad = pad[reach : reach + wnx]
        n_near = 0
        for j in range(wnx):
            v = abs(cur[j])
            ok = v <= reach
            row_pad[j] = v * v if ok else big
            n_near += ok
        o = out[i]
        if n_near == 0:
            o[:] = FAR_M
            continue
        acc_pad[:] = big
        acc = acc_pad[reach : reach + wnx]
        if 3 * n_near < wnx:
            # few columns with road near: spread each one's parabola (sparse roads)
            for j in range(wnx):
                pj = row_pad[j]
                if pj < big:
                    for d in range(-reach, reach + 1):
                        acc_pad[reach + j + d] = min(acc_pad[reach + j + d], pj + d * d)
        else:
            # many: one contiguous min pass per offset (dense roads)
            for d in range(-reach, reach + 1):
                dd = d * d
                for q in range(wnx):
                    acc[q] = min(acc[q], pad[q + reach + d] + dd)
        n_zone = 0
        for q in range(wnx):
            d2 = acc[q]
            zone = d2 > lo2 and d2 < hi2
            o[q] = 0.0 if d2 <= lo2 else (FAR_M if d2 >= hi2 else -1.0)
            n_zone += zone
        if n_zone == 0:
            continue
        py = (gy0 + wy0 + i) * cell_m
        pi = i - prev_dy
        has_prev = 0 <= pi < prev_field.shape[0]
        for q in range(wnx):
            if o[q] >= 0.0:
                continue
            # surely inside the previous band, so inside this one: nothing to work out
            pq = q - prev_dx
            if has_prev and 0 <= pq < prev_field.shape[1] and prev_field[pi, pq] == 0.0:
                o[q] = 0.0
                continue
            d2 = acc[q]
            # the nearest road node: the column that gave the least, then its row
            p = q
            for d in range(-reach, reach + 1):
                if pad[q + reach + d] + d * d == d2:
                    p = q + d
                    break
            fr = wy0 + i - cur[p]
            c0 = fr * gnx + wx0 + p
            px = (gx0 + wx0 + q) * cell_m
            best = _cell_distance(px, py, c0, band, only, head, link, link_seg, seg_xy, seg_band, np.inf)
            # the own cell's road bounds the distance from above: often it is already clearly inside. Else the 3 x 3
            # cells around the nearest road node give a tight bound (nearly always the distance itself), and where
            # that could leave the node on the wrong side of the level, the road cells of the disc that can hold
            # anything nearer are scanned, which makes it exact
            if best >= deep_m:
                for dy in range(-1, 2):
                    for dx in range(-1, 2):
                        if dy != 0 or dx != 0:
                            best = _cell_distance(
                                px, py, c0 + dy * gnx + dx, band, only, head, link, link_seg, seg_xy, seg_band, best
                            )
                if best < deep_m:
                    o[q] = 0.0
                    continue
                # that bound is an upper one: it can put a node on the wrong side of the level only if it lies above
                # the level while the lower bound (Notes) does not; only then is the road within ``reach_m`` sought
                # (exact distance if there is any; else the node is outside, and the bound stays)
                if best <= reach_m or (np.sqrt(d2) - 0.7072) * cell_m > reach_m:
                    o[q] = best
                    continue
                best = _nearest_in_disc(
                    px,
                    py,
                    i,
                    q,
                    d2,
                    best,
                    reach_m,
                    road_count,
                    wx0,
                    wy0,
                    gnx,
                    band,
                    only,
                    head,
                    link,
                    link_seg,
                    seg_xy,
                    seg_band,
                    cell_m,
                )
                if best < deep_m:
                    best = 0.0
            else:
                best = 0.0
            o[q] = best
    return out


@njit(cache=True, nogil=True)
def clip_segments(piece, a, b, ptr, f0, f1, seg_xy):
    """Straight segments of road stretches: stretch ``r`` covers fractions ``[a[r], b[r]]`` along piece
    ``piece[r]``, whose segments are ``ptr[p]:ptr[p + 1]`` of ``seg_xy`` with fraction ranges ``[f0, f1]``.

    Returns the clipped segments (S, 4), the stretch each came from (S,), in order along each stretch, the
    segment of ``seg_xy`` it was cut from and whether it is the whole of it. A segment that the stretch only
    touches is dropped, except for a stretch of zero length (kept as a point).
    """
    n = 0
    for r in range(piece.shape[0]):
        n += ptr[piece[r] + 1] - ptr[piece[r]]
    out = np.empty((n, 4), dtype=np.float64)
    row = np.empty(n, dtype=np.int64)
    src = np.empty(n, dtype=np.int64)
    whole = np.empty(n, dtype=np.bool_)
    m = 0
    for r in range(piece.shape[0]):
        ar = a[r]
        br = b[r]
        for s in range(ptr[piece[r]], ptr[piece[r] + 1]):
            lo = max(f0[s], ar)
            hi = min(f1[s], br)
            if hi > lo or (hi == lo and ar == br):
                width = f1[s] - f0[s]
                if width <= 0.0:
                    width = 1.0
                t0 = (lo - f0[s]) / width
                t1 = (hi - f0[s]) / width
                dx = seg_xy[s, 2] - seg_xy[s, 0]
                dy = seg_xy[s, 3] - seg_xy[s, 1]
                out[m, 0] = seg_xy[s, 0] + t0 * dx
                out[m, 1] = seg_xy[s, 1] + t0 * dy
                out[m, 2] = seg_xy[s, 0] + t1 * dx
                out[m, 3] = seg_xy[s, 1] + t1 * dy
                row[m] = r
                src[m] = s
                whole[m] = lo == f0[s] and hi == f1[s]
                m += 1
    return out[:m], row[:m], src[:m], whole[:m]


@njit(cache=True, nogil=True)
def piece_stretches(
    nodes, node_s, direction_in, edge_ptr, run, delay, piece_of_edge, reversed_of_edge, bands_s, n_pieces
):
    """Longest reached stretch from each end of every touched road piece, per band.

    Parameters
    ----------
    nodes : int64 array
        Nodes within the largest band.
    node_s : float64 array (n_nodes,)
        Time (s) from the sources to each node (``"out"``) or from each node to the sources (``"in"``).
    direction_in : bool
        True for ``"in"``: the edges entering a node are looked at, entered at the node's time plus the edge's
        end-node delay; else the edges leaving it, at the node's time.
    edge_ptr : int64 array (n_nodes + 1,)
        The edges at node ``n`` are ``edge_ptr[n]:edge_ptr[n + 1]`` of the edge arrays below, which are grouped by
        node (so that the pass reads them in order).
    run, delay : float64 arrays
        Running time (s, ``inf`` when closed) and end-node delay (s) of each edge.
    piece_of_edge, reversed_of_edge : arrays
        The road piece of each edge and whether the edge runs against the piece's geometry.
    bands_s : float64 array
        Band limits (s), increasing.
    n_pieces : int
        Number of road pieces.

    Returns
    -------
    touched : int64 array (P,)
        Touched pieces, in order of first touch.
    left, right : float64 arrays (P, n_bands)
        Reached fraction anchored at the piece's start and at its end, per band.
    """
    n_b = bands_s.shape[0]
    limit = bands_s[n_b - 1]
    slot = np.full(n_pieces, -1, dtype=np.int64)
    # at most one piece per edge looked at: sized once (arrays that may be regrown inside the loop keep numba from
    # optimising it, at several times the cost)
    cap = 0
    for n in nodes:
        cap += edge_ptr[n + 1] - edge_ptr[n]
    touched = np.empty(cap, dtype=np.int64)
    left = np.zeros((cap, n_b), dtype=np.float64)
    right = np.zeros((cap, n_b), dtype=np.float64)
    n_t = 0
    for n in nodes:
        for e in range(edge_ptr[n], edge_ptr[n + 1]):
            t0 = node_s[n] + delay[e] if direction_in else node_s[n]
            r = run[e]
            if not (t0 <= limit) or not np.isfinite(r):
                continue
            p = piece_of_edge[e]
            j = slot[p]
            if j < 0:
                j = n_t
                slot[p] = j
                touched[j] = p
                for k in range(n_b):
                    left[j, k] = 0.0
                    right[j, k] = 0.0
                n_t += 1
            # out-edges along the piece and in-edges against it grow from the piece's start
            from_start = reversed_of_edge[e] == direction_in
            for k in range(n_b):
                if r > 0.0:
                    ell = (bands_s[k] - t0) / r
                    ell = min(max(ell, 0.0), 1.0)
                else:
                    ell = 1.0 if bands_s[k] >= t0 else 0.0
                if from_start:
                    if ell > left[j, k]:
                        left[j, k] = ell
                elif ell > right[j, k]:
                    right[j, k] = ell
    return touched[:n_t], left[:n_t], right[:n_t]


# Marching squares: per cell case (bit 0: lower-left corner inside, 1: lower-right, 2: upper-right, 3: upper-left),
# the boundary segments as (from edge, to edge), inside on the left, so outer rings run anticlockwise and holes
# clockwise. Edges: 0 bottom, 1 right, 2 top, 3 left; -1: no segment. The saddles (5, 10) as listed hold when the
# cell centre is outside; rows 16 and 17 are cases 5 and 10 with the centre inside.
_CASE_SEGMENTS = np.array(
    [
        [-1, -1, -1, -1],
        [0, 3, -1, -1],
        [1, 0, -1, -1],
        [1, 3, -1, -1],
        [2, 1, -1, -1],
        [0, 3, 2, 1],
        [2, 0, -1, -1],
        [2, 3, -1, -1],
        [3, 2, -1, -1],
        [0, 2, -1, -1],
        [1, 0, 3, 2],
        [1, 2, -1, -1],
        [3, 1, -1, -1],
        [0, 1, -1, -1],
        [3, 0, -1, -1],
        [-1, -1, -1, -1],
        [0, 1, 2, 3],
        [3, 0, 1, 2],
    ],
    dtype=np.int64,
)


@njit(cache=True, nogil=True)
def _edge_id(i, j, side, nx, n_h):
    """Id of side ``side`` of cell ``(i, j)``: horizontal edges ``i * nx + j``, vertical ``n_h + i * nx + j``."""
    if side == 0:
        return i * nx + j
    if side == 1:
        return n_h + i * nx + j + 1
    if side == 2:
        return (i + 1) * nx + j
    return n_h + i * nx + j


#: Value of the ring of nodes put round a grid before tracing (outside any level); finite, so interpolation needs no
#: special case.
_OUTSIDE = np.float32(1e30)


@njit(cache=True, nogil=True)
def _crossing(za, zb, level):
    """Fraction from node a to node b where the linear interpolation of ``za, zb`` meets ``level``."""
    return (level - za) / (zb - za)


@njit(cache=True, nogil=True)
def trace_level(z, level, x0, y0, cell_m, case_segments):
    """Rings of the region ``z <= level`` of a grid (marching squares with linear interpolation; W. E. Lorensen,
    H. E. Cline (1987), "Marching cubes", SIGGRAPH, in its 2-d form), the grid taken as outside beyond its edge.

    Parameters
    ----------
    z : float32 array (ny, nx)
        Values at the nodes; node ``(i, j)`` lies at ``(x0 + j * cell_m, y0 + i * cell_m)``.
    level : float
        The level.
    x0, y0, cell_m : float
        Position of node ``(0, 0)`` and the spacing (m).
    case_segments
        The marching-squares table (:data:`_CASE_SEGMENTS`).

    Returns
    -------
    pts : float64 array (N, 2)
        Ring vertices, ring after ring (not repeated at the end).
    offsets : int64 array (R + 1,)
        Ring ``r`` is ``pts[offsets[r]:offsets[r + 1]]``.
    area : float64 array (R,)
        Signed area (m²): positive for outer rings (anticlockwise), negative for holes.
    """
    ny0, nx0 = z.shape
    # one node of outside all round (in the inside mask and :func:`_z_at`), so that every ring closes
    ny = ny0 + 2
    nx = nx0 + 2
    n_h = ny * nx
    inside = np.zeros((ny, nx), dtype=np.int8)
    for i in range(ny0):
        row = z[i]
        mask = inside[i + 1]
        for j in range(nx0):
            mask[j + 1] = 1 if row[j] <= level else 0
    # at most one segment leaves each edge: sized for all (the pages never written are never touched)
    nxt = np.empty(2 * n_h, dtype=np.int32)
    starts = np.empty(2 * n_h, dtype=np.int32)
    n_start = _link_crossings(z, inside, level, case_segments, nxt, starts)
    return _walk_rings(z, nxt, starts, n_start, level, x0, y0, cell_m)


@njit(cache=True, nogil=True)
def _z_at(z, i, j):
    """Value at node ``(i, j)`` of the grid padded by one outside node all round."""
    if i < 1 or j < 1 or i > z.shape[0] or j > z.shape[1]:
        return float(_OUTSIDE)
    return float(z[i - 1, j - 1])


@njit(cache=True, nogil=True)
def _link_crossings(z, inside, level, case_segments, nxt, starts):
    """Marching-squares cases of every cell of the padded grid: ``nxt[edge]`` is the edge where the boundary
    leaving ``edge`` goes next, and ``starts`` the edges that boundary leaves from (returns how many)."""
    ny, nx = inside.shape
    n_h = ny * nx
    n_start = 0
    for i in range(ny - 1):
        lower = inside[i]
        upper = inside[i + 1]
        for j in range(nx - 1):
            case = np.int64(lower[j]) + 2 * np.int64(lower[j + 1]) + 4 * np.int64(upper[j + 1]) + 8 * np.int64(upper[j])
            if case == 0 or case == 15:
                continue
            if case == 5 or case == 10:
                centre = 0.25 * (_z_at(z, i, j) + _z_at(z, i, j + 1) + _z_at(z, i + 1, j + 1) + _z_at(z, i + 1, j))
                if centre <= level:
                    case = 16 if case == 5 else 17
            for k in range(0, 4, 2):
                a = case_segments[case, k]
                if a < 0:
                    break
                ea = _edge_id(i, j, a, nx, n_h)
                nxt[ea] = _edge_id(i, j, case_segments[case, k + 1], nx, n_h)
                starts[n_start] = ea
                n_start += 1
    return n_start


@njit(cache=True, nogil=True)
def _walk_rings(z, nxt, starts, n_start, level, x0, y0, cell_m):
    """Rings from the linked crossings (see :func:`trace_level`), with their signed areas."""
    ny = z.shape[0] + 2
    nx = z.shape[1] + 2
    n_h = ny * nx
    pts = np.empty((n_start, 2), dtype=np.float64)
    offsets = np.empty(n_start + 1, dtype=np.int64)
    area = np.empty(n_start, dtype=np.float64)
    offsets[0] = 0
    n_ring = 0
    m = 0
    for t in range(n_start):
        e = np.int64(starts[t])
        if nxt[e] < 0:
            continue
        first = m
        while nxt[e] >= 0:
            # the crossing on edge e, linearly interpolated
            if e < n_h:
                i = e // nx
                j = e % nx
                f = _crossing(_z_at(z, i, j), _z_at(z, i, j + 1), level)
                px = x0 + (j - 1 + f) * cell_m
                py = y0 + (i - 1) * cell_m
            else:
                i = (e - n_h) // nx
                j = (e - n_h) % nx
                f = _crossing(_z_at(z, i, j), _z_at(z, i + 1, j), level)
                px = x0 + (j - 1) * cell_m
                py = y0 + (i - 1 + f) * cell_m
            pts[m, 0] = px
            pts[m, 1] = py
            m += 1
            e2 = np.int64(nxt[e])
            nxt[e] = -1
            e = e2
        # shoelace, relative to the ring's first point (keeps the products small)
        acc = 0.0
        bx = pts[first, 0]
        by = pts[first, 1]
        for u in range(first, m):
            w = u + 1 if u + 1 < m else first
            acc += (pts[u, 0] - bx) * (pts[w, 1] - by) - (pts[w, 0] - bx) * (pts[u, 1] - by)
        area[n_ring] = 0.5 * acc
        n_ring += 1
        offsets[n_ring] = m
    return pts[:m], offsets[: n_ring + 1], area[:n_ring]


@njit(cache=True, nogil=True)
def anchored_rows(pieces, left, right, detect_full, piece_len):
    """Reached-road increment rows of pieces covered by ``[0, left[:, k]]`` and ``[1 - right[:, k], 1]`` at band k.

    With ``detect_full``, a piece wholly covered from band j on becomes one ``[0, 1]`` row at band j (which halves
    the geometry work downstream). Rows come left stretches first, then right ones, then whole pieces, each piece by
    piece and band by band.

    Returns
    -------
    piece, band : int64 arrays; a, b : float64 arrays
        The rows: piece, band from which it is reached, and the covered fractions ``[a, b]`` along the piece.
    covered_m : float64 array (n_bands,)
        Road length covered at each band (m), ``piece_len`` being each piece's length (m).
    """
    n = pieces.shape[0]
    n_b = left.shape[1]
    full = np.full(n, n_b, dtype=np.int64)
    covered_m = np.zeros(n_b, dtype=np.float64)
    n_rows = 0
    for i in range(n):
        for k in range(n_b):
            cov = left[i, k] + right[i, k]
            covered_m[k] += min(cov, 1.0) * piece_len[pieces[i]]
            if detect_full and full[i] == n_b and cov >= 1.0 - 1e-9:
                full[i] = k
        for k in range(full[i]):
            lp = left[i, k - 1] if k > 0 else 0.0
            rp = right[i, k - 1] if k > 0 else 0.0
            n_rows += int(left[i, k] > lp) + int(right[i, k] > rp)
        n_rows += int(full[i] < n_b)
    piece = np.empty(n_rows, dtype=np.int64)
    band = np.empty(n_rows, dtype=np.int64)
    a = np.empty(n_rows, dtype=np.float64)
    b = np.empty(n_rows, dtype=np.float64)
    m = 0
    for side in range(3):
        for i in range(n):
            if side == 2:
                if full[i] < n_b:
                    piece[m] = pieces[i]
                    band[m] = full[i]
                    a[m] = 0.0
                    b[m] = 1.0
                    m += 1
                continue
            for k in range(full[i]):
                if side == 0:
                    lp = left[i, k - 1] if k > 0 else 0.0
                    if left[i, k] > lp:
                        piece[m] = pieces[i]
                        band[m] = k
                        a[m] = lp
                        b[m] = left[i, k]
                        m += 1
                else:
                    rp = right[i, k - 1] if k > 0 else 0.0
                    if right[i, k] > rp:
                        piece[m] = pieces[i]
                        band[m] = k
                        a[m] = 1.0 - right[i, k]
                        b[m] = 1.0 - rp
                        m += 1
    return piece, band, a, b, covered_m


@njit(cache=True, nogil=True)
def stamp_distance(out, x0_m, y0_m, cell_m, seg_xy, seg_band, band, radius_m):
    """Lower ``out`` to the distance (m) from its nodes to the segments of band ``band``, exactly, wherever that
    distance is at most ``radius_m``.

    Each segment is stamped onto the nodes of its bounding box grown by ``radius_m``: a node within ``radius_m``
    of a segment lies in that box, so every such node gets the distance to every such segment, hence its least.
    Node ``(i, j)`` of ``out`` lies at ``(x0_m + j * cell_m, y0_m + i * cell_m)``; nodes outside the array are not
    written. The inner loop runs along a row with a clamped projection, which vectorises.
    """
    ny, nx = out.shape
    inv_cell = 1.0 / cell_m
    for s in range(seg_xy.shape[0]):
        if seg_band[s] != band:
            continue
        ax = seg_xy[s, 0]
        ay = seg_xy[s, 1]
        dx = seg_xy[s, 2] - ax
        dy = seg_xy[s, 3] - ay
        den = dx * dx + dy * dy
        inv = 1.0 / den if den > 0.0 else 0.0
        j_lo = max(int(np.ceil((min(ax, ax + dx) - radius_m - x0_m) * inv_cell)), 0)
        j_hi = min(int(np.floor((max(ax, ax + dx) + radius_m - x0_m) * inv_cell)), nx - 1)
        i_lo = max(int(np.ceil((min(ay, ay + dy) - radius_m - y0_m) * inv_cell)), 0)
        i_hi = min(int(np.floor((max(ay, ay + dy) + radius_m - y0_m) * inv_cell)), ny - 1)
        for i in range(i_lo, i_hi + 1):
            qy = y0_m + i * cell_m - ay
            row = out[i]
            for j in range(j_lo, j_hi + 1):
                qx = x0_m + j * cell_m - ax
                t = min(max((qx * dx + qy * dy) * inv, 0.0), 1.0)
                ex = qx - t * dx
                ey = qy - t * dy
                d = np.float32(np.sqrt(ex * ex + ey * ey))
                row[j] = min(row[j], d)
