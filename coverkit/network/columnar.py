"""The columnar copy of a saved network: the engine's arrays as NumPy ``.npy`` files beside the GeoPackage.

Why: the GeoPackage is the file users open in a desktop GIS, but reading a million-node one takes tens of seconds
(a feature at a time through OGR) and builds every geometry. The copy keeps each column as one ``.npy`` file that
``np.load(mmap_mode="c")`` maps without reading (copy-on-write: callers get writeable arrays, the files never change);
edge geometries are kept as flat coordinates and offsets (shapely's ragged-array layout) and built only for the edges
a step asks for. NumPy files were chosen over Arrow/Parquet because they map with no decoding (Arrow is used only to
hand the GeoPackage's rows to GDAL, :mod:`coverkit.gpkg_batches`).

Layout of ``<network>.gpkg.arrays/``: ``manifest.json`` (format, the GeoPackage's build id, size and modification
time, the CRS, profile and build summary, the columns and their kinds) and one ``.npy`` per array. Text columns are
kept as integer codes into a JSON list of their distinct values.

Freshness: the copy is used only when the GeoPackage's size and modification time (ns) are the ones recorded and its
``build_info`` holds the same build id (read with one SQLite query, the GeoPackage being an SQLite file); anything
else (a missing, stale or unreadable copy) makes :meth:`RoadNetwork.load` read the GeoPackage and write the copy again.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import shutil
import sqlite3
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

#: Bumped when the layout changes; a copy of another format is rebuilt.
COPY_FORMAT = 1
COPY_SUFFIX = ".arrays"
MANIFEST = "manifest.json"


def copy_dir(gpkg: str | os.PathLike[str]) -> Path:
    """Folder of the columnar copy of the network GeoPackage ``gpkg``."""
    gpkg = Path(gpkg)
    return gpkg.with_name(gpkg.name + COPY_SUFFIX)


def file_stamp(path: Path) -> dict[str, int]:
    """Size (bytes) and modification time (ns) of a file: the cheap half of the freshness check."""
    st = path.stat()
    return {"size": int(st.st_size), "mtime_ns": int(st.st_mtime_ns)}


def content_id(arrays: dict[str, np.ndarray]) -> str:
    """A build id from the network's arrays (BLAKE2b of their bytes, in name order): deterministic, so saving the
    same network twice gives the same GeoPackage."""
    h = hashlib.blake2b(digest_size=16)
    for name in sorted(arrays):
        arr = np.ascontiguousarray(arrays[name])
        h.update(name.encode())
        h.update(str(arr.dtype).encode())
        h.update(memoryview(arr).cast("B"))
    return h.hexdigest()


def gpkg_build_id(gpkg: Path, info_layer: str) -> str | None:
    """The ``build_id`` row of the GeoPackage's info table, read-only through SQLite; None when absent."""
    try:
        con = sqlite3.connect(f"{gpkg.resolve().as_uri()}?mode=ro", uri=True)
        try:
            row = con.execute(f'SELECT value FROM "{info_layer}" WHERE key = ?', ("build_id",)).fetchone()
        finally:
            con.close()
    except sqlite3.Error:
        return None
    return None if row is None else str(row[0])


@dataclass
class Table:
    """One table of the copy: its columns as arrays (plain or text codes), in order, and its length."""

    length: int
    columns: dict[str, np.ndarray] = field(default_factory=dict)
    text: dict[str, list] = field(default_factory=dict)  # text column -> distinct values (codes index them)

    def select(self, names: list[str]) -> Table:
        """The columns ``names`` only, in that order (the arrays shared, not copied)."""
        return Table(
            self.length, {c: self.columns[c] for c in names}, {c: self.text[c] for c in names if c in self.text}
        )

    def series(self, name: str, rows: slice | None = None) -> np.ndarray | pd.api.extensions.ExtensionArray:
        """The column ``name`` (its ``rows`` only, when given) as loaded from the GeoPackage would give it (text:
        pandas ``str``, NaN for null)."""
        arr = self.columns[name]
        if rows is not None:
            arr = arr[rows]
        if name not in self.text:
            return arr
        values = np.asarray(self.text[name] + [np.nan], dtype=object)
        return pd.array(values[np.where(arr < 0, len(values) - 1, arr)], dtype="str")


def split_table(frame: pd.DataFrame, *, geometry: bool) -> tuple[Table, dict[str, np.ndarray]]:
    """A frame's attribute columns as a :class:`Table` and, with ``geometry``, its geometry as ragged arrays."""
    import shapely

    table = Table(len(frame))
    for name in frame.columns:
        if name == "geometry":
            continue
        col = frame[name]
        kind = col.dtype.kind if isinstance(col.dtype, np.dtype) else "O"
        if kind in "biuf":
            table.columns[name] = col.to_numpy()
        else:
            codes, uniques = pd.factorize(col, use_na_sentinel=True)
            table.columns[name] = codes.astype(np.int32)
            table.text[name] = [str(u) for u in uniques]
    geo: dict[str, np.ndarray] = {}
    if geometry:
        _, coords, offsets = shapely.to_ragged_array(frame.geometry.to_numpy())
        geo["coords"] = np.ascontiguousarray(coords)
        geo["offsets"] = np.asarray(offsets[0], dtype=np.int64)
    return table, geo


def stage_copy(
    gpkg: Path,
    *,
    nodes: Table,
    node_xy: np.ndarray,
    edges: Table,
    edge_geo: dict[str, np.ndarray],
    extra: dict[str, np.ndarray] | None = None,
) -> Path:
    """Write the arrays of the copy of ``gpkg`` into a temporary folder beside it (see :func:`commit_copy`)."""
    target = copy_dir(gpkg)
    target.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent))
    try:
        tmp.chmod(0o755)  # mkdtemp makes it private; the copy is as readable as the GeoPackage beside it
        arrays = {f"nodes.{k}": v for k, v in nodes.columns.items()}
        arrays["nodes.geometry_xy"] = node_xy
        arrays.update({f"edges.{k}": v for k, v in edges.columns.items()})
        arrays.update({f"edges.geometry_{k}": v for k, v in edge_geo.items()})
        arrays.update(extra or {})
        for name, arr in arrays.items():
            np.save(tmp / f"{name}.npy", np.ascontiguousarray(arr), allow_pickle=False)
        listing = {
            "nodes": {"length": nodes.length, "columns": list(nodes.columns), "text": nodes.text},
            "edges": {"length": edges.length, "columns": list(edges.columns), "text": edges.text},
            "arrays": {name: [str(arr.dtype), list(arr.shape)] for name, arr in arrays.items()},
        }
        (tmp / "listing.json").write_text(json.dumps(listing), encoding="utf-8")
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return tmp


def commit_copy(gpkg: Path, staged: Path, *, build_id: str | None, meta: dict) -> Path:
    """Stamp a staged copy with the GeoPackage ``gpkg`` (which must be in place) and rename it over the old copy,
    so a reader sees the old copy or the new one, never half of one."""
    target = copy_dir(gpkg)
    try:
        listing = json.loads((staged / "listing.json").read_text(encoding="utf-8"))
        (staged / "listing.json").unlink()
        manifest = {"format": COPY_FORMAT, "build_id": build_id, "gpkg": file_stamp(gpkg), "meta": meta, **listing}
        (staged / MANIFEST).write_text(json.dumps(manifest), encoding="utf-8")
        old = None
        if target.exists():
            old = target.with_name(f".{target.name}.old.{os.getpid()}")
            os.replace(target, old)
        os.replace(staged, target)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
    finally:
        if staged.exists():
            shutil.rmtree(staged, ignore_errors=True)
    return target


def write_copy(gpkg: Path, *, build_id: str | None, meta: dict, **tables) -> Path:
    """Write the copy of ``gpkg`` (already in place) in one go: :func:`stage_copy` then :func:`commit_copy`."""
    return commit_copy(gpkg, stage_copy(gpkg, **tables), build_id=build_id, meta=meta)


@dataclass
class Copy:
    """An opened, fresh columnar copy: its manifest and a loader of arrays (memory-mapped, copy-on-write)."""

    folder: Path
    manifest: dict
    _cache: dict = field(default_factory=dict, repr=False)

    def array(self, name: str) -> np.ndarray:
        """The array ``name`` mapped from its ``.npy`` file (shape and dtype checked against the manifest)."""
        if name not in self._cache:
            arr = np.load(self.folder / f"{name}.npy", mmap_mode="c", allow_pickle=False)
            want = self.manifest["arrays"].get(name)
            if want is not None and (str(arr.dtype) != want[0] or list(arr.shape) != want[1]):
                raise ValueError(f"{name}: dtype/shape {arr.dtype}{arr.shape} differ from the manifest")
            self._cache[name] = arr
        return self._cache[name]

    def add(self, arrays: dict[str, np.ndarray]) -> None:
        """Add arrays (a derived index) to the copy: each written beside its place, then renamed into it."""
        for name, arr in arrays.items():
            fd, tmp_name = tempfile.mkstemp(prefix=f".{name}.", suffix=".part.npy", dir=self.folder)
            with os.fdopen(fd, "wb") as fh:
                np.save(fh, np.ascontiguousarray(arr), allow_pickle=False)
            os.replace(tmp_name, self.folder / f"{name}.npy")

    def has(self, name: str) -> bool:
        """Whether the array ``name`` is in the copy."""
        return (self.folder / f"{name}.npy").is_file()

    def table(self, which: str) -> Table:
        """The ``nodes`` or ``edges`` table (columns mapped lazily on first use of each)."""
        spec = self.manifest[which]
        return Table(int(spec["length"]), _LazyColumns(spec["columns"], self, which), spec["text"])

    def __reduce__(self):
        # pickled (sent to a worker) as its folder and manifest: the arrays are mapped again there, not copied
        return (Copy, (self.folder, self.manifest))


class MemoryCopy:
    """The columnar layout held in memory: what a freshly built network is served from before it is saved.

    It answers like an opened :class:`Copy` (``array``, ``has``, ``add``, ``table``), so a built network and a
    loaded one share one code path, and a million-edge network is kept as flat arrays instead of a table of line
    objects (about a third of the memory).
    """

    def __init__(self, nodes: Table, node_xy: np.ndarray, edges: Table, edge_geo: dict[str, np.ndarray]) -> None:
        self.arrays = {f"nodes.{k}": v for k, v in nodes.columns.items()}
        self.arrays["nodes.geometry_xy"] = node_xy
        self.arrays.update({f"edges.{k}": v for k, v in edges.columns.items()})
        self.arrays.update({f"edges.geometry_{k}": v for k, v in edge_geo.items()})
        self._tables = {"nodes": nodes, "edges": edges}

    def array(self, name: str) -> np.ndarray:
        """The array ``name``."""
        return self.arrays[name]

    def has(self, name: str) -> bool:
        """Whether the array ``name`` is held."""
        return name in self.arrays

    def add(self, arrays: dict[str, np.ndarray]) -> None:
        """Keep more arrays (a derived index) beside the network's."""
        self.arrays.update(arrays)

    def table(self, which: str) -> Table:
        """The ``nodes`` or ``edges`` table."""
        return self._tables[which]


class _LazyColumns(dict):
    """Column name -> array, each array mapped on first access (keeps the column order of the manifest)."""

    def __init__(self, names: list[str], copy: Copy, which: str) -> None:
        super().__init__({name: None for name in names})
        self._copy, self._which = copy, which

    def __getitem__(self, name: str) -> np.ndarray:
        value = super().__getitem__(name)
        if value is None:
            value = self._copy.array(f"{self._which}.{name}")
            super().__setitem__(name, value)
        return value

    def __reduce__(self):
        return (_LazyColumns, (list(self.keys()), self._copy, self._which))

    def items(self):
        return ((k, self[k]) for k in self)

    def values(self):
        return (self[k] for k in self)


def open_copy(gpkg: Path, info_layer: str) -> tuple[Copy | None, str]:
    """The fresh copy of ``gpkg``, or None and why not (``"missing"``, ``"stale"``, ``"unreadable"``)."""
    folder = copy_dir(gpkg)
    manifest_path = folder / MANIFEST
    if not manifest_path.is_file():
        return None, "missing"
    try:
        manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
        if manifest.get("format") != COPY_FORMAT:
            return None, "stale"
        if manifest["gpkg"] != file_stamp(gpkg) or manifest["build_id"] != gpkg_build_id(gpkg, info_layer):
            return None, "stale"
        listed = set(manifest["arrays"])
        if any(not (folder / f"{name}.npy").is_file() for name in listed):
            return None, "unreadable"
    except (OSError, ValueError, KeyError, TypeError):
        return None, "unreadable"
    return Copy(folder, manifest), "fresh"


def remove_copy(gpkg: Path) -> None:
    """Delete the copy of ``gpkg`` if any (a copy that cannot be trusted and cannot be rewritten)."""
    with contextlib.suppress(OSError):
        shutil.rmtree(copy_dir(gpkg))


class NetworkArrays:
    """A network's tables served from its columnar copy: columns without building frames, geometry on demand.

    Parameters
    ----------
    copy
        The opened copy, or a :class:`MemoryCopy` (a network just built).
    """

    def __init__(self, copy: Copy | MemoryCopy) -> None:
        self.copy = copy
        self.nodes = copy.table("nodes")
        self.edges = copy.table("edges")

    def node_column(self, name: str) -> np.ndarray:
        """A node column as the GeoPackage load gives it."""
        return self.nodes.series(name)

    def edge_column(self, name: str) -> np.ndarray:
        """An edge column as the GeoPackage load gives it (``name`` with null as ``""``, as the load does)."""
        values = self.edges.series(name)
        if name == "name":
            values = pd.array(pd.Series(values).fillna(""), dtype="str")
        return values

    def node_rows(self, start: int, stop: int, columns: list[str]) -> pd.DataFrame:
        """The node ``columns`` of rows ``start:stop`` as the GeoPackage load gives them (no geometry)."""
        rows = slice(start, stop)
        return pd.DataFrame({name: self.nodes.series(name, rows) for name in columns})

    def edge_rows(self, start: int, stop: int, columns: list[str]) -> pd.DataFrame:
        """The edge ``columns`` of rows ``start:stop`` as :meth:`edge_column` gives them (no geometry)."""
        rows = slice(start, stop)
        data = {name: self.edges.series(name, rows) for name in columns}
        if "name" in data:
            data["name"] = pd.array(pd.Series(data["name"]).fillna(""), dtype="str")
        return pd.DataFrame(data)

    def layer_rows(self, which: str, columns: list[str], crs: object):
        """The ``nodes`` or ``edges`` table with ``columns`` as :class:`~coverkit.gpkg_batches.LayerRows`, read a
        batch of rows (and geometries) at a time from the arrays."""
        from coverkit.gpkg_batches import LayerRows

        if which == "nodes":
            rows, geometry, kind = self.node_rows, self.node_points, "Point"
        else:
            rows, geometry, kind = self.edge_rows, self.edge_lines, "LineString"
        table = self.nodes if which == "nodes" else self.edges
        return LayerRows(table.length, lambda start, stop: rows(start, stop, columns), geometry, kind, crs)

    def node_points(self, start: int, stop: int) -> np.ndarray:
        """Shapely points of the nodes ``start:stop``."""
        import shapely

        return shapely.points(np.asarray(self.copy.array("nodes.geometry_xy")[start:stop]))

    def edge_lines(self, start: int, stop: int) -> np.ndarray:
        """Shapely LineStrings of the edges ``start:stop`` (a contiguous slice of the flat coordinates)."""
        import shapely

        offsets = np.asarray(self.copy.array("edges.geometry_offsets")[start : stop + 1], dtype=np.int64)
        coords = np.asarray(self.copy.array("edges.geometry_coords")[offsets[0] : offsets[-1]])
        return shapely.from_ragged_array(shapely.GeometryType.LINESTRING, coords, (offsets - offsets[0],))

    def edge_coords(self, index: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Vertex coordinates (m) of the edges ``index`` (all by default) and the position in ``index`` of each."""
        coords = self.copy.array("edges.geometry_coords")
        offsets = self.copy.array("edges.geometry_offsets")
        if index is None:
            return np.asarray(coords), np.repeat(np.arange(len(offsets) - 1), np.diff(offsets))
        index = np.asarray(index, dtype=np.int64)
        count = offsets[index + 1] - offsets[index]
        take = np.repeat(offsets[index] - np.cumsum(count) + count, count) + np.arange(int(count.sum()))
        return np.asarray(coords[take]), np.repeat(np.arange(len(index)), count)

    def edge_geometry(self, index: np.ndarray | None = None) -> np.ndarray:
        """Shapely LineStrings of the edges ``index`` (all by default), built from the flat coordinates."""
        import shapely

        offsets = self.copy.array("edges.geometry_offsets")
        if index is None:
            coords = np.asarray(self.copy.array("edges.geometry_coords"))
            return shapely.from_ragged_array(shapely.GeometryType.LINESTRING, coords, (np.asarray(offsets),))
        index = np.asarray(index, dtype=np.int64)
        coords, _ = self.edge_coords(index)
        count = offsets[index + 1] - offsets[index]
        sub_offsets = np.concatenate([[0], np.cumsum(count)]).astype(np.int64)
        return shapely.from_ragged_array(shapely.GeometryType.LINESTRING, coords, (sub_offsets,))

    def nodes_frame(self, crs: object):
        """The ``nodes`` GeoDataFrame, equal to the one read from the GeoPackage."""
        import geopandas as gpd
        import shapely

        data = {name: self.node_column(name) for name in self.nodes.columns}
        xy = self.copy.array("nodes.geometry_xy")
        return gpd.GeoDataFrame(data, geometry=shapely.points(np.asarray(xy)), crs=crs)

    def edges_frame(self, crs: object, overrides: dict[str, np.ndarray]):
        """The ``edges`` GeoDataFrame, equal to the one read from the GeoPackage, with ``overrides`` columns."""
        import geopandas as gpd

        data = {name: overrides.get(name, self.edge_column(name)) for name in self.edges.columns}
        frame = gpd.GeoDataFrame(data, geometry=self.edge_geometry(), crs=crs)
        for name, values in overrides.items():
            if name not in data:  # added columns follow the geometry, as when set on a loaded table
                frame[name] = values
        return frame
