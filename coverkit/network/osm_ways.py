"""Turn OSM ways (node reference lists) into segments split at shared nodes, shared by both OSM readers.

Both the XML reader (through osmnx) and the PBF reader (through pyosmium) produce an :class:`OsmWays` table; the
drivable filter and the splitting below are the same code for both, so the two readers give the same network.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import shapely
from pyproj import CRS

from coverkit.network.osm_restrictions import READ_COLUMNS
from coverkit.network.profile import ACCESS_KEYS, Profile
from coverkit.network.raw import SEGMENT_COLUMNS, RawRoads

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
        value[has] = col[has].astype(str).str.lower().to_numpy()
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
    text = values.fillna("").astype(str).str.lower().to_numpy()
    return ~np.isin(text, np.array(["", "no", "0", "false"], dtype=object))


def ways_to_roads(ways: OsmWays, profile: Profile, source: str) -> RawRoads:
    """Filter ways to drivable roads and split them into segments at shared nodes, signals and way ends.

    A node is a graph node when it is used more than once among the kept ways (a junction, or a way that touches
    itself), when it ends a way, or when it carries a traffic signal (so the signal delay attaches to the edge
    ending there). References to nodes missing from the file are skipped; a way left with fewer than two located
    nodes is unusable and counted.
    """
    n_ways = len(ways.way_id)
    road, closed = drivable_mask(ways.tags, profile)
    keep_way = road & ~closed
    stats = {
        "ways_read": int(n_ways),
        "ways_not_road": int((~road).sum()),
        "ways_closed_access": int(closed.sum()),
    }
    lengths = np.diff(ways.offsets)
    way_of_ref = np.repeat(np.arange(n_ways), lengths)
    refs = ways.refs
    # locate references; drop unknown nodes and consecutive duplicates
    pos = np.searchsorted(ways.node_id, refs)
    pos = np.clip(pos, 0, max(len(ways.node_id) - 1, 0))
    located = (len(ways.node_id) > 0) & (ways.node_id[pos] == refs) if len(refs) else np.zeros(0, bool)
    sel = keep_way[way_of_ref] & located
    refs, way_of_ref, pos = refs[sel], way_of_ref[sel], pos[sel]
    dup = np.zeros(len(refs), dtype=bool)
    dup[1:] = (refs[1:] == refs[:-1]) & (way_of_ref[1:] == way_of_ref[:-1])
    refs, way_of_ref, pos = refs[~dup], way_of_ref[~dup], pos[~dup]
    count_per_way = np.bincount(way_of_ref, minlength=n_ways)
    usable_way = keep_way & (count_per_way >= 2)
    stats["ways_unusable"] = int((keep_way & ~usable_way).sum())
    sel = usable_way[way_of_ref]
    refs, way_of_ref, pos = refs[sel], way_of_ref[sel], pos[sel]
    stats["ways_kept"] = int(usable_way.sum())

    is_first = np.ones(len(refs), dtype=bool)
    is_first[1:] = way_of_ref[1:] != way_of_ref[:-1]
    is_last = np.ones(len(refs), dtype=bool)
    is_last[:-1] = way_of_ref[1:] != way_of_ref[:-1]
    uniq, inverse, counts = np.unique(refs, return_inverse=True, return_counts=True)
    signal_node = np.isin(uniq, ways.signal_ids)
    closed_gates = _closed_gates(ways.gates, profile)
    stats["gates_read"] = len(ways.gates)
    stats["gates_closed"] = len(closed_gates)
    # a closed gate becomes a graph node so that the road pieces it closes end there
    gate_node = np.isin(uniq, closed_gates)
    split = is_first | is_last | (counts[inverse] > 1) | signal_node[inverse] | gate_node[inverse]

    starts, ends = _segment_bounds(split, way_of_ref)
    # a closed loop with no junction on it (a loop road, a lone roundabout) is split at its middle vertex
    loops = (refs[starts] == refs[ends]) & (ends - starts >= 2)
    if loops.any():
        split[(starts[loops] + ends[loops]) // 2] = True
        starts, ends = _segment_bounds(split, way_of_ref)
    loops = refs[starts] == refs[ends]
    stats["segments_self_loop"] = int(loops.sum())
    starts, ends = starts[~loops], ends[~loops]
    # a closed gate closes the road pieces on both sides of it, up to the next junction
    gated = np.isin(refs[starts], closed_gates) | np.isin(refs[ends], closed_gates)
    stats["segments_closed_by_gates"] = int(gated.sum())
    starts, ends = starts[~gated], ends[~gated]

    n_vert = ends - starts + 1
    seg_of_vert = np.repeat(np.arange(len(starts)), n_vert)
    first_of_seg = np.repeat(np.cumsum(n_vert) - n_vert, n_vert)
    vert = np.repeat(starts, n_vert) + (np.arange(n_vert.sum()) - first_of_seg)
    coords = np.column_stack([ways.lon[pos[vert]], ways.lat[pos[vert]]])
    geometry = shapely.linestrings(coords, indices=seg_of_vert) if len(starts) else np.array([], dtype=object)

    seg_way = way_of_ref[starts]
    tags = ways.tags.iloc[seg_way].reset_index(drop=True)
    access, _ = access_value(tags, profile)
    segments = pd.DataFrame(
        {
            "u_key": refs[starts].astype(np.int64),
            "v_key": refs[ends].astype(np.int64),
            "source_id": ways.way_id[seg_way].astype(np.int64),
            "highway": tags["highway"].to_numpy(dtype=object),
            "maxspeed": tags["maxspeed"].to_numpy(dtype=object),
            "maxspeed_forward": tags["maxspeed:forward"].to_numpy(dtype=object),
            "maxspeed_backward": tags["maxspeed:backward"].to_numpy(dtype=object),
            "speed_kph": np.full(len(starts), np.nan),
            "oneway": tags["oneway"].to_numpy(dtype=object),
            "junction": tags["junction"].to_numpy(dtype=object),
            "access": np.where(access == "", None, access),
            "bridge": _yes(tags["bridge"]),
            "tunnel": _yes(tags["tunnel"]),
            # a bridge's own name ("Ferry Bridge") is what a closure names; the road's name otherwise
            "name": tags["bridge:name"]
            .where(tags["bridge:name"].notna(), tags["name"])
            .fillna("")
            .to_numpy(dtype=object),
        }
    )
    segments = segments.astype({k: v for k, v in SEGMENT_COLUMNS.items() if v != "object"})
    node_keys = np.unique(np.concatenate([segments["u_key"].to_numpy(), segments["v_key"].to_numpy()]))
    npos = np.searchsorted(ways.node_id, node_keys)
    nodes = pd.DataFrame(
        {
            "key": node_keys,
            "x": ways.lon[npos] if len(node_keys) else np.zeros(0),
            "y": ways.lat[npos] if len(node_keys) else np.zeros(0),
            "signal": np.isin(node_keys, ways.signal_ids),
        }
    )
    stats["maxspeed_directional_ways"] = int(
        (usable_way & (ways.tags["maxspeed:forward"].notna() | ways.tags["maxspeed:backward"].notna())).sum()
    )
    raw = RawRoads(segments, np.asarray(geometry, dtype=object), nodes, CRS.from_epsg(4326), source, stats)
    raw.restrictions = ways.restrictions
    return raw


def _closed_gates(gates: pd.DataFrame, profile: Profile) -> np.ndarray:
    """Ids of the gate nodes closed to the profile's vehicle by their access tags (a gate without any is open)."""
    if len(gates) == 0:
        return np.zeros(0, dtype=np.int64)
    value, key = access_value(gates, profile)
    return np.sort(gates["node_id"].to_numpy(dtype=np.int64)[closing_access(value, key, profile)])


def _segment_bounds(split: np.ndarray, way_of_ref: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start and end positions of segments between consecutive split points of the same way."""
    split_pos = np.flatnonzero(split)
    starts, ends = split_pos[:-1], split_pos[1:]
    same_way = way_of_ref[starts] == way_of_ref[ends]
    return starts[same_way], ends[same_way]


def tags_frame(rows: list[dict]) -> pd.DataFrame:
    """DataFrame of :data:`WAY_TAGS` from a list of tag dicts (missing tags become None)."""
    return pd.DataFrame({key: [row.get(key) for row in rows] for key in WAY_TAGS}, dtype=object)
