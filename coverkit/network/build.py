"""Build a :class:`~coverkit.network.model.RoadNetwork` from road data: filter, clip, project, direct, time.

The steps, each vectorised: read (OSM XML, OSM PBF or a centerline layer) -> drivable filter for the profile ->
projection to a metric CRS -> clip to a boundary plus a buffer -> geodesic lengths -> directed edges from the one-way
tags -> speeds and travel times from the profile -> keep the largest strongly connected piece.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import shapely
from pyproj import CRS, Geod
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import connected_components

from coverkit import settings
from coverkit.errors import PARAM, InputFileError, NetworkError
from coverkit.network.crs import parse_crs, transform_xy, utm_crs_for
from coverkit.network.model import RoadNetwork
from coverkit.network.profile import Profile, load_profile, parse_maxspeed_array
from coverkit.network.raw import RawRoads
from coverkit.network.road_classes import IMPLIED_ONEWAY_CLASSES
from coverkit.network.timing import edge_times
from coverkit.progress import Steps

OSM_XML_SUFFIXES = (".osm", ".osm.bz2", ".osm.gz", ".xml", ".xml.bz2")
OSM_PBF_SUFFIXES = (".pbf",)
LAYER_SUFFIXES = (".gpkg", ".shp", ".geojson", ".json", ".fgb", ".gml", ".zip")

_FORWARD = frozenset({"yes", "true", "1"})
_BACKWARD = frozenset({"-1", "reverse"})
_TWO_WAY = frozenset({"no", "false", "0"})
_REVERSIBLE = frozenset({"reversible"})  # OSM wiki, key:oneway: the direction changes with the time of day
_ROUNDABOUT = frozenset({"roundabout", "circular"})  # OSM wiki, key:junction: implies oneway=yes


@dataclass
class BuildReport:
    """What a build read, kept and dropped (all counts of ways or undirected segments; km of road)."""

    source: str
    profile: str
    crs: str
    nodes: int = 0
    edges: int = 0
    km_by_class: dict[str, float] = field(default_factory=dict)
    read: dict[str, int] = field(default_factory=dict)
    outside_boundary: int = 0
    pieces_dropped: int = 0
    edges_dropped: int = 0
    km_dropped: float = 0.0
    signals: int = 0
    oneway_segments: int = 0
    turns: dict[str, int | str] = field(default_factory=dict)

    def to_dict(self) -> dict:
        """JSON-serialisable form."""
        return dict(self.__dict__)

    def summary_text(self) -> str:
        """A one-screen summary for the CLI."""
        r = self.read
        lines = [
            f"source   {self.source}",
            f"profile  {self.profile}",
            f"CRS      {self.crs}",
            f"network  {self.nodes:,} nodes, {self.edges:,} directed edges, "
            f"{sum(self.km_by_class.values()):,.1f} km of road, {self.signals:,} signals, "
            f"{self.oneway_segments:,} one-way segments",
            "",
            "road km by class",
        ]
        for cls, km in sorted(self.km_by_class.items(), key=lambda kv: -kv[1]):
            lines.append(f"  {cls:<16}{km:>10,.1f}")
        lines += ["", "dropped"]
        if "ways_read" in r:
            lines.append(f"  ways not roads for this profile   {r.get('ways_not_road', 0):>8,}")
            lines.append(f"  ways closed by access tags        {r.get('ways_closed_access', 0):>8,}")
            lines.append(f"  ways unusable (nodes missing)     {r.get('ways_unusable', 0):>8,}")
        if "features_read" in r:
            lines.append(f"  features not drivable or empty    {r.get('features_dropped', 0):>8,}")
            if r.get("class_values_unmapped"):
                lines.append(
                    f"  of them of unknown class          {r.get('features_unknown_class', 0):>8,}"
                    f"  ({', '.join(r['class_values_unmapped'])}; map them with class_map=VALUE:class)"
                )
            lines.append(f"  near-miss endpoints (check data)  {r.get('near_miss_endpoints', 0):>8,}")
        if "gates_read" in r:
            lines.append(f"  road pieces closed by gates       {r.get('segments_closed_by_gates', 0):>8,}")
        lines.append(f"  segments outside boundary+buffer  {self.outside_boundary:>8,}")
        lines.append(
            f"  disconnected pieces               {self.pieces_dropped:>8,}"
            f"  ({self.edges_dropped:,} edges, {self.km_dropped:,.2f} km)"
        )
        return "\n".join(lines + self._turn_lines())

    def _turn_lines(self) -> list[str]:
        """What was read and used of the turn restrictions, directional speeds, reversible ways and gates."""
        t, r = self.turns, self.read
        if not t and "gates_read" not in r:
            return []
        rows = []
        if t:
            rows.append(("turn restrictions read", f"{t.get('restrictions_read', 0):,}"))
            rows.append(("  matched to kept roads", f"{t.get('restrictions_used', 0):,}"))
            if t.get("restrictions_exempt"):
                rows.append(("  not for this vehicle (except=)", f"{t['restrictions_exempt']:,}"))
            rows.append(("banned turns stored", f"{t.get('bans', 0):,}  ({t.get('policy', '')} by this profile)"))
            rows.append(("turn costs (s)", t.get("costs", "")))
        if "gates_read" in r:
            rows.append(("gates read / closed", f"{r['gates_read']:,} / {r.get('gates_closed', 0):,}"))
            rows.append(("ways with maxspeed:forward/back", f"{r.get('maxspeed_directional_ways', 0):,}"))
        if "reversible_segments" in t:
            rows.append(("oneway=reversible segments", f"{t['reversible_segments']:,}  ({t.get('reversible')})"))
        return ["", "turns and special tags", *(f"  {label:<34}{value}" for label, value in rows)]


def source_kind(path: Path) -> str:
    """``"osm_xml"``, ``"osm_pbf"`` or ``"layer"`` from the file name."""
    name = path.name.lower()
    if name.endswith(OSM_PBF_SUFFIXES):
        return "osm_pbf"
    if name.endswith(OSM_XML_SUFFIXES):
        return "osm_xml"
    if name.endswith(LAYER_SUFFIXES):
        return "layer"
    raise InputFileError(
        f"{path}: unknown road data type; give an OSM file (.osm, .osm.bz2, .osm.pbf) or a centerline layer "
        f"(.gpkg, .shp, .geojson) with {PARAM}, its field mapping.",
        param="fields",
    )


def file_digest(path: Path) -> str:
    """SHA-256 of a file (for caching builds on unchanged inputs)."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def read_roads(path: str | Path, profile: Profile, fields: dict[str, str] | None = None, **layer_options) -> RawRoads:
    """Read road data of any supported kind into :class:`RawRoads` (drivable filter applied)."""
    path = Path(path)
    if not path.exists():
        raise InputFileError(f"road data {path} not found; check the path.")
    if path.is_file() and path.stat().st_size == 0:
        raise InputFileError(f"{path} is empty; give a non-empty OSM file or centerline layer.")
    kind = source_kind(path)
    if kind == "layer":
        from coverkit.network.centerlines import read_centerlines

        if not fields:
            raise InputFileError(
                f"{path}: a centerline layer needs {PARAM}, its field mapping, e.g. "
                "class=ROADCLASS,speed=SPEED_MPH,oneway=ONEWAY.",
                param="fields",
            )
        return read_centerlines(path, fields, profile, **layer_options)
    from coverkit.network.osm_ways import ways_to_roads

    if kind == "osm_pbf":
        from coverkit.network.osm_pbf import read_osm_pbf

        ways = read_osm_pbf(path)
    else:
        from coverkit.network.osm_xml import read_osm_xml

        ways = read_osm_xml(path)
    return ways_to_roads(ways, profile, str(path))


def read_boundary(path: str | Path) -> gpd.GeoSeries:
    """Read a boundary polygon layer (any vector format; a file without CRS is taken as EPSG:4326)."""
    path = Path(path)
    if not path.is_file():
        raise InputFileError(f"boundary file {path} not found; check {PARAM}.", param="boundary")
    try:
        gdf = pyogrio.read_dataframe(path)
    except Exception as exc:
        raise InputFileError(f"{path}: not a readable vector layer ({str(exc)[:80]}).") from None
    polys = gdf[gdf.geometry.notna() & gdf.geometry.geom_type.isin(["Polygon", "MultiPolygon"])]
    if polys.empty:
        raise InputFileError(f"{path}: has no polygon; the boundary must be a polygon layer.")
    if polys.crs is None:
        polys = polys.set_crs(4326)
    return polys.geometry


def build_network(
    source: str | Path,
    profile: str | Path | Profile = settings.PROFILE,
    boundary: str | Path | None = None,
    buffer_m: float = settings.BUFFER_M,
    crs: str | CRS | None = None,
    fields: dict[str, str] | None = None,
    **layer_options,
) -> tuple[RoadNetwork, BuildReport]:
    """Build a directed road network from local road data.

    Parameters
    ----------
    source
        OSM XML (``.osm``, ``.osm.bz2``), OSM PBF (``.osm.pbf``) or a centerline layer (needs ``fields``).
    profile
        Shipped profile name, profile TOML path, or a :class:`Profile`.
    boundary
        Optional polygon layer; segments intersecting the boundary grown by ``buffer_m`` are kept.
    buffer_m
        Buffer around the boundary (m), so that bases near the edge may use roads just outside it.
    crs
        Metric CRS for the network; default the UTM zone of the data's centre.
    fields
        Centerline field mapping (see :func:`coverkit.network.centerlines.read_centerlines`).

    Returns
    -------
    network, report
    """
    steps = Steps(6, "network")
    prof = profile if isinstance(profile, Profile) else load_profile(profile)
    source = Path(source)
    steps.step(f"reading {source.name}")
    raw = read_roads(source, prof, fields, **layer_options)
    if len(raw.segments) == 0:
        raise NetworkError(
            f"{source}: no drivable road for profile '{prof.name}' (classes: {', '.join(prof.road_classes)}); "
            "check the file covers a road area, or use a profile that includes its road classes."
        )
    steps.step("projecting")
    # the lines go on as flat coordinates and offsets (shapely's ragged layout): projected, measured and directed
    # as arrays, with no line object per segment (at a million nodes, about a gigabyte less)
    raw_xy, line_offsets = raw.line_arrays()
    lonlat_xy = np.column_stack(transform_xy(raw_xy[:, 0], raw_xy[:, 1], raw.crs, CRS.from_epsg(4326)))
    if crs is None:
        lo, hi = lonlat_xy.min(axis=0), lonlat_xy.max(axis=0)
        target = utm_crs_for((lo[0] + hi[0]) / 2, (lo[1] + hi[1]) / 2)
    else:
        target = parse_crs(crs)
    line_xy = np.column_stack(transform_xy(raw_xy[:, 0], raw_xy[:, 1], raw.crs, target))
    segments = raw.segments
    raw_nodes, restrictions, stats = raw.nodes, raw.restrictions, dict(raw.stats)
    del raw, raw_xy
    outside = 0
    if boundary is not None:
        steps.step(f"clipping to {Path(boundary).name} + {buffer_m:g} m")
        area = read_boundary(boundary).to_crs(target).union_all().buffer(buffer_m)
        shapely.prepare(area)
        lines = shapely.from_ragged_array(shapely.GeometryType.LINESTRING, line_xy, (line_offsets,))
        inside = shapely.intersects(area, lines)
        del lines
        if not inside.any():
            raise NetworkError(
                f"boundary {boundary} does not overlap the road data in {source}; check both cover the same area "
                "(and the boundary's CRS)."
            )
        outside = int((~inside).sum())
        keep = np.flatnonzero(inside)
        segments = segments[inside].reset_index(drop=True)
        lonlat_xy = take_lines(lonlat_xy, line_offsets, keep)[0]
        line_xy, line_offsets = take_lines(line_xy, line_offsets, keep)
    else:
        steps.step("no boundary given: keeping all roads")
    steps.step("directing edges and timing them")
    length_m = geodesic_length_flat_m(lonlat_xy, line_offsets)
    del lonlat_xy
    network_edges, nodes, edge_lines = _directed_edges(segments, (line_xy, line_offsets), length_m, raw_nodes, prof)
    del line_xy
    steps.step("keeping the largest strongly connected piece")
    network_edges, nodes, dropped, kept = _largest_strong_piece(network_edges, nodes)
    edge_lines = take_lines(*edge_lines, np.flatnonzero(kept))
    if len(network_edges) == 0:
        raise NetworkError(f"{source}: the drivable roads form no connected network; check the data.")
    bans, turn_counts = _turn_bans(restrictions, network_edges, nodes, segments, prof)
    del segments, raw_nodes
    report = BuildReport(
        source=str(source),
        profile=prof.name,
        crs=f"{target.name} ({target.to_string()})",
        nodes=len(nodes),
        edges=len(network_edges),
        km_by_class=_km_by_class(network_edges),
        read=stats,
        outside_boundary=outside,
        pieces_dropped=dropped["pieces"],
        edges_dropped=dropped["edges"],
        km_dropped=dropped["km"],
        signals=int(nodes["signal"].sum()),
        oneway_segments=int((network_edges["oneway"] & ~network_edges["against_oneway"]).sum()),
        turns=turn_counts,
    )
    steps.step("done")
    info = {
        "source": str(source),
        "source_sha256": file_digest(source) if source.is_file() else "",
        **report.to_dict(),
    }
    return _held_as_arrays(nodes, network_edges.drop(columns="seg"), edge_lines, target, prof, info, bans), report


def _held_as_arrays(
    nodes: pd.DataFrame,
    edges: pd.DataFrame,
    edge_lines: tuple[np.ndarray, np.ndarray],
    crs: CRS,
    prof: Profile,
    info: dict,
    bans: pd.DataFrame | None,
) -> RoadNetwork:
    """The network served from its columnar layout in memory (tables with geometry built only when used).

    Why: a million-node network's 3.8 M line objects cost about three times the memory of their flat coordinates,
    and a build followed by a save (the ``network`` command) never needs them.
    """
    from coverkit.network.columnar import MemoryCopy, NetworkArrays, split_table

    node_table, _ = split_table(nodes, geometry=False)
    edge_table, _ = split_table(edges, geometry=False)
    node_xy = np.column_stack([nodes["x"].to_numpy(dtype=float), nodes["y"].to_numpy(dtype=float)])
    coords, offsets = edge_lines
    store = NetworkArrays(MemoryCopy(node_table, node_xy, edge_table, {"coords": coords, "offsets": offsets}))
    return RoadNetwork._from_store(store, crs, prof, info, turn_bans=bans)


def take_lines(
    coords: np.ndarray, offsets: np.ndarray, index: np.ndarray, reverse: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """The lines ``index`` of a ragged line array (flat ``coords``, ``offsets``), each drawn backwards where
    ``reverse``: their flat coordinates and offsets (the vertex order of ``shapely.reverse``)."""
    index = np.asarray(index, dtype=np.int64)
    count = offsets[index + 1] - offsets[index]
    new_offsets = np.zeros(len(index) + 1, dtype=np.int64)
    np.cumsum(count, out=new_offsets[1:])
    within = np.arange(new_offsets[-1], dtype=np.int64) - np.repeat(new_offsets[:-1], count)
    if reverse is not None and reverse.any():
        flip = np.repeat(reverse, count)
        within[flip] = np.repeat(count, count)[flip] - 1 - within[flip]
    within += np.repeat(offsets[index], count)
    return coords[within], new_offsets


def _turn_bans(
    restrictions: pd.DataFrame | None,
    edges: pd.DataFrame,
    nodes: pd.DataFrame,
    segments: pd.DataFrame,
    prof: Profile,
) -> tuple[pd.DataFrame | None, dict]:
    """The turn ``restrictions`` as read, as banned edge sequences of the kept edges, and what was read and used."""
    from coverkit.network.osm_restrictions import resolve_bans

    if restrictions is None:
        return None, {}
    bans, counts = resolve_bans(
        restrictions,
        u=edges["u"].to_numpy(),
        v=edges["v"].to_numpy(),
        way=edges["source_id"].to_numpy(),
        node_id=nodes["node_id"].to_numpy(),
        vehicle=prof.access_keys[0],
    )
    rules = prof.turns
    oneway = pd.Series(normalised_tag(segments["oneway"]))
    counts.update(
        bans=len(bans),
        policy="obeyed" if rules.obeys else "ignored",
        costs=f"straight {rules.straight_s:g}, right {rules.right_s:g}, left {rules.left_s:g}, "
        f"U-turn {rules.uturn_s:g}",
        reversible_segments=int(oneway.isin(sorted(_REVERSIBLE)).sum()),
        reversible=prof.reversible,
    )
    return bans, counts


def geodesic_length_m(lonlat_lines: np.ndarray) -> np.ndarray:
    """WGS84 geodesic length of each line (m), summed over its vertex pairs (pyproj ``Geod.inv``)."""
    _, coords, (offsets,) = shapely.to_ragged_array(np.asarray(lonlat_lines, dtype=object), include_z=False)
    return geodesic_length_flat_m(coords, np.asarray(offsets, dtype=np.int64))


def geodesic_length_flat_m(lonlat_xy: np.ndarray, offsets: np.ndarray) -> np.ndarray:
    """WGS84 geodesic length (m) of each line of a ragged array (lon/lat vertices ``lonlat_xy``, line ``offsets``),
    summed over its vertex pairs (pyproj ``Geod.inv``, Karney 2013)."""
    n_lines = len(offsets) - 1
    if len(lonlat_xy) < 2:
        return np.zeros(n_lines)
    index = np.repeat(np.arange(n_lines), np.diff(offsets))
    geod = Geod(ellps="WGS84")
    x, y = lonlat_xy[:, 0], lonlat_xy[:, 1]
    _, _, dist = geod.inv(x[:-1], y[:-1], x[1:], y[1:])
    same = index[1:] == index[:-1]
    return np.bincount(index[1:][same], weights=np.asarray(dist)[same], minlength=n_lines)


def normalised_tag(values: pd.Series) -> np.ndarray:
    """Tag values as stripped lower-case text ("" where missing), each distinct value cleaned once."""
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    cleaned = np.array([str(u).lower().strip() for u in uniques] + [""], dtype=object)
    return cleaned[codes]


def _directions(segments: pd.DataFrame, reversible: str = "two_way") -> tuple[np.ndarray, np.ndarray]:
    """Forward and backward travel allowed per segment, from ``oneway``, ``junction`` and the road class.

    ``oneway=reversible`` (direction set by the hour) is two-way or closed as the profile's ``reversible`` says.
    """
    oneway = normalised_tag(segments["oneway"])
    closed = np.isin(oneway, list(_REVERSIBLE)) & (reversible == "closed")
    junction = normalised_tag(segments["junction"])
    highway = segments["highway"].to_numpy(dtype=object)
    backward_only = np.isin(oneway, list(_BACKWARD))
    explicit_two_way = np.isin(oneway, list(_TWO_WAY))
    forward_only = np.isin(oneway, list(_FORWARD)) | (
        ~explicit_two_way
        & ~backward_only
        & (np.isin(junction, list(_ROUNDABOUT)) | np.isin(highway, list(IMPLIED_ONEWAY_CLASSES)))
    )
    return ~backward_only & ~closed, ~forward_only & ~closed


def _directed_edges(
    segments: pd.DataFrame,
    lines: tuple[np.ndarray, np.ndarray],
    length_m: np.ndarray,
    raw_nodes: pd.DataFrame,
    prof: Profile,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    fwd, bwd = _directions(segments, prof.reversible)
    n_seg = len(segments)
    posted = segments["speed_kph"].to_numpy(dtype=float).copy()
    missing = ~np.isfinite(posted)
    posted[missing] = parse_maxspeed_array(segments["maxspeed"].to_numpy(dtype=object)[missing])
    # maxspeed:forward / :backward (along / against the way's drawn direction) refine maxspeed per direction
    posted_dir = [posted, posted]
    for d, col in enumerate(("maxspeed_forward", "maxspeed_backward")):
        if col in segments.columns:
            parsed = parse_maxspeed_array(segments[col].to_numpy(dtype=object))
            posted_dir[d] = np.where(missing & np.isfinite(parsed), parsed, posted)
    road_class = segments["highway"].to_numpy(dtype=object)
    oneway = fwd ^ bwd

    node_keys = np.unique(np.concatenate([segments["u_key"].to_numpy(), segments["v_key"].to_numpy()]))
    u_idx = np.searchsorted(node_keys, segments["u_key"].to_numpy())
    v_idx = np.searchsorted(node_keys, segments["v_key"].to_numpy())
    against_ok = np.zeros(n_seg, dtype=bool)
    if prof.oneway == "against":
        against_ok = oneway & np.isin(road_class, list(prof.against_oneway_classes))
    seg = np.arange(n_seg)
    # direction code 0 = drawn u->v, 1 = reverse; against-one-way copies travel opposite to the allowed way
    parts = [
        (seg[fwd], 0, False),
        (seg[bwd], 1, False),
        (seg[against_ok & fwd], 1, True),
        (seg[against_ok & bwd], 0, True),
    ]
    sel = np.concatenate([p[0] for p in parts])
    direction = np.concatenate([np.full(len(p[0]), p[1]) for p in parts])
    against = np.concatenate([np.full(len(p[0]), p[2]) for p in parts])
    order = np.lexsort((direction, sel))
    sel, direction, against = sel[order], direction[order], against[order]
    rev = direction == 1
    seg_coords, seg_offsets = lines
    edge_lines = take_lines(seg_coords, seg_offsets, sel, rev)
    u = np.where(rev, v_idx[sel], u_idx[sel])
    v = np.where(rev, u_idx[sel], v_idx[sel])

    key_pos = np.searchsorted(raw_nodes["key"].to_numpy(), node_keys)
    node_x = raw_nodes["x"].to_numpy()[key_pos]
    node_y = raw_nodes["y"].to_numpy()[key_pos]
    signal = raw_nodes["signal"].to_numpy(dtype=bool)[key_pos]
    # node coordinates are taken from the projected geometry ends so that nodes and edges agree exactly
    first_xy, last_xy = seg_coords[seg_offsets[:-1]], seg_coords[seg_offsets[1:] - 1]
    node_x = node_x.astype(float)
    node_y = node_y.astype(float)
    node_x[u_idx], node_y[u_idx] = first_xy[:, 0], first_xy[:, 1]
    node_x[v_idx], node_y[v_idx] = last_xy[:, 0], last_xy[:, 1]

    seg_len = length_m[sel]
    # direction 0 travels along the way (maxspeed:forward), direction 1 against it (maxspeed:backward)
    posted_edge = np.where(direction == 0, posted_dir[0][sel], posted_dir[1][sel])
    times = edge_times(
        prof,
        road_class=road_class[sel],
        posted_kph=posted_edge,
        length_m=seg_len,
        against_oneway=against,
        signal_at_end=signal[v],
    )
    edges = pd.DataFrame(
        {
            "u": u.astype(np.int64),
            "v": v.astype(np.int64),
            "road_class": pd.array(road_class[sel].astype(str), dtype="str"),
            "length_m": seg_len,
            "posted_kph": posted_edge,
            "speed_kph": times.speed_kph,
            "delay_s": times.delay_s,
            "travel_s": times.travel_s,
            "oneway": oneway[sel],
            "against_oneway": against,
            "bridge": segments["bridge"].to_numpy(dtype=bool)[sel],
            "tunnel": segments["tunnel"].to_numpy(dtype=bool)[sel],
            "name": pd.array(segments["name"].fillna("").to_numpy(dtype=object)[sel].astype(str), dtype="str"),
            "source_id": segments["source_id"].to_numpy(dtype=np.int64)[sel],
            "seg": sel,
        }
    )
    nodes = pd.DataFrame({"node_id": node_keys.astype(np.int64), "x": node_x, "y": node_y, "signal": signal})
    return edges, nodes, edge_lines


def _largest_strong_piece(edges: pd.DataFrame, nodes: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame, dict]:
    n = len(nodes)
    u = edges["u"].to_numpy()
    v = edges["v"].to_numpy()
    graph = csr_matrix((np.ones(len(u)), (u, v)), shape=(n, n))
    n_comp, label = connected_components(graph, directed=True, connection="strong")
    used = np.zeros(n, dtype=bool)
    used[u] = True
    used[v] = True
    sizes = np.bincount(label[used], minlength=n_comp)
    keep_label = int(np.argmax(sizes))  # lowest label among equal sizes: deterministic
    keep_node = label == keep_label
    keep_edge = keep_node[u] & keep_node[v]
    dropped_edges = edges[~keep_edge]
    dropped = {
        "pieces": int(np.count_nonzero(sizes) - 1),
        "edges": len(dropped_edges),
        "km": float(dropped_edges.drop_duplicates("seg")["length_m"].sum() / 1000.0),
    }
    new_index = np.cumsum(keep_node) - 1
    edges = edges[keep_edge].reset_index(drop=True)
    edges["u"] = new_index[edges["u"].to_numpy()]
    edges["v"] = new_index[edges["v"].to_numpy()]
    edges.insert(0, "edge_id", np.arange(len(edges), dtype=np.int64))
    nodes = nodes[keep_node].reset_index(drop=True)
    nodes.insert(0, "node", np.arange(len(nodes), dtype=np.int64))
    return edges, nodes, dropped, keep_edge


def _km_by_class(edges: pd.DataFrame) -> dict[str, float]:
    undirected = edges[~edges["against_oneway"]].drop_duplicates("seg")
    km = undirected.groupby("road_class")["length_m"].sum() / 1000.0
    return {str(k): round(float(val), 3) for k, val in km.items()}


__all__ = ["BuildReport", "build_network", "geodesic_length_m", "read_roads", "transform_xy"]
