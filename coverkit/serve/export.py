"""``POST /api/export.gpkg``: the current state's layers (base state plus the request's changes) as a GeoPackage.

Layers, named by :mod:`coverkit.layer_names`: the bases, the road pieces with their minutes from the nearest base,
the gaps, first-due and depth areas of one standard, and with changes the closed and slowed roads and the changed
areas; ``about`` holds the study, the scenario, the changes and the caution. The file is written atomically into a
temporary folder (:func:`coverkit.atomic.write_gpkg_layers`), read back and removed.
"""

from __future__ import annotations

import tempfile
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd

from coverkit import CAUTION
from coverkit.atomic import write_gpkg_layers
from coverkit.coverage import grid_polygons
from coverkit.layer_names import layer_name
from coverkit.scenario import Scenario

#: The download's file name and media type (the GeoPackage media type registered by OGC).
EXPORT_FILE = "coverkit-state.gpkg"
EXPORT_MEDIA_TYPE = "application/geopackage+sqlite3"


def _roads(state: Any, node_t: Any) -> gpd.GeoDataFrame:
    """One row per road piece (as the roads layer draws it): name, class, minutes from the nearest base."""
    net = state.whatif.net
    e = net.edges.iloc[state.piece_first]
    minutes = [np.nan if m is None else m for m in state.road_minutes(node_t)]
    return gpd.GeoDataFrame(
        {
            "piece": np.arange(len(e)),
            "way_id": e["source_id"].to_numpy(dtype=np.int64),
            "name": e["name"].fillna("").astype(str).to_numpy(),
            "road_class": e["road_class"].astype(str).to_numpy(),
            "minutes": np.asarray(minutes, dtype=float),
        },
        geometry=e.geometry.to_numpy(),
        crs=net.crs,
    )


def _depth(areas: Any, crs: Any) -> gpd.GeoDataFrame:
    depth = areas.depth_grid
    poly = grid_polygons(depth, areas.transform, crs, valid=depth >= 0).dissolve("value", as_index=False)
    return poly.rename(columns={"value": "depth"})


def export_layers(state: Any, scenario: Scenario, standard: str) -> dict[str, Any]:
    """The layers of the current state for ``standard`` (see the module notes), in writing order."""
    w = state.whatif
    changed = bool(scenario.closures or scenario.slowdowns or scenario.base_changes)
    about = {"study": state.study.name, "scenario": scenario.name, "standard": standard, "caution": CAUTION}
    if changed:
        ev = state.evaluate(scenario, standard)
        out, areas = ev.outcome, ev.changed.after
        bases, node_t, lines = out.bases, out.node_t, out.changes.lines()
    else:
        areas = state.stages[standard].areas
        bases, node_t, lines = w.bases, w.node_t, ["no change: the base state"]
    about.update({f"change_{i}": line for i, line in enumerate(lines)})
    layers: dict[str, Any] = {
        layer_name("bases"): bases,
        layer_name("road_minutes"): _roads(state, node_t),
        layer_name("gaps", standard=standard): areas.gaps,
        layer_name("first_due", standard=standard): areas.first_due,
        layer_name("depth", standard=standard): _depth(areas, w.net.crs),
    }
    if changed:
        layers[layer_name("closed_roads")] = out.changes.closed
        layers[layer_name("slowed_roads")] = out.changes.slowed
        layers[layer_name("changed_areas", standard=standard)] = ev.changed.polygons
    layers[layer_name("about")] = pd.DataFrame({"key": list(about), "value": [str(v) for v in about.values()]})
    return layers


def export_bytes(state: Any, scenario: Scenario, standard: str) -> bytes:
    """The GeoPackage of :func:`export_layers`, as bytes (written atomically to a temporary file first)."""
    layers = export_layers(state, scenario, standard)
    with tempfile.TemporaryDirectory(prefix="coverkit-export-") as folder:
        path = write_gpkg_layers(Path(folder) / EXPORT_FILE, layers)
        return path.read_bytes()


__all__ = ["EXPORT_FILE", "EXPORT_MEDIA_TYPE", "export_bytes", "export_layers"]
