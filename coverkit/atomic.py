"""Atomic output: write to a temporary file in the target's folder, then rename over the target.

A failed or interrupted run never leaves a half-written output, and an existing output is replaced only once the
new one is complete.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path


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


def write_gpkg_layers(target: str | os.PathLike[str], layers: dict) -> Path:
    """Write several named layers (GeoDataFrames, or DataFrames as attribute tables) into one GeoPackage atomically.

    Layers are written in the order given; empty layers are written with their columns so that readers always
    find every layer name.
    """
    import geopandas as gpd
    import pyogrio

    target = Path(target)
    with atomic_path(target) as tmp:
        first = True
        for name, frame in layers.items():
            frame = frame.reset_index(drop=True)
            for col in frame.columns:
                if frame[col].dtype == object and col != "geometry":
                    frame[col] = frame[col].astype(str)
            if isinstance(frame, gpd.GeoDataFrame) and len(frame) == 0:
                # GDAL needs a geometry type for an empty spatial layer
                pyogrio.write_dataframe(
                    frame, tmp, layer=name, driver="GPKG", append=not first, geometry_type="Unknown"
                )
            else:
                pyogrio.write_dataframe(frame, tmp, layer=name, driver="GPKG", append=not first)
            first = False
    return target
