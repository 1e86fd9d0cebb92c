"""Drive-time polygons per base and band, and the travel-time surface (GeoTIFF).

A drive-time polygon for a band of T minutes is the set of places within ``reach_m`` (straight line) of some road
point that the search reaches within T minutes: reached edges plus partial edges, dilated by the reach distance. It
hugs the roads and has holes where no reached road comes within ``reach_m``; it is never a convex hull.

Two constructions of the same set:

* **fast** (default): per base, on a square grid (spacing ``cell_m``, default ``reach_m / 3``, i.e. 50 m for the
  default 150 m reach) over the reached extent only, compiled kernels (:mod:`coverkit.polygon_kernels`) give each
  node near the ``reach_m`` level its distance to the reached road, on the right side of the level everywhere: by
  stamping each segment on the nodes around it (exact; sparse rural roads) or by a distance transform over the
  road's grid cells (dense town grids), whichever the estimated work favours (see :func:`reach_fields`). One field
  per band, each never above the previous one, so the traced regions are nested by construction. The ``reach_m``
  level line is traced by marching squares with linear interpolation (compiled too) into valid polygons directly;
  holes smaller than ``min_hole_km2`` are filled (which keeps the nesting: a hole of band k lies inside a hole of
  band k-1). The "any base" field is the least of the bases' fields node by node (all fields share one grid anchored
  at the CRS origin), so it is traced once, with no union. Bases are worked on by one thread per core.
* **exact** (``exact=True``): shapely 2 buffer of the reached pieces, unioned band by band; the reference. Holes
  smaller than ``min_hole_km2`` are filled and the polygon of band k is unioned with band k-1, so bands nest exactly.

The fast outline matches the exact one to intersection-over-union >= 0.99 on the demo county and on synthetic
networks for bands of a few minutes, and >= 0.98 for polygons of a few tenths of a km² (tests and benchmark); it cuts
concave corners of the exact outline by up to about a cell. Areas are planar
in the network CRS.
"""

from __future__ import annotations

import os
import threading
import time
from collections import deque
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from coverkit import settings
from coverkit.atomic import atomic_path, unsynced_gpkg
from coverkit.errors import PARAM, CoverkitError
from coverkit.network.model import RoadNetwork
from coverkit.polygon_kernels import (
    _CASE_SEGMENTS,
    FAR_M,
    anchored_rows,
    band_distance,
    clip_segments,
    piece_stretches,
    road_grid,
    segment_cells,
    stamp_distance,
    trace_level,
)
from coverkit.progress import counted, note
from coverkit.travel import turns
from coverkit.travel.search import _check_direction, nearest_node_times, node_time_blocks, run_s, search_size
from coverkit.travel.snap import DEFAULT_MAX_SNAP_M, Snapped, road_pieces, snap_points

#: Default reach distance from a reached road (m): how far off the road a place still counts as reached.
DEFAULT_REACH_M = settings.REACH_M
#: Default grid spacing of the fast polygons, as a share of the reach: the traced outline interpolates exact road
#: distances, so at a third of the reach it stays within intersection-over-union 0.98 of the exact polygons even for
#: polygons of a few tenths of a km² (0.99 and up for bands of a few minutes; tests and benchmark). At half the reach
#: it is about twice as fast on sparse rural roads but drops to about 0.96 on such small polygons.
DEFAULT_CELL_PER_REACH = 1.0 / 3.0
#: Work of the distance transform per window cell, in segment-to-node distances of the stamping construction
#: (measured: 3.5 on the demo county's rural roads, 5.4 on a dense synthetic town grid; see ``reach_fields``).
STAMPS_PER_CELL = 4.5
#: Most grid cells of one base's distance field (float32: 4 bytes each, plus the work arrays): about 1 GB in all.
MAX_FIELD_CELLS = 100_000_000
#: Default: holes smaller than this (km^2) are filled (1 ha).
DEFAULT_MIN_HOLE_KM2 = 0.01
#: Default travel-time surface cell size (m).
DEFAULT_SURFACE_CELL_M = settings.SURFACE_CELL_M
#: Most bands in one call (band labels are 16-bit on the grid).
MAX_BANDS = 1000
#: ``base_id`` of the rows for the union over all bases.
ANY_BASE_ID = "(any base)"
#: Surface nodata value (minutes).
SURFACE_NODATA = -1.0

COLUMNS = ["base_id", "band_min", "area_km2", "road_km", "geometry"]


def drive_time_polygons(
    net: RoadNetwork,
    bases: gpd.GeoDataFrame | Snapped,
    minutes: list[float],
    reach_m: float = DEFAULT_REACH_M,
    exact: bool = False,
    cell_m: float | None = None,
    direction: str = "out",
    any_base: bool = True,
    min_hole_km2: float = DEFAULT_MIN_HOLE_KM2,
    max_snap_m: float = DEFAULT_MAX_SNAP_M,
    timings: dict[str, float] | None = None,
    workers: int | None = None,
) -> gpd.GeoDataFrame:
    """Drive-time polygons for every base and band, plus an "any base" polygon per band.

    Parameters
    ----------
    net
        Road network.
    bases
        Bases: a GeoDataFrame with ``id`` (as from :func:`coverkit.travel.read_points`) or already snapped points.
    minutes
        Band limits (minutes), e.g. ``[4, 8, 12]``; sorted and de-duplicated.
    reach_m
        Reach distance from a reached road (m), default 150.
    exact
        Use the shapely buffer-and-union construction instead of the fast grid one.
    cell_m
        Grid spacing of the fast path (m), default ``reach_m / 3`` (50 m for the default reach).
    direction
        ``"out"`` (from the base) or ``"in"`` (to the base).
    any_base
        Also return the union over bases (``base_id = ANY_BASE_ID``).
    min_hole_km2
        Holes smaller than this (km²) are filled.
    max_snap_m
        Snap limit for the bases (m).
    timings
        If given, the seconds spent in each step are added to it under the step's name (for benchmarks). Each
        thread times its own steps, so with several ``workers`` the per-base steps are summed over the threads
        (they may add up to more than the wall time) and ``"wait for workers"`` is the time the calling thread
        waited on them; pass ``workers=1`` for a breakdown of one thread's wall time.
    workers
        Threads working on bases at once (default: one per CPU core, at most one per base). The compiled kernels
        and shapely release the GIL; results do not depend on the number.

    Returns
    -------
    geopandas.GeoDataFrame
        Columns ``base_id, band_min, area_km2, road_km, geometry`` (CRS of the network), rows by base (input order,
        then the any-base rows) and band.

    Raises
    ------
    CoverkitError
        Empty or non-positive band list, non-positive reach; :class:`~coverkit.errors.OffNetworkError` for bases
        beyond the snap limit.
    """
    bands_s = _bands_s(minutes)
    cell_m = _grid_cell_m(reach_m, cell_m)
    _check_direction(direction)
    lap = _Laps(timings)
    snapped = _snap_bases(net, bases, max_snap_m)
    lap("snap bases")
    _warm_caches(net, direction)
    job = _PolygonJob(net, snapped, bands_s, direction, exact, reach_m, cell_m, min_hole_km2, lap)
    n_workers = max(1, min(workers or os.cpu_count() or 1, len(snapped)))
    # one source's row at a time from chunked dense blocks (memory: a chunk, plus the rows in flight); the "any
    # base" times are their running least (the multi-source search from all bases at once)
    # times at every vertex of the search graph (with turns modelled, the turn states give each edge's start)
    d_any = np.full(search_size(net), np.inf) if any_base else None

    def per_base_results(pool):
        pending: deque = deque()
        for src, block in node_time_blocks(net, snapped, float(bands_s[-1]), direction, states=True):
            for r, i in enumerate(src):
                lap("search")
                if d_any is not None:
                    np.minimum(d_any, block[r], out=d_any)
                if pool is None:
                    yield job.one_base(int(i), block[r])
                    continue
                pending.append(pool.submit(job.one_base, int(i), block[r]))
                if len(pending) > 2 * n_workers:
                    yield job.wait(pending.popleft())
        while pending:
            yield job.wait(pending.popleft())

    rows = []
    # fast path: the "any base" field is the least of the bases' fields, node by node (fields share one grid)
    mosaic: list[Field | None] = [None] * len(bands_s)
    n_jobs = len(snapped) + int(any_base)
    pool = ThreadPoolExecutor(n_workers) if n_workers > 1 else None
    try:
        results = per_base_results(pool)
        for i in counted(range(n_jobs), n_jobs, "drive-time polygons", every=max(1, n_jobs // 10)):
            if i < len(snapped):
                base_id = str(snapped.ids[i])
                km, geoms, fields = next(results)
                if any_base and not exact:
                    _merge_least(mosaic, fields)
                    lap("any-base field")
            else:
                base_id = ANY_BASE_ID
                km, geoms = job.any_base(d_any, mosaic)
            for k, g in enumerate(geoms):
                rows.append((base_id, float(bands_s[k] / 60.0), g.area / 1e6, km[k], g))
    finally:
        if pool is not None:
            pool.shutdown(wait=True, cancel_futures=True)
    out = gpd.GeoDataFrame(pd.DataFrame(rows, columns=COLUMNS), geometry="geometry", crs=net.crs)
    lap("table")
    return out


@dataclass(frozen=True)
class _PolygonJob:
    """What every base's polygons are built with: the network, the snapped bases, the bands and the options."""

    net: RoadNetwork
    snapped: Snapped
    bands_s: np.ndarray
    direction: str
    exact: bool
    reach_m: float
    cell_m: float
    min_hole_km2: float
    lap: _Laps

    def one_base(self, i: int, d: np.ndarray) -> tuple[np.ndarray, list, list | None]:
        """Road km, polygons and (fast path) fields of base ``i`` from its node times ``d`` (any thread)."""
        self.lap.start()  # this thread's steps count from here
        with _compile_notice():
            reached = reached_pieces(self.net, d, self.snapped.subset([i]), self.bands_s, self.direction)
            self.lap("reached road")
            fields = None if self.exact else reach_fields(reached, len(self.bands_s), self.reach_m, self.cell_m)
            if fields is not None:
                self.lap("distance fields")
            return reached_road_km(reached, len(self.bands_s)), self.polygons(reached, fields), fields

    def any_base(self, d_any: np.ndarray, mosaic: list[Field | None]) -> tuple[np.ndarray, list]:
        """Road km and polygons reached from any base: times ``d_any``, (fast path) the bases' merged fields."""
        reached = reached_pieces(self.net, d_any, self.snapped, self.bands_s, self.direction)
        self.lap("reached road")
        return reached_road_km(reached, len(self.bands_s)), self.polygons(reached, None if self.exact else mosaic)

    def polygons(self, reached: Reached, fields: list[Field | None] | None) -> list:
        """One polygon per band: buffer and union (exact) or traced from the distance fields (fast)."""
        if self.exact:
            geoms = band_polygons(reached, self.bands_s, self.reach_m, exact=True, min_hole_km2=self.min_hole_km2)
            self.lap("exact polygons")
        else:
            min_hole_m2 = self.min_hole_km2 * 1e6
            geoms = [_field_polygons(f, self.cell_m, self.reach_m, min_hole_m2) for f in fields]
            self.lap("trace polygons")
        return geoms

    def wait(self, future):
        """The result of a worker's base; the calling thread's wait is its own step."""
        done = future.result()
        self.lap("wait for workers")
        return done


def _grid_cell_m(reach_m: float, cell_m: float | None) -> float:
    """The fast path's grid spacing (default a third of the reach), after checking both distances."""
    if not (reach_m > 0 and np.isfinite(reach_m)):
        raise CoverkitError(
            f"{PARAM}, the reach distance, must be a positive number of metres (e.g. 150), got {reach_m}.",
            param="reach_m",
        )
    if cell_m is not None and not (cell_m > 0 and np.isfinite(cell_m)):
        raise CoverkitError(f"grid cell size {cell_m} m must be a positive number of metres (e.g. 50).")
    cell_m = float(cell_m) if cell_m else reach_m * DEFAULT_CELL_PER_REACH
    if cell_m > reach_m:
        raise CoverkitError(
            f"grid spacing {cell_m:g} m is coarser than the reach {reach_m:g} m, so polygons would lose their shape; "
            f"give at most the reach (default a third of it, {reach_m * DEFAULT_CELL_PER_REACH:g} m)."
        )
    return cell_m


def _merge_least(mosaic: list[Field | None], fields: list[Field | None]) -> None:
    """Fold one base's fields into the any-base ``mosaic``, band by band: the least distance per node."""
    for k, f in enumerate(fields):
        if f is not None and mosaic[k] is None:
            mosaic[k] = Field(f.ix0, f.iy0, f.dist_m.astype(np.float32))
        elif f is not None:
            mosaic[k].merge_min(f)


class _Laps:
    """Adds the seconds since the calling thread's previous lap to ``timings[step]`` (no-op without a dict).

    Each thread keeps its own clock (worker threads start theirs with :meth:`start`); the shared dict is updated
    under a lock.
    """

    def __init__(self, timings: dict[str, float] | None) -> None:
        self.timings = timings
        self.lock = threading.Lock()
        self.clock = threading.local()
        self.start()

    def start(self) -> None:
        """Start (or restart) the calling thread's clock."""
        if self.timings is not None:
            self.clock.t = time.perf_counter()

    def __call__(self, step: str) -> None:
        if self.timings is None:
            return
        now = time.perf_counter()
        spent = now - getattr(self.clock, "t", now)
        self.clock.t = now
        with self.lock:
            self.timings[step] = self.timings.get(step, 0.0) + spent


_KERNELS = {"ready": False, "lock": threading.Lock()}


@contextmanager
def _compile_notice():
    """Around the first use of the compiled kernels in a process: if it takes over 2 s (numba compiling them, once
    after installing, rather than loading them from its cache), say so on stderr, so that the pause is explained."""
    with _KERNELS["lock"]:
        first = not _KERNELS["ready"]
        _KERNELS["ready"] = True
    if not first:
        yield
        return
    timer = threading.Timer(
        2.0, note, args=("\ncompiling the drive-time polygon kernels (numba; once after installing, about 20 s)",)
    )
    timer.daemon = True
    timer.start()
    try:
        yield
    finally:
        timer.cancel()


def _warm_caches(net: RoadNetwork, direction: str) -> None:
    """Build the network-level caches the per-base work reads (so that worker threads only read them)."""
    road_pieces(net)
    _edge_arrays(net)
    _edge_lists(net, direction)
    _piece_length(net)
    _piece_segments(net)
    _u(net)
    _v(net)


def summary_table(polygons: gpd.GeoDataFrame) -> pd.DataFrame:
    """The printed table: base, band (min), area (km²), road reached (km), rounded for display."""
    out = polygons[["base_id", "band_min", "area_km2", "road_km"]].copy()
    out.columns = ["base", "band_min", "area_km2", "road_km"]
    out["area_km2"] = out["area_km2"].round(2)
    out["road_km"] = out["road_km"].round(1)
    return out.reset_index(drop=True)


def write_polygons(polygons: gpd.GeoDataFrame, path: str | Path) -> Path:
    """Write polygons to a GeoPackage atomically: layers ``reach_by_base`` and ``reach_any_base``."""
    from coverkit.layer_names import layer_name

    path = Path(path)
    by_base = polygons[polygons["base_id"] != ANY_BASE_ID]
    anyb = polygons[polygons["base_id"] == ANY_BASE_ID]
    with atomic_path(path) as tmp, unsynced_gpkg():
        by_base.to_file(tmp, layer=layer_name("reach_by_base"), driver="GPKG")
        if len(anyb):
            anyb.to_file(tmp, layer=layer_name("reach_any_base"), driver="GPKG", mode="a")
    return path


# -- reached road pieces ------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Reached:
    """Reached road, as increments: piece ``piece`` is reached on ``[a, b]`` (fractions along the piece's geometry)
    from band ``band`` (0-based) on. The reached road of band k is the union of the rows with ``band <= k``.
    ``road_km`` (if known) is the length of that union per band (km)."""

    net: RoadNetwork
    piece: np.ndarray
    band: np.ndarray
    a: np.ndarray
    b: np.ndarray
    road_km: np.ndarray | None = None


def reached_pieces(
    net: RoadNetwork, node_s: np.ndarray, sources: Snapped, bands_s: np.ndarray, direction: str = "out"
) -> Reached:
    """Reached road increments per band from node times and the sources' own edges.

    Only the edges leaving (``"out"``; entering for ``"in"``) a node within the largest band are looked at, so the
    work follows the reached part of the network. An edge reached from its start node covers a stretch anchored at
    that end of its piece, growing band by band; the union of such stretches on a piece is one stretch from each
    end, so coverage needs no sorting. Only the few pieces that hold a source (whose stretches start part-way)
    take the general interval union.

    Parameters
    ----------
    net
        Road network.
    node_s
        Time (s) from the sources to each node (``"out"``) or from each node to the sources (``"in"``); ``inf`` if
        not reached.
    sources
        The snapped sources whose partial edges start the search (time 0 at the source point).
    bands_s
        Band limits (s), increasing.
    direction
        ``"out"`` or ``"in"``.
    """
    pieces = road_pieces(net)
    n_b = len(bands_s)
    node_s = np.asarray(node_s, dtype=float)
    ptr, e_run, e_delay, e_piece, e_rev = _edge_lists(net, direction)
    anchor = turns.edge_anchor_s(net, node_s, direction)
    if anchor is not None:
        # turns modelled: each edge is looked at from its own start time (the kernel's "node" is then the edge)
        node_s = np.ascontiguousarray(anchor[_edge_order(net, direction)])
        ptr = np.arange(len(node_s) + 1, dtype=np.int64)
    nodes = np.flatnonzero(node_s <= bands_s[-1])
    n_p = len(pieces.rep_edge)
    # per touched piece and band, the longest stretch reached from each end (the union of stretches anchored at
    # one end is the longest of them), in one compiled pass over the edges at the reached nodes
    touched, lf, rt = piece_stretches(
        nodes.astype(np.int64),
        node_s,
        direction == "in",
        ptr,
        e_run,
        e_delay,
        e_piece,
        e_rev,
        np.asarray(bands_s, dtype=np.float64),
        n_p,
    )
    mark = np.zeros(n_p, dtype=bool)
    mark[touched] = True
    local = np.zeros(n_p, dtype=np.int64)
    local[touched] = np.arange(len(touched))
    piece_len = _piece_length(net)
    piece, band, a, b, km = anchored_rows(touched, lf, rt, True, piece_len)
    # pieces holding a source take the general interval union (a source's stretch starts part-way)
    src_piece = np.unique(pieces.piece_of_edge[sources.entry_edge])
    if len(src_piece):
        held = src_piece[mark[src_piece]]
        lr = lf[local[held]] + rt[local[held]]
        km = km - (np.minimum(lr, 1.0) * piece_len[held][:, None]).sum(axis=0)
        is_src = np.zeros(n_p, dtype=bool)
        is_src[src_piece] = True
        keep = ~is_src[piece]
        lf_s = np.zeros((len(src_piece), n_b))
        rt_s = np.zeros((len(src_piece), n_b))
        lf_s[mark[src_piece]], rt_s[mark[src_piece]] = lf[local[held]], rt[local[held]]
        sp, sk, sa, sb, _ = anchored_rows(src_piece.astype(np.int64), lf_s, rt_s, False, piece_len)
        qp, qk, qa, qb = _source_rows(net, sources, bands_s, direction)
        rows, km_src = _merge_general(
            np.concatenate([sp, qp]),
            np.concatenate([sk, qk]),
            np.concatenate([sa, qa]),
            np.concatenate([sb, qb]),
            n_b,
            piece_len,
        )
        piece, band, a, b = (np.concatenate([x[keep], y]) for x, y in zip((piece, band, a, b), rows, strict=True))
        km = km + km_src
    return Reached(net, piece, band, a, b, road_km=km / 1000.0)


def _reached_fraction(run: np.ndarray, t0: np.ndarray, bands_s: np.ndarray, span: np.ndarray) -> np.ndarray:
    """Fraction of an edge reached at each band (rows: edges, cols: bands), entered at ``t0`` s, at most ``span``."""
    with np.errstate(divide="ignore", invalid="ignore"):
        ell = (bands_s[None, :] - t0[:, None]) / run[:, None]
    zero = np.flatnonzero(run <= 0)
    if len(zero):
        # an edge without running time is reached whole once its entry time is within the band
        ell[zero] = np.where(bands_s[None, :] >= t0[zero, None], 1.0, 0.0)
    return np.clip(ell, 0.0, span[:, None], out=ell)


def _source_rows(net, sources, bands_s, direction):
    """Increment rows of the stretches each source reaches along its own entry edges (time 0 at the point)."""
    pieces = road_pieces(net)
    run, _, _ = _edge_arrays(net)
    e, fa = sources.entry_edge, sources.entry_frac
    fwd = direction == "out"
    ell = _reached_fraction(run[e], np.zeros(len(e)), bands_s, 1.0 - fa if fwd else fa)
    prev = np.concatenate([np.zeros((len(e), 1)), ell[:, :-1]], axis=1)
    ri, k = np.nonzero(ell > prev)
    lo_l, hi_l, f = prev[ri, k], ell[ri, k], fa[ri]
    a, b = (f + lo_l, f + hi_l) if fwd else (f - hi_l, f - lo_l)
    rev = pieces.reversed_of_edge[e[ri]]
    return pieces.piece_of_edge[e[ri]], k, np.where(rev, 1.0 - b, a), np.where(rev, 1.0 - a, b)


def _merge_general(p, k, a, b, n_b, piece_len):
    """General union of increment rows on a few pieces: rows of a piece wholly covered from band j on become one
    ``[0, 1]`` row at band j; also the covered length per band (m)."""
    uniq, local = np.unique(p, return_inverse=True)
    full_band = np.full(len(uniq), n_b, dtype=np.int64)
    km = np.zeros(n_b)
    for j in range(n_b - 1, -1, -1):
        sel = k <= j
        cov = _covered(local[sel], a[sel], b[sel], len(uniq))
        km[j] = (cov * piece_len[uniq]).sum()
        full_band[cov >= 1.0 - 1e-9] = j
    keep = k < full_band[local]
    fi = np.flatnonzero(full_band < n_b)
    rows = (
        np.concatenate([p[keep], uniq[fi]]),
        np.concatenate([k[keep], full_band[fi]]),
        np.concatenate([a[keep], np.zeros(len(fi))]),
        np.concatenate([b[keep], np.ones(len(fi))]),
    )
    return rows, km


def _edge_arrays(net: RoadNetwork) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Running time (s, ``inf`` closed), end-node delay (s) and length (m) of every edge (cached on the network)."""
    key = "coverkit.isochrones:edge_arrays"
    if key not in net._csr_cache:
        net._csr_cache[key] = (run_s(net), np.asarray(net.edge_values("delay_s"), dtype=float), net.length_m)
    return net._csr_cache[key]


def _piece_length(net: RoadNetwork) -> np.ndarray:
    """Length (m) of every road piece (cached)."""
    key = "coverkit.isochrones:piece_length"
    if key not in net._csr_cache:
        net._csr_cache[key] = _edge_arrays(net)[2][road_pieces(net).rep_edge]
    return net._csr_cache[key]


def _edge_lists(net: RoadNetwork, direction: str) -> tuple[np.ndarray, ...]:
    """The edges leaving (``"out"``) or entering (``"in"``) each node, grouped by node (cached): ``ptr`` and, in
    that order, each edge's running time, end-node delay, road piece and whether it runs against the piece."""
    key = f"coverkit.isochrones:edge_lists:{direction}"
    if key not in net._csr_cache:
        end = _u(net) if direction == "out" else _v(net)
        order = np.argsort(end, kind="stable")
        ptr = np.concatenate([[0], np.cumsum(np.bincount(end, minlength=net.n_nodes))]).astype(np.int64)
        run, delay, _ = _edge_arrays(net)
        pieces = road_pieces(net)
        net._csr_cache[key] = (
            ptr,
            np.ascontiguousarray(run[order], dtype=np.float64),
            np.ascontiguousarray(delay[order], dtype=np.float64),
            pieces.piece_of_edge[order].astype(np.int64),
            pieces.reversed_of_edge[order].copy(),
        )
    return net._csr_cache[key]


def _edge_order(net: RoadNetwork, direction: str) -> np.ndarray:
    """The edges in the grouped order of :func:`_edge_lists` (cached)."""
    key = f"coverkit.isochrones:edge_order:{direction}"
    if key not in net._csr_cache:
        net._csr_cache[key] = np.argsort(_u(net) if direction == "out" else _v(net), kind="stable")
    return net._csr_cache[key]


def _u(net: RoadNetwork) -> np.ndarray:
    """Start node of every edge (cached: ``net.u`` converts from the table on every call)."""
    key = "coverkit.isochrones:u"
    if key not in net._csr_cache:
        net._csr_cache[key] = net.u
    return net._csr_cache[key]


def _v(net: RoadNetwork) -> np.ndarray:
    """End node of every edge (cached)."""
    key = "coverkit.isochrones:v"
    if key not in net._csr_cache:
        net._csr_cache[key] = net.v
    return net._csr_cache[key]


def _covered(p: np.ndarray, a: np.ndarray, b: np.ndarray, n_pieces: int) -> np.ndarray:
    """Fraction of each piece covered by the union of intervals ``[a, b]`` on piece ``p`` (shape (n_pieces,))."""
    out = np.zeros(n_pieces)
    if len(p) == 0:
        return out
    order = np.lexsort((a, p))
    p, a, b = p[order], a[order], b[order]
    # one running max serves all pieces: offset each piece's fractions by 2 * (rank of the piece)
    first = np.r_[True, p[1:] != p[:-1]]
    rank = np.cumsum(first) - 1
    cm = np.maximum.accumulate(b + 2.0 * rank)
    prev = np.r_[-np.inf, cm[:-1]] - 2.0 * rank
    prev[first] = -np.inf
    np.add.at(out, p, np.maximum(0.0, b - np.maximum(a, prev)))
    return out


def reached_road_km(reached: Reached, n_bands: int) -> np.ndarray:
    """Length of road reached in each band (km), each physical street counted once."""
    if reached.road_km is not None and len(reached.road_km) == n_bands:
        return np.asarray(reached.road_km, dtype=float)
    pieces = road_pieces(reached.net)
    piece_len = reached.net.length_m[pieces.rep_edge]
    out = np.zeros(n_bands)
    for k in range(n_bands):
        sel = reached.band <= k
        cov = _covered(reached.piece[sel], reached.a[sel], reached.b[sel], len(piece_len))
        out[k] = float((cov * piece_len).sum() / 1000.0)
    return out


def reached_segments(reached: Reached) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Straight segments of the reached increments.

    Returns
    -------
    xy
        Shape (S, 4): x0, y0, x1, y1 (m).
    band
        Shape (S,): the band from which each segment is reached.
    row
        Shape (S,): the increment (row of ``reached``) each segment belongs to, segments in order along it.
    """
    xy, band, row, _, _ = _clipped_segments(reached)
    return xy, band, row


def _clipped_segments(reached: Reached):
    """:func:`reached_segments` plus, per segment, the piece segment it was cut from and whether it is whole."""
    seg = _piece_segments(reached.net)
    xy, row, src, whole = clip_segments(
        reached.piece.astype(np.int64),
        reached.a.astype(np.float64),
        reached.b.astype(np.float64),
        seg["ptr"],
        seg["f0"],
        seg["f1"],
        seg["xy"],
    )
    return xy, reached.band[row].astype(np.int64), row, src, whole


def _segment_cells(net: RoadNetwork, cell_m: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Grid cells of every piece segment at ``cell_m`` (cached per network and cell size)."""
    key = f"coverkit.isochrones:segment_cells:{float(cell_m)!r}"
    if key not in net._csr_cache:
        net._csr_cache[key] = segment_cells(_piece_segments(net)["xy"], float(cell_m))
    return net._csr_cache[key]


def _piece_segments(net: RoadNetwork) -> dict:
    """Straight segments of every piece's geometry with their fraction range along the piece (cached)."""
    key = "coverkit.isochrones:segments"
    if key in net._csr_cache:
        return net._csr_cache[key]
    pieces = road_pieces(net)
    # vertices of the piece lines straight from the network (a loaded network builds no line objects for this)
    n_geoms = len(pieces.rep_edge)
    if net._lazy():
        coords, idx = net._store.edge_coords(pieces.rep_edge)
    else:
        coords, idx = shapely.get_coordinates(net.edge_geometry(pieces.rep_edge), return_index=True)
    same = idx[1:] == idx[:-1]
    start = np.flatnonzero(same)
    seg_xy = np.column_stack([coords[start], coords[start + 1]])
    seg_piece = idx[start]
    seg_len = np.hypot(seg_xy[:, 2] - seg_xy[:, 0], seg_xy[:, 3] - seg_xy[:, 1])
    total = np.bincount(seg_piece, weights=seg_len, minlength=n_geoms)
    cum = np.cumsum(seg_len)
    first_of_piece = np.r_[True, seg_piece[1:] != seg_piece[:-1]]
    base = np.maximum.accumulate(np.where(first_of_piece, cum - seg_len, 0.0))
    start_m = cum - seg_len - base
    tot = np.where(total[seg_piece] > 0, total[seg_piece], 1.0)
    f0 = start_m / tot
    f1 = np.where(total[seg_piece] > 0, (start_m + seg_len) / tot, 1.0)
    ptr = np.concatenate([[0], np.cumsum(np.bincount(seg_piece, minlength=n_geoms))])
    out = {"xy": seg_xy, "f0": f0, "f1": f1, "ptr": ptr}
    net._csr_cache[key] = out
    return out


# -- polygons ----------------------------------------------------------------------------------------------------
def band_polygons(
    reached: Reached,
    bands_s: np.ndarray,
    reach_m: float,
    exact: bool = False,
    cell_m: float | None = None,
    min_hole_km2: float = DEFAULT_MIN_HOLE_KM2,
) -> list[shapely.Geometry]:
    """One MultiPolygon per band from the reached road increments, nested, valid, small holes filled (fast grid
    construction by default, shapely buffer-and-union with ``exact=True``)."""
    n_b = len(bands_s)
    if exact:
        raw = _exact_polygons(*reached_segments(reached), n_b, reach_m)
    else:
        # nested by construction: the fields only decrease from band to band, and filling small holes keeps that
        cell_m = cell_m or reach_m * DEFAULT_CELL_PER_REACH
        fields = reach_fields(reached, n_b, reach_m, cell_m)
        return [_field_polygons(f, cell_m, reach_m, min_hole_km2 * 1e6) for f in fields]
    out: list[shapely.Geometry] = []
    prev = shapely.Polygon()
    for g in raw:
        g = _clean(g, min_hole_km2 * 1e6)
        if not prev.is_empty:
            g = _clean(shapely.union(g, prev), min_hole_km2 * 1e6)
        out.append(g)
        prev = g
    return out


def _exact_polygons(xy, band, row, n_b, reach_m) -> list[shapely.Geometry]:
    """Buffer the reached polylines of each band increment and union cumulatively (shapely 2)."""
    out = []
    acc = shapely.Polygon()
    lines = _polylines(xy, row)
    line_band = np.zeros(len(lines), dtype=np.int64)
    if len(row):
        first = np.r_[True, row[1:] != row[:-1]]
        line_band = band[first]
    for k in range(n_b):
        sel = lines[line_band == k]
        if len(sel):
            # union of per-line buffers is far faster in GEOS than buffering one multi-line
            bufs = shapely.buffer(sel, reach_m, quad_segs=8)
            acc = shapely.union_all(np.append(bufs, acc) if not acc.is_empty else bufs)
        out.append(acc)
    return out


def _polylines(xy: np.ndarray, row: np.ndarray) -> np.ndarray:
    """One linestring per increment row from its consecutive straight segments."""
    if len(row) == 0:
        return np.empty(0, dtype=object)
    first = np.r_[True, row[1:] != row[:-1]]
    n_pts = len(row) + int(first.sum())
    pts = np.empty((n_pts, 2))
    ids = np.empty(n_pts, dtype=np.int64)
    # each segment contributes its end point; the first segment of a row also its start point
    pos_end = np.arange(len(row)) + np.cumsum(first)
    pts[pos_end] = xy[:, 2:]
    ids[pos_end] = row
    pos_start = pos_end[first] - 1
    pts[pos_start] = xy[first, :2]
    ids[pos_start] = row[first]
    return shapely.linestrings(pts, indices=np.cumsum(np.r_[True, ids[1:] != ids[:-1]]) - 1)


@dataclass
class Field:
    """Distance (m) from the nodes of a square grid to a band's reached road.

    Node ``(i, j)`` of ``dist_m`` lies at ``((ix0 + j) * cell_m, (iy0 + i) * cell_m)`` in the network CRS: every
    field shares one grid anchored at the CRS origin, so fields of different bands and bases line up cell for cell.
    """

    ix0: int
    iy0: int
    dist_m: np.ndarray

    def merge_min(self, other: Field) -> None:
        """Lower this field to ``min(self, other)``, growing it to cover ``other`` first (for "any base")."""
        ny, nx = other.dist_m.shape
        x0, y0 = min(self.ix0, other.ix0), min(self.iy0, other.iy0)
        x1 = max(self.ix0 + self.dist_m.shape[1], other.ix0 + nx)
        y1 = max(self.iy0 + self.dist_m.shape[0], other.iy0 + ny)
        if (x0, y0, x1, y1) != (self.ix0, self.iy0, self.ix0 + self.dist_m.shape[1], self.iy0 + self.dist_m.shape[0]):
            grown = np.full((y1 - y0, x1 - x0), _FAR, dtype=self.dist_m.dtype)
            grown[self._slices(x0, y0)] = self.dist_m
            self.ix0, self.iy0, self.dist_m = x0, y0, grown
        sl = other._slices(self.ix0, self.iy0)
        np.minimum(self.dist_m[sl], other.dist_m, out=self.dist_m[sl])

    def _slices(self, x0: int, y0: int) -> tuple[slice, slice]:
        """Where this field sits inside a grid window whose first node is ``(x0, y0)``."""
        ny, nx = self.dist_m.shape
        return slice(self.iy0 - y0, self.iy0 - y0 + ny), slice(self.ix0 - x0, self.ix0 - x0 + nx)


#: Value of a node farther than any reach from the road (m): a stand-in for "far", above every level traced.
_FAR = FAR_M


def reach_fields(reached: Reached, n_b: int, reach_m: float, cell_m: float) -> list[Field | None]:
    """Distance from grid nodes to the reached road of each band, nested (band k never farther than band k-1).

    Near the traced ``reach_m`` level every node is on its right side of it, with its distance to the road (exact,
    or an upper bound at a few nodes where two roads lie about equally far). Two constructions, chosen by their
    estimated work: stamping each segment on the nodes around it (:func:`_stamped_fields`: exact, its work grows
    with the road in reach of each node, so it suits sparse rural roads) and a distance transform over the road's
    grid cells (:func:`_transform_fields`: its work grows with the cells, so it suits dense town grids). Each band's
    field covers the extent of its road plus ``reach_m + 2 cell_m``, so the work follows the reached extent, not the
    network; all fields share one grid anchored at the CRS origin. ``None`` for a band that reaches no road.
    """
    c = float(cell_m)
    xy, band, _, src, whole = _clipped_segments(reached)
    if len(xy) == 0:
        return [None] * n_b
    # stamping: one distance per node of each segment's box grown by the stamp radius; the transform: about
    # STAMPS_PER_CELL such distances' worth per window cell (measured on the demo county and a dense synthetic grid)
    grow = 2.0 * (reach_m + c) / c
    stamps = float(np.sum((np.abs(xy[:, 2] - xy[:, 0]) / c + grow + 1) * (np.abs(xy[:, 3] - xy[:, 1]) / c + grow + 1)))
    lo = np.minimum(xy[:, :2], xy[:, 2:]).min(axis=0)
    hi = np.maximum(xy[:, :2], xy[:, 2:]).max(axis=0)
    window_cells = float(np.prod((hi - lo) / c + 2 * ((reach_m + 2 * c) / c + 1)))
    if window_cells > MAX_FIELD_CELLS:
        raise CoverkitError(
            f"a {c:g} m grid over the {(hi[0] - lo[0]) / 1000:.0f} x {(hi[1] - lo[1]) / 1000:.0f} km a base reaches "
            f"needs {window_cells:,.0f} cells, over the {MAX_FIELD_CELLS:,} allowed; use a coarser grid (e.g. "
            f"{c * np.sqrt(window_cells / MAX_FIELD_CELLS) * 1.1:.0f} m) or shorter bands."
        )
    if stamps < STAMPS_PER_CELL * window_cells * _bands_present(band, n_b):
        return _stamped_fields(xy, band, n_b, reach_m, c)
    return _transform_fields(reached.net, xy, band, src, whole, n_b, reach_m, c)


def _bands_present(band: np.ndarray, n_b: int) -> float:
    """A rough count of the band windows a transform goes through (the later bands' windows are the larger)."""
    first = int(band.min())
    return max(1.0, 0.5 * (n_b - first))


def _stamped_fields(xy: np.ndarray, band: np.ndarray, n_b: int, reach_m: float, cell_m: float) -> list[Field | None]:
    """:func:`reach_fields` by stamping (exact within ``reach_m + cell_m``; for sparse roads).

    Per band, the field of the previous band is carried into the band's window (the extent of its road plus
    ``reach_m + 2 cell_m``; :data:`_FAR` beyond) and the segments first reached in the band are stamped on it
    (:func:`coverkit.polygon_kernels.stamp_distance`): every node within ``reach_m + cell_m`` of the road gets its
    exact distance to it, which is all the traced ``reach_m`` line reads (a grid edge crosses it only where both ends
    lie within a cell of it). Each segment is stamped once, in the band that first reaches it.
    """
    c = float(cell_m)
    out: list[Field | None] = [None] * n_b
    # the margin keeps every window edge beyond the level
    margin = int(np.ceil((reach_m + 2.0 * c) / c)) + 1
    lo = np.floor(np.minimum(xy[:, :2], xy[:, 2:]) / c).astype(np.int64)
    hi = np.ceil(np.maximum(xy[:, :2], xy[:, 2:]) / c).astype(np.int64)
    prev: Field | None = None
    ext_lo = ext_hi = None
    for k in range(n_b):
        sel = band == k
        if sel.any():
            k_lo, k_hi = lo[sel].min(axis=0), hi[sel].max(axis=0)
            ext_lo = k_lo if ext_lo is None else np.minimum(ext_lo, k_lo)
            ext_hi = k_hi if ext_hi is None else np.maximum(ext_hi, k_hi)
        if ext_lo is None:
            continue
        ix0, iy0 = int(ext_lo[0]) - margin, int(ext_lo[1]) - margin
        nx, ny = int(ext_hi[0] - ext_lo[0]) + 2 * margin + 1, int(ext_hi[1] - ext_lo[1]) + 2 * margin + 1
        dist = np.full((ny, nx), _FAR, dtype=np.float32)
        if prev is not None:
            dist[prev._slices(ix0, iy0)] = prev.dist_m
        if sel.any():
            stamp_distance(dist, ix0 * c, iy0 * c, c, xy, band, k, float(reach_m + c))
        prev = out[k] = Field(ix0, iy0, dist)
    return out


def _transform_fields(
    net: RoadNetwork, xy, band, src, whole, n_b: int, reach_m: float, cell_m: float
) -> list[Field | None]:
    """:func:`reach_fields` by a distance transform (for dense roads).

    The reached segments (:func:`reached_segments`) are put on one grid anchored at the CRS origin
    (:func:`coverkit.polygon_kernels.road_grid`); per band, a lower-envelope distance transform over the band's road
    nodes gives each grid node its nearest one, and the nodes where the traced ``reach_m`` line can fall get their
    distance to the band's segments around it, on the right side of the level everywhere
    (:func:`coverkit.polygon_kernels.band_distance`).
    """
    c = float(cell_m)
    out: list[Field | None] = [None] * n_b
    # the margin keeps every window edge beyond the level (and one cell of grid around each road node)
    margin = int(np.ceil((reach_m + 2.0 * c) / c)) + 1
    gx0 = int(np.floor(min(xy[:, 0].min(), xy[:, 2].min()) / c)) - margin
    gy0 = int(np.floor(min(xy[:, 1].min(), xy[:, 3].min()) / c)) - margin
    gnx = int(np.ceil(max(xy[:, 0].max(), xy[:, 2].max()) / c)) + margin - gx0 + 1
    gny = int(np.ceil(max(xy[:, 1].max(), xy[:, 3].max()) / c)) + margin - gy0 + 1
    cell_ptr, cell_x, cell_y = _segment_cells(net, c)
    label, bits, head, link, link_seg, extent = road_grid(
        xy, band, src, whole, cell_ptr, cell_x, cell_y, n_b, c, gx0, gy0, gnx, gny
    )
    prev: Field | None = None
    for k in range(n_b):
        if extent[k, 0] < 0:
            continue
        wx0, wy0 = int(extent[k, 0]) - margin, int(extent[k, 1]) - margin
        wnx = int(extent[k, 2] - extent[k, 0]) + 2 * margin + 1
        wny = int(extent[k, 3] - extent[k, 1]) + 2 * margin + 1
        if prev is None:
            p_arr, p_dx, p_dy = np.zeros((0, 0), dtype=np.float32), 0, 0
        else:
            p_arr, p_dx, p_dy = prev.dist_m, prev.ix0 - (wx0 + gx0), prev.iy0 - (wy0 + gy0)
        dist = band_distance(
            label,
            bits,
            k,
            wx0,
            wy0,
            wnx,
            wny,
            head,
            link,
            link_seg,
            xy,
            band,
            gx0,
            gy0,
            c,
            float(reach_m),
            p_arr,
            p_dx,
            p_dy,
        )
        field = Field(wx0 + gx0, wy0 + gy0, dist)
        if prev is not None:
            s_ = prev._slices(field.ix0, field.iy0)
            np.minimum(dist[s_], prev.dist_m, out=dist[s_])
        prev = out[k] = field
    return out


def _field_polygons(field: Field | None, cell_m: float, level_m: float, min_hole_m2: float) -> shapely.Geometry:
    """The region ``dist <= level_m`` of a field as a valid MultiPolygon, holes under ``min_hole_m2`` filled.

    The level line is traced by marching squares with linear interpolation
    (:func:`coverkit.polygon_kernels.trace_level`), so it falls between grid nodes where the distance crosses the
    level. Its rings are disjoint, anticlockwise around the region and clockwise around holes, so the MultiPolygon is
    assembled directly: each hole goes to the smallest outer ring that contains it (no union).
    """
    if field is None:
        return shapely.MultiPolygon()
    pts, offs, area = trace_level(
        np.ascontiguousarray(field.dist_m, dtype=np.float32),
        float(level_m),
        field.ix0 * cell_m,
        field.iy0 * cell_m,
        float(cell_m),
        _CASE_SEGMENTS,
    )
    if len(area) == 0:
        return shapely.MultiPolygon()
    n_ring = len(area)
    rings = shapely.linearrings(pts, indices=np.repeat(np.arange(n_ring), np.diff(offs)))
    shell = np.flatnonzero(area > 0)
    kept_hole = np.flatnonzero((area < 0) & (-area >= min_hole_m2))
    filled = np.flatnonzero((area < 0) & (-area < min_hole_m2))
    owner = np.full(n_ring, -1, dtype=np.int64)
    owner[shell] = shell
    if len(shell) > 1 and len(filled):
        # an outer ring lying inside a hole that is filled is covered twice: drop it (its holes go with it)
        # whole rings, not their first points: a ring's first point may lie on another ring where the two touch
        # (a node exactly at the level, e.g. a pinch between two road ends 2 * reach apart)
        inside, _ = shapely.STRtree(shapely.polygons(rings[filled])).query(
            shapely.polygons(rings[shell]), predicate="covered_by"
        )
        owner[shell[np.unique(inside)]] = -1
    if len(kept_hole) and len(shell) == 1:
        owner[kept_hole] = shell[0]
    elif len(kept_hole):
        live = shell[owner[shell] >= 0]
        h, sh = shapely.STRtree(shapely.polygons(rings[live])).query(
            shapely.polygons(rings[kept_hole]), predicate="covered_by"
        )
        # nested islands: the smallest containing outer ring is the hole's own
        order = np.lexsort((area[live[sh]], h))
        h, sh = h[order], sh[order]
        first = np.ones(len(h), dtype=bool)
        first[1:] = h[1:] != h[:-1]
        owner[kept_hole[h[first]]] = live[sh[first]]
        if (owner[kept_hole] < 0).any():
            # not expected (rings are nested); never drop a hole silently: the region is the xor of its rings
            keep = np.r_[live, kept_hole]
            return _clean(shapely.symmetric_difference_all(shapely.polygons(rings[keep])), min_hole_m2)
    sel = np.flatnonzero(owner >= 0)
    # each polygon's outer ring first, then its holes
    sel = sel[np.lexsort((area[sel] < 0, owner[sel]))]
    polys = shapely.polygons(rings[sel], indices=np.unique(owner[sel], return_inverse=True)[1])
    out = shapely.multipolygons(polys)
    if not shapely.is_valid(out):
        out = _clean(out, min_hole_m2)
    return out


def _clean(geom: shapely.Geometry, min_hole_m2: float) -> shapely.Geometry:
    """Valid polygonal geometry with holes smaller than ``min_hole_m2`` filled."""
    if geom.is_empty:
        return shapely.MultiPolygon()
    if not geom.is_valid:
        geom = shapely.make_valid(geom)
    parts = shapely.get_parts(geom)
    parts = parts[np.isin(shapely.get_type_id(parts), [3])]  # polygons only (make_valid may add lines)
    if geom.geom_type == "GeometryCollection":
        parts = np.concatenate([shapely.get_parts(p) for p in shapely.get_parts(geom) if p.area > 0] or [parts])
        parts = parts[shapely.get_type_id(parts) == 3]
    if len(parts) == 0:
        return shapely.MultiPolygon()
    rings, idx = shapely.get_rings(parts, return_index=True)
    first = np.r_[True, idx[1:] != idx[:-1]]
    ring_area = shapely.area(shapely.polygons(rings))
    keep = first | (ring_area >= min_hole_m2)
    polys = shapely.polygons(rings[keep], indices=idx[keep])
    out = shapely.union_all(polys) if len(polys) > 1 else polys[0]
    if not out.is_valid:
        out = shapely.make_valid(out)
    if out.geom_type == "Polygon":
        out = shapely.MultiPolygon([out])
    return out


# -- travel-time surface -----------------------------------------------------------------------------------------
def write_travel_surface(
    net: RoadNetwork,
    bases: gpd.GeoDataFrame | Snapped,
    path: str | Path,
    max_minutes: float,
    cell_m: float = DEFAULT_SURFACE_CELL_M,
    reach_m: float = DEFAULT_REACH_M,
    base_id: str | None = None,
    direction: str = "out",
    max_snap_m: float = DEFAULT_MAX_SNAP_M,
) -> Path:
    """Write a GeoTIFF of minutes to the nearest base (or from one base), atomically.

    A cell's value is the least travel time (minutes) of the reached road in the cells whose centres lie within
    ``reach_m`` of its centre (road sampled every half cell with exact times) - the polygons' rule at the cell
    size; cells beyond ``max_minutes`` hold nodata (:data:`SURFACE_NODATA`).

    Parameters
    ----------
    net, bases, direction, max_snap_m, reach_m
        As in :func:`drive_time_polygons`.
    path
        Output ``.tif``.
    max_minutes
        Largest band (minutes); the search bound.
    cell_m
        Cell size (m), default 50.
    base_id
        Only this base (default: nearest of all bases).
    """
    surface, transform = travel_surface(net, bases, max_minutes, cell_m, reach_m, base_id, direction, max_snap_m)
    import rasterio

    path = Path(path)
    with atomic_path(path) as tmp:
        with rasterio.open(
            tmp,
            "w",
            driver="GTiff",
            height=surface.shape[0],
            width=surface.shape[1],
            count=1,
            dtype="float32",
            crs=net.crs.to_wkt(),
            transform=transform,
            nodata=SURFACE_NODATA,
            compress="deflate",
        ) as dst:
            dst.write(surface, 1)
            dst.update_tags(units="minutes", reach_m=str(reach_m), direction=direction)
            dst.set_band_description(1, "travel time (minutes)")
    return path


def travel_surface(
    net: RoadNetwork,
    bases: gpd.GeoDataFrame | Snapped,
    max_minutes: float,
    cell_m: float = DEFAULT_SURFACE_CELL_M,
    reach_m: float = DEFAULT_REACH_M,
    base_id: str | None = None,
    direction: str = "out",
    max_snap_m: float = DEFAULT_MAX_SNAP_M,
):
    """The travel-time surface as a float32 array (minutes, nodata :data:`SURFACE_NODATA`) and its affine transform.

    See :func:`write_travel_surface`.
    """
    from affine import Affine
    from scipy.ndimage import minimum_filter

    limit_s = float(_bands_s([max_minutes])[-1])
    if not (cell_m > 0 and np.isfinite(cell_m)):
        raise CoverkitError(f"surface cell size {cell_m} m must be a positive number of metres (e.g. 50).")
    snapped = _snap_bases(net, bases, max_snap_m)
    if base_id is not None:
        match = np.flatnonzero(snapped.ids.astype(str) == str(base_id))
        if len(match) == 0:
            raise CoverkitError(f"base '{base_id}' is not in the bases file; give one of its ids.")
        snapped = snapped.subset(match[:1])
    d, _ = nearest_node_times(net, snapped, limit_s, direction=direction, states=True)
    with _compile_notice():
        reached = reached_pieces(net, d, snapped, np.array([limit_s]), direction)
    # sample reached road every cell/2 with exact times; the time of a sample is its minimum over increments
    seg = _piece_segments(net)
    pieces = road_pieces(net)
    piece_len = np.maximum(net.length_m[pieces.rep_edge], 1e-9)
    step_m = cell_m / 2.0
    n_s = np.maximum(np.ceil((reached.b - reached.a) * piece_len[reached.piece] / step_m), 1).astype(np.int64) + 1
    r = np.repeat(np.arange(len(reached.piece)), n_s)
    j = np.arange(n_s.sum()) - np.repeat(np.cumsum(n_s) - n_s, n_s)
    f = reached.a[r] + (reached.b[r] - reached.a[r]) * j / (n_s[r] - 1)
    t_s = _time_at(net, d, snapped, reached.piece[r], f, direction)
    p = reached.piece[r]
    pts = _interp_on_pieces(seg, p, f)
    if len(pts) == 0:
        raise CoverkitError("no road is reached within the surface time; raise max_minutes.")
    margin = reach_m + cell_m
    x0 = np.floor((pts[:, 0].min() - margin) / cell_m) * cell_m
    y1 = np.ceil((pts[:, 1].max() + margin) / cell_m) * cell_m
    nx = int(np.ceil((pts[:, 0].max() + margin - x0) / cell_m))
    ny = int(np.ceil((y1 - (pts[:, 1].min() - margin)) / cell_m))
    col = np.clip(((pts[:, 0] - x0) / cell_m).astype(np.int64), 0, nx - 1)
    row = np.clip(((y1 - pts[:, 1]) / cell_m).astype(np.int64), 0, ny - 1)
    grid = np.full(ny * nx, np.inf)
    np.minimum.at(grid, row * nx + col, t_s)
    rad = int(np.floor(reach_m / cell_m))
    yy, xx = np.mgrid[-rad : rad + 1, -rad : rad + 1]
    footprint = (xx * xx + yy * yy) * cell_m * cell_m <= reach_m * reach_m
    grid = minimum_filter(grid.reshape(ny, nx), footprint=footprint, mode="constant", cval=np.inf)
    minutes = np.where(grid <= limit_s, grid / 60.0, SURFACE_NODATA).astype(np.float32)
    return minutes, Affine(cell_m, 0.0, x0, 0.0, -cell_m, y1)


def _time_at(net, node_s, sources, piece, f, direction) -> np.ndarray:
    """Least time (s) at fraction ``f`` of ``piece`` over the piece's directed edges and the sources on it."""
    pieces = road_pieces(net)
    run = run_s(net)
    delay = np.asarray(net.edge_values("delay_s"), dtype=float)
    best = np.full(len(piece), np.inf)
    cnt = pieces.members_ptr[piece + 1] - pieces.members_ptr[piece]
    idx = np.repeat(np.arange(len(piece)), cnt)
    e = pieces.members[
        np.repeat(pieces.members_ptr[piece], cnt) + np.arange(cnt.sum()) - np.repeat(np.cumsum(cnt) - cnt, cnt)
    ]
    fe = np.where(pieces.reversed_of_edge[e], 1.0 - f[idx], f[idx])
    anchor = turns.edge_anchor_s(net, node_s, direction)
    if anchor is None:
        anchor = node_s[net.u] if direction == "out" else node_s[net.v]
    if direction == "out":
        t = anchor[e] + fe * run[e]
    else:
        t = anchor[e] + delay[e] + (1.0 - fe) * run[e]
    np.minimum.at(best, idx, t)
    # source points on the piece: along their own edge in the driving direction
    sp_e = sources.entry_edge
    sp_piece = pieces.piece_of_edge[sp_e]
    order = np.argsort(piece, kind="stable")
    ps = piece[order]
    lo = np.searchsorted(ps, sp_piece, "left")
    hi = np.searchsorted(ps, sp_piece, "right")
    c = hi - lo
    k = np.repeat(np.arange(len(sp_e)), c)
    sample = order[np.repeat(lo, c) + np.arange(c.sum()) - np.repeat(np.cumsum(c) - c, c)]
    ek = sp_e[k]
    fe = np.where(pieces.reversed_of_edge[ek], 1.0 - f[sample], f[sample])
    ahead = fe - sources.entry_frac[k] if direction == "out" else sources.entry_frac[k] - fe
    ok = ahead >= 0
    np.minimum.at(best, sample[ok], ahead[ok] * run[ek[ok]])
    return best


def _interp_on_pieces(seg: dict, piece: np.ndarray, f: np.ndarray) -> np.ndarray:
    """Coordinates of fraction ``f`` along each piece's geometry (vectorised)."""
    if len(piece) == 0:
        return np.zeros((0, 2))
    # segment containing f: search within each piece's contiguous segment range
    lo, hi = seg["ptr"][piece], seg["ptr"][piece + 1] - 1
    f1 = seg["f1"]
    # global search on (piece offset + f): f1 increases within a piece; add piece index to make it global
    seg_piece = np.repeat(np.arange(len(seg["ptr"]) - 1), np.diff(seg["ptr"]))
    key = seg_piece * 2.0 + f1
    s = np.clip(np.searchsorted(key, piece * 2.0 + f, side="left"), lo, hi)
    f0 = seg["f0"][s]
    w = np.where(f1[s] > f0, f1[s] - f0, 1.0)
    t = np.clip((f - f0) / w, 0.0, 1.0)[:, None]
    return seg["xy"][s, :2] + t * (seg["xy"][s, 2:] - seg["xy"][s, :2])


# -- helpers ----------------------------------------------------------------------------------------------------
def _bands_s(minutes) -> np.ndarray:
    try:
        m = np.unique(np.asarray(list(minutes), dtype=float))
    except (TypeError, ValueError):
        raise CoverkitError(f"bands {minutes!r} are not numbers; give minutes such as 4,8,12.") from None
    if len(m) == 0 or not np.isfinite(m).all() or (m <= 0).any():
        raise CoverkitError(f"bands {list(minutes)!r} must be positive minutes, such as 4,8,12.")
    if len(m) > MAX_BANDS:
        raise CoverkitError(f"{len(m)} bands given; at most {MAX_BANDS} are supported (e.g. one per minute to 60).")
    return m * 60.0


def _snap_bases(net: RoadNetwork, bases, max_snap_m: float) -> Snapped:
    if isinstance(bases, Snapped):
        return bases
    if len(bases) == 0:
        raise CoverkitError("no bases given; the bases file must hold at least one row.")
    return snap_points(net, bases, max_snap_m=max_snap_m, off_network="raise", what="bases")
