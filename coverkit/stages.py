"""The stages every front end calls: coverage per standard, siting, availability, calibration.

`coverkit run`, the single commands (`cover`, `site`, `availability`, `calibrate`), the Python API and the
comparison all call these functions, so the same inputs give the same checks, the same layer names
(:mod:`coverkit.layer_names`) and the same figures on every path. Each stage returns a frozen result that knows its
own layers (``.layers()``) and its headline lines (``.lines()``); whoever calls it writes the files and the report.

Results are planning estimates, not for live dispatch or routing (see ``coverkit.CAUTION``).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pandas as pd

from coverkit.coverage import DEFAULT_CELL_M, DEFAULT_REACH_M, GAP_COUNT_PREFIX, Standard
from coverkit.demand_sources import kind_of_source, row_word, unit_word
from coverkit.errors import FieldError, InputFileError
from coverkit.layer_names import layer_name

if TYPE_CHECKING:
    import geopandas as gpd

    from coverkit.availability import AvailabilityRun
    from coverkit.availability_types import TypeAvailability
    from coverkit.calibrate import CalibrationResult
    from coverkit.coverage import AreaGrid, AreaLayers, CoverageResult
    from coverkit.network import RoadNetwork
    from coverkit.settings import AvailabilitySettings, SitingSettings
    from coverkit.site_plan import SitePlan, SitingProblem
    from coverkit.site_units import UnitPlan
    from coverkit.spread import SpreadFit
    from coverkit.units import Fleet


def demand_kind(demand: gpd.GeoDataFrame) -> str:
    """The kind of a demand layer from its source (:func:`coverkit.demand_sources.kind_of_source`)."""
    return kind_of_source(demand["source"].iloc[0]) if len(demand) else "residents"


# -- zones ------------------------------------------------------------------------------------------------------------
def check_zones(path: str | Path, id_field: str, *, layer: str | None = None) -> None:
    """Fail early, in one line, when a zones layer cannot be read or lacks ``id_field`` (before any work is done).

    Raises
    ------
    InputFileError
        The file is not a readable layer.
    FieldError
        ``id_field`` is not one of its fields.
    """
    import pyogrio

    try:
        fields = list(pyogrio.read_info(path, layer=layer)["fields"])
    except Exception as exc:
        raise InputFileError(f"zones {path}: not a readable layer ({str(exc)[:60]}).") from None
    if id_field not in fields:
        raise FieldError(
            f"zones {Path(path).name}: no field '{id_field}' to name the zones by; its fields are {', '.join(fields)}."
        )


def read_zones(path: str | Path, id_field: str, *, layer: str | None = None) -> gpd.GeoDataFrame:
    """A zones polygon layer (districts, blocks, towns), checked: readable, holding ``id_field``, with a CRS."""
    import pyogrio

    check_zones(path, id_field, layer=layer)
    zones = pyogrio.read_dataframe(path, layer=layer)
    if zones.crs is None:
        raise InputFileError(f"zones {path}: the layer has no CRS; assign one (e.g. in a desktop GIS) and rerun.")
    return zones


# -- coverage ---------------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class CoverageStage:
    """Coverage of every demand layer under one standard, with its areas and tables.

    Attributes
    ----------
    standard
        The response standard.
    results
        ``{demand name: CoverageResult}``, in the order the demand layers were given; each result's ``demand``
        carries ``gap_id`` (the gap a point lies in) for the demand layers counted in the gaps.
    kinds
        ``{demand name: "residents" | "incidents"}``.
    areas
        Due areas, gaps and single-cover areas (:class:`coverkit.coverage.AreaLayers`).
    by_base, by_zone, by_priority
        ``{demand name: table}``: first-due demand per base; compliance per zone (when zones were given); per call
        priority (when the demand has a ``priority`` column).
    """

    standard: Standard
    results: Mapping[str, CoverageResult]
    kinds: Mapping[str, str]
    areas: AreaLayers
    by_base: Mapping[str, pd.DataFrame] = field(default_factory=dict)
    by_zone: Mapping[str, pd.DataFrame] = field(default_factory=dict)
    by_priority: Mapping[str, pd.DataFrame] = field(default_factory=dict)
    type_due: gpd.GeoDataFrame | None = None  # with units: first-due areas per unit type

    def summary_rows(self) -> list[dict[str, Any]]:
        """One row per demand layer: the standard, the demand, its kind and :meth:`CoverageResult.summary`."""
        return [
            {"standard": self.standard.name, "demand": name, "kind": self.kinds[name], **res.summary()}
            for name, res in self.results.items()
        ]

    def layers(self) -> dict[str, Any]:
        """The layers of this standard, named by :mod:`coverkit.layer_names` (the same for `run` and `cover`)."""
        name = self.standard.name
        out: dict[str, Any] = {layer_name("demand", d, name): res.demand for d, res in self.results.items()}
        for kind in ("first_due", "second_due", "third_due"):
            area = getattr(self.areas, kind, None)
            if area is not None:
                out[layer_name(kind, standard=name)] = area
        if self.type_due is not None:
            out[layer_name("first_due_by_type", standard=name)] = self.type_due
        out[layer_name("gaps", standard=name)] = self.areas.gaps
        out[layer_name("single_cover", standard=name)] = self.areas.single
        for kind, tables in (("by_base", self.by_base), ("by_zone", self.by_zone), ("by_priority", self.by_priority)):
            for d, table in tables.items():
                out[layer_name(kind, d, name)] = table
        return out

    def gap_lines(self, width: int = 22) -> list[str]:
        """The gaps in words: how many, the largest, and uncovered demand outside every gap."""
        lines = []
        gaps, counts = self.areas.gaps, self.areas.gap_counts()
        if len(gaps):
            top = gaps.iloc[0]
            held = ", ".join(f"{top[c]:,.0f} {c.removeprefix(GAP_COUNT_PREFIX)}" for c in counts)
            lines.append(
                f"{self.standard.name:<{width}} {len(gaps)} gaps; largest holds {held} uncovered, "
                f"{top['area_km2']:.1f} km2"
            )
        outside = ", ".join(
            f"{v:,.0f} {c.removeprefix(GAP_COUNT_PREFIX)}" for c, v in self.areas.uncovered_outside.items() if v > 0
        )
        if outside:
            lines.append(f"{self.standard.name:<{width}} uncovered outside every gap (beyond the grid): {outside}")
        return lines

    def lines(self, demand: str | None = None) -> list[str]:
        """The figures of one demand layer (default the first) as a single command prints them."""
        name = demand or next(iter(self.results))
        res, kind = self.results[name], self.kinds[name]
        s = res.summary()
        unit = unit_word(kind)
        where_word = row_word(res.demand["source"].iloc[0]) if len(res.demand) else "points"
        frac = s["fractile_response_s"]
        frac_text = self.standard.unreached_text() if frac == float("inf") else f"{frac:,.0f} s ({frac / 60:.1f} min)"
        verdict = "meets" if s["meets_standard"] else "misses"
        out = [
            self.standard.describe(),
            f"demand       {s['demand_total']:,.0f} {unit} in {s['demand_points']:,} {where_word} "
            f"({s['off_network_points']:,} off the network, {s['off_network']:,.0f} {unit})",
        ]
        rejected = res.demand.attrs.get("rejected")
        if rejected:
            out.append(f"rejected     {rejected.text(verb=False)}; see layer {layer_name('rejected', name)}")
        out += [
            f"covered      {s['covered']:,.0f} {unit} = {s['covered_share'] * 100:.1f} %",
        ]
        if "expected_covered" in s:
            src = res.extra["spread"].source or "the given fit"
            out.append(
                f"expected     {s['expected_covered']:,.0f} {unit} = {s['expected_covered_share'] * 100:.1f} % "
                f"(each point's demand times its chance of arriving within the standard, spread from {src}; "
                "'covered' above is the deterministic figure: modelled time within the standard)"
            )
        out += [
            f"depth        once {s['covered_once']:,.0f}, twice or more {s['covered_twice_or_more']:,.0f}",
            f"fractile     {self.standard.fractile * 100:g}th percentile response {frac_text}: {verdict} "
            f"{self.standard.response_s:,.0f} s",
        ]
        count = self.areas.gap_counts()[0]
        gaps, outside = self.areas.gaps, self.areas.uncovered_outside[count]
        out.append(
            f"gaps         {len(gaps)} holding {gaps[count].sum():,.0f} uncovered {unit}"
            + (f" ({outside:,.0f} more lie outside every gap, beyond the grid)" if outside > 0 else "")
            + (f"; largest {gaps[count].iloc[0]:,.0f} {unit}, {gaps['area_km2'].iloc[0]:.1f} km2" if len(gaps) else "")
        )
        out += _unit_lines(res)
        out += ["", "per base (first due)"]
        for r in self.by_base[name].itertuples(index=False):
            out.append(
                f"  {r.base_id:<12}{r.first_due_demand:>12,.0f} {unit} ({r.first_due_share * 100:5.1f} %), "
                f"sole cover {r.sole_cover:,.0f}"
            )
        return out


def _unit_lines(res: CoverageResult) -> list[str]:
    """The fleet's figures: the weighted share reached in time by each type's first unit, and the median people
    on scene in time (empty without units)."""
    from coverkit.arrivals import PERSONNEL_COLUMN
    from coverkit.coverage import weighted_fractile
    from coverkit.units import type_column

    fleet = res.extra.get("fleet")
    if fleet is None:
        return []
    d = res.demand
    w = d["weight"].to_numpy(dtype=float)
    total = float(w.sum()) or float("nan")
    shares = ", ".join(
        f"{t} {w[d[type_column(t)].to_numpy() <= res.standard.travel_s].sum() / total * 100:.1f} %" for t in fleet.types
    )
    people = weighted_fractile(d[PERSONNEL_COLUMN].to_numpy(dtype=float), w, 0.5)
    return [
        f"units        {len(fleet)} units ({', '.join(fleet.types)}); first of each type in time: {shares}",
        f"people       median on scene within {res.standard.travel_s:g} s travel: {people:,.0f} (weighted by demand)",
    ]


def coverage_stage(
    net: RoadNetwork,
    bases: gpd.GeoDataFrame,
    demand: Mapping[str, gpd.GeoDataFrame],
    standard: Standard,
    *,
    kinds: Mapping[str, str] | None = None,
    tables: Mapping[str, Any] | None = None,
    zones: gpd.GeoDataFrame | None = None,
    zone_id_field: str | None = None,
    area: object = None,
    grid: AreaGrid | None = None,
    cell_m: float = DEFAULT_CELL_M,
    reach_m: float = DEFAULT_REACH_M,
    demand_snap_m: Mapping[str, float] | None = None,
    base_snap_m: float | None = None,
    direction: str | None = None,
    spread: SpreadFit | None = None,
    fleet: Fleet | None = None,
) -> CoverageStage:
    """Coverage of each demand layer under ``standard``, then the due areas and gaps of the whole study area.

    Parameters
    ----------
    demand
        ``{name: demand points}`` from :func:`coverkit.demand.load_demand`, in the order to report them.
    kinds
        ``{name: "residents" | "incidents"}``; default from each layer's source (:func:`demand_kind`). The first
        residents layer is the one the gaps are sorted by; the first incidents layer is counted in them too.
    tables
        ``{name: travel table}`` from :func:`coverkit.coverage.travel_table`, to share one search between standards;
        default: searched here.
    zones, zone_id_field
        Zones to report compliance by (:func:`read_zones`); both or neither.
    area
        The study area the due areas partition (shapely polygon in the network CRS); default the network's extent.
    grid
        An :class:`coverkit.coverage.AreaGrid` from an earlier standard on the same inputs (it is reused).
    cell_m, reach_m
        Grid cell size (m) and how far from a road a cell is still timed (m) for the areas.
    demand_snap_m, base_snap_m, direction
        Snap limits (m) and search direction passed to :func:`coverkit.coverage.evaluate_coverage` when no table is
        given.
    spread
        A travel-time spread fit (:func:`coverkit.spread.read_spread`): each point also gets its probability of
        arriving within the standard and each summary the expected covered demand
        (:func:`coverkit.spread.add_arrival_probability`), beside the deterministic figures.
    fleet
        The units at the bases (:func:`coverkit.units.read_units`): per-type arrivals, and the standard by type or
        force judged on them, gaps included.
    """
    from coverkit.coverage import (
        area_layers,
        compliance_by,
        compliance_by_zone,
        evaluate_coverage,
        first_due_by_type,
        per_base,
    )

    if (zones is None) != (zone_id_field is None):
        raise FieldError("zones and their id field go together: give the polygon layer and the field naming zones.")
    kinds = dict(kinds) if kinds else {name: demand_kind(d) for name, d in demand.items()}
    results: dict[str, CoverageResult] = {}
    by_base, by_zone, by_priority = {}, {}, {}
    for name, dem in demand.items():
        options: dict[str, Any] = {"table": tables[name]} if tables and name in tables else {}
        if not options:
            if demand_snap_m and name in demand_snap_m:
                options["max_snap_m"] = demand_snap_m[name]
            if base_snap_m is not None:
                options["base_snap_m"] = base_snap_m
            if direction is not None:
                options["direction"] = direction
        if fleet is not None:
            options["fleet"] = fleet
        res = evaluate_coverage(net, bases, dem, standard, **options)
        if spread is not None:
            from coverkit.spread import add_arrival_probability

            add_arrival_probability(net, res, spread)
        results[name] = res
        by_base[name] = per_base(res)
        if zones is not None:
            by_zone[name] = compliance_by_zone(res, zones, zone_id_field)
        if "priority" in dem.columns:
            by_priority[name] = compliance_by(res, "priority")
    if grid is not None and standard.travel_s > grid.table.stored_s:
        grid = None  # the grid of a shorter standard stores too little for this one: build it again
    first = next(iter(demand))
    residents = next((n for n, k in kinds.items() if k == "residents"), first)
    incidents = next((n for n, k in kinds.items() if k == "incidents" and n != residents), None)
    areas = area_layers(
        net,
        results[residents],
        incidents=results[incidents] if incidents else None,
        cell_m=cell_m,
        reach_m=reach_m,
        grid=grid,
        area=area,
    )
    results[residents].demand["gap_id"] = areas.demand_gap_id
    if incidents and areas.incident_gap_id is not None:
        results[incidents].demand["gap_id"] = areas.incident_gap_id
    type_due = first_due_by_type(areas.grid, results[residents]) if fleet is not None else None
    return CoverageStage(standard, results, kinds, areas, by_base, by_zone, by_priority, type_due)


# -- siting -----------------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class SitingStage:
    """A siting model's answer on one problem: the plan and the problem it answers."""

    problem: SitingProblem
    plan: SitePlan
    demand: str

    def layers(self) -> dict[str, Any]:
        """Chosen sites, the ranking, the curve, the candidates as snapped, and the summary row."""
        return {
            layer_name("site_chosen"): self.plan.chosen,
            layer_name("site_ranking"): self.plan.ranking,
            layer_name("site_curve"): self.plan.curve,
            layer_name("site_candidates"): self.problem.sites,
            layer_name("site_summary"): pd.DataFrame([self.plan.summary]),
        }

    def headline(self) -> str:
        """One line: the model, the new sites, covered share before and after."""
        s = self.plan.summary
        ids = ", ".join(self.plan.chosen["id"].astype(str))
        return (
            f"siting ({s['model']}, {s['method']}): new sites {ids or '-'}; {self.demand} covered "
            f"{s['covered_share_before'] * 100:.1f} % -> {s['covered_share_after'] * 100:.1f} %"
        )


@dataclass(frozen=True)
class UnitSitingStage:
    """Where the next units of a type go (:func:`coverkit.site_units.place_units`) on one demand layer."""

    plan: UnitPlan
    demand: str

    def layers(self) -> dict[str, Any]:
        """The chosen sites in order and the summary row."""
        return {
            layer_name("site_unit_chosen"): self.plan.chosen,
            layer_name("site_unit_summary"): pd.DataFrame([self.plan.summary]),
        }

    def headline(self) -> str:
        """One line: the type, the sites, covered share before and after."""
        s = self.plan.summary
        ids = ", ".join(self.plan.chosen["site_id"].astype(str))
        return (
            f"next {s['unit_type']} units ({s['method']}): at {ids}; {self.demand} covered "
            f"{s['covered_share_before'] * 100:.1f} % -> {s['covered_share_after'] * 100:.1f} %"
        )


def siting_problem(
    net: RoadNetwork,
    bases: gpd.GeoDataFrame,
    demand: gpd.GeoDataFrame,
    standard: Standard,
    cfg: SitingSettings,
    *,
    max_snap_m: float | None = None,
    base_snap_m: float | None = None,
) -> SitingProblem:
    """The candidates (read, or generated on the network) and their coverage of ``demand`` under ``standard``.

    ``cfg`` names exactly one of ``candidates`` (a point file) and ``generate`` (a road class).
    """
    from coverkit.errors import PARAM
    from coverkit.site_plan import build_problem, generate_candidates
    from coverkit.travel import read_points

    if (cfg.candidates is None) == (cfg.generate is None):
        raise FieldError(
            f"{PARAM}: give either a candidates file or a road class to generate them on (not both, not neither).",
            param="candidates",
        )
    if cfg.candidates is not None:
        candidates = read_points(str(cfg.candidates), net.crs, what="candidates")
    else:
        candidates = generate_candidates(net, cfg.generate, cfg.spacing_m)
    options = {k: v for k, v in (("max_snap_m", max_snap_m), ("base_snap_m", base_snap_m)) if v is not None}
    return build_problem(net, bases, candidates, demand, standard, relocate=cfg.relocate, **options)


def siting_stage(problem: SitingProblem, cfg: SitingSettings, demand: str) -> SitingStage:
    """The covering model ``cfg.model`` solved on ``problem`` (its curve included), as a :class:`SitingStage`."""
    from coverkit.site_plan import solve

    plan = solve(
        problem,
        cfg.model,
        add=cfg.add,
        target=cfg.target,
        q=cfg.busy_fraction,
        method=cfg.method,
        time_limit_s=cfg.time_limit_s,
        curve_to=cfg.curve,
    )
    plan.summary["demand"] = demand
    return SitingStage(problem, plan, demand)


# -- availability -----------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class AvailabilityStage:
    """Busy units (hypercube) on one demand layer under one standard."""

    run: AvailabilityRun
    demand: str
    by_type: TypeAvailability | None = None

    def layers(self) -> dict[str, Any]:
        """Per unit, per demand point, and the summary row (and, with units by type, the per-type tables)."""
        out = {
            layer_name("availability_units"): self.run.units,
            layer_name("availability_demand"): self.run.demand,
            layer_name("availability_summary"): pd.DataFrame([self.run.summary]),
        }
        if self.by_type is not None:
            out[layer_name("availability_by_type")] = self.by_type.summary.drop(columns="standard")
            out[layer_name("availability_type_units")] = self.by_type.units
        return out

    def type_lines(self) -> list[str]:
        """One line per unit type: its calls, the busiest unit, covered by drive time and by the answering unit."""
        if self.by_type is None:
            return []
        lines = []
        for r in self.by_type.summary.itertuples(index=False):
            units = self.by_type.units[self.by_type.units["type"] == r.type]
            busy = units.loc[units["workload"].idxmax()]
            lines.append(
                f"{r.type:<14} {r.calls_share * 100:5.1f} % of calls, {r.units} units, busiest {busy['unit_id']} "
                f"{busy['workload']:.2f}; in standard {r.drive_time_coverage * 100:.1f} % by drive time, "
                f"{r.availability_coverage * 100:.1f} % by the unit that answers"
            )
        return lines

    def headline(self) -> str:
        """One line: the call rate and the covered share by drive time and by the unit that answers."""
        a = self.run.summary
        return (
            f"busy units ({a['calls_per_h']:.2f} calls/h, {a['mean_service_min']:g} min each): {self.demand} "
            f"reached in standard {a['drive_time_coverage'] * 100:.1f} % by drive time, "
            f"{a['availability_coverage'] * 100:.1f} % by the unit that actually answers"
        )


def availability_stage(
    net: RoadNetwork,
    bases: gpd.GeoDataFrame,
    demand: gpd.GeoDataFrame,
    standard: Standard,
    cfg: AvailabilitySettings,
    *,
    demand_name: str,
    max_snap_m: float | None = None,
    window: tuple[str | None, str | None] = (None, None),
    fleet: Fleet | None = None,
    needs_field: str = "needs",
) -> AvailabilityStage:
    """Busy units on ``demand`` (incidents) under ``standard``: :func:`coverkit.availability.availability`.

    ``window`` is the time window the incidents were selected from (ISO times or None): the call rate is counted
    over it. With ``fleet`` each unit type is also run on the calls that need it
    (:func:`coverkit.availability_types.availability_by_type`).
    """
    from coverkit.availability import availability

    options = {
        "calls_per_h": cfg.calls_per_h,
        "queue": cfg.queue,
        "method": cfg.method,
        "time_field": cfg.time_field,
        "window": window,
        **({"max_snap_m": max_snap_m} if max_snap_m is not None else {}),
    }
    run = availability(net, bases, demand, standard, cfg.service_min, **options)
    run.summary["demand"] = demand_name
    by_type = None
    if fleet is not None:
        from coverkit.availability_types import availability_by_type

        # the types share the call rate of the whole run (counted once)
        options["calls_per_h"] = cfg.calls_per_h or run.summary["calls_per_h"]
        by_type = availability_by_type(
            net, bases, demand, standard, fleet, cfg.service_min, needs_field=needs_field, **options
        )
    return AvailabilityStage(run, demand_name, by_type)


# -- calibration ------------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class CalibrationStage:
    """Speed factors fitted to observed responses."""

    result: CalibrationResult

    def layers(self) -> dict[str, Any]:
        """Fitted factor per road class, and errors before and after."""
        return {
            layer_name("calibration_classes"): self.result.classes,
            layer_name("calibration_errors"): self.result.errors,
            **({layer_name("calibration_spread"): self.result.spread.table} if self.result.spread else {}),
        }

    def headline(self, profile_name: str = "") -> str:
        """One line: observations used and the mean absolute error before and after."""
        c = self.result
        written = f" (profile written to {profile_name})" if profile_name else ""
        return (
            f"calibration on {c.n_used} observed responses: mean absolute error "
            f"{c.error('before', 'mae_s', 'all'):.0f} s -> {c.error('after', 'mae_s', 'all'):.0f} s{written}"
        )
