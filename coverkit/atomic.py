"""Atomic output: write to a temporary file in the target's folder, then rename over the target.

A failed or interrupted run never leaves a half-written output, and an existing output is replaced only once the
new one is complete.
"""

from __future__ import annotations

import contextlib
import math
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path

from coverkit.process_setting import NestedSetting

#: GDAL setting of the SQLite ``synchronous`` pragma of the GeoPackage driver (see :func:`unsynced_gpkg`).
_SQLITE_SYNC_OPTION = "OGR_SQLITE_SYNCHRONOUS"


def _sync_off() -> object:
    import pyogrio

    before = pyogrio.get_gdal_config_option(_SQLITE_SYNC_OPTION)
    pyogrio.set_gdal_config_options({_SQLITE_SYNC_OPTION: "OFF"})
    return before


def _sync_back(before: object) -> None:
    import pyogrio

    pyogrio.set_gdal_config_options({_SQLITE_SYNC_OPTION: before})


#: Writers inside :func:`unsynced_gpkg` (threads of a server may write at once) share one change of the setting.
_UNSYNCED = NestedSetting(_sync_off, _sync_back)


@contextlib.contextmanager
def atomic_path(target: str | os.PathLike[str]) -> Iterator[Path]:
    """Yield a temporary path beside ``target``; on success rename it to ``target``.

    The temporary name keeps the target's suffix so that drivers which pick a format by extension (GeoPackage,
    GeoTIFF) still do. On an exception the temporary file is removed and ``target`` is left untouched.

    Parameters
    ----------
    target
        Final output path. Its folder is created if missing.
    """
    target = Path(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp_name = tempfile.mkstemp(prefix=f".{target.stem}.", suffix=f".part{target.suffix}", dir=target.parent)
    os.close(fd)
    tmp = Path(tmp_name)
    tmp.unlink()  # writers such as GDAL refuse to open an existing empty file as a new dataset
    try:
        yield tmp
        os.replace(tmp, target)
    finally:
        for leftover in (tmp, Path(f"{tmp}-journal"), Path(f"{tmp}-wal"), Path(f"{tmp}-shm")):
            with contextlib.suppress(FileNotFoundError):
                leftover.unlink()


@contextlib.contextmanager
def unsynced_gpkg() -> Iterator[None]:
    """While inside, GDAL writes GeoPackages without waiting for the disk after each statement (SQLite
    ``synchronous=OFF``, GDAL's ``OGR_SQLITE_SYNCHRONOUS``); for files written under :func:`atomic_path`'s temporary
    name only.

    Why: GDAL creates a new GeoPackage without syncing, but each layer appended to it costs some 30 disk syncs
    (its tables, triggers and spatial index are made one statement at a time), about 0.1 s per layer on a busy disk.
    The temporary file is renamed only when complete and is removed after a failure, so the syncs protect nothing
    a reader can see; the file's content is the same. The process-wide GDAL setting is restored when the last of
    several threads inside leaves.

    >>> import pyogrio
    >>> before = pyogrio.get_gdal_config_option("OGR_SQLITE_SYNCHRONOUS")
    >>> with unsynced_gpkg():  # pyogrio reads GDAL's ON/OFF as booleans
    ...     pyogrio.get_gdal_config_option("OGR_SQLITE_SYNCHRONOUS")
    False
    >>> pyogrio.get_gdal_config_option("OGR_SQLITE_SYNCHRONOUS") == before
    True
    """
    with _UNSYNCED.held():
        yield


def write_text_atomic(target: str | os.PathLike[str], text: str) -> Path:
    """Write ``text`` (UTF-8) to ``target`` atomically and return the path."""
    with atomic_path(target) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return Path(target)


def write_bytes_atomic(target: str | os.PathLike[str], data: bytes) -> Path:
    """Write ``data`` to ``target`` atomically and return the path."""
    with atomic_path(target) as tmp:
        tmp.write_bytes(data)
    return Path(target)


def null_missing(frame: object) -> object:
    """A copy of a table ready to be written: "no value" as a missing value (NULL), never a stand-in.

    Times and distances of places not reached are ``inf`` in memory and ids of bases not found are ``""``; a file
    holds NULL for both (an empty CSV field, SQL NULL in a GeoPackage), so that a desktop GIS or a spreadsheet
    never averages ``inf`` nor groups by an empty id. Other values of text (object) columns are written as text.
    The geometry column is left as it is.
    """
    import numpy as np
    import pandas as pd

    out = frame.copy()
    geometry = getattr(frame, "_geometry_column_name", None)
    for col in out.columns:
        if col == geometry or col == "geometry":
            continue
        values = out[col]
        if pd.api.types.is_float_dtype(values.dtype):
            out[col] = values.where(np.isfinite(values.to_numpy(dtype=float, na_value=np.nan)))
        elif values.dtype == object or pd.api.types.is_string_dtype(values.dtype):
            raw = values.to_numpy(dtype=object)
            if pd.api.types.infer_dtype(raw, skipna=True) in ("string", "empty"):
                # text and missing values only (ids, base names): compared in bulk, no per-row Python
                text, missing = raw.copy(), pd.isna(raw)
                missing[~missing] = raw[~missing] == ""
                text[missing] = None
            else:
                missing = pd.isna(raw) | np.fromiter((_is_blank(v) for v in raw), dtype=bool, count=len(raw))
                text = np.array([None if m else str(v) for v, m in zip(raw, missing, strict=True)], dtype=object)
            out[col] = pd.Series(text, index=out.index, dtype=object)
    return out


def _is_blank(value: object) -> bool:
    """An empty string or an infinite float (the in-memory stand-ins for "none")."""
    return (isinstance(value, str) and value == "") or (isinstance(value, float) and math.isinf(value))


def write_csv_atomic(target: str | os.PathLike[str], frame: object) -> Path:
    """Write a table as CSV (UTF-8, no index) atomically; missing values (``inf``, NaN, ``""``) as empty fields."""
    return write_text_atomic(target, null_missing(frame).to_csv(index=False))


def write_gpkg_layers(target: str | os.PathLike[str], layers: dict) -> Path:
    """Write several named layers (GeoDataFrames, or DataFrames as attribute tables) into one GeoPackage atomically.

    Layers are written in the order given; empty layers are written with their columns so that readers always
    find every layer name. Missing values (``inf``, NaN, ``""``, None) are written as NULL (:func:`null_missing`).
    """
    import geopandas as gpd
    import pyogrio

    from coverkit.gpkg_batches import BATCH_ROWS, frame_rows, write_layer

    target = Path(target)
    with atomic_path(target) as tmp, unsynced_gpkg():
        first = True
        for name, frame in layers.items():
            frame = null_missing(frame.reset_index(drop=True))
            if isinstance(frame, gpd.GeoDataFrame) and len(frame) == 0:
                # GDAL needs a geometry type for an empty spatial layer
                pyogrio.write_dataframe(
                    frame, tmp, layer=name, driver="GPKG", append=not first, geometry_type="Unknown"
                )
            elif isinstance(frame, gpd.GeoDataFrame) and len(frame) >= BATCH_ROWS and _one_geometry_type(frame):
                # a big layer (a million demand points) goes as Arrow batches: the same layer, written faster
                write_layer(frame_rows(frame), tmp, layer=name, append=not first)
            else:
                pyogrio.write_dataframe(frame, tmp, layer=name, driver="GPKG", append=not first)
            first = False
    return target


def _one_geometry_type(frame) -> bool:
    """Whether every row of a GeoDataFrame has the same geometry type and none is missing (the Arrow batch path
    writes one declared type; mixed single and multi parts keep GDAL's own promotion)."""
    import shapely

    kinds = shapely.get_type_id(frame.geometry.to_numpy())
    return bool(len(kinds)) and bool((kinds == kinds[0]).all()) and int(kinds[0]) >= 0
