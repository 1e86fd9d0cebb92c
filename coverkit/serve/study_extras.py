"""What ``GET /api/study`` adds to the base figures, and the demand density layer (``GET /api/layers/demand``).

Per base rows (:func:`coverkit.coverage.per_base` of every standard and demand layer), the availability section's
answer (:func:`coverkit.stages.availability_stage`, as a study run computes it), the road names, bridge names and
road classes the page offers for closures and slowdowns, and demand density cells. All values JSON-ready.
"""

from __future__ import annotations

from typing import Any

import geopandas as gpd
import numpy as np
import shapely

from coverkit.demand_sources import unit_word
from coverkit.serve.state import geojson, per_base_rows

#: Most density cells sent for one demand layer: the cell side doubles until the occupied cells are this few.
MAX_DENSITY_CELLS = 5000
#: Smallest density cell side (m): finer than a few hundred metres says more than the demand data can (our choice).
DENSITY_CELL_M = 250.0


def road_lists(net: Any) -> dict[str, list[str]]:
    """``road_names`` (distinct, non-empty, sorted), ``bridge_names`` (names with a bridge edge) and
    ``road_classes`` (sorted) of the network."""
    e = net.edges
    names = e["name"].fillna("").astype(str).str.strip()
    bridge = e["bridge"].to_numpy(dtype=bool)
    return {
        "road_names": sorted(set(names[names != ""])),
        "bridge_names": sorted(set(names[bridge & (names != "").to_numpy()])),
        "road_classes": sorted(set(e["road_class"].astype(str))),
    }


def study_extras(state: Any) -> dict[str, Any]:
    """The keys ``GET /api/study`` adds to :attr:`coverkit.serve.state.BaseState.info`."""
    return {
        "demand": [{"name": d.name, "kind": d.kind, "unit": unit_word(d.kind)} for d in state.study.demand],
        "per_base": per_base_rows(state.per_base_tables),
        "availability": state.availability_answer(),
        **road_lists(state.whatif.net),
    }


def demand_cells(demand: gpd.GeoDataFrame, unit: str) -> dict[str, Any]:
    """Demand density on square cells (network CRS, metres): ``per_km2`` (weight per km2), ``weight``, ``unit``.

    The side starts at :data:`DENSITY_CELL_M` and doubles until at most :data:`MAX_DENSITY_CELLS` cells hold
    demand, so the layer stays light; cells hold the weight of every demand point in them (on the network or not).
    """
    xy = shapely.get_coordinates(demand.geometry.to_numpy())
    w = demand["weight"].to_numpy(dtype=float)
    keep = np.isfinite(xy).all(axis=1) & (w > 0)
    xy, w = xy[keep], w[keep]
    cell = DENSITY_CELL_M
    while True:
        ij = np.floor(xy / cell).astype(np.int64)
        keys, inverse = np.unique(ij, axis=0, return_inverse=True)
        if len(keys) <= MAX_DENSITY_CELLS:
            break
        cell *= 2.0
    weight = np.bincount(inverse.ravel(), weights=w, minlength=len(keys))
    x0, y0 = keys[:, 0] * cell, keys[:, 1] * cell
    cells = gpd.GeoDataFrame(
        {
            "per_km2": weight / (cell * cell / 1e6),
            "weight": weight,
            "unit": np.full(len(keys), unit, dtype=object),
            "cell_m": np.full(len(keys), cell),
        },
        geometry=shapely.box(x0, y0, x0 + cell, y0 + cell),
        crs=demand.crs,
    )
    return geojson(cells, ["per_km2", "weight", "unit", "cell_m"])


__all__ = [
    "DENSITY_CELL_M", "MAX_DENSITY_CELLS", "demand_cells", "road_lists", "study_extras",
]  # fmt: skip
