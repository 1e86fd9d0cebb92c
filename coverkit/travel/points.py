"""Reading point files (bases, candidate sites, incident points) into a projected GeoDataFrame.

Accepted: a CSV with ``id, lon, lat`` (EPSG:4326 degrees; optional ``name``, ``units`` and any other columns kept),
or any point layer GeoPandas can read (GeoPackage, GeoJSON, Shapefile, ...) with an id field.
"""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
from pyproj import CRS

from coverkit.errors import FieldError, InputFileError

_CSV_SUFFIXES = {".csv", ".txt"}


def read_points(
    path: str | Path,
    crs: CRS | str,
    id_field: str = "id",
    what: str = "points",
    layer: str | None = None,
) -> gpd.GeoDataFrame:
    """Read a point file and project it to ``crs``.

    Parameters
    ----------
    path
        CSV (``id, lon, lat`` in degrees, EPSG:4326) or a point layer file.
    crs
        Target (network) CRS, projected, metres.
    id_field
        Column holding the point id (ids must be present and unique).
    what
        Word used in messages (``"bases"``, ``"candidates"``).
    layer
        Layer name in a multi-layer file (default: the first layer).

    Returns
    -------
    geopandas.GeoDataFrame
        Column ``id`` (string) first, the other input columns, point geometry in ``crs``. Row order as in the file.

    Raises
    ------
    InputFileError, FieldError
        One-line messages naming the file, the column and the row.
    """
    path = Path(path)
    if not path.is_file():
        raise InputFileError(f"{what} file {path} not found; give a CSV with id, lon, lat or a point layer.")
    if path.suffix.lower() in _CSV_SUFFIXES:
        gdf = _read_csv(path, id_field, what)
    else:
        gdf = _read_layer(path, id_field, what, layer)
    ids = gdf[id_field]
    blank = ids.isna() | (ids.astype(str).str.strip() == "")
    if blank.any():
        row = int(np.flatnonzero(blank.to_numpy())[0])
        raise FieldError(f"{path}: {_row_label(path, row)} has no '{id_field}'; give every {what[:-1]} an id.")
    ids = ids.astype(str).str.strip()
    dup = ids.duplicated(keep="first")
    if dup.any():
        row = int(np.flatnonzero(dup.to_numpy())[0])
        raise FieldError(
            f"{path}: id '{ids.iloc[row]}' appears more than once (again at {_row_label(path, row)}); "
            f"ids in '{id_field}' must be unique."
        )
    gdf = gdf.drop(columns=[id_field]).copy()
    gdf.insert(0, "id", ids.to_numpy())
    if len(gdf) == 0:
        raise InputFileError(f"{path} holds no {what}; add at least one row.")
    return gdf.to_crs(CRS.from_user_input(crs)).reset_index(drop=True)


def lonlat_columns(df: pd.DataFrame, path: Path, give: str = "degrees") -> tuple[np.ndarray, np.ndarray]:
    """The ``lon`` and ``lat`` text columns of a CSV read as strings, as float degrees (EPSG:4326).

    Parameters
    ----------
    df
        The CSV as read with ``dtype=str``; row ``i`` is line ``i + 2`` of the file (the header is line 1).
    path
        The file, for messages.
    give
        What the user should give, for messages (``"degrees"``, ``"the incident position in degrees"``).

    Raises
    ------
    FieldError
        One line naming the file, the line and the column: a value that is not a number, or one outside
        -180..180 (lon) / -90..90 (lat).
    """
    coords = {}
    for col, bound in (("lon", 180.0), ("lat", 90.0)):
        val = pd.to_numeric(df[col].str.strip(), errors="coerce").to_numpy(dtype=float)
        bad = ~np.isfinite(val)
        if bad.any():
            row = int(np.flatnonzero(bad)[0])
            raise FieldError(
                f"{path}: line {row + 2} has {col} '{df[col].iloc[row]}', not a number; give {give} (EPSG:4326)."
            )
        out = np.abs(val) > bound
        if out.any():
            row = int(np.flatnonzero(out)[0])
            raise FieldError(
                f"{path}: line {row + 2} has {col} {val[row]:g}, outside -{bound:g}..{bound:g}; "
                f"give {give} (EPSG:4326) and check that lon and lat are not swapped."
            )
        coords[col] = val
    return coords["lon"], coords["lat"]


def _row_label(path: Path, row: int) -> str:
    """Human row number: the CSV line (header is line 1), or the 1-based feature number."""
    return f"line {row + 2}" if path.suffix.lower() in _CSV_SUFFIXES else f"feature {row + 1}"


def _read_csv(path: Path, id_field: str, what: str) -> gpd.GeoDataFrame:
    try:
        df = pd.read_csv(path, dtype=str, skipinitialspace=True, keep_default_na=False)
    except pd.errors.EmptyDataError:
        raise InputFileError(f"{path} is empty; give a CSV with a header line id, lon, lat.") from None
    except (pd.errors.ParserError, UnicodeDecodeError) as exc:
        raise InputFileError(f"{path} is not a readable CSV ({str(exc).splitlines()[0]}); fix the file.") from None
    df.columns = [str(c).strip() for c in df.columns]
    lower = {c.lower(): c for c in df.columns}
    for need in (id_field, "lon", "lat"):
        if need not in df.columns and need.lower() in lower:
            df = df.rename(columns={lower[need.lower()]: need})
    missing = [c for c in (id_field, "lon", "lat") if c not in df.columns]
    if missing:
        raise FieldError(
            f"{path} has no column '{missing[0]}' (columns: {', '.join(df.columns)}); "
            f"a {what} CSV needs {id_field}, lon, lat (degrees, EPSG:4326)."
        )
    lon, lat = lonlat_columns(df, path)
    for col in ("units",):
        if col in df.columns:
            units = pd.to_numeric(df[col].replace("", "1"), errors="coerce")
            if units.isna().any() or (units < 0).any():
                row = int(np.flatnonzero((units.isna() | (units < 0)).to_numpy())[0])
                raise FieldError(f"{path}: line {row + 2} has units '{df[col].iloc[row]}'; give a whole number >= 0.")
            df[col] = units.astype(int)
    df = df.drop(columns=["lon", "lat"])
    return gpd.GeoDataFrame(df, geometry=gpd.points_from_xy(lon, lat), crs="EPSG:4326")


def _read_layer(path: Path, id_field: str, what: str, layer: str | None) -> gpd.GeoDataFrame:
    try:
        gdf = gpd.read_file(path, layer=layer) if layer else gpd.read_file(path)
    except Exception as exc:  # pyogrio raises several types for unreadable files
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise InputFileError(f"{path} cannot be read as a point layer ({first}); give a CSV or a GIS layer.") from None
    if id_field not in gdf.columns:
        cols = ", ".join(c for c in gdf.columns if c != "geometry")
        raise FieldError(f"{path} has no field '{id_field}' (fields: {cols}); name the id field with id_field.")
    if gdf.crs is None:
        raise InputFileError(f"{path} has no coordinate reference system; save it with one (e.g. EPSG:4326).")
    geom = gdf.geometry
    empty = geom.isna() | geom.is_empty
    if empty.any():
        row = int(np.flatnonzero(empty.to_numpy())[0])
        raise FieldError(f"{path}: feature {row + 1} has no geometry; give every {what[:-1]} a point.")
    kinds = geom.geom_type.to_numpy()
    multi = kinds == "MultiPoint"
    if multi.any():
        one = np.array([len(g.geoms) == 1 for g in geom[multi]])
        if not one.all():
            row = int(np.flatnonzero(multi)[np.flatnonzero(~one)[0]])
            raise FieldError(f"{path}: feature {row + 1} is a multi-point; give one point per {what[:-1]}.")
        gdf.loc[multi, "geometry"] = geom[multi].apply(lambda g: g.geoms[0])
        kinds = gdf.geometry.geom_type.to_numpy()
    if (kinds != "Point").any():
        row = int(np.flatnonzero(kinds != "Point")[0])
        raise FieldError(f"{path}: feature {row + 1} is a {kinds[row]}, not a point; give a point layer.")
    return gdf
