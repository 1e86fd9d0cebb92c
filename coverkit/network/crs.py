"""Choosing and applying a metric CRS."""

from __future__ import annotations

import numpy as np
import shapely
from pyproj import CRS, Transformer

from coverkit.errors import PARAM, CoverkitError


def utm_crs_for(lon: float, lat: float) -> CRS:
    """The WGS84 UTM zone CRS containing a point (EPSG 326xx north, 327xx south).

    Zone = floor((lon + 180) / 6) + 1 (the standard UTM zone numbering; the Norway/Svalbard exceptions are not
    applied, as they change only which zone, not the metric quality, of the result).
    """
    zone = int(np.floor((lon + 180.0) / 6.0)) % 60 + 1
    return CRS.from_epsg((32600 if lat >= 0 else 32700) + zone)


def parse_crs(text: str | CRS, what: str | None = None) -> CRS:
    """Parse a user CRS (``EPSG:32633``, WKT, PROJ string) and insist that it is projected in metres.

    ``what`` names the value in a message; without it the error is about the parameter ``crs``.

    >>> parse_crs("EPSG:32633").name
    'WGS 84 / UTM zone 33N'
    >>> parse_crs("EPSG:4326")
    Traceback (most recent call last):
    coverkit.errors.CoverkitError: crs: WGS 84 is not projected; give a metric projected CRS such as a UTM zone.
    """
    param = None if what else "crs"
    what = what or PARAM
    try:
        crs = CRS.from_user_input(text)
    except Exception:
        raise CoverkitError(
            f"{what}: '{text}' is not a CRS pyproj understands; give e.g. EPSG:32633.", param=param
        ) from None
    if not crs.is_projected:
        raise CoverkitError(
            f"{what}: {crs.name} is not projected; give a metric projected CRS such as a UTM zone.", param=param
        )
    unit = crs.axis_info[0].unit_name if crs.axis_info else ""
    if unit not in ("metre", "meter"):
        raise CoverkitError(
            f"{what}: {crs.name} has units '{unit}'; give a CRS in metres (e.g. a UTM zone).", param=param
        )
    return crs


def transform_geometry(geometry: np.ndarray, src: CRS, dst: CRS) -> np.ndarray:
    """Reproject shapely geometries (vectorised over all coordinates)."""
    if CRS.from_user_input(src) == CRS.from_user_input(dst):
        return np.asarray(geometry, dtype=object)
    transformer = Transformer.from_crs(src, dst, always_xy=True)
    return shapely.transform(
        np.asarray(geometry, dtype=object),
        lambda xy: np.column_stack(transformer.transform(xy[:, 0], xy[:, 1])),
    )


def transform_xy(x: np.ndarray, y: np.ndarray, src: CRS, dst: CRS) -> tuple[np.ndarray, np.ndarray]:
    """Reproject coordinate arrays."""
    if CRS.from_user_input(src) == CRS.from_user_input(dst):
        return np.asarray(x, float), np.asarray(y, float)
    transformer = Transformer.from_crs(src, dst, always_xy=True)
    tx, ty = transformer.transform(np.asarray(x, float), np.asarray(y, float))
    return np.asarray(tx), np.asarray(ty)
