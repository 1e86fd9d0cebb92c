"""Inline polygons: a GeoJSON geometry table (Polygon or MultiPolygon, lon/lat degrees, EPSG:4326) read and checked.

A scenario's closure or slowdown may give its ``polygon`` inline instead of naming a file: the table the page draws
(``{"type": "Polygon", "coordinates": [[[lon, lat], ...]]}``, RFC 7946 geometry) or the same as a TOML inline table.
:func:`inline_polygon` checks it and gives the shapely geometry: a ring left open is closed for the user, each ring
needs three distinct points, every position finite degrees in range; a self-crossing ring is repaired with
:func:`shapely.make_valid` and only its polygonal part kept. Problems are one-line StudyErrors naming the key.
"""

from __future__ import annotations

import math
from typing import Any

import shapely

from coverkit.errors import StudyError

#: The CRS of every inline polygon (RFC 7946: GeoJSON positions are WGS 84 lon/lat degrees).
INLINE_CRS = "EPSG:4326"
#: The keys an inline geometry table may hold.
GEOMETRY_KEYS = ("type", "coordinates")
_TYPES = ("Polygon", "MultiPolygon")
_FIX = 'give a GeoJSON geometry {type = "Polygon", coordinates = [[[lon, lat], ...]]} in degrees'


def _position(value: Any, key: str, where: str) -> tuple[float, float]:
    ok = isinstance(value, list) and len(value) in (2, 3)
    ok = ok and all(isinstance(v, int | float) and not isinstance(v, bool) for v in value)
    if not ok:
        raise StudyError(f"{where}: key '{key}' must be a position [lon, lat] (two numbers), got {value!r:.60}.")
    lon, lat = float(value[0]), float(value[1])
    if not (math.isfinite(lon) and math.isfinite(lat)):
        raise StudyError(f"{where}: key '{key}' is [{lon}, {lat}]; give finite degrees (EPSG:4326).")
    if not (-180.0 <= lon <= 180.0 and -90.0 <= lat <= 90.0):
        raise StudyError(
            f"{where}: key '{key}' is [{lon:g}, {lat:g}], outside -180..180 / -90..90; give lon, lat in degrees "
            "(EPSG:4326), not projected metres."
        )
    return lon, lat


def _ring(value: Any, key: str, where: str) -> list[tuple[float, float]]:
    if not isinstance(value, list):
        raise StudyError(f"{where}: key '{key}' must be a ring (a list of [lon, lat] positions).")
    ring = [_position(p, f"{key}[{i}]", where) for i, p in enumerate(value)]
    if len(set(ring)) < 3:
        raise StudyError(f"{where}: key '{key}' has {len(set(ring))} distinct points; a ring needs at least 3.")
    if ring[0] != ring[-1]:
        ring.append(ring[0])  # closed for the user: the page and hand-written files may leave the ring open
    return ring


def _polygon(value: Any, key: str, where: str) -> shapely.Polygon:
    if not isinstance(value, list) or not value:
        raise StudyError(f"{where}: key '{key}' must list the polygon's rings (outer ring first); {_FIX}.")
    rings = [_ring(r, f"{key}[{i}]", where) for i, r in enumerate(value)]
    return shapely.Polygon(rings[0], rings[1:])


def inline_polygon(value: Any, key: str, where: str) -> Any:
    """The shapely (Multi)Polygon of an inline GeoJSON geometry table, in :data:`INLINE_CRS`.

    Parameters
    ----------
    value
        The parsed table: ``type`` (``"Polygon"`` or ``"MultiPolygon"``) and ``coordinates``.
    key
        The key named in messages (``"closure[0].polygon"``).
    where
        The source named first in messages (a file or ``"request body"``).

    Raises
    ------
    StudyError
        One line naming ``key`` and the fix.
    """
    if not isinstance(value, dict):
        raise StudyError(f"{where}: key '{key}' must be a file name or a polygon table; {_FIX}.")
    extra = [k for k in value if k not in GEOMETRY_KEYS]
    if extra:
        raise StudyError(f"{where}: unknown key '{key}.{extra[0]}'; a polygon table holds only type and coordinates.")
    kind = value.get("type")
    if kind not in _TYPES:
        raise StudyError(f'{where}: key \'{key}.type\' must be "Polygon" or "MultiPolygon", got {kind!r:.40}.')
    coords = value.get("coordinates")
    if kind == "Polygon":
        geom = _polygon(coords, f"{key}.coordinates", where)
    else:
        if not isinstance(coords, list) or not coords:
            raise StudyError(f"{where}: key '{key}.coordinates' must list polygons (MultiPolygon); {_FIX}.")
        geom = shapely.MultiPolygon([_polygon(p, f"{key}.coordinates[{i}]", where) for i, p in enumerate(coords)])
    if not geom.is_valid:
        # a self-crossing ring (a bow tie drawn by hand) becomes the polygons it encloses; lines and points it
        # leaves behind enclose nothing
        fixed = shapely.make_valid(geom)
        parts = [g for g in shapely.get_parts(fixed) if g.geom_type in _TYPES]
        geom = shapely.union_all(parts) if parts else shapely.Polygon()
    if geom.is_empty or geom.area == 0:
        raise StudyError(f"{where}: key '{key}' encloses no area (points in a line); draw the polygon again.")
    return geom


__all__ = ["GEOMETRY_KEYS", "INLINE_CRS", "inline_polygon"]
