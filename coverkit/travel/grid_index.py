"""Exact nearest road piece from a grid of buckets over short straight sub-segments: plain arrays, so the index can
be kept in a network's columnar copy and memory-mapped instead of built on every load.

Why a grid: a k-d tree over millions of sub-segment midpoints takes seconds to build and cannot be mapped from disk;
a bucket grid is four arrays (sub-segment ends, their piece, and where each cell's run starts after sorting by cell).

Exactness (the same argument as :mod:`coverkit.travel.nearest`): every piece is cut into straight sub-segments no
longer than ``max_len_m`` and each sub-segment is filed under the cell of its midpoint, so a sub-segment at distance
d from a point has its midpoint within d + max_len_m / 2. Cells are examined in square rings around the point's cell;
after ring r, every unseen midpoint lies outside the examined block, at least m (the distance from the point to the
block's border) away, so every unseen sub-segment is at least m - max_len_m / 2 away. The best distance found is the
true minimum once it is below that bound; a point is proven off-network once the bound exceeds the snap limit.
Among pieces at the minimum distance (within 1e-9 m) the lowest index wins, as in the k-d tree search.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from coverkit.travel.nearest import MAX_SUBSEGMENT_M, cut_segments_compiled, point_segment_distance

#: Sub-segments per cell aimed at when choosing the cell size (common practice for bucket grids: a few per cell).
SEGMENTS_PER_CELL = 4.0
#: Points searched together (bounds the candidate arrays: about 40 candidates per point per ring).
CHUNK_POINTS = 65_536
_TIE_M = 1e-9


@dataclass(frozen=True)
class GridIndex:
    """Sub-segments sorted by grid cell, and the grid.

    Attributes
    ----------
    a, b
        (S, 2) sub-segment ends (m).
    piece
        (S,) piece index of each sub-segment.
    cell_ptr
        (nx * ny + 1,) start of each cell's run in the sorted sub-segments (cell = iy * nx + ix).
    origin_m, cell_m, shape
        Lower-left corner of the grid (m), cell size (m) and (nx, ny).
    max_len_m
        Longest sub-segment (m).
    """

    a: np.ndarray
    b: np.ndarray
    piece: np.ndarray
    cell_ptr: np.ndarray
    origin_m: tuple[float, float]
    cell_m: float
    shape: tuple[int, int]
    max_len_m: float

    def to_arrays(self) -> dict[str, np.ndarray]:
        """The index as named arrays (for the columnar copy)."""
        params = np.array([*self.origin_m, self.cell_m, *self.shape, self.max_len_m], dtype=float)
        return {"a": self.a, "b": self.b, "piece": self.piece, "cell_ptr": self.cell_ptr, "params": params}

    @classmethod
    def from_arrays(cls, arrays: dict[str, np.ndarray]) -> GridIndex:
        """The index from :meth:`to_arrays`' arrays."""
        p = np.asarray(arrays["params"], dtype=float)
        return cls(
            arrays["a"],
            arrays["b"],
            arrays["piece"],
            arrays["cell_ptr"],
            (float(p[0]), float(p[1])),
            float(p[2]),
            (int(p[3]), int(p[4])),
            float(p[5]),
        )


def build_grid_index(coords: np.ndarray, owner: np.ndarray, max_len_m: float = MAX_SUBSEGMENT_M) -> GridIndex:
    """A :class:`GridIndex` over the lines given by vertex ``coords`` (m) and the line index ``owner`` of each."""
    a, b, piece = cut_segments_compiled(np.asarray(coords, dtype=float), np.asarray(owner), max_len_m)
    mid = (a + b) / 2.0
    if len(mid) == 0:
        return GridIndex(a, b, piece.astype(np.int64), np.zeros(2, np.int64), (0.0, 0.0), 1.0, (1, 1), max_len_m)
    lo = mid.min(axis=0)
    span = np.maximum(mid.max(axis=0) - lo, max_len_m)
    cell_m = max(float(np.sqrt(span[0] * span[1] * SEGMENTS_PER_CELL / len(mid))), max_len_m)
    nx, ny = (np.floor(span / cell_m).astype(np.int64) + 1).tolist()
    ix = np.minimum(((mid[:, 0] - lo[0]) // cell_m).astype(np.int64), nx - 1)
    iy = np.minimum(((mid[:, 1] - lo[1]) // cell_m).astype(np.int64), ny - 1)
    del mid
    cell = iy * nx + ix
    del ix, iy
    order = np.argsort(cell, kind="stable")
    ptr = np.concatenate([[0], np.cumsum(np.bincount(cell, minlength=nx * ny))]).astype(np.int64)
    del cell
    # reordered one array at a time, each old copy freed before the next is made (millions of rows)
    a = np.ascontiguousarray(a[order])
    b = np.ascontiguousarray(b[order])
    piece = piece[order].astype(np.int64)
    return GridIndex(
        a,
        b,
        piece,
        ptr,
        (float(lo[0]), float(lo[1])),
        cell_m,
        (int(nx), int(ny)),
        float(max_len_m),
    )


def _ring(r: int) -> np.ndarray:
    """Cell offsets (dx, dy) at Chebyshev distance exactly ``r``."""
    if r == 0:
        return np.zeros((1, 2), dtype=np.int64)
    side = np.arange(-r, r + 1)
    top = np.column_stack([side, np.full(len(side), r)])
    bottom = np.column_stack([side, np.full(len(side), -r)])
    inner = np.arange(-r + 1, r)
    left = np.column_stack([np.full(len(inner), -r), inner])
    right = np.column_stack([np.full(len(inner), r), inner])
    return np.concatenate([top, bottom, left, right]).astype(np.int64)


def grid_nearest(index: GridIndex, xy: np.ndarray, max_distance_m: float) -> tuple[np.ndarray, np.ndarray]:
    """Nearest piece (lowest index among equidistant ones) and its distance for each point within the limit.

    Returns
    -------
    piece
        Shape (n,), ``-1`` where no piece lies within ``max_distance_m``.
    dist_m
        Shape (n,), distance to that piece (m), ``inf`` where none.
    """
    xy = np.asarray(xy, dtype=float).reshape(-1, 2)
    n = len(xy)
    piece = np.full(n, -1, dtype=np.int64)
    dist = np.full(n, np.inf)
    if n == 0 or len(index.piece) == 0:
        return piece, dist
    from coverkit.travel.kernels import grid_nearest_kernel

    nx, ny = index.shape
    c, half, max_d = index.cell_m, index.max_len_m / 2.0, float(max_distance_m)
    ix, iy = _point_cells(index, xy, max_d)
    grid_nearest_kernel(
        np.ascontiguousarray(xy), ix, iy, np.asarray(index.a), np.asarray(index.b),
        np.asarray(index.piece, dtype=np.int64), np.asarray(index.cell_ptr, dtype=np.int64),
        float(index.origin_m[0]), float(index.origin_m[1]), float(c), int(nx), int(ny), half, max_d, piece, dist,
    )  # fmt: skip
    return piece, dist


def grid_nearest_numpy(index: GridIndex, xy: np.ndarray, max_distance_m: float) -> tuple[np.ndarray, np.ndarray]:
    """:func:`grid_nearest` in numpy, chunk by chunk: the reference the compiled kernel is held to in the tests."""
    xy = np.asarray(xy, dtype=float).reshape(-1, 2)
    n = len(xy)
    piece = np.full(n, -1, dtype=np.int64)
    dist = np.full(n, np.inf)
    if n == 0 or len(index.piece) == 0:
        return piece, dist
    for lo in range(0, n, CHUNK_POINTS):
        p, d = _nearest_chunk(index, xy[lo : lo + CHUNK_POINTS], float(max_distance_m))
        piece[lo : lo + len(p)], dist[lo : lo + len(p)] = p, d
    return piece, dist


def _point_cells(index: GridIndex, xy: np.ndarray, max_d: float) -> tuple[np.ndarray, np.ndarray]:
    """The cell (ix, iy) of each point, clipped a ring beyond the reach of the limit (may lie outside the grid:
    its cells there are simply empty)."""
    nx, ny = index.shape
    c = index.cell_m
    fx = np.floor((xy[:, 0] - index.origin_m[0]) / c)
    fy = np.floor((xy[:, 1] - index.origin_m[1]) / c)
    far = max(nx, ny) + int(np.ceil((max_d + index.max_len_m / 2.0) / c)) + 2
    return np.clip(fx, -far, nx + far).astype(np.int64), np.clip(fy, -far, ny + far).astype(np.int64)


def _nearest_chunk(index: GridIndex, xy: np.ndarray, max_d: float) -> tuple[np.ndarray, np.ndarray]:
    n = len(xy)
    nx, ny = index.shape
    c = index.cell_m
    half = index.max_len_m / 2.0
    big = np.iinfo(np.int64).max
    ix, iy = _point_cells(index, xy, max_d)
    best_d = np.full(n, np.inf)
    best_p = np.full(n, big, dtype=np.int64)
    active = np.arange(n)
    r = 0
    while len(active):
        ring = _ring(r)
        cx = ix[active, None] + ring[None, :, 0]
        cy = iy[active, None] + ring[None, :, 1]
        inside = (cx >= 0) & (cx < nx) & (cy >= 0) & (cy < ny)
        cell = np.where(inside, cy * nx + cx, 0)
        count = np.where(inside, index.cell_ptr[cell + 1] - index.cell_ptr[cell], 0).ravel()
        if count.sum():
            owner = np.repeat(np.repeat(active, len(ring)), count)
            seg = np.repeat(index.cell_ptr[cell].ravel() - np.cumsum(count) + count, count) + np.arange(count.sum())
            d = point_segment_distance(xy[owner], index.a[seg], index.b[seg])
            ring_d = np.full(n, np.inf)
            np.minimum.at(ring_d, owner, d)
            at_min = d <= ring_d[owner] + _TIE_M
            ring_p = np.full(n, big, dtype=np.int64)
            np.minimum.at(ring_p, owner[at_min], index.piece[seg[at_min]])
            new_d = np.minimum(best_d, ring_d)
            keep_old = best_d <= new_d + _TIE_M
            take_new = ring_d <= new_d + _TIE_M
            best_p = np.minimum(np.where(keep_old, best_p, big), np.where(take_new, ring_p, big))
            best_d = new_d
        # distance from each active point to the border of the examined block of cells
        x0 = index.origin_m[0] + (ix[active] - r) * c
        x1 = index.origin_m[0] + (ix[active] + r + 1) * c
        y0 = index.origin_m[1] + (iy[active] - r) * c
        y1 = index.origin_m[1] + (iy[active] + r + 1) * c
        px, py = xy[active, 0], xy[active, 1]
        m = np.minimum(np.minimum(px - x0, x1 - px), np.minimum(py - y0, y1 - py))
        bd = best_d[active]
        covers = (ix[active] - r <= 0) & (ix[active] + r >= nx - 1) & (iy[active] - r <= 0) & (iy[active] + r >= ny - 1)
        done = covers | (bd + _TIE_M < m - half) | ((m - half > max_d) & (bd > max_d))
        active = active[~done]
        r += 1
    within = best_d <= max_d
    return np.where(within, best_p, -1), np.where(within, best_d, np.inf)
