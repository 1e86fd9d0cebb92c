"""The :class:`RoadNetwork`: a directed road graph as arrays, with its GeoPackage form.

Nodes are numbered 0..N-1 and edges 0..E-1. Every edge is directed: a two-way street is two edges (``u -> v`` and
``v -> u``, the second with reversed geometry); a one-way street is one. Geometry is in a projected, metric CRS.
"""

from __future__ import annotations

import contextlib
import json
import os
import sys
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import scipy.sparse as sp
import shapely
from pyproj import CRS

from coverkit.atomic import atomic_path
from coverkit.errors import InputFileError
from coverkit.network.profile import Profile, load_profile, profile_from_dict

if TYPE_CHECKING:
    import networkx as nx

FORMAT_VERSION = 1
INFO_LAYER = "build_info"
#: GeoPackage table of the turn bans, and the prefix of their arrays in the columnar copy.
BANS_LAYER, BAN_PREFIX = "turn_bans", "turns."

#: Edge columns every network carries, in this order (geometry last).
EDGE_COLUMNS = [
    "edge_id",
    "u",
    "v",
    "road_class",
    "length_m",
    "posted_kph",
    "speed_kph",
    "delay_s",
    "travel_s",
    "oneway",
    "against_oneway",
    "bridge",
    "tunnel",
    "name",
    "source_id",
]
NODE_COLUMNS = ["node", "node_id", "x", "y", "signal"]

#: csgraph treats a zero weight as a missing edge; zero-length edges get this many seconds instead.
MIN_EDGE_S = 1e-9

#: Edge columns of a network with edges closed only in part (a closure polygon cutting a street): the closed
#: stretch as fractions along the edge from ``u`` (NaN: not cut), and the running time (s) of the open stubs.
CLOSED_FROM_COL, CLOSED_TO_COL, STUB_RUN_COL = "closed_from_frac", "closed_to_frac", "stub_run_s"

#: Cache keys starting with this depend on the geometry and the nodes only; copies with new times keep them.
GEOMETRY_CACHE = "geometry:"


@dataclass(repr=False)
class RoadNetwork:
    """A directed drivable road network.

    Attributes
    ----------
    nodes
        GeoDataFrame indexed 0..N-1 with ``node`` (same as the index), ``node_id`` (source id, e.g. OSM node id),
        ``x``, ``y`` (metres, in ``crs``), ``signal`` (traffic-signal node) and point geometry.
    edges
        GeoDataFrame indexed 0..E-1 with :data:`EDGE_COLUMNS` and line geometry drawn from ``u`` to ``v``.
        ``travel_s = length_m / (speed_kph / 3.6) * (against-one-way factor) + delay_s``.
    crs
        The projected CRS of all coordinates.
    profile
        The speed profile the network was built with.
    info
        Build summary (JSON-serialisable): source, counts, what was dropped.
    turn_bans
        Banned turns from the road data's turn restrictions (:data:`coverkit.network.osm_restrictions.BAN_COLUMNS`:
        ``from_edge -> to_edge``, or ``from_edge -> via_edge -> to_edge``); None or empty when there are none. Used
        by searches when the profile obeys restrictions (:mod:`coverkit.travel.turns`).
    """

    nodes: gpd.GeoDataFrame
    edges: gpd.GeoDataFrame
    crs: CRS
    profile: Profile
    info: dict = field(default_factory=dict)
    turn_bans: pd.DataFrame | None = None
    _csr_cache: dict = field(default_factory=dict, init=False, repr=False, compare=False)
    #: The columnar copy a loaded network reads its columns from (None: the tables above are the data).
    _store: object = field(default=None, init=False, repr=False, compare=False)
    #: Edge columns replacing the copy's (a loaded network with new times, see :meth:`with_travel_s`).
    _overrides: dict = field(default_factory=dict, init=False, repr=False, compare=False)

    @classmethod
    def _from_store(
        cls, store: object, crs: CRS, profile: Profile, info: dict, overrides: dict | None = None, turn_bans=None
    ):
        """A network whose ``nodes`` and ``edges`` tables are built from ``store`` only when first used."""
        net = object.__new__(cls)
        net.__dict__.update(
            crs=crs,
            profile=profile,
            info=info,
            turn_bans=turn_bans,
            _csr_cache={},
            _store=store,
            _overrides=dict(overrides or {}),
        )
        return net

    def __getattr__(self, name: str):
        # reached only when normal lookup fails: the tables of a network loaded from its columnar copy, built on
        # first use (a search needs neither; drawing and exports do)
        store = self.__dict__.get("_store")
        if store is not None and name in ("nodes", "edges"):
            table = store.nodes_frame(self.crs) if name == "nodes" else store.edges_frame(self.crs, self._overrides)
            self.__dict__[name] = table
            return table
        raise AttributeError(f"{type(self).__name__!r} object has no attribute {name!r}")

    def node_bounds(self) -> np.ndarray:
        """``(xmin, ymin, xmax, ymax)`` of the nodes (m): the nodes table's ``total_bounds``, read from the columnar
        copy's coordinates when the table is not built (a million-node table costs a second and its memory)."""
        store = self.__dict__.get("_store")
        if store is None or "nodes" in self.__dict__:
            return np.asarray(self.nodes.total_bounds, dtype=float)
        xy = np.asarray(store.copy.array("nodes.geometry_xy"), dtype=float).reshape(-1, 2)
        if len(xy) == 0:
            return np.full(4, np.nan)
        lo, hi = np.nanmin(xy, axis=0), np.nanmax(xy, axis=0)
        return np.array([lo[0], lo[1], hi[0], hi[1]])

    def _lazy(self) -> bool:
        """Whether the columns still come from the columnar copy (the edge table not yet built)."""
        return self.__dict__.get("_store") is not None and "edges" not in self.__dict__

    def edge_values(self, column: str) -> np.ndarray:
        """One edge column as an array, without building the edge table of a loaded network."""
        if self._lazy():
            if column in self._overrides:
                return self._overrides[column]
            return np.asarray(self._store.edge_column(column))
        return self.edges[column].to_numpy()

    def has_edge_column(self, column: str) -> bool:
        """Whether the edges carry ``column``."""
        if self._lazy():
            return column in self._overrides or column in self._store.edges.columns
        return column in self.edges.columns

    def node_values(self, column: str) -> np.ndarray:
        """One node column as an array, without building the node table of a loaded network."""
        if self.__dict__.get("_store") is not None and "nodes" not in self.__dict__:
            return np.asarray(self._store.node_column(column))
        return self.nodes[column].to_numpy()

    def edge_geometry(self, index: np.ndarray | None = None) -> np.ndarray:
        """Line geometries of the edges ``index`` (all by default); a loaded network builds only those."""
        if self._lazy():
            return self._store.edge_geometry(index)
        geoms = self.edges.geometry.to_numpy()
        return geoms if index is None else geoms[np.asarray(index, dtype=np.int64)]

    def __repr__(self) -> str:
        # one line: a notebook prints the network, not its tables
        crs = self.crs.to_string() if self.crs is not None else "no CRS"
        name = getattr(self.profile, "name", "?")
        km = float(self.length_m.sum()) / 1000.0 if self.has_edge_column("length_m") else float("nan")
        return (
            f"RoadNetwork({self.n_nodes:,} nodes, {self.n_edges:,} directed edges, {km:,.1f} km, "
            f"profile '{name}', {crs})"
        )

    # -- sizes and arrays ------------------------------------------------------------------------------------------
    @property
    def n_nodes(self) -> int:
        """Number of nodes."""
        if self.__dict__.get("_store") is not None and "nodes" not in self.__dict__:
            return self._store.nodes.length
        return len(self.nodes)

    @property
    def n_edges(self) -> int:
        """Number of directed edges."""
        return self._store.edges.length if self._lazy() else len(self.edges)

    @property
    def u(self) -> np.ndarray:
        """Start node of each edge (int64)."""
        return np.asarray(self.edge_values("u"), dtype=np.int64)

    @property
    def v(self) -> np.ndarray:
        """End node of each edge (int64)."""
        return np.asarray(self.edge_values("v"), dtype=np.int64)

    @property
    def travel_s(self) -> np.ndarray:
        """Travel time of each edge (s)."""
        return np.asarray(self.edge_values("travel_s"), dtype=float)

    @property
    def length_m(self) -> np.ndarray:
        """Length of each edge (m)."""
        return np.asarray(self.edge_values("length_m"), dtype=float)

    @property
    def xy(self) -> np.ndarray:
        """Node coordinates, shape (N, 2), metres."""
        return np.column_stack([self.node_values("x"), self.node_values("y")]).astype(float, copy=False)

    def csr(self, weight: str = "travel_s") -> sp.csr_matrix:
        """Sparse N x N adjacency with the smallest ``weight`` over parallel edges (for ``scipy.sparse.csgraph``).

        Cached per weight; a network is treated as immutable (use :meth:`with_travel_s` for changed times).
        """
        if weight not in self._csr_cache:
            w = np.maximum(np.asarray(self.edge_values(weight), dtype=float), MIN_EDGE_S)
            self._csr_cache[weight] = min_weight_csr(self.u, self.v, w, self.n_nodes)
        return self._csr_cache[weight]

    def csr_edge_index(self, weight: str = "travel_s") -> sp.csr_matrix:
        """Sparse N x N matrix whose entry (u, v) is 1 + the edge id chosen by :meth:`csr` for that pair."""
        key = f"edge_index:{weight}"
        if key not in self._csr_cache:
            w = np.asarray(self.edge_values(weight), dtype=float)
            best = _best_parallel_edges(self.u, self.v, w, self.n_nodes)
            self._csr_cache[key] = sp.csr_matrix(
                (best.astype(np.int64) + 1, (self.u[best], self.v[best])),
                shape=(self.n_nodes, self.n_nodes),
            )
        return self._csr_cache[key]

    # -- derived networks -------------------------------------------------------------------------------------------
    def with_travel_s(
        self,
        travel_s: np.ndarray,
        note: str = "",
        *,
        closed_frac: np.ndarray | None = None,
        stub_run_s: np.ndarray | None = None,
    ) -> RoadNetwork:
        """A copy with new edge travel times (s); ``inf`` closes an edge. Nodes and geometry are shared.

        ``closed_frac`` (shape (E, 2), NaN rows for edges not cut) gives, for edges closed only in part, the closed
        stretch as fractions along the edge from ``u``; ``stub_run_s`` the running time of their open stubs (s).
        Without them every closed edge is closed whole.
        """
        travel_s = np.asarray(travel_s, dtype=float)
        if travel_s.shape != (self.n_edges,):
            raise ValueError(f"travel_s must have shape ({self.n_edges},), got {travel_s.shape}")
        changed = {"travel_s": travel_s}
        if closed_frac is not None:
            closed_frac = np.asarray(closed_frac, dtype=float)
            stub = np.asarray(stub_run_s, dtype=float)
            if closed_frac.shape != (self.n_edges, 2) or stub.shape != (self.n_edges,):
                raise ValueError(f"closed_frac must have shape ({self.n_edges}, 2) and stub_run_s ({self.n_edges},)")
            changed.update({CLOSED_FROM_COL: closed_frac[:, 0], CLOSED_TO_COL: closed_frac[:, 1], STUB_RUN_COL: stub})
        info = dict(self.info)
        if note:
            info["changes"] = [*info.get("changes", []), note]
        if self._lazy():
            # the copy keeps serving the unchanged columns; only the new ones are held
            base = {k: v for k, v in self._overrides.items() if k not in (CLOSED_FROM_COL, CLOSED_TO_COL, STUB_RUN_COL)}
            out = RoadNetwork._from_store(
                self._store, self.crs, self.profile, info, {**base, **changed}, turn_bans=self.turn_bans
            )
            if "nodes" in self.__dict__:
                out.__dict__["nodes"] = self.nodes
        else:
            edges = self.edges.drop(columns=[CLOSED_FROM_COL, CLOSED_TO_COL, STUB_RUN_COL], errors="ignore")
            for name, values in changed.items():
                edges[name] = values
            out = RoadNetwork(self.nodes, edges, self.crs, self.profile, info, turn_bans=self.turn_bans)
        out._csr_cache.update({k: v for k, v in self._csr_cache.items() if k.startswith(GEOMETRY_CACHE)})
        if "travel_s" in self._csr_cache:
            # a what-if changes a handful of edges: patch the search graph instead of sorting every edge again
            g = updated_min_weight_csr(self._csr_cache["travel_s"], self.u, self.v, self.travel_s, travel_s)
            if g is not None:
                out._csr_cache["travel_s"] = g
        return out

    def closed_stretch(self) -> tuple[np.ndarray, np.ndarray]:
        """The closed stretch of every edge as fractions along it from ``u``: ``(from, to)``.

        NaN for open edges; ``(0, 1)`` for an edge closed whole; the cut for an edge closed only in part (see
        :meth:`with_travel_s`), whose stretches outside stay reachable from their own ends.
        """
        closed = ~np.isfinite(self.travel_s)
        lo = np.where(closed, 0.0, np.nan)
        hi = np.where(closed, 1.0, np.nan)
        if self.has_edge_column(CLOSED_FROM_COL):
            frm = np.asarray(self.edge_values(CLOSED_FROM_COL), dtype=float)
            cut = closed & np.isfinite(frm)
            lo[cut] = frm[cut]
            hi[cut] = np.asarray(self.edge_values(CLOSED_TO_COL), dtype=float)[cut]
        return lo, hi

    def stub_run_s(self) -> np.ndarray:
        """Running time (s) at which the open stubs of an edge closed in part are driven; ``inf`` elsewhere."""
        if not self.has_edge_column(STUB_RUN_COL):
            return np.full(self.n_edges, np.inf)
        stub = np.asarray(self.edge_values(STUB_RUN_COL), dtype=float)
        return np.where(np.isfinite(stub) & ~np.isfinite(self.travel_s), stub, np.inf)

    def road_lines(self) -> gpd.GeoDataFrame:
        """One row per road piece: the directed edges with a two-way street's reverse twin (and against-one-way
        copies) left out. For drawing and for placing things along roads."""
        key = "road_lines"
        if key not in self._csr_cache:
            e = self.edges
            lo = np.minimum(e["u"].to_numpy(), e["v"].to_numpy())
            hi = np.maximum(e["u"].to_numpy(), e["v"].to_numpy())
            frame = pd.DataFrame({"lo": lo, "hi": hi, "src": e["source_id"].to_numpy()})
            first = ~frame.duplicated(["lo", "hi", "src"]).to_numpy() & ~e["against_oneway"].to_numpy()
            self._csr_cache[key] = e.loc[first, ["edge_id", "road_class", "name", "length_m", "geometry"]]
        return self._csr_cache[key]

    def open_edges(self) -> np.ndarray:
        """Boolean mask of edges with finite travel time."""
        return np.isfinite(self.travel_s)

    # -- interoperability -------------------------------------------------------------------------------------------
    def to_networkx(self, weight: str = "travel_s") -> nx.MultiDiGraph:
        """A ``networkx.MultiDiGraph``: nodes 0..N-1 with ``x, y, node_id``; edges keyed by ``edge_id``.

        Closed edges (infinite travel time) are left out.
        """
        import networkx as nx

        g = nx.MultiDiGraph(crs=self.crs.to_string())
        g.add_nodes_from(
            (int(n), {"x": float(x), "y": float(y), "node_id": int(i)})
            for n, x, y, i in zip(
                self.nodes["node"],
                self.nodes["x"],
                self.nodes["y"],
                self.nodes["node_id"],
                strict=True,
            )
        )
        cols = ["edge_id", "u", "v", "road_class", "length_m", "speed_kph", "travel_s"]
        table = self.edges[cols]
        table = table[np.isfinite(table["travel_s"].to_numpy())]
        g.add_edges_from(
            (
                int(u),
                int(v),
                int(e),
                {
                    "road_class": c,
                    "length_m": float(m),
                    "speed_kph": float(s),
                    "travel_s": float(t),
                },
            )
            for e, u, v, c, m, s, t in table.itertuples(index=False, name=None)
        )
        if weight != "travel_s":
            for _, _, data in g.edges(data=True):
                data["weight"] = data[weight]
        return g

    # -- persistence ------------------------------------------------------------------------------------------------
    def save(
        self,
        path: str | Path,
        *,
        arrays: bool = True,
        indexes: tuple[Callable[[RoadNetwork], dict[str, np.ndarray]], ...] = (),
    ) -> Path:
        """Write the network to a GeoPackage (layers ``nodes``, ``edges``, ``build_info``), atomically.

        With ``arrays`` (the default) also write its columnar copy beside it (see :mod:`coverkit.network.columnar`),
        from which :meth:`load` serves the network without reading the GeoPackage; ``indexes`` are functions giving
        more named arrays to keep in the copy (e.g. :func:`coverkit.travel.snap.snap_index_arrays`), computed while
        the GeoPackage is written.
        """
        from coverkit.network.columnar import content_id

        path = Path(path)
        nodes, edges, parts = _save_sources(self)
        node_table, node_xy, edge_table, edge_geo, meta = parts
        hashed = {f"n.{k}": v for k, v in node_table.columns.items()}
        hashed |= {f"e.{k}": v for k, v in edge_table.columns.items()}
        hashed |= {"n.xy": node_xy, **{f"g.{k}": v for k, v in edge_geo.items()}}
        texts = json.dumps([node_table.text, edge_table.text, meta], sort_keys=True).encode()
        hashed["meta"] = np.frombuffer(texts, dtype=np.uint8)
        bans = ban_arrays(self.turn_bans)
        hashed |= bans
        build_id = content_id(hashed)
        info_rows = {**meta, "build_id": build_id}
        info_df = pd.DataFrame({"key": list(info_rows), "value": list(info_rows.values())})
        staged = None
        from coverkit.memory import release_free_memory

        release_free_memory()
        with atomic_path(path) as tmp:
            # the GeoPackage (SQLite, one row at a time) is written by a forked child while this process writes the
            # columnar copy and the indexes: the two jobs run on two cores
            child = _fork(lambda: _write_gpkg(tmp, nodes, edges, info_df, self.turn_bans)) if arrays else None
            try:
                if child is None:
                    _write_gpkg(tmp, nodes, edges, info_df, self.turn_bans)
                if arrays:
                    staged = _stage_or_note(path, parts, self, indexes)
            finally:
                if child is not None and not _child_ok(child):
                    _remove_partial(tmp)
                    _write_gpkg(tmp, nodes, edges, info_df, self.turn_bans)  # the child failed: write it here instead
        if staged is not None:
            _commit_or_note(path, staged, build_id, parts[4])
        return path

    @staticmethod
    def read_info(path: str | Path) -> dict:
        """The build summary saved with a network (its ``build_info`` layer only, without reading the graph)."""
        info_df = pyogrio.read_dataframe(path, layer=INFO_LAYER)
        meta = dict(zip(info_df["key"], info_df["value"], strict=True))
        return json.loads(meta.get("info_json", "{}"))

    @classmethod
    def load(cls, path: str | Path, *, arrays: bool = True) -> RoadNetwork:
        """Read a network written by :meth:`save`.

        With ``arrays`` (the default) the network comes from its columnar copy when that copy is fresh: columns are
        memory-mapped and the tables (with geometry) built only when first used. A missing, stale or unreadable
        copy is rebuilt from the GeoPackage (with a note on stderr); ``arrays=False`` reads the GeoPackage only.

        Raises
        ------
        InputFileError
            The file is missing or is not a coverkit network GeoPackage.
        """
        path = Path(path)
        if not path.is_file():
            raise InputFileError(
                f"network file {path} not found; build a network and save it there first (`coverkit network`, or "
                "build_network and save)."
            )
        why = ""
        if arrays:
            from coverkit.network.columnar import open_copy

            copy, why = open_copy(path, INFO_LAYER)
            if copy is not None:
                try:
                    return cls._from_copy(path, copy)
                except (OSError, ValueError, KeyError, TypeError):
                    why = "unreadable"
        net = cls._read_gpkg(path)
        if arrays:
            from coverkit.network.columnar import gpkg_build_id
            from coverkit.progress import note

            note(f"network {path.name}: columnar copy {why}; rebuilding it from the GeoPackage for faster loads")
            parts = _copy_parts(net.nodes, net.edges, net)
            staged = _stage_or_note(path, parts, net)
            if staged is not None:
                _commit_or_note(path, staged, gpkg_build_id(path, INFO_LAYER), parts[4])
        return net

    @classmethod
    def _from_copy(cls, path: Path, copy) -> RoadNetwork:
        """The network served by a fresh columnar copy (every array header checked, no data read)."""
        import tomllib

        from coverkit.network.columnar import NetworkArrays

        for name in copy.manifest["arrays"]:
            copy.array(name)
        meta = copy.manifest["meta"]
        if int(meta.get("format_version", -1)) != FORMAT_VERSION:
            raise ValueError("format")
        crs = CRS.from_wkt(meta["crs"])
        profile = profile_from_dict(
            tomllib.loads(meta["profile_toml"]), where=f"{path}:profile", source_text=meta["profile_toml"]
        )
        store = NetworkArrays(copy)
        if store.nodes.length and store.edges.length != len(copy.array("edges.geometry_offsets")) - 1:
            raise ValueError("edge geometry count")
        bans = bans_from_arrays({k: copy.array(k) for k in copy.manifest["arrays"] if k.startswith(BAN_PREFIX)})
        net = cls._from_store(store, crs, profile, json.loads(meta["info_json"]), turn_bans=bans)
        if copy.has("csr.travel_s.indptr"):
            n = store.nodes.length
            arrays = (copy.array(f"csr.travel_s.{k}") for k in ("data", "indices", "indptr"))
            net._csr_cache["travel_s"] = sp.csr_matrix(tuple(arrays), shape=(n, n))
        return net

    @classmethod
    def _read_gpkg(cls, path: Path) -> RoadNetwork:
        """Read the network from its GeoPackage (every layer, every geometry)."""
        try:
            layers = {name for name, _ in pyogrio.list_layers(path)}
        except Exception:
            raise InputFileError(f"{path} is not a GeoPackage; give a network built by `coverkit network`.") from None
        missing = {"nodes", "edges", INFO_LAYER} - layers
        if missing:
            raise InputFileError(
                f"{path} has no layer '{sorted(missing)[0]}', so it is not a coverkit network; "
                "build one with `coverkit network`."
            )
        info_df = pyogrio.read_dataframe(path, layer=INFO_LAYER)
        meta = dict(zip(info_df["key"], info_df["value"], strict=True))
        if int(meta.get("format_version", -1)) != FORMAT_VERSION:
            raise InputFileError(f"{path} was written by an incompatible coverkit version; rebuild it.")
        crs = CRS.from_wkt(meta["crs"])
        import tomllib

        profile = profile_from_dict(
            tomllib.loads(meta["profile_toml"]),
            where=f"{path}:profile",
            source_text=meta["profile_toml"],
        )
        nodes = pyogrio.read_dataframe(path, layer="nodes")
        edges = pyogrio.read_dataframe(path, layer="edges")
        nodes = nodes.set_crs(crs, allow_override=True)
        edges = edges.set_crs(crs, allow_override=True)
        edges["name"] = edges["name"].fillna("")
        bans = pyogrio.read_dataframe(path, layer=BANS_LAYER) if BANS_LAYER in layers else None
        if bans is not None:
            bans = bans.astype({c: np.int64 for c in ("relation_id", "from_edge", "via_edge", "to_edge")})
        return cls(nodes, edges, crs, profile, json.loads(meta["info_json"]), turn_bans=bans)


def _save_sources(net: RoadNetwork) -> tuple:
    """The rows of the ``nodes`` and ``edges`` layers (:class:`~coverkit.gpkg_batches.LayerRows`) and the
    columnar copy's parts (see :func:`_copy_parts`) of ``net``.

    A network still held as its columnar layout (just built, or loaded and not changed) is written from its arrays,
    a batch of geometries at a time; otherwise from its tables.
    """
    from coverkit.gpkg_batches import frame_rows

    store = net.__dict__.get("_store")
    if store is None or net._overrides or "nodes" in net.__dict__ or "edges" in net.__dict__:
        nodes = net.nodes[[*NODE_COLUMNS, "geometry"]]
        edges = net.edges[[*EDGE_COLUMNS, "geometry"]]
        return frame_rows(nodes), frame_rows(edges), _copy_parts(nodes, edges, net)
    copy = store.copy
    parts = (
        store.nodes.select(NODE_COLUMNS),
        np.asarray(copy.array("nodes.geometry_xy")),
        store.edges.select(EDGE_COLUMNS),
        {k: copy.array(f"edges.geometry_{k}") for k in ("coords", "offsets")},
        _copy_meta(net),
    )
    nodes = store.layer_rows("nodes", NODE_COLUMNS, net.crs)
    return nodes, store.layer_rows("edges", EDGE_COLUMNS, net.crs), parts


def _write_gpkg(tmp: Path, nodes, edges, info_df: pd.DataFrame, bans: pd.DataFrame | None) -> None:
    """The layers of a network GeoPackage (the turn bans' table only when there are some).

    ``nodes`` and ``edges`` are :class:`~coverkit.gpkg_batches.LayerRows`: the two big layers go to GDAL as
    Arrow batches, the small ones feature by feature.
    """
    from coverkit.atomic import unsynced_gpkg
    from coverkit.gpkg_batches import write_layer

    with unsynced_gpkg():  # a temporary file, renamed into place only when complete
        write_layer(nodes, tmp, layer="nodes")
        write_layer(edges, tmp, layer="edges", append=True)
        pyogrio.write_dataframe(info_df, tmp, layer=INFO_LAYER, driver="GPKG", append=True)
        if bans is not None and len(bans):
            pyogrio.write_dataframe(pd.DataFrame(bans), tmp, layer=BANS_LAYER, driver="GPKG", append=True)


def _fork(job: Callable[[], None]) -> int | None:
    """Run ``job`` in a forked child (its process id), or None where that is not safe (then run it here): no
    ``fork`` on the platform, or other Python threads running (a server), one of which might hold a lock the child
    would wait on forever."""
    import threading

    if not hasattr(os, "fork") or threading.active_count() > 1:
        return None
    sys.stdout.flush()
    sys.stderr.flush()
    pid = os.fork()
    if pid == 0:  # the child: do the job and leave at once (no cleanup of the parent's state)
        code = 1
        try:
            job()
            code = 0
        except BaseException as exc:  # reported by the parent, which then does the job itself
            print(f"network save (child): {type(exc).__name__}: {str(exc)[:200]}", file=sys.stderr, flush=True)
        finally:
            os._exit(code)
    return pid


def _child_ok(pid: int) -> bool:
    """Wait for a forked child; whether it exited cleanly."""
    _, status = os.waitpid(pid, 0)
    return os.WIFEXITED(status) and os.WEXITSTATUS(status) == 0


def _remove_partial(tmp: Path) -> None:
    for leftover in (tmp, Path(f"{tmp}-journal"), Path(f"{tmp}-wal"), Path(f"{tmp}-shm")):
        with contextlib.suppress(FileNotFoundError):
            leftover.unlink()


def _copy_parts(nodes: gpd.GeoDataFrame, edges: gpd.GeoDataFrame, net: RoadNetwork) -> tuple:
    """What the columnar copy holds: node and edge tables, node coordinates (m), edge geometry, and the metadata."""
    from coverkit.network.columnar import split_table

    node_table, _ = split_table(nodes, geometry=False)
    edge_table, edge_geo = split_table(edges, geometry=True)
    geoms = nodes.geometry.to_numpy()
    node_xy = np.column_stack([shapely.get_x(geoms), shapely.get_y(geoms)])
    return node_table, node_xy, edge_table, edge_geo, _copy_meta(net)


def _copy_meta(net: RoadNetwork) -> dict[str, str]:
    """The text the copy and the GeoPackage's info table carry: format, CRS, profile and build summary."""
    return {
        "format_version": str(FORMAT_VERSION),
        "crs": net.crs.to_wkt(),
        "profile_toml": net.profile.to_toml(),
        "info_json": json.dumps(net.info, sort_keys=True, default=_json_default),
    }


def _csr_arrays(csr: sp.csr_matrix | None) -> dict[str, np.ndarray]:
    if csr is None:
        return {}
    return {"csr.travel_s.data": csr.data, "csr.travel_s.indices": csr.indices, "csr.travel_s.indptr": csr.indptr}


def _commit_or_note(path: Path, staged: Path, build_id: str | None, meta: dict) -> None:
    """Put a staged copy in place; when that fails (another process renaming its own copy at the same moment, a
    folder turned read-only), say so and go on: the next load checks the copy again."""
    from coverkit.network.columnar import commit_copy
    from coverkit.progress import note

    try:
        commit_copy(path, staged, build_id=build_id, meta=meta)
    except OSError as exc:
        note(f"network {path.name}: columnar copy not put in place ({exc}); loads will check it again")


def _stage_or_note(path: Path, parts: tuple, net: RoadNetwork, indexes: tuple = ()) -> Path | None:
    """Stage the columnar copy's arrays (and ``indexes``' arrays); when that fails, say so and go on (the
    GeoPackage alone is a complete network)."""
    from coverkit.network.columnar import remove_copy, stage_copy
    from coverkit.progress import note

    node_table, node_xy, edge_table, edge_geo, _ = parts
    try:
        extra = _csr_arrays(net.csr() if net.n_edges else None)
        extra.update(ban_arrays(net.turn_bans))
        for index in indexes:
            extra.update(index(net))
        return stage_copy(path, nodes=node_table, node_xy=node_xy, edges=edge_table, edge_geo=edge_geo, extra=extra)
    except OSError as exc:
        remove_copy(path)
        note(f"network {path.name}: columnar copy not written ({exc}); loads will read the GeoPackage")
        return None


def ban_arrays(bans: pd.DataFrame | None) -> dict[str, np.ndarray]:
    """The turn bans as named arrays of the columnar copy (none when there are no bans)."""
    if bans is None or len(bans) == 0:
        return {}
    out = {
        f"{BAN_PREFIX}{c}": bans[c].to_numpy(dtype=np.int64)
        for c in ("relation_id", "from_edge", "via_edge", "to_edge")
    }
    out[f"{BAN_PREFIX}restriction"] = bans["restriction"].to_numpy(dtype=str)
    return out


def bans_from_arrays(arrays: dict[str, np.ndarray]) -> pd.DataFrame | None:
    """The turn bans from the columnar copy's arrays (None when it holds none)."""
    if not arrays:
        return None
    cols = ("relation_id", "restriction", "from_edge", "via_edge", "to_edge")
    return pd.DataFrame({c: np.asarray(arrays[f"{BAN_PREFIX}{c}"]) for c in cols}).astype({"restriction": object})


def _json_default(obj: object) -> object:
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.floating):
        return float(obj)
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    raise TypeError(f"not JSON serialisable: {type(obj)}")


def _best_parallel_edges(u: np.ndarray, v: np.ndarray, w: np.ndarray, n: int) -> np.ndarray:
    """Index of the lowest-weight edge for each distinct (u, v) pair among finite-weight edges."""
    finite = np.flatnonzero(np.isfinite(w))
    key = u[finite] * np.int64(n) + v[finite]
    order = np.lexsort((w[finite], key))
    sorted_key = key[order]
    first = np.ones(len(order), dtype=bool)
    first[1:] = sorted_key[1:] != sorted_key[:-1]
    return finite[order[first]]


def min_weight_csr(u: np.ndarray, v: np.ndarray, w: np.ndarray, n: int) -> sp.csr_matrix:
    """N x N CSR matrix holding, for each (u, v), the smallest finite weight among parallel edges."""
    best = _best_parallel_edges(u, v, w, n)
    return sp.csr_matrix((w[best], (u[best], v[best])), shape=(n, n))


def updated_min_weight_csr(
    g: sp.csr_matrix, u: np.ndarray, v: np.ndarray, w_before: np.ndarray, w_after: np.ndarray
) -> sp.csr_matrix | None:
    """:func:`min_weight_csr` of the weights ``w_after`` (s, per edge, before the :data:`MIN_EDGE_S` floor), given
    ``g``, the graph of ``w_before``: only the (u, v) pairs of changed edges are recomputed. ``None`` when a pair
    absent from ``g`` (every edge of it closed) gets a finite weight (then build the graph whole)."""
    w_before, w_after = np.asarray(w_before, dtype=float), np.asarray(w_after, dtype=float)
    changed = np.flatnonzero(~((w_before == w_after) | (np.isnan(w_before) & np.isnan(w_after))))
    if not len(changed):
        return g.copy()
    n = g.shape[0]
    pair = np.unique(u[changed] * np.int64(n) + v[changed])
    key = u * np.int64(n) + v
    members = np.flatnonzero(np.isin(key, pair))
    w = np.maximum(w_after[members], MIN_EDGE_S)
    w = np.where(np.isfinite(w), w, np.inf)
    slot = np.searchsorted(pair, key[members])
    best = np.full(len(pair), np.inf)
    np.minimum.at(best, slot, w)
    a, b = np.divmod(pair, n)
    lo, hi = g.indptr[a], g.indptr[a + 1]
    counts = hi - lo
    which = np.repeat(np.arange(len(pair)), counts)
    at = np.repeat(lo - np.cumsum(counts) + counts, counts) + np.arange(int(counts.sum()))
    match = g.indices[at] == b[which]
    where = np.full(len(pair), -1, dtype=np.int64)
    where[which[match]] = at[match]
    if np.any((where < 0) & np.isfinite(best)):
        return None
    out = g.copy()
    present = where >= 0
    out.data[where[present]] = best[present]
    gone = where[present & ~np.isfinite(best)]
    if len(gone):
        keep = np.ones(out.nnz, dtype=bool)
        keep[gone] = False
        row = np.repeat(np.arange(n), np.diff(out.indptr))
        indptr = np.concatenate([[0], np.cumsum(np.bincount(row[keep], minlength=n))]).astype(out.indptr.dtype)
        out = sp.csr_matrix((out.data[keep], out.indices[keep], indptr), shape=out.shape)
    return out


def network_from_arrays(
    xy: np.ndarray,
    u: np.ndarray,
    v: np.ndarray,
    speed_kph: np.ndarray | float,
    crs: str | CRS = "EPSG:32633",
    profile: Profile | None = None,
    road_class: np.ndarray | str = "residential",
    oneway: np.ndarray | bool = False,
    signal: np.ndarray | None = None,
    geometry: np.ndarray | None = None,
) -> RoadNetwork:
    """Build a network directly from node coordinates and *directed* edge arrays (tests, benchmarks, synthetic data).

    Straight-line geometry is used unless ``geometry`` is given; ``length_m`` is the geometry's planar length and
    ``travel_s = length_m / (speed_kph / 3.6)`` plus the profile's signal delay at signal end nodes.
    """
    xy = np.asarray(xy, dtype=float)
    u = np.asarray(u, dtype=np.int64)
    v = np.asarray(v, dtype=np.int64)
    n_edges = len(u)
    if profile is None:
        # arrays carry no turn data: the normal profile's speeds, without its turn costs
        import dataclasses

        from coverkit.network.turn_rules import TurnRules

        profile = dataclasses.replace(load_profile("normal"), turns=TurnRules(), source_text="")
    signal = np.zeros(len(xy), dtype=bool) if signal is None else np.asarray(signal, dtype=bool)
    if geometry is None:
        coords = np.stack([xy[u], xy[v]], axis=1).reshape(-1, 2)
        geometry = shapely.linestrings(coords, indices=np.repeat(np.arange(n_edges), 2))
    length_m = shapely.length(geometry)
    speed = np.broadcast_to(np.asarray(speed_kph, dtype=float), (n_edges,)).copy()
    delay_s = np.where(signal[v], profile.signal_delay_s, 0.0)
    crs = CRS.from_user_input(crs)
    nodes = gpd.GeoDataFrame(
        {
            "node": np.arange(len(xy)),
            "node_id": np.arange(len(xy)),
            "x": xy[:, 0],
            "y": xy[:, 1],
            "signal": signal,
        },
        geometry=shapely.points(xy),
        crs=crs,
    )
    edges = gpd.GeoDataFrame(
        {
            "edge_id": np.arange(n_edges),
            "u": u,
            "v": v,
            "road_class": np.broadcast_to(np.asarray(road_class, dtype=object), (n_edges,)).copy(),
            "length_m": length_m,
            "posted_kph": speed,
            "speed_kph": speed,
            "delay_s": delay_s,
            "travel_s": length_m / (speed / 3.6) + delay_s,
            "oneway": np.broadcast_to(np.asarray(oneway, dtype=bool), (n_edges,)).copy(),
            "against_oneway": np.zeros(n_edges, dtype=bool),
            "bridge": np.zeros(n_edges, dtype=bool),
            "tunnel": np.zeros(n_edges, dtype=bool),
            "name": np.full(n_edges, "", dtype=object),
            "source_id": np.arange(n_edges, dtype=np.int64),
        },
        geometry=geometry,
        crs=crs,
    )
    return RoadNetwork(nodes, edges, crs, profile, {"source": "arrays"})


def grid_network(
    nx_nodes: int,
    ny_nodes: int,
    spacing_m: float,
    speed_kph: float,
    crs: str = "EPSG:32633",
    x0: float = 500000.0,
    y0: float = 5000000.0,
) -> RoadNetwork:
    """A uniform two-way 4-neighbour grid, each edge ``spacing_m`` long at ``speed_kph`` (tests, benchmarks)."""
    ix, iy = np.meshgrid(np.arange(nx_nodes), np.arange(ny_nodes), indexing="xy")
    ids = (iy * nx_nodes + ix).ravel()
    xy = np.column_stack([x0 + ix.ravel() * spacing_m, y0 + iy.ravel() * spacing_m])
    right = ids[(ix.ravel() < nx_nodes - 1)]
    up = ids[(iy.ravel() < ny_nodes - 1)]
    u = np.concatenate([right, right + 1, up, up + nx_nodes])
    v = np.concatenate([right + 1, right, up + nx_nodes, up])
    return network_from_arrays(xy, u, v, speed_kph, crs=crs)
