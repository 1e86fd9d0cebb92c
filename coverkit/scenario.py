"""Scenarios: closures, slowdowns and base changes, and the before/after comparison of coverage.

A scenario file (TOML, keys our own, paths relative to the file) lists changes::

    [scenario]
    name = "Ambrel Bridge closed"
    description = "..."

    [[closure]]                 # one selector per entry: edge_ids, way_ids, road_name or polygon
    way_ids = [90]              # OSM way ids (the edges' source_id)
    only_bridges = false        # true: keep only the bridge edges among those selected

    [[closure]]                 # a polygon: a file (relative path) or inline GeoJSON geometry in degrees
    polygon = { type = "Polygon", coordinates = [[[-35.03, 41.0], [-35.02, 41.0], [-35.02, 41.01]]] }

    [[slowdown]]                # road_class and/or polygon (both given: edges matching both)
    road_class = ["residential", "unclassified"]
    factor = 1.5                # multiplies the running time; > 1 slows, < 1 speeds up

    [[base_change]]             # one of add, remove, move, units
    add = { id = "S5", lon = -35.0, lat = 41.0, units = 1 }

:func:`load_scenario` validates the file; :func:`apply_scenario` gives the changed network and bases and a
:class:`ChangeLog`; :func:`compare_results` and :func:`changed_areas` compare coverage before and after.
:func:`coverkit.compare_run.compare_study` runs a whole study before and after a scenario (study level).
:class:`coverkit.whatif.WhatIf` answers the same changes incrementally on a computed base study.

Time conventions follow :mod:`coverkit.travel.search`: an edge's ``travel_s`` is its running time plus its end-node
delay (signals); a slowdown factor multiplies the running time only, never the delay.
"""

from __future__ import annotations

import difflib
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from coverkit import settings
from coverkit.coverage import (
    AreaGrid,
    AreaLayers,
    CoverageResult,
    Standard,
    area_grid,
    area_layers,
    grid_polygons,
    label_regions,
    per_base,
)
from coverkit.errors import StudyError
from coverkit.inline_polygon import INLINE_CRS, inline_polygon
from coverkit.network.model import GEOMETRY_CACHE, RoadNetwork
from coverkit.tomlcheck import Schema, check_sections, check_table, read_toml
from coverkit.travel import nearest_sources
from coverkit.travel.search import run_s
from coverkit.travel.snap import at_junctions

# -- the scenario file ------------------------------------------------------------------------------------------------
_NUM = (int, float)
_SCHEMA: dict[str, Schema] = {
    "scenario": {"name": ((str,), True), "description": ((str,), False)},
    "closure": {
        "edge_ids": ((list,), False),
        "way_ids": ((list,), False),
        "road_name": ((str, list), False),
        "polygon": ((str, dict), False),
        "only_bridges": ((bool,), False),
        "note": ((str,), False),
    },
    "slowdown": {
        "road_class": ((str, list), False),
        "polygon": ((str, dict), False),
        "factor": (_NUM, True),
        "note": ((str,), False),
    },
    "base_change": {
        "add": ((dict,), False),
        "remove": ((str,), False),
        "move": ((dict,), False),
        "units": ((dict,), False),
        "note": ((str,), False),
    },
}
_BASE_CHANGE_KEYS: dict[str, Schema] = {
    "add": {"id": ((str,), True), "lon": (_NUM, True), "lat": (_NUM, True), "units": ((int,), False),
            "name": ((str,), False)},
    "move": {"id": ((str,), True), "lon": (_NUM, True), "lat": (_NUM, True)},
    "units": {"id": ((str,), True), "units": ((int,), True)},
}  # fmt: skip
_CLOSURE_SELECTORS = ("edge_ids", "way_ids", "road_name", "polygon")
_LIST_SECTIONS = ("closure", "slowdown", "base_change")

#: How messages name an inline polygon (where a file polygon shows its path).
INLINE_NAME = "(inline, EPSG:4326)"
#: Road inside a polygon shorter than this (m) does not count: the road only touches the polygon.
_MIN_CUT_M = 1e-6


@dataclass(frozen=True)
class Closure:
    """One ``[[closure]]`` entry: the selector given and its value.

    ``kind`` is ``"edge_ids"`` (directed edge ids: a two-way street has two), ``"way_ids"`` (OSM way ids, both
    directions), ``"road_name"`` (exact name, case-insensitive, every way of that name) or ``"polygon"`` (the part
    of every edge inside the polygon: edges are cut at its boundary, see :func:`closure_cut`). ``only_bridges``
    keeps the bridge edges among those selected.
    """

    index: int
    kind: str
    values: tuple
    polygon: Any = None  # shapely geometry in EPSG:4326 (or the file's CRS, kept in ``polygon_crs``)
    polygon_crs: Any = None
    only_bridges: bool = False
    note: str = ""


@dataclass(frozen=True)
class Slowdown:
    """One ``[[slowdown]]`` entry: running time x ``factor`` on the edges of ``road_classes`` and/or in a polygon."""

    index: int
    factor: float
    road_classes: tuple[str, ...] = ()
    polygon: Any = None
    polygon_crs: Any = None
    note: str = ""


@dataclass(frozen=True)
class BaseChange:
    """One ``[[base_change]]`` entry: ``action`` is ``add``, ``remove``, ``move`` or ``units``."""

    index: int
    action: str
    base_id: str
    lon: float | None = None
    lat: float | None = None
    units: int | None = None
    name: str | None = None
    note: str = ""


@dataclass(frozen=True)
class Scenario:
    """A validated scenario file (changes in file order)."""

    path: Path
    name: str
    description: str
    closures: tuple[Closure, ...]
    slowdowns: tuple[Slowdown, ...]
    base_changes: tuple[BaseChange, ...]


def _read_polygon(folder: Path, value: str, key: str, where: str) -> tuple[Any, Any]:
    """Union of the polygons of a file, with its CRS; a missing, empty or non-polygon file is a StudyError."""
    path = (folder / value).resolve()
    if not path.is_file():
        raise StudyError(f"{where}: file for '{key}' not found: {path}; fix the path (relative to the scenario).")
    try:
        gdf = gpd.read_file(path)
    except Exception as exc:  # pyogrio raises several types for unreadable files
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise StudyError(f"{where}: '{key}' file {path} cannot be read ({first}); give a polygon layer.") from None
    geoms = gdf.geometry[~(gdf.geometry.isna() | gdf.geometry.is_empty)] if len(gdf) else gdf.geometry
    if len(geoms) == 0:
        raise StudyError(f"{where}: '{key}' file {path} holds no polygon; draw at least one polygon in it.")
    kinds = set(geoms.geom_type)
    if not kinds <= {"Polygon", "MultiPolygon"}:
        bad = sorted(kinds - {"Polygon", "MultiPolygon"})[0]
        raise StudyError(f"{where}: '{key}' file {path} holds a {bad}, not polygons; give a polygon layer.")
    if gdf.crs is None:
        raise StudyError(f"{where}: '{key}' file {path} has no coordinate reference system; save it with one.")
    geom = shapely.union_all(shapely.make_valid(geoms.to_numpy()))
    if geom.is_empty or geom.area == 0:
        raise StudyError(f"{where}: '{key}' file {path} holds only empty polygons (zero area); fix the polygon.")
    return geom, gdf.crs


def _int_list(values: list, key: str, where: str) -> tuple[int, ...]:
    if not values:
        raise StudyError(f"{where}: key '{key}' is an empty list; give at least one id.")
    if not all(isinstance(v, int) and not isinstance(v, bool) for v in values):
        bad = next(v for v in values if not isinstance(v, int) or isinstance(v, bool))
        raise StudyError(f"{where}: key '{key}' must list whole numbers, got {bad!r}.")
    return tuple(int(v) for v in values)


def _str_list(value: str | list, key: str, where: str) -> tuple[str, ...]:
    values = [value] if isinstance(value, str) else value
    if not values or not all(isinstance(v, str) and v.strip() for v in values):
        raise StudyError(f"{where}: key '{key}' must be a name or a list of names (non-empty strings).")
    return tuple(v.strip() for v in values)


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario TOML file.

    Every key is checked (unknown key, wrong type, missing required key, missing or unusable polygon file); ids and
    names are checked against the network by :func:`apply_scenario`.

    Raises
    ------
    StudyError
        One line naming the file and the key.
    """
    path, raw = read_toml(path, "scenario", "give a .toml scenario file.")
    return scenario_from_table(raw, path=path)


def scenario_from_table(
    raw: Any, *, path: Path | None = None, where: str | None = None, allow_empty: bool = False
) -> Scenario:
    """Validate parsed scenario tables (the file's schema, e.g. a TOML file read or a JSON body) into a Scenario.

    Parameters
    ----------
    raw
        The top-level tables: ``scenario``, ``closure``, ``slowdown``, ``base_change``.
    path
        The scenario file; its folder resolves polygon files. Without a path a ``polygon`` naming a file is
        refused (a request body may not name a file on the machine); an inline polygon table is read anywhere.
    where
        How messages name the source (default: the path).
    allow_empty
        Accept a scenario that changes nothing (it then means the base state).

    Raises
    ------
    StudyError
        One line naming the source and the key.
    """
    where = where or str(path)
    if not isinstance(raw, dict):
        raise StudyError(f"{where}: a scenario is a table of sections (scenario, closure, slowdown, base_change).")
    check_sections(raw, _SCHEMA, where)
    if "scenario" not in raw:
        raise StudyError(f'{where}: missing section [scenario] (with name = "...").')
    check_table(raw["scenario"], _SCHEMA["scenario"], "scenario", where, "[scenario]")
    for section in _LIST_SECTIONS:
        if section in raw and not isinstance(raw[section], list):
            raise StudyError(f"{where}: [{section}] must be written [[{section}]] (one or more entries).")
    if not allow_empty and not any(raw.get(s) for s in _LIST_SECTIONS):
        raise StudyError(f"{where}: the scenario changes nothing; add a [[closure]], [[slowdown]] or [[base_change]].")
    folder = path.parent if path is not None else None

    def polygon(value: str | dict, key: str) -> tuple[Any, Any]:
        if isinstance(value, dict):
            return inline_polygon(value, key, where), INLINE_CRS
        if folder is None:
            raise StudyError(
                f"{where}: key '{key}' names a file, which is refused here; give the polygon inline (a GeoJSON "
                "Polygon table in degrees) or close roads by road_name, way_ids or edge_ids."
            )
        return _read_polygon(folder, value, key, where)

    closures = []
    for i, item in enumerate(raw.get("closure", [])):
        key = f"closure[{i}]"
        check_table(item, _SCHEMA["closure"], key, where)
        given = [k for k in _CLOSURE_SELECTORS if k in item]
        if len(given) != 1:
            raise StudyError(
                f"{where}: {key} needs exactly one of {', '.join(_CLOSURE_SELECTORS)}"
                + (f" (got {', '.join(given)}); write one [[closure]] per selector." if given else ".")
            )
        kind = given[0]
        poly = crs = None
        if kind in ("edge_ids", "way_ids"):
            values: tuple = _int_list(item[kind], f"{key}.{kind}", where)
        elif kind == "road_name":
            values = _str_list(item[kind], f"{key}.road_name", where)
        else:
            poly, crs = polygon(item["polygon"], f"{key}.polygon")
            inline = isinstance(item["polygon"], dict)
            values = (INLINE_NAME if inline else str((folder / item["polygon"]).resolve()),)
        closures.append(
            Closure(i, kind, values, poly, crs, bool(item.get("only_bridges", False)), item.get("note", ""))
        )

    slowdowns = []
    for i, item in enumerate(raw.get("slowdown", [])):
        key = f"slowdown[{i}]"
        check_table(item, _SCHEMA["slowdown"], key, where)
        if "road_class" not in item and "polygon" not in item:
            raise StudyError(f"{where}: {key} needs road_class, polygon or both to say which roads slow down.")
        factor = float(item["factor"])
        if not (np.isfinite(factor) and factor > 0):
            raise StudyError(f"{where}: key '{key}.factor' must be a number > 0 (1.5 = 50 % slower), got {factor}.")
        classes = _str_list(item["road_class"], f"{key}.road_class", where) if "road_class" in item else ()
        poly = crs = None
        if "polygon" in item:
            poly, crs = polygon(item["polygon"], f"{key}.polygon")
        slowdowns.append(Slowdown(i, factor, classes, poly, crs, item.get("note", "")))

    changes = [_base_change(i, item, where) for i, item in enumerate(raw.get("base_change", []))]
    scen = raw["scenario"]
    return Scenario(
        path or Path(where), scen["name"], scen.get("description", ""), tuple(closures), tuple(slowdowns),
        tuple(changes),
    )  # fmt: skip


def _base_change(i: int, item: Any, where: str) -> BaseChange:
    """One ``[[base_change]]`` entry checked (one action; lon/lat in degrees; units >= 0)."""
    key = f"base_change[{i}]"
    check_table(item, _SCHEMA["base_change"], key, where)
    given = [k for k in ("add", "remove", "move", "units") if k in item]
    if len(given) != 1:
        raise StudyError(f"{where}: {key} needs exactly one of add, remove, move, units; write one per entry.")
    action = given[0]
    if action == "remove":
        if not item["remove"].strip():
            raise StudyError(f"{where}: key '{key}.remove' must name a base id.")
        return BaseChange(i, "remove", item["remove"].strip(), note=item.get("note", ""))
    sub = item[action]
    check_table(sub, _BASE_CHANGE_KEYS[action], f"{key}.{action}", where)
    for coord, bound in (("lon", 180.0), ("lat", 90.0)):
        if coord in sub and not (-bound <= float(sub[coord]) <= bound):
            raise StudyError(
                f"{where}: key '{key}.{action}.{coord}' is {sub[coord]}, outside -{bound:g}..{bound:g}; give "
                "degrees (EPSG:4326)."
            )
    if "units" in sub and sub["units"] < 0:
        raise StudyError(f"{where}: key '{key}.{action}.units' must be a whole number >= 0, got {sub['units']}.")
    return BaseChange(
        i,
        action,
        sub["id"].strip(),
        float(sub["lon"]) if "lon" in sub else None,
        float(sub["lat"]) if "lat" in sub else None,
        int(sub["units"]) if "units" in sub else None,
        sub.get("name"),
        item.get("note", ""),
    )


def _toml_key(key: str) -> str:
    """A table key in TOML: bare when it may be, else a quoted (JSON-escaped) string."""
    import json
    import re

    return key if re.fullmatch(r"[A-Za-z0-9_-]+", key) else json.dumps(key, ensure_ascii=False)


def _toml_value(value: Any) -> str:
    """One value of a scenario table in TOML (strings JSON-escaped, which TOML basic strings read alike; nested
    arrays and inline tables, e.g. an inline polygon's coordinates, written on one line as TOML 1.0 requires for
    inline tables)."""
    import json

    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        return repr(value)  # Python's float repr (1e-05, inf) is a TOML float that reads back to the same value
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, list):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    return "{ " + ", ".join(f"{_toml_key(k)} = {_toml_value(v)}" for k, v in value.items()) + " }"


def scenario_text(raw: dict[str, Any]) -> str:
    """Scenario tables (validated by :func:`scenario_from_table`) as the text of a scenario file that
    :func:`load_scenario` reads back unchanged."""
    lines = ["[scenario]", *(f"{_toml_key(k)} = {_toml_value(v)}" for k, v in raw["scenario"].items())]
    for section in _LIST_SECTIONS:
        for item in raw.get(section, []):
            lines += ["", f"[[{section}]]", *(f"{_toml_key(k)} = {_toml_value(v)}" for k, v in item.items())]
    return "\n".join(lines) + "\n"


# -- applying a scenario ----------------------------------------------------------------------------------------------
@dataclass
class ChangeLog:
    """What a scenario changed.

    Attributes
    ----------
    closed_edge_ids
        Directed edge ids closed (sorted).
    closed
        GeoDataFrame, one row per closed road piece (a two-way street once): ``edge_id`` (lowest of the piece),
        ``way_id`` (OSM way id), ``name``, ``road_class``, ``bridge``, ``length_m``, geometry.
    closed_km
        Road length closed (km), each road piece counted once.
    slowed_edge_ids, slowed, slowed_km
        The same for slowed edges (``slowed`` adds ``factor``: the product of the factors applied).
    base_changes
        DataFrame: ``action``, ``base_id``, ``detail``.
    notes
        Lines for the user (e.g. :data:`coverkit.whatif.NO_REACH_NOTE`).
    """

    closed_edge_ids: np.ndarray
    closed: gpd.GeoDataFrame
    closed_km: float
    slowed_edge_ids: np.ndarray
    slowed: gpd.GeoDataFrame
    slowed_km: float
    base_changes: pd.DataFrame
    notes: list[str] = field(default_factory=list)

    def closed_roads(self) -> pd.DataFrame:
        """Closed length per road name and way: ``name``, ``way_id``, ``bridge``, ``km``."""
        c = self.closed
        if len(c) == 0:
            return pd.DataFrame({"name": [], "way_id": [], "bridge": [], "km": []})
        g = c.groupby(["name", "way_id"], sort=True, as_index=False).agg(
            bridge=("bridge", "any"), km=("length_m", "sum")
        )
        g["km"] = g["km"] / 1000.0
        return pd.DataFrame(g)

    def lines(self) -> list[str]:
        """Plain lines describing the changes (for the CLI and the report)."""
        out = []
        if len(self.closed_edge_ids):
            # the names in the order of closed_roads() (sorted), without its group-by
            names = ", ".join(dict.fromkeys(n or "(unnamed)" for n in sorted(set(self.closed["name"]))))
            out.append(
                f"closed {self.closed_km:.2f} km of road ({len(self.closed_edge_ids):,} directed edges): {names}"
            )
        if len(self.slowed_edge_ids):
            out.append(f"slowed {self.slowed_km:.2f} km of road ({len(self.slowed_edge_ids):,} directed edges)")
        for r in self.base_changes.itertuples(index=False):
            out.append(f"base {r.base_id}: {r.action} ({r.detail})")
        return out + list(self.notes)


def _pieces_frame(net: RoadNetwork, edge_ids: np.ndarray, extra: dict | None = None) -> gpd.GeoDataFrame:
    """One row per physical road piece among ``edge_ids`` (a two-way street's twins counted once)."""
    e = net.edges.iloc[edge_ids]
    u, v = e["u"].to_numpy(), e["v"].to_numpy()
    frame = pd.DataFrame({"lo": np.minimum(u, v), "hi": np.maximum(u, v), "src": e["source_id"].to_numpy()})
    first = ~frame.duplicated(["lo", "hi", "src"]).to_numpy()
    sel = e[first]
    out = gpd.GeoDataFrame(
        {
            "edge_id": sel["edge_id"].to_numpy(dtype=np.int64),
            "way_id": sel["source_id"].to_numpy(dtype=np.int64),
            "name": sel["name"].fillna("").astype(str).to_numpy(dtype=object),
            "road_class": sel["road_class"].astype(str).to_numpy(dtype=object),
            "bridge": sel["bridge"].to_numpy(dtype=bool),
            "length_m": sel["length_m"].to_numpy(dtype=float),
        },
        geometry=sel.geometry.to_numpy(),
        crs=net.crs,
    )
    for name, values in (extra or {}).items():
        out[name] = np.asarray(values)[first]
    return out


def _polygon_cut(net: RoadNetwork, polygon: Any, crs: Any) -> tuple[np.ndarray, np.ndarray]:
    """The edges with road inside ``polygon`` (given in ``crs``) and the part of each inside it (shapely 2,
    vectorised: one STRtree query, one intersection over the candidate edges).

    Returns
    -------
    edge_ids, inside
        Sorted edge ids with a positive length inside (an edge only touching the polygon at a point has none),
        and the geometry of their inside parts.
    """
    poly = gpd.GeoSeries([polygon], crs=crs).to_crs(net.crs).iloc[0]
    key = f"{GEOMETRY_CACHE}coverkit.scenario:edge_tree"
    if key not in net._csr_cache:
        net._csr_cache[key] = shapely.STRtree(net.edges.geometry.to_numpy())
    cand = np.unique(net._csr_cache[key].query(poly, predicate="intersects")).astype(np.int64)
    inside = shapely.intersection(net.edges.geometry.to_numpy()[cand], poly)
    keep = shapely.length(inside) > _MIN_CUT_M
    return cand[keep], inside[keep]


def _stretch(geom: np.ndarray, part: np.ndarray) -> np.ndarray:
    """Fractions along each line of ``geom`` (shape (n, 2)) from the first to the last point of its ``part``.

    The span covers the whole part: for a line crossing a polygon several times, the stretches between the crossings
    are reached from neither end, so they are cut off with it.
    """
    coords, idx = shapely.get_coordinates(part, return_index=True)
    fr = shapely.line_locate_point(geom[idx], shapely.points(coords), normalized=True)
    out = np.column_stack([np.full(len(geom), np.inf), np.full(len(geom), -np.inf)])
    np.minimum.at(out[:, 0], idx, fr)
    np.maximum.at(out[:, 1], idx, fr)
    return np.clip(out, 0.0, 1.0)


def _name_choices(names: list[str], wanted: str) -> str:
    close = difflib.get_close_matches(wanted, names, n=3, cutoff=0.6)
    return f" (did you mean {', '.join(repr(c) for c in close)}?)" if close else ""


def closure_edges(net: RoadNetwork, closure: Closure, where: str = "scenario") -> np.ndarray:
    """The directed edge ids a closure selects (sorted); unknown ids or names raise :class:`StudyError`."""
    return closure_cut(net, closure, where)[0]


def closure_cut(
    net: RoadNetwork, closure: Closure, where: str = "scenario"
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """What a closure shuts: the directed edge ids (sorted), the closed stretch of each and its geometry.

    A polygon cuts its edges at its boundary: only the part of an edge inside is closed, and the parts outside stay
    reachable from their own ends. Ids, way ids and road names close whole edges.

    Returns
    -------
    edge_ids, stretch, part
        Edge ids; shape (n, 2), the closed stretch as fractions along each edge from its ``u`` (``[0, 1]``: the
        whole edge); the closed part of each edge (line geometry, network CRS).

    Raises
    ------
    StudyError
        An unknown id, way id or road name; a polygon with no road inside it.
    """
    key = f"closure[{closure.index}].{closure.kind}"
    if closure.kind == "edge_ids":
        ids = np.asarray(closure.values, dtype=np.int64)
        bad = ids[(ids < 0) | (ids >= net.n_edges)]
        if len(bad):
            raise StudyError(
                f"{where}: {key}: edge {int(bad[0])} is not in the network (edge ids run 0..{net.n_edges - 1})."
            )
        sel = np.unique(ids)
    elif closure.kind == "way_ids":
        src = net.edges["source_id"].to_numpy(dtype=np.int64)
        ways = np.asarray(closure.values, dtype=np.int64)
        missing = ways[~np.isin(ways, src)]
        if len(missing):
            raise StudyError(
                f"{where}: {key}: no road edge has way id {int(missing[0])}; check the id (OSM way ids of drivable "
                "roads only)."
            )
        sel = np.flatnonzero(np.isin(src, ways))
    elif closure.kind == "road_name":
        names = net.edges["name"].fillna("").astype(str)
        lower = names.str.strip().str.lower().to_numpy()
        sel_parts = []
        for wanted in closure.values:
            hit = np.flatnonzero(lower == wanted.lower())
            if len(hit) == 0:
                choices = sorted(n for n in set(names) if n)
                hint = _name_choices(choices, wanted)
                if not hint and "bridge" in wanted.lower():
                    hint = " (a bridge carries its road's name: close it by way_ids, or by polygon with only_bridges)"
                raise StudyError(f"{where}: {key}: no road is named '{wanted}'{hint}.")
            sel_parts.append(hit)
        sel = np.unique(np.concatenate(sel_parts))
    else:
        sel, part = _polygon_cut(net, closure.polygon, closure.polygon_crs)
        if len(sel) == 0:
            raise StudyError(f"{where}: {key}: the polygon {closure.values[0]} holds no road of the network.")
    geom = net.edges.geometry.to_numpy()
    if closure.kind == "polygon":
        stretch = _stretch(geom[sel], part)
        stretch = np.column_stack([at_junctions(net, sel, stretch[:, 0]), at_junctions(net, sel, stretch[:, 1])])
    else:
        part = geom[sel]
        stretch = np.tile([0.0, 1.0], (len(sel), 1))
    if closure.only_bridges:
        bridge = net.edges["bridge"].to_numpy(dtype=bool)[sel]
        sel, stretch, part = sel[bridge], stretch[bridge], part[bridge]
        if len(sel) == 0:
            raise StudyError(f"{where}: {key}: none of the roads selected is a bridge (only_bridges = true).")
    return sel.astype(np.int64), stretch, part


def slowdown_edges(net: RoadNetwork, slowdown: Slowdown, where: str = "scenario") -> np.ndarray:
    """The directed edge ids a slowdown applies to (sorted); unknown road classes raise :class:`StudyError`."""
    return slowdown_share(net, slowdown, where)[0]


def slowdown_share(net: RoadNetwork, slowdown: Slowdown, where: str = "scenario") -> tuple[np.ndarray, np.ndarray]:
    """The directed edge ids a slowdown applies to (sorted) and the share of each edge's length it slows (1 for a
    road class; the part inside for a polygon)."""
    key = f"slowdown[{slowdown.index}]"
    mask = np.ones(net.n_edges, dtype=bool)
    share = np.ones(net.n_edges)
    if slowdown.road_classes:
        classes = net.edges["road_class"].astype(str).to_numpy()
        present = set(classes)
        for c in slowdown.road_classes:
            if c not in present:
                known = sorted(present)
                raise StudyError(
                    f"{where}: {key}.road_class: no road of class '{c}' in the network (classes: {', '.join(known)})."
                )
        mask &= np.isin(classes, list(slowdown.road_classes))
    if slowdown.polygon is not None:
        ids, part = _polygon_cut(net, slowdown.polygon, slowdown.polygon_crs)
        if len(ids) == 0:
            raise StudyError(f"{where}: {key}.polygon holds no road of the network.")
        inside = np.zeros(net.n_edges, dtype=bool)
        inside[ids] = True
        share[ids] = np.clip(shapely.length(part) / np.maximum(shapely.length(net.edges.geometry.to_numpy()[ids]),
                                                               _MIN_CUT_M), 0.0, 1.0)  # fmt: skip
        mask &= inside
    sel = np.flatnonzero(mask)
    if len(sel) == 0:
        raise StudyError(f"{where}: {key}: no road has both the class and lies in the polygon; nothing slows down.")
    return sel.astype(np.int64), share[sel]


def slowed_travel_s(net: RoadNetwork, edge_ids: np.ndarray, factor: np.ndarray | float) -> np.ndarray:
    """Edge travel times with the running time of ``edge_ids`` multiplied by ``factor`` (delays kept).

    ``new travel_s = running_s x factor + delay_s`` on those edges; every other edge keeps its exact value, and
    closed edges stay closed.
    """
    t = net.travel_s.copy()
    edge_ids = np.asarray(edge_ids, dtype=np.int64)
    delay = net.edges["delay_s"].to_numpy(dtype=float)
    run = run_s(net)
    new = run[edge_ids] * np.asarray(factor, dtype=float) + delay[edge_ids]
    t[edge_ids] = np.where(np.isfinite(t[edge_ids]), new, np.inf)
    return t


def _empty_pieces(net: RoadNetwork, extra: tuple[str, ...] = ()) -> gpd.GeoDataFrame:
    return _pieces_frame(net, np.zeros(0, dtype=np.int64), {k: np.zeros(0) for k in extra})


def change_log(
    net: RoadNetwork,
    closed: np.ndarray,
    slowed: np.ndarray | None = None,
    factors: np.ndarray | None = None,
    base_rows: list[dict] | None = None,
    *,
    closed_part: np.ndarray | None = None,
    slowed_share: np.ndarray | None = None,
) -> ChangeLog:
    """The :class:`ChangeLog` of closed and slowed edge ids (with their factors) and base-change log rows.

    ``closed_part`` (line geometry per closed id, in the order of ``closed``) and ``slowed_share`` (share of each
    slowed edge's length slowed) give the parts a polygon cut; without them the whole edges count.
    """
    order = np.argsort(np.asarray(closed, dtype=np.int64), kind="stable")
    closed = np.asarray(closed, dtype=np.int64)[order]
    slowed = np.zeros(0, dtype=np.int64) if slowed is None else np.asarray(slowed, dtype=np.int64)
    geom = net.edges.geometry.to_numpy()
    part = geom[closed] if closed_part is None else np.asarray(closed_part, dtype=object)[order]
    closed_gdf = _pieces_frame(net, closed, {"edge_length_m": net.length_m[closed], "_part": part})
    # the closed length is the length closed, not the length of the edges it cuts (in the measure of length_m);
    # the layer draws the closed parts
    parts = closed_gdf.pop("_part").to_numpy()
    closed_gdf["length_m"] = closed_gdf["edge_length_m"].to_numpy() * _share(parts, geom[closed_gdf["edge_id"]])
    closed_gdf = closed_gdf.set_geometry(gpd.GeoSeries(parts, index=closed_gdf.index, crs=net.crs))
    if len(slowed):
        share = np.ones(len(slowed)) if slowed_share is None else np.asarray(slowed_share, dtype=float)
        slowed_gdf = _pieces_frame(net, slowed, {"factor": factors, "_share": share})
        slowed_gdf["length_m"] = slowed_gdf["length_m"].to_numpy() * slowed_gdf.pop("_share").to_numpy()
    else:
        slowed_gdf = _empty_pieces(net, ("factor",))
    bases = pd.DataFrame(base_rows or [], columns=["action", "base_id", "detail"])
    return ChangeLog(
        closed,
        closed_gdf,
        float(closed_gdf["length_m"].sum() / 1000.0),
        slowed,
        slowed_gdf,
        float(slowed_gdf["length_m"].sum() / 1000.0),
        bases,
    )


def _share(part: np.ndarray, geom: np.ndarray) -> np.ndarray:
    """Share of each line's length in its part (0..1)."""
    full = shapely.length(geom)
    return np.where(full > 0, np.clip(shapely.length(part) / np.where(full > 0, full, 1.0), 0.0, 1.0), 1.0)


def apply_base_changes(
    bases: gpd.GeoDataFrame, changes: tuple[BaseChange, ...] | list[BaseChange], where: str = "scenario"
) -> tuple[gpd.GeoDataFrame, list[dict]]:
    """Bases after the changes (in order: a later change may refer to a base added earlier), and one log row each.

    Kept bases stay in their input order; an added base goes last; a moved base keeps its place. A base with
    ``units`` changed keeps its searches: units do not change drive times (they matter for availability); a base
    with 0 units still counts in drive-time coverage, so take a base out of service with ``remove``.
    """
    out = bases.copy()
    if "units" not in out.columns:
        out["units"] = 1
    if "name" not in out.columns:
        out["name"] = out["id"]
    rows: list[dict] = []
    for ch in changes:
        key = f"base_change[{ch.index}].{ch.action}"
        ids = out["id"].astype(str).tolist()
        if ch.action == "add":
            if ch.base_id in ids:
                raise StudyError(f"{where}: {key}: base '{ch.base_id}' already exists; give a new id or use move.")
            pt = gpd.GeoSeries(gpd.points_from_xy([ch.lon], [ch.lat]), crs="EPSG:4326").to_crs(out.crs)
            row = gpd.GeoDataFrame(
                {"id": [ch.base_id], "name": [ch.name or ch.base_id], "units": [1 if ch.units is None else ch.units]},
                geometry=pt.to_numpy(),
                crs=out.crs,
            )
            out = gpd.GeoDataFrame(pd.concat([out, row], ignore_index=True), crs=out.crs)
            rows.append({"action": "added", "base_id": ch.base_id, "detail": f"at {ch.lon:.6f}, {ch.lat:.6f}"})
            continue
        if ch.base_id not in ids:
            raise StudyError(f"{where}: {key}: no base has id '{ch.base_id}' (bases: {', '.join(ids)}).")
        pos = ids.index(ch.base_id)
        if ch.action == "remove":
            if len(out) == 1:
                raise StudyError(f"{where}: {key}: removing '{ch.base_id}' leaves no base; keep at least one.")
            out = out.drop(index=out.index[pos]).reset_index(drop=True)
            rows.append({"action": "removed", "base_id": ch.base_id, "detail": "taken out of service"})
        elif ch.action == "move":
            pt = gpd.GeoSeries(gpd.points_from_xy([ch.lon], [ch.lat]), crs="EPSG:4326").to_crs(out.crs)
            geoms = out.geometry.to_numpy().copy()
            geoms[pos] = pt.iloc[0]
            out = out.set_geometry(gpd.GeoSeries(geoms, crs=out.crs, index=out.index))
            rows.append({"action": "moved", "base_id": ch.base_id, "detail": f"to {ch.lon:.6f}, {ch.lat:.6f}"})
        else:
            before = out.loc[out.index[pos], "units"]
            out.loc[out.index[pos], "units"] = int(ch.units)
            rows.append({"action": "units", "base_id": ch.base_id, "detail": f"units {before} -> {ch.units}"})
    return out.reset_index(drop=True), rows


@dataclass
class EdgeChanges:
    """The edge times after a scenario's closures and slowdowns.

    Attributes
    ----------
    travel_s
        New edge times (s; inf = closed).
    closed_ids, closed_stretch, closed_part
        Closed edge ids (sorted); per closed id the closed stretch as fractions along the edge (``[0, 1]``: whole)
        and the closed part's geometry.
    stub_run_s
        Per edge (shape (E,)): the running time of the open stubs of an edge closed in part (s, slowdowns
        applied), ``inf`` elsewhere.
    slowed_ids, slowed_factor, slowed_share
        Slowed (still open) edge ids, the factor applied to each one's running time, and the share of its length
        that is slowed.
    """

    travel_s: np.ndarray
    closed_ids: np.ndarray
    closed_stretch: np.ndarray
    closed_part: np.ndarray
    stub_run_s: np.ndarray
    slowed_ids: np.ndarray
    slowed_factor: np.ndarray
    slowed_share: np.ndarray

    def closed_frac(self, n_edges: int) -> np.ndarray:
        """The closed stretch of every edge, shape (E, 2), NaN rows for edges not closed."""
        out = np.full((n_edges, 2), np.nan)
        out[self.closed_ids] = self.closed_stretch
        return out

    def network(self, net: RoadNetwork, note: str = "") -> RoadNetwork:
        """``net`` with these edge times (and cut closures)."""
        return net.with_travel_s(
            self.travel_s, note, closed_frac=self.closed_frac(net.n_edges), stub_run_s=self.stub_run_s
        )

    def log(self, net: RoadNetwork, base_rows: list[dict] | None = None) -> ChangeLog:
        """The :class:`ChangeLog` of these changes on ``net``."""
        return change_log(
            net, self.closed_ids, self.slowed_ids, self.slowed_factor, base_rows,
            closed_part=self.closed_part, slowed_share=self.slowed_share,
        )  # fmt: skip


def edge_changes(net: RoadNetwork, scenario: Scenario) -> EdgeChanges:
    """The edge times after the scenario's closures and slowdowns (vectorised over edges, a loop over entries only).

    A closure polygon cuts its edges at its boundary (:func:`closure_cut`); several closures of one edge close the
    span of their stretches. A slowdown polygon slows the part of an edge inside it: the edge's running time becomes
    ``run x (1 + (factor - 1) x share inside)``, i.e. the outside part at its speed and the inside part slowed;
    several slowdowns multiply. Times part-way along an edge spread its running time evenly (the model's rule).
    """
    where = str(scenario.path)
    n = net.n_edges
    lo, hi = np.full(n, np.inf), np.full(n, -np.inf)
    part = np.full(n, None, dtype=object)
    for c in scenario.closures:
        ids, stretch, cut = closure_cut(net, c, where)
        lo[ids] = np.minimum(lo[ids], stretch[:, 0])
        hi[ids] = np.maximum(hi[ids], stretch[:, 1])
        had = part[ids] != None  # noqa: E711 (elementwise on an object array)
        part[ids] = np.where(had, shapely.union(np.where(had, part[ids], cut), cut), cut)
    closed_ids = np.flatnonzero(np.isfinite(lo))
    factor = np.ones(n)
    share = np.zeros(n)
    for s in scenario.slowdowns:
        ids, sh = slowdown_share(net, s, where)
        factor[ids] *= 1.0 + (s.factor - 1.0) * sh
        share[ids] = np.maximum(share[ids], sh)
    is_closed = np.zeros(n, dtype=bool)
    is_closed[closed_ids] = True
    slowed_ids = np.flatnonzero((factor != 1.0) & ~is_closed & net.open_edges())
    t = slowed_travel_s(net, slowed_ids, factor[slowed_ids])
    t[closed_ids] = np.inf
    stub = np.full(n, np.inf)
    stub[closed_ids] = run_s(net)[closed_ids] * factor[closed_ids]
    return EdgeChanges(
        t,
        closed_ids.astype(np.int64),
        np.column_stack([lo[closed_ids], hi[closed_ids]]),
        part[closed_ids],
        stub,
        slowed_ids,
        factor[slowed_ids],
        share[slowed_ids],
    )


def apply_scenario(
    net: RoadNetwork, bases: gpd.GeoDataFrame, scenario: Scenario
) -> tuple[RoadNetwork, gpd.GeoDataFrame, ChangeLog]:
    """The network and bases after a scenario, with a log of what changed.

    Closures set ``travel_s`` to inf (the edges stay in the network, so edge ids are stable); a closure polygon
    closes only the stretch of an edge inside it, and the stubs outside stay reachable from their own ends
    (:func:`edge_changes`); slowdowns multiply the running time of the part they cover; base changes apply in file
    order.

    Raises
    ------
    StudyError
        An edge id, way id, road name, road class or base id the network or the bases do not have; a polygon that
        holds no road.
    """
    ch = edge_changes(net, scenario)
    new_bases, rows = apply_base_changes(bases, scenario.base_changes, str(scenario.path))
    changed = bool(len(ch.closed_ids) or len(ch.slowed_ids))
    new_net = ch.network(net, note=f"scenario: {scenario.name}") if changed else net
    return new_net, new_bases, ch.log(net, rows)


# -- comparing coverage -----------------------------------------------------------------------------------------------
CHANGE_KINDS = ("lost", "gained", "same_covered", "same_uncovered")


@dataclass
class Comparison:
    """Coverage before and after a change, for one standard and one demand layer.

    Attributes
    ----------
    standard
        The standard compared.
    table
        DataFrame with ``measure``, ``before``, ``after``, ``change``: demand total, covered weight and share,
        uncovered, covered twice or more, fractile response (s), off-network weight.
    points
        GeoDataFrame per demand point: ``id``, ``weight``, ``travel_s_before``, ``travel_s_after``, ``delta_s``
        (after - before; inf when the point is no longer reached within the horizon, -inf when newly reached,
        NaN when reached in neither), ``covered_before``, ``covered_after``, ``change`` (one of
        :data:`CHANGE_KINDS`), ``first_base_before``, ``first_base_after``, geometry.
    bases
        DataFrame per base id (before and after): ``status`` (kept, added, removed, moved), first-due demand,
        first-due covered demand and demand reached within the standard, each ``_before``, ``_after``,
        ``_change``.
    lost_weight, lost_points, gained_weight, gained_points
        Demand (weight and count) that loses / gains coverage.
    """

    standard: Standard
    before: dict
    after: dict
    _table: pd.DataFrame | Callable[[], pd.DataFrame] = field(repr=False)
    _points: gpd.GeoDataFrame | Callable[[], gpd.GeoDataFrame] = field(repr=False)
    _bases: pd.DataFrame | Callable[[], pd.DataFrame] = field(repr=False)
    lost_weight: float
    lost_points: int
    gained_weight: float
    gained_points: int
    _unchanged: bool | None = field(default=None, repr=False)

    # the tables are built on first use: a web answer needs the figures, not the per point layer
    @property
    def table(self) -> pd.DataFrame:
        """The measures before and after (see the class notes)."""
        if callable(self._table):
            self._table = self._table()
        return self._table

    @property
    def points(self) -> gpd.GeoDataFrame:
        """The per point comparison (see the class notes)."""
        if callable(self._points):
            self._points = self._points()
        return self._points

    @property
    def bases(self) -> pd.DataFrame:
        """The per base comparison (see the class notes)."""
        if callable(self._bases):
            self._bases = self._bases()
        return self._bases

    @property
    def unchanged(self) -> bool:
        """True when no demand point's travel time or first-due base changed."""
        if self._unchanged is not None:
            return self._unchanged
        p = self.points
        same_t = np.array_equal(p["travel_s_before"].to_numpy(), p["travel_s_after"].to_numpy(), equal_nan=True)
        return bool(same_t and (p["first_base_before"] == p["first_base_after"]).all())

    def lines(self, unit: str = "people", point_word: str = "points") -> list[str]:
        """Headline lines (covered share and fractile before/after, loss and gain); ``point_word`` names the
        demand's units (``"cells"`` for a population raster)."""
        b, a = self.before, self.after

        def mins(s: float) -> str:
            return "not reached" if not np.isfinite(s) else f"{s / 60:.1f} min"

        return [
            f"{self.standard.name}: covered {b['covered_share'] * 100:.1f} % -> {a['covered_share'] * 100:.1f} % "
            f"({a['covered'] - b['covered']:+,.0f} {unit}); {self.standard.fractile * 100:g}th percentile response "
            f"{mins(b['fractile_response_s'])} -> {mins(a['fractile_response_s'])}",
            f"{self.standard.name}: {self.lost_weight:,.0f} {unit} ({self.lost_points:,} {point_word}) lose "
            f"coverage, {self.gained_weight:,.0f} {unit} ({self.gained_points:,} {point_word}) gain it",
        ]


def compare_results(
    before: CoverageResult,
    after: CoverageResult,
    *,
    summary_before: dict | None = None,
    per_base_before: pd.DataFrame | None = None,
    per_base_after: pd.DataFrame | None = None,
) -> Comparison:
    """Compare two coverage results of the same demand points under the same standard.

    ``summary_before``, ``per_base_before`` and ``per_base_after`` are ``before.summary()`` and
    :func:`coverkit.coverage.per_base` of ``before`` and ``after`` when the caller has them (a base state compared
    with many scenarios); the comparison is the same with or without them.

    Raises
    ------
    ValueError
        The two results hold different demand points or different standards (a programming error, not input).
    """
    db, da = before.demand, after.demand
    if len(db) != len(da) or not _same_ids(db["id"], da["id"]):
        raise ValueError("compare_results needs the same demand points, in the same order, before and after")
    if before.standard != after.standard:
        raise ValueError("compare_results needs the same standard before and after")
    sb = before.summary() if summary_before is None else summary_before
    sa = after.summary()
    tb, ta = db["travel_s"].to_numpy(dtype=float), da["travel_s"].to_numpy(dtype=float)
    cb, ca = db["covered"].to_numpy(dtype=bool), da["covered"].to_numpy(dtype=bool)
    fb, fa = db["first_base"].to_numpy(dtype=object), da["first_base"].to_numpy(dtype=object)
    w = db["weight"].to_numpy(dtype=float)
    lost, gained = cb & ~ca, ~cb & ca
    unchanged = bool(np.array_equal(tb, ta, equal_nan=True) and (fb == fa).all())
    return Comparison(
        before.standard,
        sb,
        sa,
        lambda: _measure_table(sb, sa),
        lambda: _point_changes(before, after),
        lambda: _base_changes(before, after, per_base_before=per_base_before, per_base_after=per_base_after),
        float(w[lost].sum()),
        int(lost.sum()),
        float(w[gained].sum()),
        int(gained.sum()),
        unchanged,
    )


def _measure_table(sb: dict, sa: dict) -> pd.DataFrame:
    """The measures of :attr:`Comparison.table` from the summaries before and after."""
    measures = [
        ("demand_total", "demand_total"),
        ("covered", "covered"),
        ("covered_share", "covered_share"),
        ("uncovered", "uncovered"),
        ("covered_twice_or_more", "covered_twice_or_more"),
        ("fractile_response_s", "fractile_response_s"),
        ("off_network", "off_network"),
    ]
    table = pd.DataFrame(
        {
            "measure": [m for m, _ in measures],
            "before": [float(sb[k]) for _, k in measures],
            "after": [float(sa[k]) for _, k in measures],
        }
    )
    with np.errstate(invalid="ignore"):
        table["change"] = table["after"] - table["before"]
    return table


def _point_changes(before: CoverageResult, after: CoverageResult) -> gpd.GeoDataFrame:
    """The per point layer of :attr:`Comparison.points`."""
    db, da = before.demand, after.demand
    tb, ta = db["travel_s"].to_numpy(dtype=float), da["travel_s"].to_numpy(dtype=float)
    with np.errstate(invalid="ignore"):
        delta = ta - tb  # inf - inf is NaN: reached in neither
    cb, ca = db["covered"].to_numpy(dtype=bool), da["covered"].to_numpy(dtype=bool)
    change = np.select(
        [cb & ~ca, ~cb & ca, cb & ca], ["lost", "gained", "same_covered"], default="same_uncovered"
    ).astype(object)
    return gpd.GeoDataFrame(
        {
            "id": db["id"].to_numpy(),
            "weight": db["weight"].to_numpy(dtype=float),
            "travel_s_before": tb,
            "travel_s_after": ta,
            "delta_s": delta,
            "covered_before": cb,
            "covered_after": ca,
            "change": change,
            "first_base_before": db["first_base"].to_numpy(dtype=object),
            "first_base_after": da["first_base"].to_numpy(dtype=object),
        },
        geometry=db.geometry.to_numpy(),
        crs=db.crs,
    )


def _same_ids(before: pd.Series, after: pd.Series) -> bool:
    """The same point ids in the same order (as text)."""
    if before is after:
        return True
    if before.dtype == after.dtype and isinstance(before.dtype, pd.StringDtype):
        # already text: compared without a conversion (missing ids equal each other, as they do as text)
        return bool(before.reset_index(drop=True).equals(after.reset_index(drop=True)))
    return bool(np.array_equal(before.astype(str).to_numpy(), after.astype(str).to_numpy()))


def _base_changes(
    before: CoverageResult,
    after: CoverageResult,
    *,
    per_base_before: pd.DataFrame | None = None,
    per_base_after: pd.DataFrame | None = None,
) -> pd.DataFrame:
    """Per base id (before's bases, then the added ones): status and the per-base figures before, after, change."""
    cols = ["first_due_demand", "first_due_covered", "reaches_in_standard"]
    pb = per_base(before) if per_base_before is None else per_base_before
    pa = per_base(after) if per_base_after is None else per_base_after
    ids_b, ids_a = pb["base_id"].astype(str).tolist(), pa["base_id"].astype(str).tolist()
    order = list(dict.fromkeys([*ids_b, *ids_a]))
    pos_b = {b: i for i, b in enumerate(ids_b)}
    pos_a = {b: i for i, b in enumerate(ids_a)}
    geo_b = dict(zip(before.bases["id"].astype(str), before.bases.geometry, strict=True))
    geo_a = dict(zip(after.bases["id"].astype(str), after.bases.geometry, strict=True))
    status = []
    for b in order:
        if b not in geo_a:
            status.append("removed")
        elif b not in geo_b:
            status.append("added")
        else:
            status.append("kept" if geo_b[b].equals_exact(geo_a[b], 1e-6) else "moved")
    data: dict[str, Any] = {"base_id": order, "status": status}
    take_b = np.array([pos_b.get(b, -1) for b in order], dtype=np.int64)
    take_a = np.array([pos_a.get(b, -1) for b in order], dtype=np.int64)
    for c in cols:
        # a base missing on one side counts 0 there
        vb = np.where(take_b >= 0, pb[c].to_numpy(dtype=float)[np.maximum(take_b, 0)] if len(pb) else 0.0, 0.0)
        va = np.where(take_a >= 0, pa[c].to_numpy(dtype=float)[np.maximum(take_a, 0)] if len(pa) else 0.0, 0.0)
        data[f"{c}_before"], data[f"{c}_after"], data[f"{c}_change"] = vb, va, va - vb
    return pd.DataFrame(data)


@dataclass
class ChangedAreas:
    """Areas whose covered status changed, as polygons for a diverging difference map.

    Attributes
    ----------
    polygons
        GeoDataFrame: ``area_id``, ``change`` (``lost`` or ``gained``), ``weight`` (demand that lost / gained
        coverage inside: population for residents), ``points``, ``incidents`` (incident points inside, when
        given), ``area_km2``; lost areas first, each kind by weight then area.
    delta_grid
        Response-time change per grid cell (s, after - before; NaN where no road is within reach or not reached
        before nor after; inf where no longer reached) for a diverging raster map.
    status_grid
        Per cell: -1 lost, +1 gained, 0 unchanged, -2 no road within reach (int8).
    transform
        Affine transform of the grids (network CRS).
    before, after
        The :class:`coverkit.coverage.AreaLayers` (first-due areas, gaps, single cover) before and after, built on
        first use (a map of the changed areas alone does not need them).
    """

    polygons: gpd.GeoDataFrame
    delta_grid: np.ndarray
    status_grid: np.ndarray
    transform: Any
    _before: AreaLayers | Callable[[], AreaLayers] = field(repr=False)
    _after: AreaLayers | Callable[[], AreaLayers] = field(repr=False)

    @property
    def before(self) -> AreaLayers:
        """The area layers before the change."""
        if callable(self._before):
            self._before = self._before()
        return self._before

    @property
    def after(self) -> AreaLayers:
        """The area layers after the change."""
        if callable(self._after):
            self._after = self._after()
        return self._after


def cell_nearest_s(grid: AreaGrid) -> np.ndarray:
    """Nearest base time (s) per grid cell (flat, nrow*ncol), inf where not reached or no road within reach."""
    out = np.full(grid.nrow * grid.ncol, np.inf)
    _, t = nearest_sources(grid.table.times, k=1)
    out[grid.on[grid.near]] = t[grid.near, 0]
    return out


def changed_areas(
    net_before: RoadNetwork,
    net_after: RoadNetwork,
    before: CoverageResult,
    after: CoverageResult,
    incidents: gpd.GeoDataFrame | None = None,
    cell_m: float = settings.AREA_CELL_M,
    reach_m: float = settings.AREA_REACH_M,
    grid_before: AreaGrid | None = None,
    grid_after: AreaGrid | None = None,
    *,
    calls_before: CoverageResult | None = None,
    calls_after: CoverageResult | None = None,
    layers_before: AreaLayers | Callable[[], AreaLayers] | None = None,
    layers_after: AreaLayers | Callable[[], AreaLayers] | None = None,
    nearest_s: tuple[np.ndarray, np.ndarray] | None = None,
) -> ChangedAreas:
    """Polygons of the areas that lose or gain coverage, from the road-near grids before and after.

    The grid of :func:`coverkit.coverage.area_grid` is timed on each network (same cells: the networks share their
    nodes). A cell is *lost* when it was covered before and is not after (or its road closed), or when it holds a
    demand point that lost coverage; *gained* the other way round. Lost and gained cells are grouped into polygons
    by 8-connectivity. Every demand point that loses (gains) coverage lies in exactly one lost (gained) polygon, so
    the polygon weights add up to the comparison's lost (gained) demand; a cell holding both lost and gained points
    appears in one polygon of each kind. The gaps before and after count the uncovered calls of ``calls_before``
    and ``calls_after`` (the incidents' coverage results) besides the uncovered demand of ``before``/``after``.

    A caller answering many scenarios on one base state may pass what it keeps: ``layers_before`` /
    ``layers_after`` (the area layers, or a function building them on first use; default
    :func:`coverkit.coverage.area_layers` on each grid, on first use) and ``nearest_s`` (per cell, flat, the
    nearest base time before and after, as :func:`cell_nearest_s` gives; then the grids' own times are not read).
    The polygons are the same either way.
    """
    calls = tuple(c.demand for c in (calls_before, calls_after) if c is not None)
    gb = grid_before or area_grid(net_before, before, cell_m, reach_m, points=calls)
    ga = grid_after or area_grid(net_after, after, cell_m, reach_m, points=calls)
    if (gb.nrow, gb.ncol, gb.cell_m) != (ga.nrow, ga.ncol, ga.cell_m) or gb.transform != ga.transform:
        raise ValueError("changed_areas needs the same grid before and after (networks sharing their nodes)")
    tb, ta = nearest_s if nearest_s is not None else (cell_nearest_s(gb), cell_nearest_s(ga))
    on_any = np.zeros(gb.nrow * gb.ncol, dtype=bool)
    on_any[gb.on[gb.near]] = True
    on_any[ga.on[ga.near]] = True
    polys, lost, gained = _changed_polygons(gb, before, after, incidents, tb, ta, on_any)
    with np.errstate(invalid="ignore"):
        delta = np.where(on_any, ta - tb, np.nan)
    status = np.zeros(gb.nrow * gb.ncol, dtype=np.int8)
    status[~on_any] = -2
    status[gained] = 1
    status[lost] = -1
    shape = (gb.nrow, gb.ncol)
    if layers_before is None:
        layers_before = lambda: area_layers(net_before, before, incidents=calls_before, grid=gb)  # noqa: E731
    if layers_after is None:
        layers_after = lambda: area_layers(net_after, after, incidents=calls_after, grid=ga)  # noqa: E731
    return ChangedAreas(polys, delta.reshape(shape), status.reshape(shape), gb.transform, layers_before, layers_after)


def _changed_polygons(
    grid: AreaGrid,
    before: CoverageResult,
    after: CoverageResult,
    incidents: gpd.GeoDataFrame | None,
    tb: np.ndarray,
    ta: np.ndarray,
    on_any: np.ndarray,
) -> tuple[gpd.GeoDataFrame, np.ndarray, np.ndarray]:
    """The lost and gained polygons of :func:`changed_areas` and the lost and gained cell masks (flat)."""
    nrow, ncol, transform, cell = grid.nrow, grid.ncol, grid.transform, grid.cell_m
    travel = before.standard.travel_s
    cov_b, cov_a = tb <= travel, ta <= travel
    lost = on_any & cov_b & ~cov_a
    gained = on_any & ~cov_b & cov_a
    d = before.demand
    xy = shapely.get_coordinates(d.geometry.to_numpy())
    col = np.clip(((xy[:, 0] - transform.c) / cell).astype(int), 0, ncol - 1)
    row = np.clip(((transform.f - xy[:, 1]) / cell).astype(int), 0, nrow - 1)
    dcell = row * ncol + col
    p_lost = d["covered"].to_numpy(dtype=bool) & ~after.demand["covered"].to_numpy(dtype=bool)
    p_gain = ~d["covered"].to_numpy(dtype=bool) & after.demand["covered"].to_numpy(dtype=bool)
    lost[dcell[p_lost]] = True
    gained[dcell[p_gain]] = True
    # a cell holding a lost point is drawn as gained only when it also holds a gained point
    has_gain = np.zeros(nrow * ncol, dtype=bool)
    has_gain[dcell[p_gain]] = True
    gained &= ~lost | has_gain
    w = d["weight"].to_numpy(dtype=float)
    inc_cell = None
    if incidents is not None and len(incidents):
        ixy = shapely.get_coordinates(incidents.to_crs(d.crs).geometry.to_numpy())
        icol = ((ixy[:, 0] - transform.c) / cell).astype(int)
        irow = ((transform.f - ixy[:, 1]) / cell).astype(int)
        inside = (icol >= 0) & (icol < ncol) & (irow >= 0) & (irow < nrow)
        inc_cell = irow[inside] * ncol + icol[inside]
    parts = []
    for kind, mask, pts in (("lost", lost, p_lost), ("gained", gained, p_gain)):
        if not mask.any():
            continue
        labels = label_regions(mask.reshape(nrow, ncol)).ravel()
        n_lab = int(labels.max())
        weight = np.bincount(labels[dcell[pts]], weights=w[pts], minlength=n_lab + 1)
        count = np.bincount(labels[dcell[pts]], minlength=n_lab + 1)
        inc = np.bincount(labels[inc_cell], minlength=n_lab + 1) if inc_cell is not None else np.zeros(n_lab + 1)
        poly = grid_polygons(labels.reshape(nrow, ncol), transform, d.crs, valid=labels.reshape(nrow, ncol) > 0)
        if poly["value"].duplicated().any():  # a region traced in several rings; most are one polygon already
            poly = poly.dissolve("value", as_index=False)
        lab = poly["value"].to_numpy(dtype=int)
        poly["change"] = kind
        poly["weight"] = weight[lab]
        poly["points"] = count[lab].astype(np.int64)
        poly["incidents"] = inc[lab].astype(np.int64)
        poly["area_km2"] = poly.area / 1e6
        parts.append(poly.sort_values(["weight", "area_km2", "value"], ascending=[False, False, True]))
    if parts:
        polys = gpd.GeoDataFrame(pd.concat(parts, ignore_index=True), crs=d.crs).drop(columns="value")
        polys.insert(0, "area_id", np.arange(1, len(polys) + 1))
        polys = polys[["area_id", "change", "weight", "points", "incidents", "area_km2", "geometry"]]
    else:
        polys = gpd.GeoDataFrame(
            {"area_id": [], "change": [], "weight": [], "points": [], "incidents": [], "area_km2": []},
            geometry=[],
            crs=d.crs,
        )
    return polys, lost, gained


__all__ = [
    "CHANGE_KINDS",
    "BaseChange",
    "ChangeLog",
    "ChangedAreas",
    "Closure",
    "Comparison",
    "EdgeChanges",
    "Scenario",
    "Slowdown",
    "apply_base_changes",
    "apply_scenario",
    "cell_nearest_s",
    "change_log",
    "changed_areas",
    "closure_cut",
    "closure_edges",
    "compare_results",
    "edge_changes",
    "load_scenario",
    "scenario_from_table",
    "scenario_text",
    "slowdown_edges",
    "slowdown_share",
    "slowed_travel_s",
]
