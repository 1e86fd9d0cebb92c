"""Demand: population rasters, census-like polygons and incident points as weighted demand points.

Every demand source becomes a GeoDataFrame of points in the network CRS with ``id`` (string), ``weight`` and
``source`` columns (plus the input's other fields for incident points). Demand points are snapped to the network
later like any point; off-network demand is counted and reported by the coverage step, never dropped silently.
"""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import rasterio
import shapely
from pyproj import CRS, Transformer

from coverkit import settings
from coverkit.errors import FieldError, InputFileError
from coverkit.network.model import RoadNetwork
from coverkit.progress import warn
from coverkit.travel.points import (
    DEFAULT_MAX_REJECTED_SHARE,
    RejectedRows,
    check_rejected,
    read_point_rows,
)
from coverkit.where import filter_mask

#: Spacing of demand points along roads when spreading a polygon's population (m).
POLYGON_SAMPLE_SPACING_M = 100.0
#: Demand points farther than this outside the road network's extent are outside the study area (m).
EXTENT_MARGIN_M = 5000.0
RASTER_SUFFIXES = (".tif", ".tiff", ".vrt", ".img", ".asc")


def demand_from_raster(path: str | Path, crs: CRS | str, band: int = 1) -> gpd.GeoDataFrame:
    """Population raster to demand points: one point per populated cell centre, weight = cell value.

    Cells that are nodata, NaN, zero or negative carry no demand (negative values are treated as nodata, a common
    convention for population grids). Any raster CRS is accepted; points are reprojected to ``crs``.

    Raises
    ------
    InputFileError
        Missing or unreadable raster, or a raster without CRS.
    """
    path = Path(path)
    if not path.is_file():
        raise InputFileError(f"population raster {path} not found; check the path.")
    try:
        with rasterio.open(path) as src:
            if src.crs is None:
                raise InputFileError(
                    f"{path}: the raster has no CRS; assign one (e.g. gdal_edit.py -a_srs EPSG:xxxx) and retry."
                )
            values = src.read(band, masked=True).astype("float64")
            transform = src.transform
            raster_crs = CRS.from_user_input(src.crs.to_wkt())
    except rasterio.errors.RasterioIOError as exc:
        raise InputFileError(f"{path}: not a readable raster ({str(exc)[:80]}).") from None
    data = values.filled(np.nan)
    rows, cols = np.nonzero(np.isfinite(data) & (data > 0))
    weights = data[rows, cols]
    xs, ys = rasterio.transform.xy(transform, rows, cols, offset="center")
    tx, ty = Transformer.from_crs(raster_crs, CRS.from_user_input(crs), always_xy=True).transform(
        np.asarray(xs, float), np.asarray(ys, float)
    )
    ids = np.char.add(np.char.add(rows.astype(str), "_"), cols.astype(str))
    return gpd.GeoDataFrame(
        {"id": ids.astype(object), "weight": weights, "source": "raster"},
        geometry=shapely.points(np.column_stack([tx, ty])),
        crs=CRS.from_user_input(crs),
    )


def raster_total(path: str | Path, band: int = 1) -> float:
    """Sum of a raster's valid positive cells (nodata, NaN and negative values excluded)."""
    with rasterio.open(path) as src:
        data = src.read(band, masked=True).astype("float64").filled(np.nan)
    return float(np.nansum(np.where(data > 0, data, np.nan)))


def demand_from_polygons(
    path: str | Path,
    net: RoadNetwork,
    population_field: str,
    id_field: str | None = None,
    spacing_m: float = POLYGON_SAMPLE_SPACING_M,
    layer: str | None = None,
) -> gpd.GeoDataFrame:
    """Spread each polygon's population over the roads inside it; the total is preserved.

    Points are placed every ``spacing_m`` along the network's road pieces inside each polygon (people live along
    roads; a common dasymetric assumption, no single source) and share the polygon's population in proportion to
    road length. A polygon with no road inside puts its whole population on its representative point, which the
    coverage step snaps or reports as off-network.

    Raises
    ------
    FieldError
        The population (or id) field is missing or holds non-numeric / negative values.
    """
    path = Path(path)
    if not path.is_file():
        raise InputFileError(f"demand polygons {path} not found; check the path.")
    try:
        gdf = pyogrio.read_dataframe(path, layer=layer)
    except Exception as exc:
        raise InputFileError(f"{path}: not a readable polygon layer ({str(exc)[:80]}).") from None
    if gdf.crs is None:
        raise InputFileError(f"{path}: the layer has no CRS; assign one and retry.")
    if population_field not in gdf.columns:
        fields = ", ".join(c for c in gdf.columns if c != "geometry")
        raise FieldError(
            f"{path}: no population field '{population_field}' (fields: {fields}); name it with population_field."
        )
    if id_field is not None and id_field not in gdf.columns:
        raise FieldError(f"{path}: no id field '{id_field}'; name an existing field or leave it out.")
    pop = pd.to_numeric(gdf[population_field], errors="coerce")
    bad = pop.isna() | (pop < 0)
    if bad.any():
        row = int(np.flatnonzero(bad.to_numpy())[0])
        raise FieldError(
            f"{path}: feature {row + 1} has {population_field} '{gdf[population_field].iloc[row]}'; give a number >= 0."
        )
    gdf = gdf.to_crs(net.crs)
    polys = gdf.geometry.to_numpy()
    poly_ids = gdf[id_field].astype(str).to_numpy() if id_field else np.arange(1, len(gdf) + 1).astype(str)
    pop = pop.to_numpy(dtype=float)

    roads = net.road_lines().geometry.to_numpy()
    tree = shapely.STRtree(roads)
    poly_idx, road_idx = tree.query(polys, predicate="intersects")
    pieces = shapely.intersection(roads[road_idx], polys[poly_idx])
    pieces_len = shapely.length(pieces)
    keep = pieces_len > 0
    poly_idx, pieces, pieces_len = poly_idx[keep], pieces[keep], pieces_len[keep]
    n_pts = np.maximum(1, np.ceil(pieces_len / spacing_m).astype(int))
    piece_of_pt = np.repeat(np.arange(len(pieces)), n_pts)
    first = np.repeat(np.cumsum(n_pts) - n_pts, n_pts)
    frac = (np.arange(n_pts.sum()) - first + 0.5) / n_pts[piece_of_pt]
    pts = shapely.line_interpolate_point(pieces[piece_of_pt], frac, normalized=True)
    seg_len = (pieces_len / n_pts)[piece_of_pt]
    pt_poly = poly_idx[piece_of_pt]
    road_len_in_poly = np.bincount(pt_poly, weights=seg_len, minlength=len(polys))
    weights = pop[pt_poly] * seg_len / road_len_in_poly[pt_poly]

    roadless = np.flatnonzero((road_len_in_poly == 0) & (pop > 0))
    rep = shapely.point_on_surface(polys[roadless])
    all_pts = np.concatenate([pts, rep])
    all_poly = np.concatenate([pt_poly, roadless])
    all_w = np.concatenate([weights, pop[roadless]])
    order = np.lexsort((np.arange(len(all_poly)), all_poly))
    all_pts, all_poly, all_w = all_pts[order], all_poly[order], all_w[order]
    seq = np.arange(len(all_poly)) - np.searchsorted(all_poly, all_poly)
    ids = np.char.add(np.char.add(poly_ids[all_poly].astype(str), ":"), seq.astype(str))
    nonzero = all_w > 0
    return gpd.GeoDataFrame(
        {
            "id": np.asarray(ids, dtype=object)[nonzero],
            "weight": all_w[nonzero],
            "source": "polygons",
            "zone": poly_ids[all_poly][nonzero],
        },
        geometry=all_pts[nonzero],
        crs=net.crs,
    )


def demand_from_points(
    path: str | Path,
    crs: CRS | str,
    where: str | None = None,
    weight_field: str | None = None,
    time_field: str | None = None,
    start: str | None = None,
    end: str | None = None,
    id_field: str = "id",
    layer: str | None = None,
    *,
    max_rejected_share: float = DEFAULT_MAX_REJECTED_SHARE,
    area_bounds: tuple[float, float, float, float] | None = None,
) -> gpd.GeoDataFrame:
    """Incident points (or any ``id, lon, lat[, weight]`` points) as demand, with an optional filter.

    Parameters
    ----------
    where
        A filter on the file's fields in the usual GIS query syntax, e.g. ``"priority = 1"`` or
        ``"priority IN (1, 2) AND type <> 'transfer'"`` (see :mod:`coverkit.where`; never evaluated as code).
    weight_field
        Field holding a weight; default each point weighs 1 (or the ``weight`` column when present).
    time_field, start, end
        Keep points whose timestamp in ``time_field`` lies in ``[start, end)`` (ISO 8601).
    max_rejected_share
        Rows with no usable position (blank, not a number, out of range, 0,0) or outside ``area_bounds`` are set
        aside and listed in ``attrs["rejected"]`` (a :class:`~coverkit.travel.points.RejectedRows`); the import
        stops when more than this share of the rows (0..1, default 1 %) is rejected. Rejected rows are counted
        before the filter.
    area_bounds
        ``(xmin, ymin, xmax, ymax)`` in ``crs``: points outside are rejected as outside the study area.

    Returns
    -------
    geopandas.GeoDataFrame
        ``id``, ``weight``, ``source``, the file's other fields, point geometry; ``attrs["rejected"]`` and
        ``attrs["read"]`` (one line: rows, delimiter, coordinate columns).
    """
    gdf, kept, lines = read_point_rows(
        path, crs, id_field=id_field, what="demand points", layer=layer, max_rejected_share=max_rejected_share
    )
    read_text = gdf.attrs["read"]
    gdf.attrs = {}  # set again at the end
    rejected, rows_read = kept.table, kept.rows_read
    if area_bounds is not None:
        x0, y0, x1, y1 = area_bounds
        xy = shapely.get_coordinates(gdf.geometry.to_numpy())
        inside = (xy[:, 0] >= x0) & (xy[:, 0] <= x1) & (xy[:, 1] >= y0) & (xy[:, 1] <= y1)
        if len(inside) and inside.mean() < 0.5:
            raise FieldError(
                f"{path}: {int((~inside).sum()):,} of {len(inside):,} points lie outside the road network's extent; "
                "check that lon and lat are not swapped and that the points cover the same area as the roads."
            )
        if not inside.all():
            outside = pd.DataFrame(
                {
                    "line": lines[~inside],
                    "id": gdf["id"].to_numpy()[~inside],
                    "reason": "outside the study area",
                }
            )
            rejected = pd.concat([rejected, outside], ignore_index=True).sort_values("line", kind="stable")
            rejected = rejected.reset_index(drop=True)
            gdf = gdf[inside].reset_index(drop=True)
            check_rejected(rejected, rows_read, max_rejected_share, path, "demand points")
    gdf = _numeric_columns(gdf)
    n_read = len(gdf)
    if where:
        gdf = _apply_where(gdf, where, path)
    if time_field or start or end:
        gdf = _apply_time_window(gdf, path, time_field or settings.TIME_FIELD, start, end)
    if len(gdf) == 0:
        cond = " and ".join(x for x in (where, f"time in [{start}, {end})" if (start or end) else None) if x)
        raise FieldError(f"{path}: no demand point left after the filter ({cond}) out of {n_read:,}; widen the filter.")
    weight_col = weight_field or ("weight" if "weight" in gdf.columns else None)
    if weight_col:
        if weight_col not in gdf.columns:
            raise FieldError(f"{path}: no weight field '{weight_col}'; name an existing field.")
        w = pd.to_numeric(gdf[weight_col], errors="coerce")
        if w.isna().any() or (w < 0).any():
            row = int(np.flatnonzero((w.isna() | (w < 0)).to_numpy())[0])
            raise FieldError(
                f"{path}: point '{gdf['id'].iloc[row]}' has {weight_col} '{gdf[weight_col].iloc[row]}'; "
                "give a number >= 0."
            )
        weight = w.to_numpy(dtype=float)
    else:
        weight = np.ones(len(gdf))
    gdf = gdf.drop(columns=[c for c in ("weight",) if c in gdf.columns])
    gdf.insert(1, "weight", weight)
    gdf.insert(2, "source", "points")
    gdf = gdf.reset_index(drop=True)
    gdf.attrs = {"read": read_text, "rejected": RejectedRows(rejected, rows_read)}
    return gdf


def _numeric_columns(gdf: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    """Turn text columns that hold only numbers (and blanks, read as missing) into numbers (CSV fields arrive as
    text)."""
    for col in gdf.columns:
        if col in ("id", "geometry") or gdf[col].dtype.kind in "biuf":
            continue
        text = gdf[col].astype(str).str.strip()
        blank = (text == "") | gdf[col].isna()
        num = pd.to_numeric(text.mask(blank), errors="coerce")
        if len(num) and (num.notna() | blank).all() and num.notna().any():
            gdf[col] = num
    return gdf


def _apply_where(gdf: gpd.GeoDataFrame, where: str, path: str | Path) -> gpd.GeoDataFrame:
    return gdf[filter_mask(gdf, where, source=str(path))]


def _apply_time_window(gdf, path, time_field: str, start: str | None, end: str | None) -> gpd.GeoDataFrame:
    if time_field not in gdf.columns:
        raise FieldError(f"{path}: no time field '{time_field}' for the time window; name it with time_field.")
    stamps = pd.to_datetime(gdf[time_field], errors="coerce", format="ISO8601")
    if stamps.isna().any():
        row = int(np.flatnonzero(stamps.isna().to_numpy())[0])
        raise FieldError(
            f"{path}: point '{gdf['id'].iloc[row]}' has {time_field} '{gdf[time_field].iloc[row]}', "
            "not an ISO 8601 time."
        )
    keep = np.ones(len(gdf), dtype=bool)
    for bound, op in ((start, "ge"), (end, "lt")):
        if bound:
            try:
                t = pd.Timestamp(bound)
            except ValueError:
                raise FieldError(f"time bound '{bound}' is not an ISO 8601 time, e.g. 2026-06-01T00:00.") from None
            keep &= getattr(stamps, op)(t).to_numpy()
    return gdf[keep]


def check_extent(
    demand: gpd.GeoDataFrame, net: RoadNetwork, what: str, margin_m: float = EXTENT_MARGIN_M
) -> np.ndarray:
    """Mask of demand points inside the network's extent (grown by ``margin_m``).

    Raises
    ------
    FieldError
        When most points fall outside, the usual cause being swapped lon/lat or a wrong CRS.
    """
    x0, y0, x1, y1 = net.node_bounds()
    xy = shapely.get_coordinates(demand.geometry.to_numpy())
    inside = (xy[:, 0] >= x0 - margin_m) & (xy[:, 0] <= x1 + margin_m) & (xy[:, 1] >= y0 - margin_m)
    inside &= xy[:, 1] <= y1 + margin_m
    if len(inside) and inside.mean() < 0.5:
        raise FieldError(
            f"{what}: {int((~inside).sum())} of {len(inside)} points lie outside the road network's extent; "
            "check that lon and lat are not swapped and that the points cover the same area as the roads."
        )
    return inside


def load_demand(
    spec: str | Path,
    net: RoadNetwork,
    where: str | None = None,
    population_field: str | None = None,
    weight_field: str | None = None,
    id_field: str = "id",
    time_field: str | None = None,
    start: str | None = None,
    end: str | None = None,
    *,
    max_rejected_share: float = DEFAULT_MAX_REJECTED_SHARE,
) -> gpd.GeoDataFrame:
    """Read any demand file by its kind: raster, polygons (needs ``population_field``) or points.

    Point files keep going past a few bad rows (see :func:`demand_from_points`; points farther than 5 km outside
    the network's extent count as outside the study area): what was read goes to the progress line, a warning
    line names the rejected rows, and ``attrs["rejected"]`` lists them.
    """
    path = Path(spec)
    if where and (population_field or path.suffix.lower() in RASTER_SUFFIXES):
        kind = "a population raster" if path.suffix.lower() in RASTER_SUFFIXES else "population polygons"
        raise FieldError(f"{path} is {kind}; a filter (where) applies to point demand only - leave it out.")
    if path.suffix.lower() in RASTER_SUFFIXES:
        demand = demand_from_raster(path, net.crs)
    elif population_field:
        demand = demand_from_polygons(path, net, population_field, id_field=None if id_field == "id" else id_field)
    else:
        if not path.is_file():
            raise InputFileError(f"demand file {path} not found; check the path.")
        try:
            kinds = set() if path.suffix.lower() == ".csv" else {str(pyogrio.read_info(path).get("geometry_type"))}
        except Exception:
            kinds = set()
        if any("Polygon" in k for k in kinds):
            raise FieldError(f"{path} holds polygons; name the population field (population_field) to spread them.")
        x0, y0, x1, y1 = net.node_bounds()
        m = EXTENT_MARGIN_M
        demand = demand_from_points(
            path,
            net.crs,
            where,
            weight_field,
            time_field,
            start,
            end,
            id_field,
            max_rejected_share=max_rejected_share,
            area_bounds=(x0 - m, y0 - m, x1 + m, y1 + m),
        )
        if len(demand.attrs["rejected"]):
            warn(f"{path}: {demand.attrs['rejected'].text()}")
        return demand
    if len(demand) == 0:
        raise FieldError(f"{path}: no demand (all cells or features are empty or zero).")
    check_extent(demand, net, str(path))
    return demand


__all__ = [
    "check_extent",
    "demand_from_points",
    "demand_from_polygons",
    "demand_from_raster",
    "load_demand",
    "raster_total",
]
