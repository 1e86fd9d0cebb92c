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
import pandas as pd
import scipy.sparse as sp
import shapely

from coverkit import CAUTION
from coverkit.compare_run import comparison_rows, whatif_from_study
from coverkit.coverage import AreaLayers, area_layers, grid_polygons, per_base
from coverkit.errors import StudyError
from coverkit.progress import Steps
from coverkit.report.web_map import RAMP, RAMP_MAX_MIN
from coverkit.scenario import ChangedAreas, Comparison, Scenario, cell_nearest_s, changed_areas, compare_results
from coverkit.stages import CoverageStage, availability_stage, coverage_stage
from coverkit.study import load_study, study_area
from coverkit.travel.snap import Snapped
from coverkit.whatif import WhatIf, WhatIfOutcome

#: Decimal places of degrees in GeoJSON (about 0.1 m: finer than any snap limit).
COORD_DIGITS = 6


def json_value(value: Any) -> Any:
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
        props = {c: json_value(v[i]) for c, v in cols.items()}
        features.append({"type": "Feature", "geometry": shapely.geometry.mapping(geom), "properties": props})
    return {"type": "FeatureCollection", "features": features}


#: The area layers of one standard the page draws (``GET /api/layers/{kind}``, ``?layers=`` of a comparison).
AREA_KINDS = ("gaps", "first_due", "depth")
#: What ``?layers=`` of a comparison may name: the area layers after the change, and the availability after it.
AFTER_LAYERS = (*AREA_KINDS, "availability")
#: Per base columns sent (the order of :func:`coverkit.coverage.per_base` with the keys named first).
PER_BASE_COLUMNS = (
    "first_due_demand", "first_due_share", "first_due_covered", "sole_cover", "reaches_in_standard",
)  # fmt: skip


def area_json(areas: AreaLayers, kind: str, crs: Any) -> dict[str, Any]:
    """One area layer of ``areas`` (``kind`` one of :data:`AREA_KINDS`) as GeoJSON with the page's properties."""
    if kind == "gaps":
        return geojson(areas.gaps, ["gap_id", *areas.gap_counts(), "area_km2"])
    if kind == "first_due":
        return geojson(areas.first_due, ["base_id", "status", "area_km2"])
    depth = areas.depth_grid
    poly = grid_polygons(depth, areas.transform, crs, valid=depth >= 0).dissolve("value", as_index=False)
    return geojson(poly.rename(columns={"value": "depth"}), ["depth"])


def column_min(m: Any) -> np.ndarray:
    """Per column of a sparse matrix, the smallest stored value (inf where none is stored; stored zeros count)."""
    r = sp.csr_matrix(m)
    best = np.full(r.shape[1], np.inf)
    for i in range(r.shape[0]):  # one step per base: a row holds each column once
        cols = r.indices[r.indptr[i] : r.indptr[i + 1]]
        best[cols] = np.minimum(best[cols], r.data[r.indptr[i] : r.indptr[i + 1]])
    return best


def after_layers(query: str | None) -> tuple[str, ...]:
    """The layers named by a comparison's ``?layers=`` (comma separated, in :data:`AFTER_LAYERS` order); a
    StudyError names the query field and the choices otherwise."""
    names = [n.strip() for n in (query or "").split(",") if n.strip()]
    bad = [n for n in names if n not in AFTER_LAYERS]
    if bad:
        raise StudyError(f"query 'layers': '{bad[0]}' is not a layer after the change; use {', '.join(AFTER_LAYERS)}.")
    return tuple(n for n in AFTER_LAYERS if n in names)


def per_base_rows(frames: dict[tuple[str, str], pd.DataFrame]) -> list[dict[str, Any]]:
    """One row per standard, demand layer and base (``standard``, ``demand``, ``base_id`` and
    :data:`PER_BASE_COLUMNS`) from :func:`coverkit.coverage.per_base` tables keyed by (standard, demand)."""
    rows = []
    for (std, dem), table in frames.items():
        cols = {c: table[c].to_numpy() for c in ("base_id", *PER_BASE_COLUMNS)}
        for i in range(len(table)):
            rows.append(
                {"standard": std, "demand": dem, "base_id": str(cols["base_id"][i]),
                 **{c: json_value(cols[c][i]) for c in PER_BASE_COLUMNS}}
            )  # fmt: skip
    return rows


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
        self._kept = _Kept.of(self)

    @property
    def per_base_tables(self) -> dict[tuple[str, str], pd.DataFrame]:
        """Per (standard, demand) the base state's :func:`coverkit.coverage.per_base` table (computed once)."""
        return self._kept.per_base

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

    def piece_minutes(self, node_t: Any) -> np.ndarray:
        """Per road piece: minutes from the nearest base to the piece's nearer end (inf: not reached), unrounded."""
        best = column_min(node_t)
        return np.minimum(best[self.piece_u], best[self.piece_v]) / 60.0

    def road_minutes(self, node_t: Any, *, like: tuple[np.ndarray, list] | None = None) -> list[float | None]:
        """Per road piece: minutes from the nearest base to the piece's nearer end, to 0.01 min (None: not
        reached). ``like`` = (unrounded minutes, their list) of another state: the pieces whose minutes are the
        same keep its values, only the others are rounded again (the same values, fewer Python steps)."""
        t = self.piece_minutes(node_t)
        if like is None:
            return [round(float(x), 2) if np.isfinite(x) else None for x in t]
        old, values = like
        out = list(values)
        for i in np.flatnonzero(t != old):
            out[i] = round(float(t[i]), 2) if np.isfinite(t[i]) else None
        return out

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
            for kind in AREA_KINDS:
                layers[f"{kind}/{name}"] = area_json(stage.areas, kind, w.net.crs)
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
            "figures": [{k: json_value(v) for k, v in f.items()} for f in figures],
            "layers": sorted(self.layers),
            "base_snap_m": self.whatif.base_snap_m,
            # the road colours' one home is the report's map, so the page and the report agree
            "ramp": list(RAMP),
            "ramp_max_min": RAMP_MAX_MIN,
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
        into the base state).

        The before side comes from what the base state keeps (summaries, per base tables, area layers, the grid's
        nearest times); the changed areas time only the road-near cells after the change, from the bases searched
        again, and the area layers after are built on first use of ``changed.after``. The figures equal
        :func:`coverkit.scenario.compare_results` and :func:`coverkit.scenario.changed_areas` without those
        shortcuts (tests/test_serve_after.py)."""
        std = self.standard_name(standard)
        w, kept = self.whatif, self._kept
        outcome = w.run(scenario)
        keys = [(s.name, name) for name in w.demand for s in self.study.standards]
        per_base_after = {k: per_base(outcome.results[k]) for k in keys}
        comparisons = {
            k: compare_results(
                w.results[k], outcome.results[k], summary_before=kept.summary[k], per_base_before=kept.per_base[k],
                per_base_after=per_base_after[k],
            )
            for k in keys
        }  # fmt: skip
        if all(c.unchanged for c in comparisons.values()) and not len(outcome.changes.base_changes):
            outcome.changes.notes.append("coverage unchanged: no travel time to any demand point changed")
        nearest_after = np.full(self.grid.nrow * self.grid.ncol, np.inf)
        near_t = w.point_times_after(kept.near_snap, kept.near_times, outcome)
        nearest_after[kept.near_cells] = column_min(near_t)  # the first of nearest_sources, without a sort
        inc = self.incidents
        res_after = outcome.results[(std, self.residents)]
        calls_after = outcome.results[(std, inc)] if inc else None

        def layers_after() -> AreaLayers:
            # every timed cell after the change (the due areas tile the study area), only when asked for
            times = w.point_times_after(self.grid.table.point_snap, self.grid.table.times, outcome)
            table = dataclasses.replace(self.grid.table, base_snap=outcome.base_snap, times=times)
            grid_after = dataclasses.replace(self.grid, table=table)
            return area_layers(outcome.network, res_after, incidents=calls_after, grid=grid_after)

        ca = changed_areas(
            w.net, outcome.network, w.results[(std, self.residents)], res_after,
            incidents=w.demand[inc] if inc else None, grid_before=self.grid, grid_after=self.grid,
            calls_before=w.results[(std, inc)] if inc else None, calls_after=calls_after,
            layers_before=self.stages[std].areas, layers_after=layers_after,
            nearest_s=(kept.nearest_before, nearest_after),
        )  # fmt: skip
        return Evaluation(scenario, std, outcome, comparisons, ca, per_base_after)

    def compare(
        self, scenario: Scenario, standard: str | None = None, *, layers: tuple[str, ...] = ()
    ) -> dict[str, Any]:
        """The comparison rows of ``scenario`` (the columns of ``comparison.csv``), its change lines, the changed
        areas of one standard (residents), the map and the per base figures after the change, as JSON-ready values.

        ``layers`` names further layers after the change (:func:`after_layers`): ``gaps``, ``first_due`` and
        ``depth`` of the standard add ``gaps_after`` ... (the area layers are built for them), ``availability``
        runs the study's ``[availability]`` section on the network and bases after the change (a search without
        horizon from every base, so only on request); ``availability_after`` is null otherwise."""
        ev = self.evaluate(scenario, standard)
        outcome, ca = ev.outcome, ev.changed
        rows = comparison_rows(scenario.name, ev.comparisons, self.kinds)
        answer = {
            "scenario": scenario.name,
            "rows": [{k: json_value(v) for k, v in r.items()} for r in rows],
            "changes": outcome.changes.lines(),
            "standard": ev.standard,
            "changed_areas": geojson(ca.polygons, ["area_id", "change", "weight", "points", "incidents", "area_km2"]),
            "bases_after": geojson(outcome.bases, ["id", "name", "units"]),
            "closed_roads": geojson(outcome.changes.closed, ["edge_id", "way_id", "name", "road_class", "length_m"]),
            "road_minutes_after": self.road_minutes(outcome.node_t, like=self._kept.minutes),
            "per_base_after": per_base_rows(ev.per_base_after),
        }
        for kind in AREA_KINDS:
            if kind in layers:
                answer[f"{kind}_after"] = area_json(ca.after, kind, outcome.network.crs)
        wanted = "availability" in layers and self.study.availability is not None
        answer["availability_after"] = self.availability_answer(outcome) if wanted else None
        answer["caution"] = CAUTION
        return answer

    def availability_answer(self, outcome: WhatIfOutcome | None = None) -> dict[str, Any] | None:
        """The study's ``[availability]`` section on the network and bases after ``outcome`` (default the base
        state's), as :func:`coverkit.study.run_study` runs it, or None without that section:
        ``{standard, demand, summary, units}`` (the summary row and one row per unit)."""
        cfg, w = self.study.availability, self.whatif
        if cfg is None:
            return None
        std = self.study.standard_named(cfg.standard, "availability.standard")
        dname = self.study.demand_named(cfg.demand, "availability.demand", "incidents")
        spec = next(d for d in self.study.demand if d.name == dname)
        net, bases = (w.net, w.bases) if outcome is None else (outcome.network, outcome.bases)
        run = availability_stage(
            net, bases, w.demand[dname], std, cfg, demand_name=dname, max_snap_m=w.demand_snap_m[dname],
            window=(spec.start, spec.end),
        ).run  # fmt: skip
        return {
            "standard": std.name,
            "demand": dname,
            "summary": {k: json_value(v) for k, v in run.summary.items()},
            "units": [{k: json_value(v) for k, v in r.items()} for r in run.units.to_dict("records")],
        }


@dataclasses.dataclass(frozen=True)
class _Kept:
    """What a comparison reads from the base state before the change, computed once: per (standard, demand) the
    summary and the per base table, and for the grid's road-near cells their snap, their base times and, per cell
    of the grid, the nearest base time (the before side of the changed areas)."""

    summary: dict[tuple[str, str], dict]
    per_base: dict[tuple[str, str], pd.DataFrame]
    near_cells: np.ndarray
    near_snap: Snapped
    near_times: sp.csr_matrix
    nearest_before: np.ndarray
    minutes: tuple[np.ndarray, list]

    @classmethod
    def of(cls, state: BaseState) -> _Kept:
        results, grid = state.whatif.results, state.grid
        near = np.flatnonzero(grid.near)
        return cls(
            {k: r.summary() for k, r in results.items()},
            {k: per_base(r) for k, r in results.items()},
            grid.on[near],
            grid.table.point_snap.subset(near),
            grid.table.times[:, near].tocsr(),
            cell_nearest_s(grid),
            (state.piece_minutes(state.whatif.node_t), state.road_minutes(state.whatif.node_t)),
        )


@dataclasses.dataclass(frozen=True)
class Evaluation:
    """One scenario evaluated on a :class:`BaseState` (see :meth:`BaseState.evaluate`)."""

    scenario: Scenario
    standard: str
    outcome: WhatIfOutcome
    comparisons: dict[tuple[str, str], Comparison]
    changed: ChangedAreas
    per_base_after: dict[tuple[str, str], pd.DataFrame] = dataclasses.field(default_factory=dict)


__all__ = [
    "AFTER_LAYERS", "AREA_KINDS", "PER_BASE_COLUMNS", "BaseState", "Evaluation", "after_layers", "area_json",
    "geojson", "json_value", "per_base_rows",
]  # fmt: skip
