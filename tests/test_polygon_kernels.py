"""Compiled kernels of the fast drive-time polygons, against GEOS (shapely 2) as the reference.

Sources of the checks:

* Grid traversal (Amanatides & Woo 1987): the cells a segment passes through are the node-centred squares its
  interior meets, which GEOS ``intersects`` decides independently. With random real coordinates a segment touching a
  square only at a corner or along a side has probability zero, so the two sets must be equal.
* Per-band distance field (to the road a band first reaches): the distance from a point to a set of segments is GEOS
  ``distance``. The field must never
  be below it (its values are distances to some of the band's segments), its stand-ins must be on the right side
  (0 only where the road is surely closer than ``reach - cell``, far only where it is surely farther than
  ``reach + cell``: the property the level tracing relies on), every node must be on its right side of the level,
  and nearly every node within a cell of the level must equal GEOS. The last is a measured property of the 3 x 3
  search, which is made exact only where it could put a node on the wrong side: on these random walks, which bend
  more than real roads, 97-99 % of such nodes are exact, so the test asks for 95 %.
"""

from __future__ import annotations

import numpy as np
import shapely

from coverkit.polygon_kernels import FAR_M, band_distance, road_grid, segment_cells


def _random_segments(seed: int, n: int = 400, extent_m: float = 3000.0) -> np.ndarray:
    """Random-walk polylines (road-like: mostly straight, bending) as segments x0, y0, x1, y1 (m)."""
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(n // 20):
        p = rng.uniform(500.0, extent_m - 500.0, 2) + 100_000.0
        heading = rng.uniform(0, 2 * np.pi)
        for _ in range(20):
            heading += rng.normal(0.0, 0.3)
            q = p + rng.uniform(10.0, 120.0) * np.array([np.cos(heading), np.sin(heading)])
            out.append([p[0], p[1], q[0], q[1]])
            p = q
    return np.asarray(out)


def test_segment_cells_equal_geos_intersects():
    """Traversal cells equal the squares whose shape GEOS says the segment intersects."""
    cell = 50.0
    seg = _random_segments(1, 300)
    ptr, ix, iy = segment_cells(seg, cell)
    lines = shapely.linestrings(seg.reshape(-1, 2, 2))
    for s in range(len(seg)):
        got = set(zip(ix[ptr[s] : ptr[s + 1]].tolist(), iy[ptr[s] : ptr[s + 1]].tolist(), strict=True))
        lo = np.floor(np.minimum(seg[s, :2], seg[s, 2:]) / cell) - 1
        hi = np.ceil(np.maximum(seg[s, :2], seg[s, 2:]) / cell) + 1
        gx, gy = np.meshgrid(np.arange(lo[0], hi[0] + 1), np.arange(lo[1], hi[1] + 1))
        boxes = shapely.box((gx - 0.5) * cell, (gy - 0.5) * cell, (gx + 0.5) * cell, (gy + 0.5) * cell)
        hit = shapely.intersects(boxes, lines[s])
        want = set(zip(gx[hit].astype(int).tolist(), gy[hit].astype(int).tolist(), strict=True))
        assert got == want, s
        assert len(got) == ptr[s + 1] - ptr[s]  # each cell once


def test_band_distance_against_geos_distance():
    """Zone values equal the GEOS distance to the band's segments (never below it); stand-ins on the right side."""
    cell, reach, n_b = 50.0, 150.0, 3
    seg = _random_segments(2, 600)
    rng = np.random.default_rng(3)
    band = np.sort(rng.integers(0, n_b, len(seg)))  # later walks reached in later bands
    ptr, ix, iy = segment_cells(seg, cell)
    margin = int(np.ceil((reach + 2 * cell) / cell)) + 1
    gx0 = int(np.floor(seg[:, [0, 2]].min() / cell)) - margin
    gy0 = int(np.floor(seg[:, [1, 3]].min() / cell)) - margin
    gnx = int(np.ceil(seg[:, [0, 2]].max() / cell)) + margin - gx0 + 1
    gny = int(np.ceil(seg[:, [1, 3]].max() / cell)) + margin - gy0 + 1
    whole = np.ones(len(seg), dtype=bool)
    label, bits, head, link, link_seg, extent = road_grid(
        seg, band, np.arange(len(seg)), whole, ptr, ix, iy, n_b, cell, gx0, gy0, gnx, gny
    )
    lines = shapely.linestrings(seg.reshape(-1, 2, 2))
    n_near = n_exact = 0
    for k in range(n_b):
        wx0, wy0 = int(extent[k, 0]) - margin, int(extent[k, 1]) - margin
        wnx = int(extent[k, 2] - extent[k, 0]) + 2 * margin + 1
        wny = int(extent[k, 3] - extent[k, 1]) + 2 * margin + 1
        no_prev = np.zeros((0, 0), dtype=np.float32)
        dist = band_distance(
            label, bits, k, wx0, wy0, wnx, wny, head, link, link_seg, seg, band, gx0, gy0, cell, reach, no_prev, 0, 0
        )
        road = shapely.union_all(lines[band == k])  # the band's increment (the field nests by taking minima)
        jj, ii = np.meshgrid(np.arange(wnx), np.arange(wny))
        px, py = (gx0 + wx0 + jj) * cell, (gy0 + wy0 + ii) * cell
        true = shapely.distance(shapely.points(px.ravel(), py.ravel()), road).reshape(dist.shape)
        inside, far = dist == 0.0, dist == np.float32(FAR_M)
        zone = ~inside & ~far
        assert (true[inside] < reach - cell + 1e-6).all()
        assert (true[far] > reach + cell - 1e-6).all()
        # every node within a cell of the level has its distance (the only values the traced line uses)
        assert zone[np.abs(true - reach) <= cell].all()
        assert (dist[zone] >= true[zone] - 1e-3).all()  # float32 values
        # the right side of the level everywhere (values at float32 rounding of the level excepted)
        clear = np.abs(true - reach) > 1e-3
        assert ((dist <= reach) == (true <= reach))[clear].all()
        near = np.abs(true - reach) <= cell
        n_near += int(near.sum())
        n_exact += int((np.abs(dist[near] - true[near]) <= 1e-2).sum())
    assert n_near > 1000
    assert n_exact / n_near >= 0.95


def _contourpy_region(z, level, x0, y0, cell):
    """The region ``z <= level`` by contourpy's filled contours (a general-purpose marching-squares library)."""
    import contourpy

    ny, nx = z.shape
    gen = contourpy.contour_generator(
        x0 + np.arange(nx) * cell, y0 + np.arange(ny) * cell, z, name="serial", fill_type="OuterOffset"
    )
    pts, offs = gen.filled(-np.inf, level)
    polys = []
    for p, o in zip(pts, offs, strict=True):
        rings = [p[o[i] : o[i + 1]] for i in range(len(o) - 1)]
        polys.append(shapely.Polygon(rings[0], rings[1:]))
    return shapely.union_all(polys) if polys else shapely.Polygon()


def test_trace_level_matches_contourpy_and_circle_area():
    """Traced rings: anticlockwise outer rings and clockwise holes; the region equals contourpy's filled contour on a
    random smooth field (IoU > 0.999; saddles may be split differently), and a disk's area is pi r^2 within 0.5 %."""
    from coverkit.isochrones import _CASE_SEGMENTS
    from coverkit.polygon_kernels import trace_level

    rng = np.random.default_rng(5)
    cell, x0, y0 = 10.0, 1000.0, 2000.0
    yy, xx = np.mgrid[0:120, 0:150]
    z = np.zeros(xx.shape)
    for _ in range(12):  # a sum of bumps: islands, holes and saddles
        cx, cy, s, a = rng.uniform(0, 150), rng.uniform(0, 120), rng.uniform(5, 20), rng.choice([-1.0, 1.0])
        z += a * np.exp(-((xx - cx) ** 2 + (yy - cy) ** 2) / (2 * s * s))
    z = z.astype(np.float32)
    for level in (-0.2, 0.0, 0.3):
        pts, offs, area = trace_level(z, level, x0, y0, cell, _CASE_SEGMENTS)
        rings = [shapely.LinearRing(pts[offs[i] : offs[i + 1]]) for i in range(len(area))]
        assert np.allclose([shapely.Polygon(r).area for r in rings], np.abs(area), rtol=1e-9)
        assert all(r.is_ccw == (a > 0) for r, a in zip(rings, area, strict=True))
        # region = outer rings minus holes (rings are disjoint, so signed areas add up)
        ref = _contourpy_region(z.astype(float), level, x0, y0, cell)
        ours = shapely.union_all([shapely.Polygon(r) for r, a in zip(rings, area, strict=True) if a > 0])
        holes = [shapely.Polygon(r) for r, a in zip(rings, area, strict=True) if a < 0]
        if holes:
            ours = shapely.difference(ours, shapely.union_all(holes))
        assert abs(ours.area - area.sum()) < 1e-6 * ours.area
        assert shapely.intersection(ours, ref).area / shapely.union(ours, ref).area > 0.999
    # a cone: the region within 300 m of a point is a disk
    d = np.hypot(xx - 75.3, yy - 60.7).astype(np.float32) * cell
    pts, offs, area = trace_level(d, 300.0, x0, y0, cell, _CASE_SEGMENTS)
    assert len(area) == 1 and abs(area[0] / (np.pi * 300.0**2) - 1.0) < 0.005


def test_stamp_distance_against_geos_distance():
    """Stamping: every node within the stamp radius of a band's segments holds its GEOS distance to them (float32);
    nodes beyond keep their value unless a segment's box reaches them (then their true distance)."""
    from coverkit.polygon_kernels import stamp_distance

    cell, radius = 50.0, 200.0
    seg = _random_segments(4, 300)
    band = np.sort(np.random.default_rng(6).integers(0, 2, len(seg)))
    x0, y0 = np.floor(seg[:, [0, 2]].min() / cell) * cell - 400, np.floor(seg[:, [1, 3]].min() / cell) * cell - 400
    nx = int((seg[:, [0, 2]].max() - x0 + 400) / cell) + 1
    ny = int((seg[:, [1, 3]].max() - y0 + 400) / cell) + 1
    lines = shapely.linestrings(seg.reshape(-1, 2, 2))
    jj, ii = np.meshgrid(np.arange(nx), np.arange(ny))
    nodes = shapely.points((x0 + jj * cell).ravel(), (y0 + ii * cell).ravel())
    for k in (0, 1):
        out = np.full((ny, nx), 1e9, dtype=np.float32)
        stamp_distance(out, x0, y0, cell, seg, band, k, radius)
        true = shapely.distance(nodes, shapely.union_all(lines[band == k])).reshape(out.shape)
        near = true <= radius
        assert near.sum() > 1000
        assert np.allclose(out[near], true[near], rtol=1e-6, atol=1e-3)
        assert (out[~near] > radius - 1e-3).all()
