"""Read road centerline layers (GeoPackage, Shapefile, GeoJSON, ...) with a field mapping.

County centerline layers carry their own class codes, speeds in mph or km/h and one-way flags with local values.
The user maps them with ``fields`` (``class=ROADCLASS,speed=SPEED_MPH,oneway=ONEWAY``, or ``ng911`` for the NENA
NG9-1-1 GIS data model's fields, :mod:`coverkit.network.ng911`); topology comes from shared
line endpoints, merged within a tolerance. Endpoints that nearly meet another line's end without touching
(the usual defect of such layers) are counted and reported, never silently joined.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
import pyogrio
import shapely
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

from coverkit.errors import FieldError, InputFileError
from coverkit.network.ng911 import PRESET, ng911_fields
from coverkit.network.profile import KPH_PER_MPH, Profile
from coverkit.network.raw import SEGMENT_COLUMNS, RawRoads
from coverkit.network.road_classes import CENTERLINE_ALIASES

if TYPE_CHECKING:
    import geopandas as gpd

FIELD_KEYS = ("class", "speed", "oneway", "name", "id", "bridge", "tunnel")

#: Class values a county layer commonly uses, mapped to OSM-style classes (held with each class in
#: :mod:`coverkit.network.road_classes`).
CLASS_ALIASES = CENTERLINE_ALIASES

#: One-way values: forward (digitised direction), backward, two-way. Common practice in centerline layers.
FORWARD_VALUES = frozenset({"1", "y", "yes", "true", "t", "ft", "f", "forward", "fw", "one way", "oneway"})
BACKWARD_VALUES = frozenset({"-1", "tf", "backward", "bw", "reverse", "r"})
TWO_WAY_VALUES = frozenset({"", "0", "n", "no", "false", "b", "both", "two way", "twoway", "none", "nan"})


def parse_fields(text: str) -> dict[str, str]:
    """Parse ``class=ROADCLASS,speed=SPEED_MPH,oneway=ONEWAY`` (plus optional ``name``, ``id``, ``bridge``,
    ``tunnel``, ``speed_unit=mph|kph``, ``oneway_forward=FT;1``, ``oneway_backward=TF``).

    A first part ``ng911`` starts from the NENA NG9-1-1 road centerline fields
    (:func:`coverkit.network.ng911.ng911_fields`); the parts after it override single keys (``ng911,name=St_Name``).

    >>> parse_fields("ng911,name=St_Name")["name"], parse_fields("ng911")["oneway"]
    ('St_Name', 'OneWay')
    """
    out: dict[str, str] = {}
    parts = [p.strip() for p in text.split(",") if p.strip()]
    if parts and parts[0].lower() == PRESET:
        out.update(ng911_fields())
        parts = parts[1:]
    for part in parts:
        if "=" not in part:
            raise FieldError(
                f"field mapping: '{part}' is not key=FIELD; write e.g. class=ROADCLASS,speed=SPEED_MPH "
                f"(or {PRESET} first for the NENA NG9-1-1 fields)."
            )
        key, value = (s.strip() for s in part.split("=", 1))
        allowed = (*FIELD_KEYS, "speed_unit", "oneway_forward", "oneway_backward", "class_map")
        if key not in allowed:
            raise FieldError(f"field mapping: unknown key '{key}'; allowed: {', '.join(allowed)}.")
        out[key] = value
    if "class" not in out:
        raise FieldError("the field mapping must name the road class field, e.g. class=ROADCLASS.")
    return out


#: Classes for ways that are not for motor vehicles (OpenStreetMap ``highway`` values, from memory of the OSM wiki's
#: Key:highway page): a ``class_map`` may send values there to leave those features out.
NOT_DRIVABLE_CLASSES = frozenset(
    {"path", "footway", "cycleway", "bridleway", "steps", "pedestrian", "track", "construction", "proposed", "rail"}
)


def _class_map(fields: dict[str, str], profile: Profile) -> dict[str, str]:
    mapping = {k: v for k, v in CLASS_ALIASES.items()}
    mapping.update({c: c for c in profile.road_classes})
    for pair in filter(None, fields.get("class_map", "").split(";")):
        if ":" not in pair:
            raise FieldError(f"class_map '{pair}' is not VALUE:class; write e.g. class_map=LOC:residential.")
        value, cls = (s.strip() for s in pair.split(":", 1))
        if cls not in profile.road_classes and cls not in NOT_DRIVABLE_CLASSES:
            raise FieldError(
                f"class_map {value}:{cls}: '{cls}' is not a class of profile '{profile.name}' "
                f"({', '.join(profile.road_classes)}); map roads to one of them, or to path to leave features out."
            )
        mapping[value.lower()] = cls
    return mapping


#: Above this share of the features or of the road length with class values the mapping does not know, the
#: reading stops (the class field or its mapping is wrong); below it, the unknown values are built without those
#: features and listed in the summary. Our choice: a layer half unknown cannot give a trustworthy network.
MAX_UNKNOWN_CLASS_SHARE = 0.5


def _unknown_classes(
    path: Path, gdf, raw_class: pd.Series, known: np.ndarray, fields: dict[str, str], profile: Profile
) -> dict[str, int]:
    """Counts of class values the mapping does not know, most common first; stop when they are most of the layer.

    Raises
    ------
    FieldError
        When more than :data:`MAX_UNKNOWN_CLASS_SHARE` of the features or of their length has an unknown class:
        one line listing the values (most common first, with counts) and the ``class_map=`` fix.
    """
    unknown = ~known
    if not unknown.any():
        return {}
    counts = raw_class[unknown].value_counts()
    counts = counts.sort_index().sort_values(ascending=False, kind="stable")
    length = shapely.length(gdf.geometry.to_crs(gdf.crs if gdf.crs.is_projected else gdf.estimate_utm_crs()))
    length = np.asarray(length, dtype=float)
    n_share = unknown.mean()
    len_share = length[unknown].sum() / length.sum() if length.sum() > 0 else n_share
    if max(n_share, len_share) > MAX_UNKNOWN_CLASS_SHARE:
        shown = ", ".join(f"'{v}' ({c:,})" for v, c in counts.head(8).items())
        more = f" and {len(counts) - 8} more" if len(counts) > 8 else ""
        example = ";".join(f"{v}:<class>" for v in counts.index[:3])
        raise FieldError(
            f"{path}: {int(unknown.sum()):,} of {len(unknown):,} features ({len_share * 100:.0f} % of the length) "
            f"have values in field '{fields['class']}' that are not road classes: {shown}{more}; map them in the "
            f"field mapping with class_map={example} (classes of profile '{profile.name}': "
            f"{', '.join(profile.road_classes)}; map values that are not roads to e.g. path to leave them out)."
        )
    return {str(v): int(c) for v, c in counts.items()}


def read_centerlines(
    path: str | Path,
    fields: dict[str, str],
    profile: Profile,
    layer: str | None = None,
    snap_tolerance_m: float = 0.5,
    near_miss_m: float = 10.0,
) -> RawRoads:
    """Read a centerline layer into :class:`RawRoads`.

    Parameters
    ----------
    path
        Vector file readable by GDAL (GeoPackage, Shapefile, GeoJSON ...).
    fields
        Field mapping, see :func:`parse_fields`. ``speed_unit`` defaults to mph when the speed field's name
        contains ``MPH``, else km/h.
    profile
        Profile whose classes are drivable; other classes are dropped and counted. Class values that neither the
        profile, :data:`CLASS_ALIASES` nor ``class_map`` know are listed in ``stats["class_values_unmapped"]``; when
        they hold more than :data:`MAX_UNKNOWN_CLASS_SHARE` of the features or of the length, reading stops.
    snap_tolerance_m
        Endpoints closer than this (m, in a metric CRS) are the same node.
    near_miss_m
        Dangling endpoints within this distance of another endpoint (but beyond the tolerance) are counted as
        near misses.
    """
    path = Path(path)
    gdf = _read_layer(path, layer, fields)
    features_read = len(gdf)
    mapping = _class_map(fields, profile)
    raw_class = gdf[fields["class"]].astype(str).str.strip()
    known = raw_class.str.lower().map(mapping).notna().to_numpy()
    unknown_counts = _unknown_classes(path, gdf, raw_class, known, fields, profile)
    gdf = gdf.explode(index_parts=False)
    gdf = gdf[gdf.geometry.geom_type == "LineString"].reset_index(drop=True)
    # work in metres for snapping tolerances
    metric = gdf.crs if gdf.crs.is_projected else gdf.estimate_utm_crs()
    metric_geom = gdf.geometry.to_crs(metric).to_numpy()

    road_class = gdf[fields["class"]].astype(str).str.strip().str.lower().map(mapping)
    drivable = road_class.isin(profile.road_classes).to_numpy()
    stats = {
        "features_read": int(features_read),
        "features_dropped": int((~drivable).sum()),
        "features_unknown_class": int(sum(unknown_counts.values())),
        "class_values_unmapped": [f"{v} ({c:,})" for v, c in list(unknown_counts.items())[:20]],
    }
    gdf, metric_geom, road_class = (
        gdf[drivable].reset_index(drop=True),
        metric_geom[drivable],
        road_class[drivable],
    )

    starts = shapely.get_coordinates(shapely.get_point(metric_geom, 0))
    ends = shapely.get_coordinates(shapely.get_point(metric_geom, -1))
    n = len(metric_geom)
    endpoints = np.vstack([starts, ends])
    node_of_end, near_miss = _merge_endpoints(endpoints, snap_tolerance_m, near_miss_m)
    stats["near_miss_endpoints"] = int(near_miss)

    speed_kph = _speed_kph(gdf, fields)
    oneway = _oneway(path, gdf, fields)
    source_id = (
        pd.to_numeric(gdf[fields["id"]], errors="coerce").fillna(-1).to_numpy(dtype=np.int64)
        if "id" in fields
        else np.arange(n, dtype=np.int64)
    )
    segments = pd.DataFrame(
        {
            "u_key": node_of_end[:n].astype(np.int64),
            "v_key": node_of_end[n:].astype(np.int64),
            "source_id": source_id,
            "highway": road_class.to_numpy(dtype=object),
            "maxspeed": np.full(n, None, dtype=object),
            "speed_kph": speed_kph,
            "oneway": oneway,
            "junction": np.full(n, None, dtype=object),
            "access": np.full(n, None, dtype=object),
            "bridge": _flag(gdf, fields, "bridge"),
            "tunnel": _flag(gdf, fields, "tunnel"),
            "name": gdf[fields["name"]].fillna("").astype(str).to_numpy(dtype=object)
            if "name" in fields
            else np.full(n, "", dtype=object),
        }
    ).astype({k: v for k, v in SEGMENT_COLUMNS.items() if v != "object"})
    loops = segments["u_key"].to_numpy() == segments["v_key"].to_numpy()
    stats["segments_self_loop"] = int(loops.sum())
    segments = segments[~loops].reset_index(drop=True)
    # geometry in metric CRS with its end vertices moved onto the merged node positions
    node_xy = np.zeros((int(node_of_end.max()) + 1 if len(node_of_end) else 0, 2))
    node_xy[node_of_end] = endpoints
    geometry = _pin_ends(metric_geom[~loops], node_xy, segments["u_key"].to_numpy(), segments["v_key"].to_numpy())
    keys = np.unique(np.concatenate([segments["u_key"].to_numpy(), segments["v_key"].to_numpy()]))
    nodes = pd.DataFrame({"key": keys, "x": node_xy[keys, 0], "y": node_xy[keys, 1], "signal": False})
    return RawRoads(segments, geometry, nodes, metric, str(path), stats)


def _read_layer(path: Path, layer: str | None, fields: dict[str, str]) -> gpd.GeoDataFrame:
    """The layer's features with a geometry; its CRS and every mapped field must be there."""
    try:
        gdf = pyogrio.read_dataframe(path, layer=layer)
    except Exception as exc:
        raise InputFileError(f"{path}: not a readable vector layer ({str(exc)[:80]}).") from None
    if gdf.crs is None:
        raise InputFileError(f"{path}: the layer has no CRS; assign one (e.g. in a desktop GIS) and retry.")
    gdf = gdf[gdf.geometry.notna() & ~gdf.geometry.is_empty]
    # field names differ only in case between formats (a Shapefile's ROADCLASS is a GeoPackage's RoadClass)
    by_lower = {str(c).lower(): c for c in gdf.columns}
    for key in FIELD_KEYS:
        if key in fields and fields[key] not in gdf.columns and fields[key].lower() in by_lower:
            gdf = gdf.rename(columns={by_lower[fields[key].lower()]: fields[key]})
    for key in FIELD_KEYS:
        if key in fields and fields[key] not in gdf.columns:
            raise FieldError(
                f"{path}: field '{fields[key]}' (mapped as {key}) is not in the layer; "
                f"fields are {', '.join(map(str, gdf.columns[:12]))}."
            )
    return gdf


def _speed_kph(gdf: gpd.GeoDataFrame, fields: dict[str, str]) -> np.ndarray:
    """Posted speed per feature (km/h; NaN where absent or not positive), converted from mph when mapped so."""
    speed_kph = np.full(len(gdf), np.nan)
    if "speed" in fields:
        unit = fields.get("speed_unit", "mph" if "mph" in fields["speed"].lower() else "kph").lower()
        if unit not in ("mph", "kph", "kmh", "km/h"):
            raise FieldError(f"field mapping: speed_unit must be mph or kph, got '{unit}'.")
        values = pd.to_numeric(gdf[fields["speed"]], errors="coerce").to_numpy(dtype=float)
        speed_kph = values * (KPH_PER_MPH if unit == "mph" else 1.0)
        speed_kph[~(speed_kph > 0)] = np.nan
    return speed_kph


def _oneway(path: Path, gdf: gpd.GeoDataFrame, fields: dict[str, str]) -> np.ndarray:
    """One-way tag per feature ("no", "yes" along the digitised direction, "-1" against it)."""
    oneway = np.full(len(gdf), "no", dtype=object)
    if "oneway" in fields:
        forward = FORWARD_VALUES | {v.lower() for v in fields.get("oneway_forward", "").split(";") if v}
        backward = BACKWARD_VALUES | {v.lower() for v in fields.get("oneway_backward", "").split(";") if v}
        values = gdf[fields["oneway"]].astype(str).str.strip().str.lower().to_numpy()
        oneway[np.isin(values, list(forward - backward))] = "yes"
        oneway[np.isin(values, list(backward))] = "-1"
        odd = sorted(set(values) - forward - backward - TWO_WAY_VALUES)
        if odd:
            raise FieldError(
                f"{path}: one-way field '{fields['oneway']}' has value '{odd[0]}' that is not understood; "
                f"add oneway_forward={odd[0]} or oneway_backward={odd[0]} to the field mapping."
            )
    return oneway


def _flag(gdf: gpd.GeoDataFrame, fields: dict[str, str], key: str) -> np.ndarray:
    """A yes/no field (bridge, tunnel) as booleans; all False when it is not mapped."""
    if key not in fields:
        return np.zeros(len(gdf), dtype=bool)
    text = gdf[fields[key]].astype(str).str.strip().str.lower()
    return ~text.isin(["", "0", "n", "no", "false", "none", "nan"]).to_numpy()


def _merge_endpoints(points: np.ndarray, tolerance_m: float, near_miss_m: float) -> tuple[np.ndarray, int]:
    """Cluster endpoints closer than ``tolerance_m`` into nodes; count dangling ends with a near miss."""
    tree = cKDTree(points)
    pairs = tree.query_pairs(tolerance_m, output_type="ndarray")
    n = len(points)
    graph = coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(n, n)) if len(pairs) else None
    if graph is None:
        labels = np.arange(n)
    else:
        _, labels = connected_components(graph, directed=False)
    # renumber clusters in order of first appearance (stable ids)
    _, first, inverse = np.unique(labels, return_index=True, return_inverse=True)
    rank = np.argsort(np.argsort(first))
    labels = rank[inverse]
    degree = np.bincount(labels, minlength=labels.max() + 1 if n else 0)
    dangling = np.flatnonzero(degree[labels] == 1)
    near = 0
    if len(dangling):
        dist, idx = tree.query(points[dangling], k=min(2, n))
        if dist.ndim == 2 and dist.shape[1] > 1:
            other = idx[:, 1]
            near = int(
                np.sum((dist[:, 1] > tolerance_m) & (dist[:, 1] <= near_miss_m) & (labels[other] != labels[dangling]))
            )
    return labels, near


def _pin_ends(geometry: np.ndarray, node_xy: np.ndarray, u: np.ndarray, v: np.ndarray) -> np.ndarray:
    coords, index = shapely.get_coordinates(geometry, return_index=True)
    coords = coords.copy()
    first = np.r_[True, index[1:] != index[:-1]]
    last = np.r_[index[1:] != index[:-1], True]
    coords[first] = node_xy[u]
    coords[last] = node_xy[v]
    return shapely.linestrings(coords, indices=index)
