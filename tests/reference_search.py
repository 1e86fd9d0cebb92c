"""An independent travel-time reference for the tests: it shares no code with coverkit's search or snapping.

It reads the network as coverkit *exports* it (the ``nodes`` and ``edges`` layers of the saved GeoPackage, read back
with pyogrio), groups opposite directed edges into roads, snaps points to the nearest road with shapely's STRtree
and searches with a plain binary-heap Dijkstra (Python's ``heapq``; E. W. Dijkstra (1959), "A note on two problems
in connexion with graphs", Numerische Mathematik 1). No scipy.sparse.csgraph, no ``RoadNetwork.to_networkx()``, no
``coverkit.travel``.

Time conventions it implements, as documented for users (README / ``coverkit.travel.search``): an edge's
``travel_s`` is its running time spread evenly along its length plus its ``delay_s`` paid only when the end node is
passed; a point part-way along an edge is reached after the matching share of the running time.
"""

from __future__ import annotations

import heapq
import importlib.util
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyogrio
import shapely
import shapely.ops

REPO = Path(__file__).resolve().parents[1]


def synthetic_network(**kwargs):
    """The benchmark's 90,000-node synthetic county (``benchmarks/bench_isochrones.py``), imported from its one
    home so the tests and the benchmark time the same network."""
    spec = importlib.util.spec_from_file_location("_bench_isochrones", REPO / "benchmarks" / "bench_isochrones.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod.synthetic_network(**kwargs)


@dataclass
class Exported:
    """Arrays read back from a saved network GeoPackage."""

    xy: np.ndarray
    u: np.ndarray
    v: np.ndarray
    travel_s: np.ndarray
    delay_s: np.ndarray
    length_m: np.ndarray
    geometry: np.ndarray
    signal: np.ndarray

    @property
    def run_s(self) -> np.ndarray:
        """Running time without the end-node delay (s)."""
        return np.where(np.isfinite(self.travel_s), self.travel_s - self.delay_s, np.inf)


def read_exported(gpkg: Path) -> Exported:
    """The ``nodes`` and ``edges`` layers of a network GeoPackage written by ``RoadNetwork.save``."""
    nodes = pyogrio.read_dataframe(gpkg, layer="nodes")
    edges = pyogrio.read_dataframe(gpkg, layer="edges")
    order = np.argsort(nodes["node"].to_numpy())
    xy = np.column_stack([nodes["x"].to_numpy(float), nodes["y"].to_numpy(float)])[order]
    return Exported(
        xy=xy,
        u=edges["u"].to_numpy(np.int64),
        v=edges["v"].to_numpy(np.int64),
        travel_s=edges["travel_s"].to_numpy(float),
        delay_s=edges["delay_s"].to_numpy(float),
        length_m=edges["length_m"].to_numpy(float),
        geometry=edges.geometry.to_numpy(),
        signal=nodes["signal"].to_numpy(bool)[order],
    )


class HeapGraph:
    """Adjacency lists of the open directed edges, for a heap Dijkstra."""

    def __init__(self, ex: Exported) -> None:
        ok = np.isfinite(ex.travel_s)
        self.n = len(ex.xy)
        self.adj: list[list[tuple[int, float]]] = [[] for _ in range(self.n)]
        for a, b, w in zip(ex.u[ok].tolist(), ex.v[ok].tolist(), ex.travel_s[ok].tolist(), strict=True):
            self.adj[a].append((b, w))

    def search(self, seeds: list[tuple[int, float]], limit_s: float = np.inf) -> np.ndarray:
        """Shortest times from initial labels ``(node, time_s)``; ``inf`` beyond ``limit_s``."""
        dist = np.full(self.n, np.inf)
        best: dict[int, float] = {}
        heap = []
        for node, t in seeds:
            if t <= limit_s and t < best.get(node, np.inf):
                best[node] = t
                heapq.heappush(heap, (t, node))
        done = set()
        adj = self.adj
        while heap:
            d, x = heapq.heappop(heap)
            if x in done:
                continue
            done.add(x)
            dist[x] = d
            for y, w in adj[x]:
                nd = d + w
                if nd <= limit_s and nd < best.get(y, np.inf):
                    best[y] = nd
                    heapq.heappush(heap, (nd, y))
        return dist


@dataclass
class Roads:
    """Undirected roads: the geometry drawn from end ``a`` to end ``b``, and the directed edge each way (-1: none)."""

    a: np.ndarray
    b: np.ndarray
    geometry: np.ndarray
    fwd: np.ndarray
    bwd: np.ndarray
    length_m: np.ndarray


def roads_of(ex: Exported) -> Roads:
    """Pair each directed edge with its opposite twin (same end nodes, same length to 1e-6 relative)."""
    ok = np.isfinite(ex.travel_s)
    idx = np.flatnonzero(ok)
    lo, hi = np.minimum(ex.u[idx], ex.v[idx]), np.maximum(ex.u[idx], ex.v[idx])
    key = np.round(ex.length_m[idx], 3)
    order = np.lexsort((ex.u[idx] != lo, key, hi, lo))
    idx, lo, hi, key = idx[order], lo[order], hi[order], key[order]
    a_list, b_list, geom, fwd, bwd, length = [], [], [], [], [], []
    i = 0
    n = len(idx)
    while i < n:
        j = i + 1
        while j < n and lo[j] == lo[i] and hi[j] == hi[i] and key[j] == key[i]:
            j += 1
        group = idx[i:j]
        first = group[0]
        a, b = int(ex.u[first]), int(ex.v[first])
        f = [e for e in group if ex.u[e] == a]
        r = [e for e in group if ex.u[e] == b and ex.v[e] == a]
        a_list.append(a)
        b_list.append(b)
        geom.append(ex.geometry[first])
        fwd.append(min(f, key=lambda e: ex.travel_s[e]))
        bwd.append(min(r, key=lambda e: ex.travel_s[e]) if r and a != b else -1)
        length.append(ex.length_m[first])
        i = j
    return Roads(
        np.array(a_list),
        np.array(b_list),
        np.array(geom, dtype=object),
        np.array(fwd),
        np.array(bwd),
        np.array(length),
    )


@dataclass
class Snap:
    """Points on roads: road index, share ``s`` of the road's length from end ``a``, distance to the road (m)."""

    road: np.ndarray
    s: np.ndarray
    dist_m: np.ndarray


def snap(roads: Roads, xy: np.ndarray) -> Snap:
    """Nearest road by shapely's STRtree (exact distance to the line geometry), position by ``line_locate_point``."""
    tree = shapely.STRtree(roads.geometry)
    pts = shapely.points(xy)
    (pi, ri), dist = tree.query_nearest(pts, return_distance=True, all_matches=False)
    road = np.full(len(xy), -1)
    d = np.full(len(xy), np.inf)
    road[pi] = ri
    d[pi] = dist
    s = shapely.line_locate_point(roads.geometry[road], pts, normalized=True)
    return Snap(road, np.clip(s, 0.0, 1.0), d)


def base_seeds(ex: Exported, roads: Roads, sn: Snap, i: int) -> list[tuple[int, float]]:
    """Initial labels of a trip leaving point ``i``: to ``b`` along the forward edge, to ``a`` along the backward one,
    each paying the rest of the running time plus the end node's delay."""
    r, s = sn.road[i], sn.s[i]
    run = ex.run_s
    out = []
    if roads.fwd[r] >= 0:
        e = roads.fwd[r]
        out.append((int(roads.b[r]), (1.0 - s) * run[e] + ex.delay_s[e]))
    if roads.bwd[r] >= 0:
        e = roads.bwd[r]
        out.append((int(roads.a[r]), s * run[e] + ex.delay_s[e]))
    return out


def target_times(ex: Exported, roads: Roads, dist: np.ndarray, tg: Snap, src: Snap | None = None, i: int = -1):
    """Times to target points from node times ``dist``: via ``a`` plus ``s`` of the forward run, via ``b`` plus
    ``1 - s`` of the backward run (no end-node delay: the point is reached before the end node), and, when source
    point ``i`` of ``src`` lies on the same road, straight along it in an allowed direction."""
    run = ex.run_s
    r, s = tg.road, tg.s
    f, b = roads.fwd[r], roads.bwd[r]
    t = np.full(len(r), np.inf)
    has_f, has_b = f >= 0, b >= 0
    t[has_f] = dist[roads.a[r[has_f]]] + s[has_f] * run[f[has_f]]
    t[has_b] = np.minimum(t[has_b], dist[roads.b[r[has_b]]] + (1.0 - s[has_b]) * run[b[has_b]])
    if src is not None:
        same = r == src.road[i]
        s0 = src.s[i]
        ahead = same & has_f & (s >= s0)
        t[ahead] = np.minimum(t[ahead], (s[ahead] - s0) * run[f[ahead]])
        behind = same & has_b & (s <= s0)
        t[behind] = np.minimum(t[behind], (s0 - s[behind]) * run[b[behind]])
    return t


def reversed_edges(ex: Exported) -> Exported:
    """The same edges turned round (u and v swapped), for searches toward a point ("in" direction)."""
    return Exported(ex.xy, ex.v, ex.u, ex.travel_s, ex.delay_s, ex.length_m, ex.geometry, ex.signal)


def inbound_seeds(ex: Exported, roads: Roads, sn: Snap, i: int) -> list[tuple[int, float]]:
    """Initial labels of a search on the reversed edges toward point ``i``: the point is reached from end ``a``
    after ``s`` of the forward run, from ``b`` after ``1 - s`` of the backward run (no delay: the end node is not
    passed)."""
    r, s = sn.road[i], sn.s[i]
    run = ex.run_s
    out = []
    if roads.fwd[r] >= 0:
        out.append((int(roads.a[r]), s * run[roads.fwd[r]]))
    if roads.bwd[r] >= 0:
        out.append((int(roads.b[r]), (1.0 - s) * run[roads.bwd[r]]))
    return out


def inbound_times(ex: Exported, roads: Roads, dist_rev: np.ndarray, tg: Snap, src: Snap, i: int) -> np.ndarray:
    """Times from target points to source point ``i`` given the reversed search's node times ``dist_rev``: leaving
    toward ``b`` costs ``1 - s`` of the forward run plus its end delay, toward ``a`` ``s`` of the backward run plus
    its delay; straight along a shared road in an allowed direction."""
    run = ex.run_s
    r, s = tg.road, tg.s
    f, b = roads.fwd[r], roads.bwd[r]
    t = np.full(len(r), np.inf)
    hf, hb = f >= 0, b >= 0
    t[hf] = dist_rev[roads.b[r[hf]]] + (1.0 - s[hf]) * run[f[hf]] + ex.delay_s[f[hf]]
    t[hb] = np.minimum(t[hb], dist_rev[roads.a[r[hb]]] + s[hb] * run[b[hb]] + ex.delay_s[b[hb]])
    same = r == src.road[i]
    s0 = src.s[i]
    ahead = same & hf & (s <= s0)
    t[ahead] = np.minimum(t[ahead], (s0 - s[ahead]) * run[f[ahead]])
    behind = same & hb & (s >= s0)
    t[behind] = np.minimum(t[behind], (s[behind] - s0) * run[b[behind]])
    return t


def reached_lines(ex: Exported, roads: Roads, dist: np.ndarray, limit_s: float, src: Snap, i: int) -> np.ndarray:
    """The road stretches reached within ``limit_s`` from source point ``i``, as line geometries.

    A road is reached from end ``a`` over the first ``(limit - dist[a]) / run`` of its length along the forward
    edge, from ``b`` likewise backward, and from the source itself when it lies on the road. The reached share of
    each road is the union of those intervals (each interval starts at an end or at the source)."""
    run = ex.run_s
    n = len(roads.a)
    lo_parts: list[tuple[np.ndarray, np.ndarray, np.ndarray]] = []
    f, b = roads.fwd, roads.bwd
    has_f = f >= 0
    has_b = b >= 0
    # from a (share 0 .. x), from b (share 1 - y .. 1)
    x = np.zeros(n)
    x[has_f] = np.clip((limit_s - dist[roads.a[has_f]]) / run[f[has_f]], 0.0, 1.0)
    x[has_f & ~np.isfinite(dist[roads.a])] = 0.0
    y = np.zeros(n)
    y[has_b] = np.clip((limit_s - dist[roads.b[has_b]]) / run[b[has_b]], 0.0, 1.0)
    y[has_b & ~np.isfinite(dist[roads.b])] = 0.0
    ra = has_f & (x > 0)
    rb = has_b & (y > 0)
    ids = np.arange(n)
    lo_parts.append((ids[ra], np.zeros(ra.sum()), x[ra]))
    lo_parts.append((ids[rb], 1.0 - y[rb], np.ones(rb.sum())))
    r0, s0 = src.road[i], src.s[i]
    if f[r0] >= 0:
        lo_parts.append((np.array([r0]), np.array([s0]), np.array([min(1.0, s0 + limit_s / run[f[r0]])])))
    if b[r0] >= 0:
        lo_parts.append((np.array([r0]), np.array([max(0.0, s0 - limit_s / run[b[r0]])]), np.array([s0])))
    road = np.concatenate([p[0] for p in lo_parts])
    start = np.concatenate([p[1] for p in lo_parts])
    end = np.concatenate([p[2] for p in lo_parts])
    whole = (start <= 0.0) & (end >= 1.0)
    lines = list(roads.geometry[road[whole]])
    for r, s_a, s_b in zip(road[~whole], start[~whole], end[~whole], strict=True):
        if s_b > s_a:
            lines.append(shapely.ops.substring(roads.geometry[r], s_a, s_b, normalized=True))
    return np.array(lines, dtype=object)


def reached_length_m(ex: Exported, roads: Roads, dist: np.ndarray, limit_s: float, src: Snap, i: int) -> float:
    """Length of road reached within ``limit_s`` (each road once): per road the measure of the union of its reached
    intervals, times its length (interval arithmetic; no geometry, so no double counting of overlapping pieces)."""
    run = ex.run_s
    f, b = roads.fwd, roads.bwd
    n = len(roads.a)
    x = np.zeros(n)
    y = np.zeros(n)
    with np.errstate(invalid="ignore"):
        x[f >= 0] = np.clip((limit_s - dist[roads.a[f >= 0]]) / run[f[f >= 0]], 0.0, 1.0)
        y[b >= 0] = np.clip((limit_s - dist[roads.b[b >= 0]]) / run[b[b >= 0]], 0.0, 1.0)
    x[~np.isfinite(x)] = 0.0
    y[~np.isfinite(y)] = 0.0
    share = np.minimum(1.0, x + y)
    r0, s0 = src.road[i], src.s[i]
    pieces = [(0.0, x[r0]), (1.0 - y[r0], 1.0)]
    if f[r0] >= 0:
        pieces.append((s0, min(1.0, s0 + limit_s / run[f[r0]])))
    if b[r0] >= 0:
        pieces.append((max(0.0, s0 - limit_s / run[b[r0]]), s0))
    total, end = 0.0, 0.0
    for lo, hi in sorted(p for p in pieces if p[1] > p[0]):
        lo = max(lo, end)
        if hi > lo:
            total += hi - lo
            end = hi
    share[r0] = total
    return float((share * roads.length_m).sum())


def fill_small_holes(geom, min_hole_m2: float):
    """Drop interior rings smaller than ``min_hole_m2`` (what the documented polygon fills)."""
    parts = shapely.get_parts(geom)
    out = []
    for p in parts:
        rings = [r for r in p.interiors if shapely.Polygon(r).area >= min_hole_m2]
        out.append(shapely.Polygon(p.exterior, rings))
    return shapely.union_all(out)


def iou(a, b) -> float:
    """Intersection over union of two areal geometries."""
    return float(shapely.intersection(a, b).area / shapely.union(a, b).area)
