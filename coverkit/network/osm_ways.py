"""Turn OSM ways (node reference lists) into segments split at shared nodes, shared by both OSM readers.

Both the XML reader (through osmnx) and the PBF reader (through pyosmium) produce an :class:`OsmWays` table; the
drivable filter and the splitting below are the same code for both, so the two readers give the same network.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from pyproj import CRS

from coverkit.network.osm_restrictions import READ_COLUMNS
from coverkit.network.profile import ACCESS_KEYS, Profile
from coverkit.network.raw import SEGMENT_COLUMNS, RawRoads
from coverkit.network.way_kernels import kept_references_kernel, segment_vertices_kernel, segments_kernel

#: Way tags kept from OSM (``motor_vehicle`` refines ``access`` for cars and trucks).
WAY_TAGS = (
    "highway",
    "maxspeed",
    "maxspeed:forward",
    "maxspeed:backward",
    "oneway",
    "junction",
    "access",
    "motor_vehicle",
    "motorcar",
    "vehicle",
    "emergency",
    "bridge",
    "tunnel",
    "name",
    "bridge:name",
)

#: ``access`` values that close a way to ordinary traffic (OSM wiki, key:access; common practice in routing).
CLOSED_ACCESS = frozenset({"no", "private", "agricultural", "forestry", "military", "emergency"})
#: Values closing a way even to emergency vehicles that may use private roads (physically unusable).
CLOSED_ALWAYS = frozenset({"impassable", "unknown_closed"})


@dataclass
class OsmWays:
    """OSM highway ways as read.

    Attributes
    ----------
    way_id
        Way ids, shape (W,).
    tags
        DataFrame (W rows) with :data:`WAY_TAGS` columns (None where absent).
    refs
        Node references of all ways concatenated, shape (R,).
    offsets
        Start of each way in ``refs``, shape (W + 1,).
    node_id, lon, lat
        Located nodes (sorted by id): ids, longitude and latitude (degrees).
    signal_ids
        Ids of nodes tagged ``highway=traffic_signals``.
    restrictions
        Turn restrictions as read (:data:`coverkit.network.osm_restrictions.READ_COLUMNS`).
    gates
        Gate nodes: ``node_id`` and the access tags :data:`coverkit.network.profile.ACCESS_KEYS` (None where absent).
    ref_node
        Optional, shape (R,): the place of each reference in ``node_id`` (-1 where not located), from a reader that
        knows it already (the PBF reader gets it from the sort that makes ``node_id``); None to have
        :func:`ways_to_roads` look the references up.
    tag_sets, way_tag_set
        Optional: the distinct rows of ``tags`` (a DataFrame of the same columns) and the row of each way in it,
        shape (W,), so that ``tags`` is ``tag_sets.iloc[way_tag_set]``; from a reader that has them (the PBF reader
        decodes each distinct tag field once). :func:`ways_to_roads` then works the tags once per distinct row.
    """

    way_id: np.ndarray
    tags: pd.DataFrame
    refs: np.ndarray
    offsets: np.ndarray
    node_id: np.ndarray
    lon: np.ndarray
    lat: np.ndarray
    signal_ids: np.ndarray
    restrictions: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(columns=list(READ_COLUMNS)))
    gates: pd.DataFrame = field(default_factory=lambda: gates_frame([], []))
    ref_node: np.ndarray | None = None
    tag_sets: pd.DataFrame | None = None
    way_tag_set: np.ndarray | None = None


def gates_frame(node_ids: list[int], tags: list[dict]) -> pd.DataFrame:
    """Gate nodes with their access tags (one row per node, sorted by id)."""
    frame = pd.DataFrame({"node_id": np.asarray(node_ids, dtype=np.int64)})
    for key in ACCESS_KEYS:
        frame[key] = pd.Series([t.get(key) for t in tags], dtype=object)
    return frame.sort_values("node_id", kind="stable").reset_index(drop=True)


def access_value(tags: pd.DataFrame, profile: Profile) -> tuple[np.ndarray, np.ndarray]:
    """The access value that decides for the profile (its first access key tagged) and that key, per row.

    Values are lower-cased; "" (and key "") where none of the profile's keys is tagged.
    """
    value = np.full(len(tags), "", dtype=object)
    key = np.full(len(tags), "", dtype=object)
    for k in reversed(profile.access_keys):
        if k not in tags.columns:
            continue
        col = tags[k]
        has = col.notna().to_numpy()
        value[has] = _lower_text(col[has])
        key[has] = k
    return value, key


def closing_access(value: np.ndarray, key: np.ndarray, profile: Profile) -> np.ndarray:
    """Whether each access value closes the road (or gate) to the profile's vehicle.

    ``private_access`` reopens all but the physically impassable values; an explicit ``emergency=no`` always closes.
    """
    closing = CLOSED_ALWAYS if profile.private_access else CLOSED_ACCESS | CLOSED_ALWAYS
    closed = np.isin(value, np.array(sorted(closing), dtype=object))
    return closed | ((key == "emergency") & (value == "no"))


def drivable_mask(tags: pd.DataFrame, profile: Profile) -> tuple[np.ndarray, np.ndarray]:
    """Which ways are roads for the profile's vehicle.

    Returns
    -------
    road, closed
        ``road``: the ``highway`` value is one of the profile's classes. ``closed``: a road whose access tag (the
        first of the profile's ``access_keys`` tagged, see :func:`access_value`) closes it; the profile's
        ``private_access`` reopens all but the physically impassable ones.
    """
    highway = tags["highway"].to_numpy(dtype=object)
    road = np.isin(highway, np.array(profile.road_classes, dtype=object))
    value, key = access_value(tags, profile)
    closed = road & closing_access(value, key, profile)
    return road, closed


def _yes(values: pd.Series) -> np.ndarray:
    text = _lower_text(values.fillna(""))
    return ~np.isin(text, np.array(["", "no", "0", "false"], dtype=object))


def _lower_text(values: pd.Series) -> np.ndarray:
    """``values.astype(str).str.lower()`` as an object array, worked once per distinct value.

    Tag columns repeat few distinct values over millions of rows; pandas' string conversion of every row was most
    of the tag work of a large county.
    """
    codes, uniques = pd.factorize(values, use_na_sentinel=False)
    lowered = pd.Series(np.asarray(uniques, dtype=object), dtype=object).astype(str).str.lower().to_numpy(object)
    return lowered[codes]


def ways_to_roads(ways: OsmWays, profile: Profile, source: str) -> RawRoads:
    """Filter ways to drivable roads and split them into segments at shared nodes, signals and way ends.

    A node is a graph node when it is used more than once among the kept ways (a junction, or a way that touches
    itself), when it ends a way, or when it carries a traffic signal (so the signal delay attaches to the edge
    ending there). References to nodes missing from the file are skipped; a way left with fewer than two located
    nodes is unusable and counted.
    """
    # the tags are worked once per distinct row where the reader gives the distinct rows
    if ways.way_tag_set is not None and len(ways.way_tag_set) == len(ways.tags):
        tag_sets, tag_set = ways.tag_sets, ways.way_tag_set
    else:
        tag_sets, tag_set = ways.tags, np.arange(len(ways.tags))
    road, closed = drivable_mask(tag_sets, profile)
    road, closed = road[tag_set], closed[tag_set]
    keep_way = road & ~closed
    stats = {
        "ways_read": len(ways.way_id),
        "ways_not_road": int((~road).sum()),
        "ways_closed_access": int(closed.sum()),
    }
    way_of_ref, pos, usable_way = _kept_references(ways, keep_way, stats)
    closed_gates = _closed_gates(ways.gates, profile)
    stats["gates_read"] = len(ways.gates)
    stats["gates_closed"] = len(closed_gates)
    signal_node = _flag_nodes(ways.node_id, ways.signal_ids)
    # a closed gate becomes a graph node so that the road pieces it closes end there
    gate_node = _flag_nodes(ways.node_id, closed_gates)
    starts, ends, n_loops = segments_kernel(way_of_ref, pos, signal_node | gate_node, len(ways.node_id))
    stats["segments_self_loop"] = int(n_loops)
    # a closed gate closes the road pieces on both sides of it, up to the next junction
    open_seg = ~(gate_node[pos[starts]] | gate_node[pos[ends]])
    stats["segments_closed_by_gates"] = int((~open_seg).sum())
    starts, ends = starts[open_seg], ends[open_seg]
    coords, offsets = np.zeros((0, 2)), np.zeros(len(starts) + 1, dtype=np.int64)
    if len(starts):
        coords, seg_of_vert = segment_vertices_kernel(ways.lon, ways.lat, pos, starts, ends)
        # vertices come grouped by segment, in order: the offsets of shapely's ragged layout (no line objects)
        np.cumsum(np.bincount(seg_of_vert, minlength=len(starts)), out=offsets[1:])
        del seg_of_vert
    u_pos, v_pos, seg_way = pos[starts], pos[ends], way_of_ref[starts]
    del way_of_ref, pos, starts, ends
    keys = (ways.node_id[u_pos], ways.node_id[v_pos], ways.way_id[seg_way])
    segments = _segment_table(tag_sets, profile, tag_set[seg_way], *keys)
    # every segment end, in node_id order (node_id is sorted and distinct: this is np.unique of the keys)
    end_node = np.zeros(len(ways.node_id), dtype=bool)
    end_node[u_pos] = True
    end_node[v_pos] = True
    npos = np.flatnonzero(end_node)
    nodes = pd.DataFrame(
        {
            "key": ways.node_id[npos].astype(np.int64),
            "x": ways.lon[npos] if len(npos) else np.zeros(0),
            "y": ways.lat[npos] if len(npos) else np.zeros(0),
            "signal": signal_node[npos],
        }
    )
    directional = (tag_sets["maxspeed:forward"].notna() | tag_sets["maxspeed:backward"].notna()).to_numpy()
    stats["maxspeed_directional_ways"] = int((usable_way & directional[tag_set]).sum())
    raw = RawRoads(segments, None, nodes, CRS.from_epsg(4326), source, stats, lines=(coords, offsets))
    raw.restrictions = ways.restrictions
    return raw


def _kept_references(ways: OsmWays, keep_way: np.ndarray, stats: dict) -> tuple[np.ndarray, ...]:
    """The references of the usable kept ways, in order: their way and their place in ``ways.node_id``; and which
    ways are usable.

    References to unknown nodes and consecutive repeats are dropped; a kept way left with fewer than two is
    unusable (counted in ``stats``).
    """
    pos = ways.ref_node
    if pos is None or len(pos) != len(ways.refs):
        pos = np.searchsorted(ways.node_id, ways.refs)
        pos = np.clip(pos, 0, max(len(ways.node_id) - 1, 0))
        located = (ways.node_id[pos] == ways.refs) if len(ways.node_id) else np.zeros(len(pos), bool)
        pos = np.where(located, pos, -1)
    way_of_ref, pos, usable_way = kept_references_kernel(ways.offsets.astype(np.int64), pos, keep_way)
    stats["ways_unusable"] = int((keep_way & ~usable_way).sum())
    stats["ways_kept"] = int(usable_way.sum())
    return way_of_ref, pos, usable_way


def _flag_nodes(node_id: np.ndarray, ids: np.ndarray) -> np.ndarray:
    """``np.isin(node_id, ids)`` for the sorted ``node_id`` (at the first of repeated ids), by a search per id."""
    flag = np.zeros(len(node_id), dtype=bool)
    at = np.searchsorted(node_id, ids)
    inside = at < len(node_id)
    at = at[inside]
    flag[at[node_id[at] == ids[inside]]] = True
    return flag


def _segment_table(tag_sets: pd.DataFrame, profile: Profile, rows: np.ndarray, u_key, v_key, source_id) -> pd.DataFrame:
    """The :data:`SEGMENT_COLUMNS` of segments with the tags ``rows`` of ``tag_sets`` (worked once per row of
    ``tag_sets``, then taken), end node keys and source way ids."""
    access, _ = access_value(tag_sets, profile)
    # a bridge's own name ("Ferry Bridge") is what a closure names; the road's name otherwise
    name = tag_sets["bridge:name"].where(tag_sets["bridge:name"].notna(), tag_sets["name"]).fillna("")
    segments = pd.DataFrame(
        {
            "u_key": u_key.astype(np.int64),
            "v_key": v_key.astype(np.int64),
            "source_id": source_id.astype(np.int64),
            "highway": _taken(tag_sets["highway"], rows),
            "maxspeed": _taken(tag_sets["maxspeed"], rows),
            "maxspeed_forward": _taken(tag_sets["maxspeed:forward"], rows),
            "maxspeed_backward": _taken(tag_sets["maxspeed:backward"], rows),
            "speed_kph": np.full(len(rows), np.nan),
            "oneway": _taken(tag_sets["oneway"], rows),
            "junction": _taken(tag_sets["junction"], rows),
            "access": _taken(np.where(access == "", None, access), rows),
            "bridge": _yes(tag_sets["bridge"])[rows],
            "tunnel": _yes(tag_sets["tunnel"])[rows],
            "name": _taken(name, rows),
        }
    )
    return segments.astype({k: v for k, v in SEGMENT_COLUMNS.items() if v != "object"})


def _taken(values: pd.Series | np.ndarray, take: np.ndarray) -> np.ndarray | pd.api.extensions.ExtensionArray:
    """``values[take]`` (objects) in the form a DataFrame keeps it: pandas' string array where pandas infers its
    string dtype for the values taken, built from each distinct value once instead of from every row.

    Tag columns repeat few distinct values over millions of segments; the string conversion of every row cost
    seconds.
    """
    values = np.asarray(values, dtype=object)
    codes, uniques = pd.factorize(values)
    codes = codes[take] + 1
    used = np.bincount(codes, minlength=len(uniques) + 1) > 0
    # the distinct values taken (None first where a missing value is), for pandas to infer their dtype
    distinct = pd.Series(np.concatenate([np.array([None], dtype=object), np.asarray(uniques, dtype=object)])[used])
    if not len(take) or not isinstance(distinct.dtype, pd.StringDtype):
        return values[take]
    return distinct.array.take(np.cumsum(used)[codes] - 1)


def _closed_gates(gates: pd.DataFrame, profile: Profile) -> np.ndarray:
    """Ids of the gate nodes closed to the profile's vehicle by their access tags (a gate without any is open)."""
    if len(gates) == 0:
        return np.zeros(0, dtype=np.int64)
    value, key = access_value(gates, profile)
    return np.sort(gates["node_id"].to_numpy(dtype=np.int64)[closing_access(value, key, profile)])


def tags_frame(rows: list[dict]) -> pd.DataFrame:
    """DataFrame of :data:`WAY_TAGS` from a list of tag dicts (missing tags become None)."""
    return pd.DataFrame({key: [row.get(key) for row in rows] for key in WAY_TAGS}, dtype=object)
