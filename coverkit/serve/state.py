"""The base state of `coverkit serve`: a study computed once, answering scenarios without being changed.

The what-if (:class:`coverkit.whatif.WhatIf`) holds the base network, bases, snapped demand and travel tables; the
coverage stage of every standard (:func:`coverkit.stages.coverage_stage`) gives the base layers (gaps, first-due
areas, coverage depth). A request builds a new outcome from them and never writes into them.
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import shapely

from coverkit import CAUTION
from coverkit.compare_run import comparison_rows, whatif_from_study
from coverkit.coverage import grid_polygons
from coverkit.errors import StudyError
from coverkit.progress import Steps
from coverkit.scenario import ChangedAreas, Comparison, Scenario, changed_areas, compare_results
from coverkit.stages import CoverageStage, coverage_stage
from coverkit.study import load_study, study_area
from coverkit.whatif import WhatIf, WhatIfOutcome

#: Decimal places of degrees in GeoJSON (about 0.1 m: finer than any snap limit).
COORD_DIGITS = 6


def _clean(value: Any) -> Any:
    """A JSON-safe value: numpy scalars to Python, inf and NaN to None."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def geojson(frame: gpd.GeoDataFrame, columns: list[str]) -> dict[str, Any]:
    """A GeoDataFrame as a GeoJSON FeatureCollection in EPSG:4326 with ``columns`` as properties."""
    g = frame.to_crs("EPSG:4326") if frame.crs is not None and len(frame) else frame
    geoms = shapely.set_precision(g.geometry.to_numpy(), 10.0**-COORD_DIGITS) if len(g) else []
    features = []
    cols = {c: g[c].to_numpy() for c in columns if c in g.columns}
    for i, geom in enumerate(geoms):
        if geom is None or geom.is_empty:
            continue
        props = {c: _clean(v[i]) for c, v in cols.items()}
        features.append({"type": "Feature", "geometry": shapely.geometry.mapping(geom), "properties": props})
    return {"type": "FeatureCollection", "features": features}


class BaseState:
    """A study's base state for the web page: what-if engine, base layers and base figures (read only).

    Parameters
    ----------
    study_path
        The study TOML file.
    """

    def __init__(self, study_path: str | Path) -> None:
        steps = Steps(3, "serve")
        steps.step("study inputs and base coverage")
        self.study = load_study(study_path)
        self.whatif: WhatIf = whatif_from_study(study_path)
        w = self.whatif
        self.kinds = {d.name: d.kind for d in self.study.demand}
        steps.step("base areas (gaps, first-due, depth)")
        opts = self.study.outputs
        area, grid = study_area(self.study, w.net), None
        self.stages: dict[str, CoverageStage] = {}
        for std in self.study.standards:
            stage = coverage_stage(
                w.net, w.bases, w.demand, std, kinds=self.kinds, tables=w.tables, area=area, grid=grid,
                cell_m=opts.grid_cell_m, reach_m=opts.area_reach_m,
            )  # fmt: skip
            grid = stage.areas.grid
            self.stages[std.name] = stage
        self.grid = grid
        self.residents = next((n for n, k in self.kinds.items() if k == "residents"), next(iter(w.demand)))
        self.incidents = next((n for n, k in self.kinds.items() if k == "incidents"), None)
        steps.step("map layers")
        self._road_pieces()
        self.layers = self._base_layers()
        self.info = self._study_info()

    # -- roads --------------------------------------------------------------------------------------------------------
    def _road_pieces(self) -> None:
        """One drawn line per physical road piece (a two-way street's twin edges once), with its edge ids."""
        e = self.whatif.net.edges
        u, v = e["u"].to_numpy(), e["v"].to_numpy()
        key = np.stack([np.minimum(u, v), np.maximum(u, v), e["source_id"].to_numpy(dtype=np.int64)], axis=1)
        _, first, inverse = np.unique(key, axis=0, return_index=True, return_inverse=True)
        order = np.argsort(first)
        rank = np.empty_like(order)
        rank[order] = np.arange(len(order))
        self.piece_of_edge = rank[inverse.ravel()]
        self.piece_first = first[order]
        self.piece_u, self.piece_v = u[self.piece_first], v[self.piece_first]

    def road_minutes(self, node_t: Any) -> list[float | None]:
        """Per road piece: minutes from the nearest base to the piece's nearer end (None: not reached)."""
        m = node_t.tocsc()
        best = np.full(m.shape[1], np.inf)
        coo = m.tocoo()
        np.minimum.at(best, coo.col, coo.data)
        t = np.minimum(best[self.piece_u], best[self.piece_v]) / 60.0
        return [round(float(x), 2) if np.isfinite(x) else None for x in t]

    def _base_layers(self) -> dict[str, dict[str, Any]]:
        w = self.whatif
        e = w.net.edges.iloc[self.piece_first]
        ids = [[] for _ in range(len(self.piece_first))]
        for edge, piece in enumerate(self.piece_of_edge):
            ids[piece].append(edge)
        roads = gpd.GeoDataFrame(
            {
                "piece": np.arange(len(e)),
                "name": e["name"].fillna("").astype(str).to_numpy(),
                "road_class": e["road_class"].astype(str).to_numpy(),
                "minutes": self.road_minutes(w.node_t),
                "edge_ids": ids,
            },
            geometry=e.geometry.to_numpy(),
            crs=w.net.crs,
        )
        layers = {
            "roads": geojson(roads, ["piece", "name", "road_class", "minutes", "edge_ids"]),
            "bases": geojson(w.bases, ["id", "name", "units"]),
        }
        if self.study.roads.boundary:
            from coverkit.network.build import read_boundary

            layers["boundary"] = geojson(read_boundary(self.study.roads.boundary), [])
        if self.study.siting and self.study.siting.candidates:
            from coverkit.travel import read_points

            cands = read_points(self.study.siting.candidates, w.net.crs, what="candidates")
            layers["candidates"] = geojson(cands, ["id", *[c for c in ("name",) if c in cands.columns]])
        for name, stage in self.stages.items():
            areas = stage.areas
            layers[f"gaps/{name}"] = geojson(areas.gaps, ["gap_id", *areas.gap_counts(), "area_km2"])
            layers[f"first_due/{name}"] = geojson(areas.first_due, ["base_id", "status", "area_km2"])
            depth = areas.depth_grid
            poly = grid_polygons(depth, areas.transform, w.net.crs, valid=depth >= 0).dissolve("value", as_index=False)
            layers[f"depth/{name}"] = geojson(poly.rename(columns={"value": "depth"}), ["depth"])
        return layers

    def _study_info(self) -> dict[str, Any]:
        figures = []
        for (std, dem), res in self.whatif.results.items():
            s = res.summary()
            figures.append(
                {
                    "standard": std, "demand": dem, "kind": self.kinds[dem], "demand_total": s["demand_total"],
                    "covered": s["covered"], "covered_share": s["covered_share"], "fractile": s["fractile"],
                    "fractile_response_s": s["fractile_response_s"], "meets_standard": s["meets_standard"],
                }
            )  # fmt: skip
        return {
            "name": self.study.name,
            "caution": CAUTION,
            "standards": [
                {**dataclasses.asdict(s), "response_s": s.response_s, "text": s.describe()}
                for s in self.study.standards
            ],
            "demand": [{"name": d.name, "kind": d.kind} for d in self.study.demand],
            "bases": self.layers["bases"],
            "candidates": self.layers.get("candidates"),
            "figures": [{k: _clean(v) for k, v in f.items()} for f in figures],
            "layers": sorted(self.layers),
            "base_snap_m": self.whatif.base_snap_m,
        }

    # -- one scenario -------------------------------------------------------------------------------------------------
    def standard_name(self, name: str | None) -> str:
        """The standard called ``name`` (the first when None); a StudyError names the query field otherwise."""
        if name is None:
            return self.study.standards[0].name
        if name not in self.stages:
            raise StudyError(f"query 'standard': '{name}' is not a standard; use one of {', '.join(self.stages)}.")
        return name

    def evaluate(self, scenario: Scenario, standard: str | None = None) -> Evaluation:
        """``scenario`` on the base state: the what-if outcome, one comparison per standard and demand layer and the
        changed areas of one standard (residents, with the calls counted), as Python objects (nothing is written
        into the base state)."""
        std = self.standard_name(standard)
        w = self.whatif
        outcome = w.run(scenario)
        keys = [(s.name, name) for name in w.demand for s in self.study.standards]
        comparisons = {k: compare_results(w.results[k], outcome.results[k]) for k in keys}
        if all(c.unchanged for c in comparisons.values()) and not len(outcome.changes.base_changes):
            outcome.changes.notes.append("coverage unchanged: no travel time to any demand point changed")
        # the grid cells keep their snap; their times after come from the outcome's node times (no new search)
        grid_after = dataclasses.replace(
            self.grid,
            table=dataclasses.replace(
                self.grid.table,
                base_snap=outcome.base_snap,
                times=w.point_times(self.grid.table.point_snap, outcome),
            ),
        )
        inc = self.incidents
        ca = changed_areas(
            w.net, outcome.network, w.results[(std, self.residents)], outcome.results[(std, self.residents)],
            incidents=w.demand[inc] if inc else None, grid_before=self.grid, grid_after=grid_after,
            calls_before=w.results[(std, inc)] if inc else None,
            calls_after=outcome.results[(std, inc)] if inc else None,
        )  # fmt: skip
        return Evaluation(scenario, std, outcome, comparisons, ca)

    def compare(self, scenario: Scenario, standard: str | None = None) -> dict[str, Any]:
        """The comparison rows of ``scenario`` (the columns of ``comparison.csv``), its change lines, the changed
        areas of one standard (residents) and the map after the change, as JSON-ready values."""
        ev = self.evaluate(scenario, standard)
        outcome, ca = ev.outcome, ev.changed
        rows = comparison_rows(scenario.name, ev.comparisons, self.kinds)
        return {
            "scenario": scenario.name,
            "rows": [{k: _clean(v) for k, v in r.items()} for r in rows],
            "changes": outcome.changes.lines(),
            "standard": ev.standard,
            "changed_areas": geojson(ca.polygons, ["area_id", "change", "weight", "points", "incidents", "area_km2"]),
            "bases_after": geojson(outcome.bases, ["id", "name", "units"]),
            "closed_roads": geojson(outcome.changes.closed, ["edge_id", "way_id", "name", "road_class", "length_m"]),
            "road_minutes_after": self.road_minutes(outcome.node_t),
            "caution": CAUTION,
        }


@dataclasses.dataclass(frozen=True)
class Evaluation:
    """One scenario evaluated on a :class:`BaseState` (see :meth:`BaseState.evaluate`)."""

    scenario: Scenario
    standard: str
    outcome: WhatIfOutcome
    comparisons: dict[tuple[str, str], Comparison]
    changed: ChangedAreas


__all__ = ["BaseState", "Evaluation", "geojson"]
