"""Snapping points to the nearest road edge, with the position along it.

A point is snapped to the nearest *physical* road piece (a two-way street is one piece carried by two directed
edges, ``u -> v`` and its twin ``v -> u``). Every directed edge of that piece becomes an *entry* of the point,
with the fraction of the way along that edge, so travel to or from the point includes the partial edge in each
direction the street allows: a point on a one-way edge has a single entry, so it is entered only from the edge's
start and left only toward its end.

Snapping looks at the road geometry only, never at closures: a point keeps its road when the road is closed (the
searches then reach it along the open stub it sits on, or not at all), so a closure can never move a point onto
another road and shorten its time. The pieces and the snap index are therefore built once per geometry and shared
by every copy of a network with changed times.
"""

from __future__ import annotations

import hashlib
from collections.abc import Callable
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import shapely
from scipy.sparse.csgraph import connected_components

from coverkit import settings
from coverkit.errors import OffNetworkError
from coverkit.network.model import GEOMETRY_CACHE, RoadNetwork
from coverkit.progress import warn
from coverkit.travel.grid_index import GridIndex, build_grid_index, grid_nearest

#: Default snap limit (m): a point farther than this from any road is off-network.
DEFAULT_MAX_SNAP_M = settings.SNAP_M

#: Relative tolerance on length for two opposite directed edges to count as one two-way street.
_TWIN_REL_TOL = 1e-6

#: A snapped position this close to an end of its edge (m) is that junction (its fraction becomes exactly 0 or 1):
#: rounding only (1 micrometre), so no point really part-way along a street is moved.
JUNCTION_TOL_M = 1e-6


def at_junctions(net: RoadNetwork, edge: np.ndarray, frac: np.ndarray) -> np.ndarray:
    """``frac`` along ``edge`` with positions within :data:`JUNCTION_TOL_M` of an edge end put exactly on it.

    A point at the end of an edge *is* the junction, whichever street it was snapped to, and the searches give it
    the junction's time (:func:`coverkit.travel.search.seeds`); the tolerance absorbs the rounding of projecting
    a node's own coordinates onto a line.
    """
    tol = JUNCTION_TOL_M / np.maximum(net.length_m[edge], JUNCTION_TOL_M)
    return np.where(frac <= tol, 0.0, np.where(frac >= 1.0 - tol, 1.0, frac))


@dataclass(frozen=True)
class Snapped:
    """Points snapped to a road network.

    Per-point arrays have length ``n`` (one per input point, in input order); entry arrays have one row per
    usable directed edge of each snapped point, sorted by point then edge.

    Attributes
    ----------
    ids
        Point ids as given (object array).
    on_network
        ``True`` where the point lies within the snap limit of a road.
    edge
        The snapped directed edge (lowest edge id of the piece), ``-1`` off-network.
    frac
        Fraction of the way along ``edge`` from its start node (0..1), NaN off-network.
    offset_m
        Distance along ``edge`` from its start node (m, from the edge's ``length_m``), NaN off-network.
    dist_m
        Distance from the point to the nearest road (m); also filled for off-network points.
    x, y
        The snapped position on the road (m, network CRS), NaN off-network.
    entry_point, entry_edge, entry_frac
        For each usable directed edge of each on-network point: the point index, the edge id, and the fraction
        along that edge (the twin of a two-way street has ``1 - frac``).
    max_snap_m
        The snap limit used (m).
    """

    ids: np.ndarray
    on_network: np.ndarray
    edge: np.ndarray
    frac: np.ndarray
    offset_m: np.ndarray
    dist_m: np.ndarray
    x: np.ndarray
    y: np.ndarray
    entry_point: np.ndarray
    entry_edge: np.ndarray
    entry_frac: np.ndarray
    max_snap_m: float

    def __len__(self) -> int:
        return len(self.ids)

    def subset(self, index: np.ndarray) -> Snapped:
        """The snapped points at positions ``index`` (renumbered 0..len(index)-1, in that order)."""
        index = np.asarray(index, dtype=np.int64)
        new_pos = np.full(len(self), -1, dtype=np.int64)
        new_pos[index] = np.arange(len(index))
        keep = new_pos[self.entry_point] >= 0
        ep = new_pos[self.entry_point[keep]]
        if len(index) < 2 or bool(np.all(index[1:] > index[:-1])):
            order = slice(None)  # an increasing index keeps the (point, edge) order of the entries: no sort
        else:
            order = np.lexsort((self.entry_edge[keep], ep))
        return Snapped(
            ids=self.ids[index],
            on_network=self.on_network[index],
            edge=self.edge[index],
            frac=self.frac[index],
            offset_m=self.offset_m[index],
            dist_m=self.dist_m[index],
            x=self.x[index],
            y=self.y[index],
            entry_point=ep[order],
            entry_edge=self.entry_edge[keep][order],
            entry_frac=self.entry_frac[keep][order],
            max_snap_m=self.max_snap_m,
        )


@dataclass(frozen=True)
class RoadPieces:
    """Directed edges grouped into physical pieces (a two-way street = one piece, two edges), open or closed.

    Attributes
    ----------
    piece_of_edge
        Piece index of every edge.
    rep_edge
        The representative (lowest-id) edge of each piece; its geometry is the piece's geometry.
    members_ptr, members
        CSR-style list of the edges of each piece: ``members[members_ptr[p]:members_ptr[p + 1]]``.
    reversed_of_edge
        ``True`` where an edge runs opposite to its piece's representative edge.
    rep_geoms
        Returns the piece geometries (the representative edges' lines), built only when a step needs them.
    """

    piece_of_edge: np.ndarray
    rep_edge: np.ndarray
    members_ptr: np.ndarray
    members: np.ndarray
    reversed_of_edge: np.ndarray
    rep_geoms: Callable[[], np.ndarray] = field(repr=False, compare=False)

    @cached_property
    def tree(self) -> shapely.STRtree:
        """STRtree over the piece geometries (built on first use: only distances beyond the snap limit need it)."""
        return shapely.STRtree(self.rep_geoms())

    def to_arrays(self) -> dict[str, np.ndarray]:
        """The grouping as named arrays (for the network's columnar copy)."""
        names = ("piece_of_edge", "rep_edge", "members_ptr", "members", "reversed_of_edge")
        return {name: getattr(self, name) for name in names}


#: Prefix of the snap index arrays in a network's columnar copy (bump the version when their meaning changes).
STORE_PREFIX = "snap1"


def _stored(net: RoadNetwork, name: str, keys: tuple[str, ...]) -> dict[str, np.ndarray] | None:
    """Arrays ``name.key`` kept in the network's columnar copy, or None (not a loaded network, or not kept yet)."""
    store = net.__dict__.get("_store")
    if store is None or not all(store.copy.has(f"{STORE_PREFIX}.{name}.{k}") for k in keys):
        return None
    try:
        return {k: store.copy.array(f"{STORE_PREFIX}.{name}.{k}") for k in keys}
    except (OSError, ValueError):
        return None


def _keep(net: RoadNetwork, name: str, arrays: dict[str, np.ndarray]) -> None:
    """Add arrays to the network's columnar copy so later loads map them instead of computing them again."""
    store = net.__dict__.get("_store")
    if store is None:
        return
    try:
        store.copy.add({f"{STORE_PREFIX}.{name}.{k}": v for k, v in arrays.items()})
    except OSError:
        pass  # a read-only folder: the index is simply rebuilt on the next load


def road_pieces(net: RoadNetwork) -> RoadPieces:
    """Group the edges of ``net`` into physical pieces (cached with the geometry, see :data:`GEOMETRY_CACHE`).

    Two directed edges are one piece when they join the same two nodes in opposite (or the same) direction and have
    the same geometric length (relative tolerance 1e-6): a two-way street, or a one-way street with an added
    against-one-way edge.
    """
    key = f"{GEOMETRY_CACHE}coverkit.travel:pieces"
    if key in net._csr_cache:
        return net._csr_cache[key]
    names = ("piece_of_edge", "rep_edge", "members_ptr", "members", "reversed_of_edge")
    kept = _stored(net, "pieces", names)
    if kept is not None and len(kept["piece_of_edge"]) == net.n_edges:
        pieces = RoadPieces(**kept, rep_geoms=_RepGeoms(net, kept["rep_edge"]))
    else:
        pieces = _group_pieces(net)
        _keep(net, "pieces", pieces.to_arrays())
    net._csr_cache[key] = pieces
    return pieces


def _planar_length_m(net: RoadNetwork) -> np.ndarray:
    """Planar length (m) of every edge geometry, as GEOS measures it (vertex to vertex, in order)."""
    if not net._lazy():
        return shapely.length(net.edge_geometry())
    coords, owner = net._store.edge_coords()
    same = owner[1:] == owner[:-1]
    step = np.diff(coords, axis=0)[same]
    return np.bincount(
        owner[1:][same], weights=np.sqrt(step[:, 0] * step[:, 0] + step[:, 1] * step[:, 1]), minlength=net.n_edges
    )


def _group_pieces(net: RoadNetwork) -> RoadPieces:
    u, v = net.u, net.v
    all_e = np.arange(net.n_edges)
    length = _planar_length_m(net)
    a = np.minimum(u[all_e], v[all_e])
    b = np.maximum(u[all_e], v[all_e])
    order = np.lexsort((all_e, length, b, a))
    a_s, b_s, len_s, e_s = a[order], b[order], length[order], all_e[order]
    new = np.ones(len(order), dtype=bool)
    if len(order) > 1:
        same_pair = (a_s[1:] == a_s[:-1]) & (b_s[1:] == b_s[:-1])
        close = np.abs(len_s[1:] - len_s[:-1]) <= _TWIN_REL_TOL * np.maximum(len_s[1:], 1.0)
        new[1:] = ~(same_pair & close)
    piece_sorted = np.cumsum(new) - 1
    n_pieces = int(piece_sorted[-1] + 1) if len(order) else 0
    piece_of_edge = np.full(net.n_edges, -1, dtype=np.int64)
    piece_of_edge[e_s] = piece_sorted
    # members sorted by piece then edge id, so the representative is the lowest edge id.
    m_order = np.lexsort((e_s, piece_sorted))
    members = e_s[m_order]
    counts = np.bincount(piece_sorted, minlength=n_pieces)
    members_ptr = np.concatenate([[0], np.cumsum(counts)])
    rep_edge = members[members_ptr[:-1]]
    reversed_of_edge = np.zeros(net.n_edges, dtype=bool)
    rep_of_edge = rep_edge[piece_of_edge[all_e]]
    reversed_of_edge[all_e] = u[all_e] != u[rep_of_edge]
    return RoadPieces(
        piece_of_edge=piece_of_edge,
        rep_edge=rep_edge,
        members_ptr=members_ptr,
        members=members,
        reversed_of_edge=reversed_of_edge,
        rep_geoms=_RepGeoms(net, rep_edge),
    )


class _RepGeoms:
    """The piece geometries of a network, built when called (a class, not a closure: networks can be pickled)."""

    def __init__(self, net: RoadNetwork, rep_edge: np.ndarray) -> None:
        self.net, self.rep_edge = net, rep_edge

    def __call__(self) -> np.ndarray:
        return self.net.edge_geometry(self.rep_edge)


def _off_network_error(
    bad: np.ndarray, id_arr: np.ndarray, dist_m: np.ndarray, max_snap_m: float, what: str
) -> OffNetworkError:
    """The error naming the points ``bad`` beyond the snap limit (the first ten, with their distances)."""
    shown = ", ".join(f"{id_arr[i]} ({_distance_text(dist_m[i])})" for i in bad[:10])
    more = f" and {len(bad) - 10} more" if len(bad) > 10 else ""
    count = f"{len(bad)} {what} lie" if len(bad) > 1 else f"1 of the {what} lies"
    # tens of kilometres off is a coordinate mistake, not a point beside the road
    hint = (
        "check that lon and lat are not swapped and that the network covers them"
        if np.nanmax(np.where(np.isfinite(dist_m[bad]), dist_m[bad], np.nan), initial=0.0) > FAR_OFF_M
        else "move them onto a road, check their coordinates, or raise the snap limit"
    )
    return OffNetworkError(f"{count} farther than {max_snap_m:g} m from any road: {shown}{more}; {hint}.")


def snap_points(
    net: RoadNetwork,
    points: object,
    ids: object | None = None,
    max_snap_m: float = DEFAULT_MAX_SNAP_M,
    off_network: str = "raise",
    what: str = "points",
    warn_islands: bool = True,
    measure_far: bool = True,
    exclude_classes: tuple[str, ...] = (),
    *,
    positions: bool = True,
) -> Snapped:
    """Snap projected points to the nearest road edge (closed or not: a closure never moves a point).

    Parameters
    ----------
    net
        The road network.
    points
        Point geometries in the network CRS: a GeoSeries/GeoDataFrame (its geometry), an array of shapely points,
        or an (n, 2) array of x, y in metres. A GeoDataFrame with an ``id`` column gives the ids.
    ids
        Point ids (default: the ``id`` column of a GeoDataFrame, else 0..n-1).
    max_snap_m
        Snap limit (m). Points farther than this from every road are off-network.
    off_network
        ``"raise"``: raise :class:`OffNetworkError` listing the ids (use for bases and candidates);
        ``"mask"``: keep them with ``on_network = False`` (use for demand points, which are counted later).
    what
        Word used in messages (``"bases"``, ``"demand points"``).
    exclude_classes
        Road classes never snapped onto, e.g. :data:`coverkit.network.road_classes.NO_ACCESS_CLASSES` for
        population cells, which are not reached from a motorway carriageway (incidents and bases keep the default:
        every class).
    measure_far
        Also measure the distance to the nearest road of off-network points (for messages); grids of many cells
        that only need on/off skip it (their ``dist_m`` stays inf).
    positions
        Also give the snapped position on the road (``x``, ``y``); grids of many cells that are only timed skip it
        (their ``x``, ``y`` stay NaN).
    warn_islands
        Warn (``coverkit.progress.warn``) when points snap onto road pieces not connected to the largest connected
        part of the network, since they reach (or are reached from) only that part.

    Returns
    -------
    Snapped

    Raises
    ------
    OffNetworkError
        With ``off_network="raise"``, when any point is beyond the snap limit.
    """
    if off_network not in ("raise", "mask"):
        raise ValueError(f"off_network must be 'raise' or 'mask', not {off_network!r}")
    if max_snap_m <= 0 or not np.isfinite(max_snap_m):
        raise OffNetworkError(f"snap limit {max_snap_m} m is not a positive number; give e.g. max_snap_m=500.")
    geoms, id_arr = _as_points(points, ids, net)
    n = len(geoms)
    pieces = road_pieces(net)

    dist_m = np.full(n, np.inf)
    piece = np.full(n, -1, dtype=np.int64)
    if n and len(pieces.rep_edge):
        exclude = tuple(sorted(exclude_classes))
        allowed, index = _snap_targets(net, pieces, exclude)
        sub_piece, dist_m = grid_nearest(index, shapely.get_coordinates(geoms), max_snap_m)
        piece = np.where(sub_piece >= 0, allowed[np.maximum(sub_piece, 0)], -1)
        far = np.flatnonzero(piece < 0)
        if len(far) and measure_far and len(allowed):
            tree = _far_tree(net, pieces, allowed, exclude)
            (fi, _), fd = tree.query_nearest(geoms[far], return_distance=True)
            dist_m[far[fi]] = fd
    on = piece >= 0

    if not on.all() and off_network == "raise":
        raise _off_network_error(np.flatnonzero(~on), id_arr, dist_m, max_snap_m, what)

    # Entries: every directed edge of the snapped piece, with the fraction along that edge.
    on_idx = np.flatnonzero(on)
    entry_point, entry_edge, entry_frac, x_on, y_on = _entries(net, pieces, piece, on_idx, geoms, positions)
    edge = np.full(n, -1, dtype=np.int64)
    frac = np.full(n, np.nan)
    first = np.ones(len(entry_point), dtype=bool)
    first[1:] = entry_point[1:] != entry_point[:-1]
    edge[entry_point[first]] = entry_edge[first]
    frac[entry_point[first]] = entry_frac[first]
    offset_m = np.full(n, np.nan)
    offset_m[on] = frac[on] * net.length_m[edge[on]]
    x = np.full(n, np.nan)
    y = np.full(n, np.nan)
    x[on], y[on] = x_on, y_on

    result = Snapped(
        ids=id_arr,
        on_network=on,
        edge=edge,
        frac=frac,
        offset_m=offset_m,
        dist_m=dist_m,
        x=x,
        y=y,
        entry_point=entry_point,
        entry_edge=entry_edge,
        entry_frac=entry_frac,
        max_snap_m=float(max_snap_m),
    )
    if warn_islands and on.any():
        _warn_islands(net, result, what)
    return result


#: Snapped points whose road lines are built at a time (bounds the lines held: a few hundred MB at most).
ENTRY_BLOCK = 250_000


def _entries(
    net: RoadNetwork,
    pieces: RoadPieces,
    piece: np.ndarray,
    on_idx: np.ndarray,
    geoms: np.ndarray,
    positions: bool = True,
) -> tuple[np.ndarray, ...]:
    """Every directed edge of the snapped piece of each on-network point (``on_idx``, increasing) with the fraction
    along it, sorted by point then edge, and each point's snapped position (x, y) on its first entry's edge.

    Points go in blocks: each block's lines are built once, serve both the fractions and the positions, and are
    dropped before the next block (the values are those of one pass over all points).
    """
    p_on = piece[on_idx]
    cnt = pieces.members_ptr[p_on + 1] - pieces.members_ptr[p_on]
    ptr = np.concatenate([[0], np.cumsum(cnt)])
    entry_point = np.repeat(on_idx, cnt)
    local = np.arange(ptr[-1]) - np.repeat(ptr[:-1], cnt)
    entry_edge = pieces.members[np.repeat(pieces.members_ptr[p_on], cnt) + local]
    entry_frac = np.empty(len(entry_edge))
    x, y = np.full(len(on_idx), np.nan), np.full(len(on_idx), np.nan)
    for lo in range(0, len(on_idx), ENTRY_BLOCK):
        hi = min(lo + ENTRY_BLOCK, len(on_idx))
        a, b = ptr[lo], ptr[hi]
        pt, e = entry_point[a:b], entry_edge[a:b]
        lines = net.edge_geometry(e)
        f = shapely.line_locate_point(lines, geoms[pt], normalized=True)
        f = at_junctions(net, e, np.clip(np.nan_to_num(f, nan=0.0), 0.0, 1.0))
        # the points are in order and each one's entries together: sorting the block sorts them all
        order = np.lexsort((e, pt))
        entry_edge[a:b], entry_frac[a:b] = e[order], f[order]
        if not positions:
            continue
        lines = lines[order]
        first = np.ones(b - a, dtype=bool)
        first[1:] = pt[1:] != pt[:-1]  # pt is unchanged by the sort (entries stay within their point)
        xy = shapely.get_coordinates(
            shapely.line_interpolate_point(lines[first], entry_frac[a:b][first], normalized=True)
        )
        x[lo:hi], y[lo:hi] = xy[:, 0], xy[:, 1]
    return entry_point, entry_edge, entry_frac, x, y


#: A point this far from every road (m) is taken as a coordinate mistake in messages.
FAR_OFF_M = 50_000.0


def _snap_targets(net: RoadNetwork, pieces: RoadPieces, exclude: tuple[str, ...]) -> tuple[np.ndarray, GridIndex]:
    """Pieces that may be snapped onto (indices) and their grid index; cached per exclusion set, and kept in a
    loaded network's columnar copy."""
    key = f"{GEOMETRY_CACHE}coverkit.travel:snap_targets:{','.join(exclude)}"
    if key not in net._csr_cache:
        tag = "all" if not exclude else hashlib.blake2b(",".join(exclude).encode(), digest_size=6).hexdigest()
        names = ("allowed", "a", "b", "piece", "cell_ptr", "params")
        kept = _stored(net, f"grid_{tag}", names)
        if kept is not None:
            allowed, index = kept.pop("allowed"), GridIndex.from_arrays(kept)
        else:
            if exclude:
                classes = np.asarray(net.edge_values("road_class"), dtype=object)[pieces.rep_edge]
                allowed = np.flatnonzero(~np.isin(classes, list(exclude)))
            else:
                allowed = np.arange(len(pieces.rep_edge))
            coords, owner = _edge_coords(net, pieces.rep_edge[allowed])
            index = build_grid_index(coords, owner)
            _keep(net, f"grid_{tag}", {"allowed": allowed, **index.to_arrays()})
        net._csr_cache[key] = (allowed, index)
    return net._csr_cache[key]


def _edge_coords(net: RoadNetwork, edges: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Vertex coordinates (m) of ``edges`` and the position in ``edges`` of each vertex."""
    if net._lazy():
        return net._store.edge_coords(edges)
    return shapely.get_coordinates(net.edge_geometry(edges), return_index=True)


def _far_tree(net: RoadNetwork, pieces: RoadPieces, allowed: np.ndarray, exclude: tuple[str, ...]) -> shapely.STRtree:
    """STRtree over the allowed pieces, for the distance of points beyond the snap limit (messages only)."""
    if not exclude:
        return pieces.tree
    key = f"{GEOMETRY_CACHE}coverkit.travel:far_tree:{','.join(exclude)}"
    if key not in net._csr_cache:
        net._csr_cache[key] = shapely.STRtree(net.edge_geometry(pieces.rep_edge[allowed]))
    return net._csr_cache[key]


def snap_index_arrays(net: RoadNetwork) -> dict[str, np.ndarray]:
    """The snap index of ``net`` (road pieces and the grid over all of them) as named arrays, for
    :meth:`RoadNetwork.save`'s ``indexes``: a network loaded from the copy then maps them instead of building them."""
    pieces = road_pieces(net)
    allowed, index = _snap_targets(net, pieces, ())
    out = {f"{STORE_PREFIX}.pieces.{k}": v for k, v in pieces.to_arrays().items()}
    out.update({f"{STORE_PREFIX}.grid_all.{k}": v for k, v in {"allowed": allowed, **index.to_arrays()}.items()})
    return out


def _distance_text(metres: float) -> str:
    """A distance for messages: metres up to 10 km, kilometres beyond."""
    if not np.isfinite(metres):
        return "no road"
    return f"{metres:.0f} m" if metres < 10_000 else f"{metres / 1000:,.0f} km"


def island_mask(net: RoadNetwork, snapped: Snapped) -> np.ndarray:
    """``True`` for on-network points whose edge lies outside the largest weakly connected part of the network."""
    key = "coverkit.travel:components"
    if key not in net._csr_cache:
        _, labels = connected_components(net.csr(), directed=True, connection="weak")
        sizes = np.bincount(labels)
        net._csr_cache[key] = (labels, int(np.argmax(sizes)), sizes)
    labels, main, _ = net._csr_cache[key]
    out = np.zeros(len(snapped), dtype=bool)
    on = snapped.on_network
    out[on] = labels[net.u[snapped.edge[on]]] != main
    return out


def _warn_islands(net: RoadNetwork, snapped: Snapped, what: str) -> None:
    isl = np.flatnonzero(island_mask(net, snapped))
    if len(isl) == 0:
        return
    labels, _, sizes = net._csr_cache["coverkit.travel:components"]
    shown = ", ".join(f"{snapped.ids[i]} ({sizes[labels[net.u[snapped.edge[i]]]]} nodes)" for i in isl[:10])
    more = f" and {len(isl) - 10} more" if len(isl) > 10 else ""
    warn(
        f"{len(isl)} {what} snap onto road pieces not connected to the main network: {shown}{more}; "
        "they reach and are reached only within that piece - check the road data or the point locations."
    )


def _as_points(points: object, ids: object | None, net: RoadNetwork) -> tuple[np.ndarray, np.ndarray]:
    """Point geometries (shapely array) and ids (object array) from the accepted inputs."""
    import geopandas as gpd

    if isinstance(points, gpd.GeoDataFrame):
        if ids is None and "id" in points.columns:
            ids = points["id"].to_numpy()
        points = points.geometry
    if isinstance(points, gpd.GeoSeries):
        if points.crs is not None and not net.crs.equals(points.crs):
            points = points.to_crs(net.crs)
        geoms = points.to_numpy()
    else:
        arr = np.asarray(points)
        if arr.dtype != object and arr.ndim == 2 and arr.shape[1] == 2:
            geoms = shapely.points(arr.astype(float))
        else:
            geoms = np.asarray(arr, dtype=object)
    geoms = np.asarray(geoms, dtype=object).reshape(-1)
    id_arr = np.arange(len(geoms)).astype(object) if ids is None else np.asarray(ids, dtype=object).reshape(-1)
    if len(id_arr) != len(geoms):
        raise ValueError(f"{len(id_arr)} ids for {len(geoms)} points")
    return geoms, id_arr
