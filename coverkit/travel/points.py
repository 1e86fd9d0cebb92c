"""Reading point files (bases, candidate sites, incident points) into a projected GeoDataFrame.

Accepted: a CSV with ``id, lon, lat`` (EPSG:4326 degrees; optional ``name``, ``units`` and any other columns kept;
comma, semicolon or tab separated; the usual names of the coordinate columns), or any point layer GeoPandas can read
(GeoPackage, GeoJSON, Shapefile, ...) with an id field. Bases and candidates are read strictly (a bad row is an
error); demand and incident files may set a few bad rows aside (``max_rejected_share``).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from pyproj import CRS

from coverkit import settings
from coverkit.errors import FieldError, InputFileError
from coverkit.progress import note

_CSV_SUFFIXES = {".csv", ".txt"}


#: Column names accepted for the coordinates of a CSV, case-insensitive, in order of preference (common practice).
LON_NAMES = ("lon", "long", "longitude", "lng", "x")
LAT_NAMES = ("lat", "latitude", "y")
#: Delimiters a CSV may use; the one found most often in the header line is taken.
CSV_DELIMITERS = (",", ";", "\t")
#: Default share of rows a point file may lose to bad coordinates before the import stops (1 %).
DEFAULT_MAX_REJECTED_SHARE = settings.MAX_REJECTED_SHARE

#: Names of the delimiters, for messages.
DELIMITER_NAMES = {",": "comma", ";": "semicolon", "\t": "tab"}


def read_points(
    path: str | Path,
    crs: CRS | str,
    id_field: str = "id",
    what: str = "points",
    layer: str | None = None,
    *,
    max_rejected_share: float | None = None,
) -> gpd.GeoDataFrame:
    """Read a point file and project it to ``crs``.

    Parameters
    ----------
    path
        CSV (``id`` and coordinates in degrees, EPSG:4326) or a point layer file. The CSV delimiter (comma,
        semicolon or tab) is found from the header line; the coordinate columns may be named
        ``lon``/``long``/``longitude``/``lng``/``x`` and ``lat``/``latitude``/``y`` in any case.
    crs
        Target (network) CRS, projected, metres.
    id_field
        Column holding the point id (ids must be present and unique).
    what
        Word used in messages (``"bases"``, ``"candidates"``).
    layer
        Layer name in a multi-layer file (default: the first layer).
    max_rejected_share
        ``None`` (bases, candidates): every row must have a valid position, the first bad one is an error. A share
        0..1 (demand and incident files): rows with a blank, non-numeric, out-of-range or 0,0 position, or without
        geometry, are set aside and listed in ``attrs["rejected"]`` (a :class:`RejectedRows`); the import stops
        only when more than this share of the rows is rejected.

    Returns
    -------
    geopandas.GeoDataFrame
        Column ``id`` (string) first, the other input columns, point geometry in ``crs``. Row order as in the file.
        ``attrs["read"]`` says what was read (rows, delimiter, coordinate columns) in one line; with
        ``max_rejected_share`` given, ``attrs["rejected"]`` is a :class:`RejectedRows`.

    Raises
    ------
    InputFileError, FieldError
        One-line messages naming the file, the column and the row.
    """
    return read_point_rows(path, crs, id_field, what, layer, max_rejected_share=max_rejected_share)[0]


@dataclass(frozen=True, eq=False)
class RejectedRows:
    """Rows of a point file set aside for want of a usable position.

    Attributes
    ----------
    table
        ``line`` (CSV line, header = 1, or feature number), ``id``, ``reason``; sorted by line.
    rows_read
        Rows in the file (blank lines not counted).

    Kept in a GeoDataFrame's ``attrs``: treat as read-only. pandas deep-copies and compares ``attrs`` in its
    operations, so copying returns the same object and equality is identity (a 50,000-row demand layer is not
    copied row by row at every step).
    """

    table: pd.DataFrame
    rows_read: int

    def __deepcopy__(self, memo: dict) -> RejectedRows:
        return self

    def __len__(self) -> int:
        return len(self.table)

    def text(self, verb: bool = True) -> str:
        """One line: how many, why (most common first) and the first line numbers; see :func:`rejected_text`."""
        return rejected_text(self.table, self.rows_read, verb=verb)


def read_point_rows(
    path: str | Path,
    crs: CRS | str,
    id_field: str = "id",
    what: str = "points",
    layer: str | None = None,
    *,
    max_rejected_share: float | None = None,
) -> tuple[gpd.GeoDataFrame, RejectedRows | None, np.ndarray]:
    """:func:`read_points` that also returns the rejected rows (``None`` when strict) and the line (or feature)
    number of each row kept."""
    path = Path(path)
    if not path.is_file():
        raise InputFileError(f"{what} file {path} not found; give a CSV with id, lon, lat or a point layer.")
    lenient = max_rejected_share is not None
    if path.suffix.lower() in _CSV_SUFFIXES:
        gdf, reasons, read_text = _read_csv(path, id_field, what, lenient)
    else:
        gdf, reasons, read_text = _read_layer(path, id_field, what, layer, lenient)
    lines = gdf.index.to_numpy()
    gdf = gdf.reset_index(drop=True)
    ids = gdf[id_field]
    stripped = ids.astype(str).str.strip()  # once: the blank check and the ids both use it
    blank = ids.isna() | (stripped == "")
    # lenient: a row without an id is an error only when its position is fine (else it is rejected with it)
    check = blank.to_numpy() & (pd.isna(reasons) if lenient else True)
    if check.any():
        row = int(np.flatnonzero(check)[0])
        raise FieldError(f"{path}: {_row_label(path, lines[row])} has no '{id_field}'; give every {what[:-1]} an id.")
    ids = stripped
    if lenient:
        ids = ids.mask(blank, "")
    dup = ids.duplicated(keep="first") & ~blank
    if dup.any():
        row = int(np.flatnonzero(dup.to_numpy())[0])
        raise FieldError(
            f"{path}: id '{ids.iloc[row]}' appears more than once (again at {_row_label(path, lines[row])}); "
            f"ids in '{id_field}' must be unique."
        )
    gdf = gdf.drop(columns=[id_field]).copy()
    gdf.insert(0, "id", ids.to_numpy())
    rows_read = len(gdf)
    if rows_read == 0:
        raise InputFileError(f"{path} holds no {what}; add at least one row.")
    rejected = None
    if lenient:
        bad = ~pd.isna(reasons)
        rejected = pd.DataFrame(
            {
                "line": lines[bad].astype(np.int64),
                "id": ids.to_numpy()[bad].astype(object),
                "reason": reasons[bad].astype(object),
            }
        )
        gdf = gdf[~bad]
        check_rejected(rejected, rows_read, max_rejected_share, path, what)
        if len(gdf) == 0:
            raise InputFileError(f"{path} holds no {what} with a position; give lon and lat on every row.")
    out = gdf.to_crs(CRS.from_user_input(crs)).reset_index(drop=True)
    out.attrs["read"] = read_text
    note(f"{what} {read_text}")
    if not lenient:
        return out, None, lines.astype(np.int64)
    kept = RejectedRows(rejected_table(rejected), rows_read)
    out.attrs["rejected"] = kept
    return out, kept, lines[~bad].astype(np.int64)


def rejected_table(records: RejectedRows | list[dict] | pd.DataFrame | None) -> pd.DataFrame:
    """Rejected rows as a table: ``line``, ``id``, ``reason`` (sorted by line)."""
    if isinstance(records, RejectedRows):
        return records.table.copy()
    df = pd.DataFrame(records if records is not None else [], columns=["line", "id", "reason"])
    return df.astype({"line": np.int64}).sort_values("line", kind="stable").reset_index(drop=True)


def check_rejected(rejected: pd.DataFrame, rows_read: int, max_share: float, path: str | Path, what: str) -> None:
    """Stop when more than ``max_share`` of ``rows_read`` rows were rejected.

    Raises
    ------
    FieldError
        One line: how many rows, why (most common reason first), the first line numbers, and the fix.
    """
    if not 0.0 <= float(max_share) <= 1.0:
        raise FieldError(f"the rejected-row limit must be a share 0..1 (0.01 = 1 %), got {max_share:g}.")
    n = len(rejected)
    if n == 0 or n <= max_share * rows_read:
        return
    raise FieldError(
        f"{path}: {rejected_text(rejected, rows_read, what)}, more than the {max_share * 100:g} % allowed; fix those "
        "rows (or check the coordinate columns), or raise the limit of rejected rows (max_rejected_share)."
    )


def rejected_text(rejected: pd.DataFrame, rows_read: int, what: str = "rows", verb: bool = True) -> str:
    """``"4 of 6,042 rows rejected (0.066 %: 2 blank position, 1 at 0,0, 1 lon not a number at lines 6, 11, 32 ...)"``.

    Reasons most common first; the first five line (or feature) numbers.
    """
    n = len(rejected)
    counts = rejected["reason"].value_counts().sort_index().sort_values(ascending=False, kind="stable")
    why = ", ".join(f"{c:,} {r}" for r, c in counts.items())
    first = ", ".join(str(int(x)) for x in np.sort(rejected["line"].to_numpy())[:5]) + (" ..." if n > 5 else "")
    share = n / rows_read * 100 if rows_read else 0.0
    at = "at lines" if n > 1 else "at line"
    return f"{n:,} of {rows_read:,} rows{' rejected' if verb else ''} ({share:.2g} %: {why}; {at} {first})"


def coordinate_fields(columns: list[str]) -> tuple[str | None, str | None]:
    """The columns holding lon and lat among ``columns`` (see :data:`LON_NAMES`, :data:`LAT_NAMES`)."""
    lower: dict[str, str] = {}
    for c in columns:
        lower.setdefault(c.lower(), c)
    lon = next((lower[n] for n in LON_NAMES if n in lower), None)
    lat = next((lower[n] for n in LAT_NAMES if n in lower), None)
    return lon, lat


def read_csv_text(path: Path, what: str, header: str) -> tuple[pd.DataFrame, str]:
    """A CSV read as text with its delimiter found from the header line.

    Row ``i`` of the result has index = its line number in the file (header = line 1); wholly blank lines are
    dropped (they keep their numbers out of the count).

    Returns
    -------
    df, delimiter
    """
    encoding = "utf-8-sig"
    try:
        with open(path, encoding=encoding, newline="") as fh:
            first = fh.readline()
            fh.read()
    except UnicodeDecodeError:
        # spreadsheet and CAD exports on Windows are often Windows-1252; every byte decodes, numbers are unchanged
        encoding = "cp1252"
        note(f"{path.name}: not UTF-8 text, read as Windows-1252")
        with open(path, encoding=encoding, errors="replace", newline="") as fh:
            first = fh.readline()
    counts = {d: first.count(d) for d in CSV_DELIMITERS}
    delimiter = max(CSV_DELIMITERS, key=lambda d: (counts[d], -CSV_DELIMITERS.index(d)))
    try:
        df = pd.read_csv(
            path,
            sep=delimiter,
            dtype=str,
            skipinitialspace=True,
            keep_default_na=False,
            skip_blank_lines=False,
            encoding=encoding,
            encoding_errors="replace",
        )
    except pd.errors.EmptyDataError:
        raise InputFileError(f"{path} is empty; give a CSV with a header line {header}.") from None
    except pd.errors.ParserError as exc:
        raise InputFileError(f"{path} is not a readable CSV ({str(exc).splitlines()[0]}); fix the file.") from None
    df.columns = [str(c).strip() for c in df.columns]
    df.index = np.arange(len(df)) + 2
    if not len(df.columns):
        return df.iloc[:0], delimiter
    # wholly blank lines: look only at rows whose first cell is blank
    empty = (df.iloc[:, 0].str.strip() == "").to_numpy()
    if empty.any():
        empty[empty] = (df[empty].apply(lambda col: col.str.strip()) == "").all(axis=1).to_numpy()
    return df[~empty], delimiter


def lonlat_columns(
    df: pd.DataFrame,
    path: Path,
    give: str = "degrees",
    lon_field: str = "lon",
    lat_field: str = "lat",
    lenient: bool = False,
) -> tuple[np.ndarray, np.ndarray] | tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The lon and lat text columns of a CSV read as strings, as float degrees (EPSG:4326).

    Parameters
    ----------
    df
        The CSV as read with ``dtype=str``; row ``i`` is line ``i + 2`` of the file (the header is line 1) unless
        the index holds the line numbers (as from :func:`read_csv_text`).
    path
        The file, for messages.
    give
        What the user should give, for messages (``"degrees"``, ``"the incident position in degrees"``).
    lon_field, lat_field
        The columns holding lon and lat.
    lenient
        ``False``: the first bad value is an error. ``True``: also return, per row, why its position is rejected
        (``None`` when it is fine): blank, not a number, out of range, or 0,0 (the usual placeholder of a missing
        position in a CAD export, common practice).

    Raises
    ------
    FieldError
        (not lenient) One line naming the file, the line and the column: a value that is not a number, one
        outside -180..180 (lon) / -90..90 (lat), or a position at 0,0.
    """
    lines = df.index.to_numpy() if df.index.dtype.kind in "iu" and len(df) and df.index[0] >= 2 else None
    if lines is None:
        lines = np.arange(len(df)) + 2
    coords = {}
    reasons = np.full(len(df), None, dtype=object)
    for col, name, bound in ((lon_field, "lon", 180.0), (lat_field, "lat", 90.0)):
        text = df[col].astype(str).str.strip()
        # a decimal comma (41,05), as semicolon-separated exports write numbers in many locales
        if text.str.contains(",", regex=False).any():
            text = text.str.replace(r"^([+-]?\d+),(\d+)$", r"\1.\2", regex=True)
        val = pd.to_numeric(text, errors="coerce").to_numpy(dtype=float, copy=True)
        bad = ~np.isfinite(val)
        if lenient:
            blank = (text == "").to_numpy()
            reasons[bad & blank & pd.isna(reasons)] = "blank position"
            reasons[bad & ~blank & pd.isna(reasons)] = f"{name} not a number"
        elif bad.any():
            row = int(np.flatnonzero(bad)[0])
            value = str(df[col].iloc[row]).strip()
            has = f"has {col} '{value}', not a number" if value else f"has no {col}"
            raise FieldError(f"{path}: line {lines[row]} {has}; give {give} (EPSG:4326).")
        out = np.abs(val) > bound
        if lenient:
            reasons[out & pd.isna(reasons)] = f"{name} outside -{bound:g}..{bound:g}"
        elif out.any():
            row = int(np.flatnonzero(out)[0])
            raise FieldError(
                f"{path}: line {lines[row]} has {col} {val[row]:g}, outside -{bound:g}..{bound:g}; "
                f"give {give} (EPSG:4326) and check that lon and lat are not swapped."
            )
        coords[name] = val
    zero = (coords["lon"] == 0) & (coords["lat"] == 0)
    if not lenient:
        if zero.any():
            row = int(np.flatnonzero(zero)[0])
            raise FieldError(
                f"{path}: line {lines[row]} is at 0,0, the usual placeholder of a missing position; give {give} "
                "(EPSG:4326)."
            )
        return coords["lon"], coords["lat"]
    reasons[zero & pd.isna(reasons)] = "at 0,0"
    ok = pd.isna(reasons)
    coords["lon"][~ok] = 0.0
    coords["lat"][~ok] = 0.0
    return coords["lon"], coords["lat"], reasons


def _row_label(path: Path, line: int) -> str:
    """Human row number: the CSV line (header is line 1), or the 1-based feature number."""
    return f"line {line}" if path.suffix.lower() in _CSV_SUFFIXES else f"feature {line}"


def _read_csv(path: Path, id_field: str, what: str, lenient: bool) -> tuple[gpd.GeoDataFrame, np.ndarray, str]:
    df, delimiter = read_csv_text(path, what, f"{id_field}, lon, lat")
    lower = {c.lower(): c for c in df.columns}
    if id_field not in df.columns and id_field.lower() in lower:
        df = df.rename(columns={lower[id_field.lower()]: id_field})
    lon_col, lat_col = coordinate_fields([c for c in df.columns if c != id_field])
    missing = [
        label
        for label, col in ((id_field, id_field if id_field in df.columns else None), ("lon", lon_col), ("lat", lat_col))
        if col is None
    ]
    if missing:
        names = {"lon": "/".join(LON_NAMES), "lat": "/".join(LAT_NAMES)}
        raise FieldError(
            f"{path} has no column '{missing[0]}' (columns: {', '.join(df.columns)}; {DELIMITER_NAMES[delimiter]}-"
            f"separated); a {what} CSV needs {id_field} and the position in degrees (EPSG:4326) in columns named "
            f"{names['lon']} and {names['lat']}."
        )
    if lenient:
        lon, lat, reasons = lonlat_columns(df, path, lon_field=lon_col, lat_field=lat_col, lenient=True)
    else:
        lon, lat = lonlat_columns(df, path, lon_field=lon_col, lat_field=lat_col)
        reasons = np.full(len(df), None, dtype=object)
    for col in ("units",):
        if col in df.columns:
            units = pd.to_numeric(df[col].replace("", "1"), errors="coerce")
            if units.isna().any() or (units < 0).any():
                row = int(np.flatnonzero((units.isna() | (units < 0)).to_numpy())[0])
                raise FieldError(
                    f"{path}: line {df.index[row]} has units '{df[col].iloc[row]}'; give a whole number >= 0."
                )
            df[col] = units.astype(int)
    df = df.drop(columns=[lon_col, lat_col])
    read_text = (
        f"{path.name}: {len(df):,} row{'' if len(df) == 1 else 's'}, {DELIMITER_NAMES[delimiter]}-separated, "
        f"lon from '{lon_col}', "
        f"lat from '{lat_col}'"
    )
    gdf = gpd.GeoDataFrame(df, geometry=gpd.points_from_xy(lon, lat), crs="EPSG:4326", index=df.index)
    return gdf, reasons, read_text


def _read_layer(
    path: Path, id_field: str, what: str, layer: str | None, lenient: bool
) -> tuple[gpd.GeoDataFrame, np.ndarray, str]:
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
    gdf.index = np.arange(len(gdf)) + 1  # feature numbers, for messages
    reasons = np.full(len(gdf), None, dtype=object)
    geom = gdf.geometry
    empty = (geom.isna() | geom.is_empty).to_numpy()
    if empty.any() and not lenient:
        row = int(np.flatnonzero(empty)[0])
        raise FieldError(f"{path}: feature {row + 1} has no geometry; give every {what[:-1]} a point.")
    reasons[empty] = "no geometry"
    kinds = np.where(empty, "Point", geom.geom_type.fillna("Point").to_numpy())
    multi = kinds == "MultiPoint"
    if multi.any():
        one = np.array([len(g.geoms) == 1 for g in geom[multi]])
        if not one.all():
            row = int(np.flatnonzero(multi)[np.flatnonzero(~one)[0]])
            raise FieldError(f"{path}: feature {row + 1} is a multi-point; give one point per {what[:-1]}.")
        gdf.loc[multi, "geometry"] = geom[multi].apply(lambda g: g.geoms[0])
        kinds = np.where(empty, "Point", gdf.geometry.geom_type.fillna("Point").to_numpy())
    if (kinds != "Point").any():
        row = int(np.flatnonzero(kinds != "Point")[0])
        raise FieldError(f"{path}: feature {row + 1} is a {kinds[row]}, not a point; give a point layer.")
    if lenient:
        xy = np.full((len(gdf), 2), np.nan)
        xy[~empty] = shapely.get_coordinates(gdf.geometry.to_numpy()[~empty])
        reasons[~empty & (xy[:, 0] == 0) & (xy[:, 1] == 0)] = "at 0,0"
        gdf.loc[empty, "geometry"] = shapely.points(0.0, 0.0)
    return gdf, reasons, f"{path.name}: {len(gdf):,} features"
