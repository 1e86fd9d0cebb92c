"""The ``coverkit`` command line: parse arguments, call the library, print, set the exit code.

No algorithm lives here. Bad input raises :class:`~coverkit.errors.CoverkitError`; the message is printed as one
line and the exit status is 2.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
from collections.abc import Callable, Sequence
from pathlib import Path

from coverkit import CAUTION, __version__
from coverkit.errors import CoverkitError
from coverkit.layer_names import demand_name_of, layer_name, map_file, single_standard_name, table_file
from coverkit.progress import set_quiet
from coverkit.travel.points import DEFAULT_MAX_REJECTED_SHARE

COMMANDS: dict[str, Callable[[argparse.Namespace], int]] = {}


def command(name: str) -> Callable:
    """Register a sub-command handler."""

    def register(func: Callable[[argparse.Namespace], int]) -> Callable[[argparse.Namespace], int]:
        COMMANDS[name] = func
        return func

    return register


def _common(p: argparse.ArgumentParser) -> None:
    p.add_argument("--quiet", "-q", action="store_true", help="no progress messages on stderr")


def _positive_float(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a number") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"'{text}' must not be negative")
    return value


def _share(text: str) -> float:
    try:
        value = float(text.rstrip("%")) / (100.0 if text.endswith("%") else 1.0)
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a share, e.g. 0.01 or 1%") from None
    if not 0.0 <= value <= 1.0:
        raise argparse.ArgumentTypeError(f"'{text}' must be a share 0..1, e.g. 0.01 or 1%")
    return value


def _minutes_list(text: str) -> list[float]:
    try:
        values = sorted({float(v) for v in text.split(",") if v.strip()})
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a comma-separated list of minutes, e.g. 4,8,12") from None
    if not values or values[0] <= 0:
        raise argparse.ArgumentTypeError("minutes must be positive, e.g. 4,8,12")
    return values


def _coverage_inputs(
    p: argparse.ArgumentParser,
    bases_help: str,
    demand_help: str = "population raster, polygons (with --population-field) or points",
    standard: bool = True,
) -> None:
    """The arguments every coverage-like command takes: network, bases, demand and the response standard."""
    p.add_argument("network", type=Path, help="network GeoPackage from `coverkit network`")
    p.add_argument("--bases", type=Path, required=True, help=bases_help)
    p.add_argument("--demand", type=Path, required=True, help=demand_help)
    p.add_argument(
        "--where",
        help="filter on point demand fields in the usual GIS query syntax, "
        "e.g. \"priority = 1 AND type <> 'transfer'\"",
    )
    p.add_argument(
        "--max-rejected",
        type=_share,
        default=DEFAULT_MAX_REJECTED_SHARE,
        help="point demand: stop when more than this share of rows has no usable position, 0..1 (0.01 = 1 %%)",
    )
    p.add_argument("--minutes", type=_positive_float, required=True, help="travel-time standard in minutes")
    if standard:
        p.add_argument("--population-field", help="population field of a polygon demand layer")
        p.add_argument("--turnout-s", type=_positive_float, default=0.0, help="turnout added to travel, s (0)")
        p.add_argument("--fractile", type=float, default=0.9, help="share of demand to reach, 0..1 (0.9)")


def _points_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--id-field", default="id", help="id field of --bases (id)")
    p.add_argument("--snap-m", type=_positive_float, default=500.0, help="base snap limit, m (500)")


class _Parser(argparse.ArgumentParser):
    """Argument errors as one line (what is wrong and where to look), exit status 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        self.exit(2, f"{self.prog}: error: {message}; see `{self.prog} --help`.\n")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every sub-command."""
    parser = _Parser(
        prog="coverkit",
        description="Drive-time polygons and coverage for fire and EMS planning. " + CAUTION,
    )
    parser.add_argument("--version", action="version", version=f"coverkit {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    parser.set_defaults(_commands=sub.choices)

    p = sub.add_parser(
        "network",
        help="build a drivable road network from OSM or centerline data",
        description="Build a directed, timed road network from a local OSM file (.osm, .osm.bz2, .osm.pbf) or a "
        "centerline layer (.gpkg, .shp, .geojson) and save it as a GeoPackage.",
    )
    p.add_argument("source", type=Path, help="road data: .osm/.osm.bz2/.osm.pbf, or a centerline layer")
    p.add_argument("--out", "-o", type=Path, required=True, help="network GeoPackage to write")
    p.add_argument(
        "--profile",
        default="emergency",
        help="speed profile: normal, emergency, winter or a .toml file",
    )
    p.add_argument("--boundary", type=Path, help="polygon layer to clip to (roads within it plus the buffer)")
    p.add_argument(
        "--buffer-m",
        type=_positive_float,
        default=3000.0,
        help="buffer around --boundary, m (3000)",
    )
    p.add_argument("--crs", help="metric CRS for the network (default: the UTM zone of the data)")
    p.add_argument(
        "--fields",
        help="centerline field mapping, e.g. class=ROADCLASS,speed=SPEED_MPH,oneway=ONEWAY "
        "(also name=, id=, bridge=, tunnel=, speed_unit=mph|kph, oneway_forward=FT, oneway_backward=TF, "
        "class_map=LOC:residential;COL:tertiary)",
    )
    p.add_argument("--layer", help="layer name inside a multi-layer centerline file")
    p.add_argument(
        "--snap-tolerance-m",
        type=_positive_float,
        default=0.5,
        help="centerlines: join endpoints closer than this",
    )
    _common(p)

    p = sub.add_parser(
        "isochrones",
        help="drive-time polygons per base and band, and a travel-time surface",
        description="Drive-time polygons (nested bands) from each base and for any base, written to a GeoPackage; "
        "optionally a GeoTIFF of minutes to the nearest base.",
    )
    p.add_argument("network", type=Path, help="network GeoPackage from `coverkit network`")
    p.add_argument("--bases", type=Path, required=True, help="bases: CSV with id, lon, lat or a point layer")
    p.add_argument("--minutes", type=_minutes_list, default=[4.0, 8.0, 12.0], help="bands in minutes (4,8,12)")
    p.add_argument(
        "--out", "-o", type=Path, required=True, help="GeoPackage to write (layers reach_by_base, reach_any_base)"
    )
    p.add_argument("--surface", type=Path, help="also write a GeoTIFF of minutes to the nearest base")
    p.add_argument("--surface-cell-m", type=_positive_float, default=50.0, help="surface cell size, m (50)")
    p.add_argument("--reach-m", type=_positive_float, default=150.0, help="reach from a reached road, m (150)")
    p.add_argument("--exact", action="store_true", help="exact vector construction (slower reference path)")
    p.add_argument(
        "--grid-m", type=_positive_float, help="grid spacing of the fast polygons, m (default: a third of the reach)"
    )
    p.add_argument("--direction", choices=["out", "in"], default="out", help="out: from base (default); in: to base")
    _points_options(p)
    _common(p)

    p = sub.add_parser(
        "cover",
        help="coverage of demand against a response standard",
        description="Who is reached within turnout + travel, by which base, how many times over, and where the gaps "
        "are. Demand: a population raster (.tif), a polygon layer with --population-field, or points (CSV with "
        "id, lon, lat[, weight] or a point layer).",
    )
    _coverage_inputs(p, bases_help="bases: CSV with id, lon, lat or a point layer")
    p.add_argument(
        "--out",
        "-o",
        type=Path,
        required=True,
        help="GeoPackage to write (layers demand_<demand>_<standard>, gaps_<standard>, ...)",
    )
    p.add_argument("--weight-field", help="weight field of point demand (default: weight column or 1)")
    p.add_argument("--demand-id-field", default="id", help="id field of point demand (id)")
    p.add_argument("--time-field", help="timestamp field for --start/--end (received_at)")
    p.add_argument("--start", help="keep points at or after this ISO time")
    p.add_argument("--end", help="keep points before this ISO time")
    p.add_argument("--zones", type=Path, help="polygon layer for compliance by zone")
    p.add_argument("--zone-field", help="id field of --zones")
    p.add_argument(
        "--boundary",
        type=Path,
        help="study area polygon layer that the first-, second- and third-due areas tile (default: the network's "
        "extent)",
    )
    p.add_argument("--demand-snap-m", type=_positive_float, default=500.0, help="demand snap limit, m (500)")
    p.add_argument("--direction", choices=["out", "in"], default="out", help="out: base to demand (default)")
    _points_options(p)
    _common(p)

    p = sub.add_parser(
        "site",
        help="where new stations should go: covering models on candidate sites",
        description="Rank candidate sites and choose new ones with a published covering model (MCLP, LSCP, backup "
        "coverage, MEXCLP, p-median), solved exactly with HiGHS or by a greedy-plus-interchange heuristic.",
    )
    _coverage_inputs(p, bases_help="existing bases: CSV with id, lon, lat or a point layer")
    p.add_argument("--candidates", type=Path, help="candidate sites: CSV with id, lon, lat or a point layer")
    p.add_argument(
        "--generate-candidates",
        metavar="CLASS",
        help="generate candidates at nodes on roads of CLASS or better (e.g. tertiary)",
    )
    p.add_argument("--spacing-m", type=_positive_float, default=1500.0, help="generated candidate spacing, m (1500)")
    p.add_argument("--model", choices=["mclp", "lscp", "backup", "mexclp", "p-median"], default="mclp")
    p.add_argument("--add", type=int, help="number of new sites (mclp, backup, p-median) or units (mexclp)")
    p.add_argument("--target", type=float, help="lscp: share of demand to cover, 0..1 (default all coverable)")
    p.add_argument("--busy-fraction", type=float, help="mexclp: share of time a unit is busy, 0..1")
    p.add_argument("--relocate", action="store_true", help="existing bases are free to move (not fixed)")
    p.add_argument("--rank", action="store_true", help="only rank every candidate alone (what each adds)")
    p.add_argument("--curve", type=int, help="coverage curve up to this many new sites (default --add, at least 3)")
    p.add_argument("--method", choices=["auto", "milp", "heuristic"], default="auto", help="solver (auto)")
    p.add_argument(
        "--time-limit-s", type=_positive_float, default=60.0, help="time for all solving, curve included, s (60)"
    )
    p.add_argument(
        "--out",
        "-o",
        type=Path,
        required=True,
        help="GeoPackage to write (layers site_chosen, site_ranking, site_curve, ...)",
    )
    _points_options(p)
    _common(p)

    p = sub.add_parser(
        "availability",
        help="busy units: hypercube model of who actually responds, and availability-adjusted coverage",
        description="Closest-available dispatch with the hypercube model (exact for small N, Larson's approximation "
        "for large N): unit workloads, the chance each unit answers each demand point, expected travel time with "
        "backup responses, and the share of calls reached within the standard by whichever unit responds.",
    )
    _coverage_inputs(
        p,
        bases_help="bases with optional units column",
        demand_help="incidents (points with a time field)",
        standard=False,
    )
    p.add_argument("--service-min", type=_positive_float, required=True, help="mean time a unit is busy per call, min")
    p.add_argument("--calls-per-h", type=_positive_float, help="total call rate (default: from incident timestamps)")
    p.add_argument("--time-field", default="received_at", help="incident timestamp field (received_at)")
    p.add_argument("--start", help="keep incidents at or after this ISO time")
    p.add_argument("--end", help="keep incidents before this ISO time")
    p.add_argument(
        "--queue",
        choices=["infinite", "zero"],
        default="infinite",
        help="infinite: calls wait; zero: calls finding all units busy are lost to mutual aid",
    )
    p.add_argument(
        "--method",
        choices=["auto", "exact", "approx"],
        default="auto",
        help="exact 2^N-state model, Larson's approximation, or auto by size",
    )
    p.add_argument(
        "--out",
        "-o",
        type=Path,
        required=True,
        help="GeoPackage to write (layers availability_units, availability_demand, ...)",
    )
    _points_options(p)
    _common(p)

    p = sub.add_parser(
        "calibrate",
        help="fit speed factors per road class to observed travel times; write a calibrated profile",
        description="Match observed responses (base_id, lon, lat, observed_s[, hour]) to modelled routes, fit one "
        "speed multiplier per road class by bounded robust least squares (re-routing until stable), report "
        "errors before and after by distance band, and write a profile TOML that `coverkit network` accepts.",
    )
    p.add_argument("network", type=Path, help="network GeoPackage from `coverkit network`")
    p.add_argument("--observed", type=Path, required=True, help="CSV: base_id, lon, lat, observed_s[, hour]")
    p.add_argument("--bases", type=Path, required=True, help="bases the observed base_id values refer to")
    p.add_argument("--profile", help="starting profile (default: the one the network was built with)")
    p.add_argument("--out", "-o", type=Path, required=True, help="calibrated profile TOML to write")
    p.add_argument("--chart", type=Path, help="also write the diagnostic distance-time chart (PNG)")
    p.add_argument("--hours", help="only observations in these hours of day, e.g. 7-19 or 0,1,2")
    p.add_argument(
        "--max-rejected",
        type=_share,
        default=DEFAULT_MAX_REJECTED_SHARE,
        help="stop when more than this share of observations has no usable position, 0..1 (0.01 = 1 %%)",
    )
    _common(p)

    p = sub.add_parser(
        "compare",
        help="before/after coverage for a scenario: closures, slowdowns, station changes",
        description="Run a study's coverage before and after a scenario file ([[closure]], [[slowdown]], "
        "[[base_change]]) and report who loses or gains coverage, per-base changes, and a difference map.",
    )
    p.add_argument("study", type=Path, help="study TOML file")
    p.add_argument("scenario", type=Path, help="scenario TOML file (see examples/scenarios/)")
    p.add_argument("--out", "-o", type=Path, required=True, help="output folder")
    _common(p)

    p = sub.add_parser(
        "run",
        help="run a whole study from a TOML file",
        description="Run a study file (see examples/demo-study.toml): network (cached), drive-time polygons, "
        "surface, coverage for every standard and demand layer, maps and the HTML report.",
    )
    p.add_argument("study", type=Path, help="study TOML file")
    p.add_argument("--out", "-o", type=Path, help="output folder (default: outputs.folder in the study)")
    _common(p)

    p = sub.add_parser(
        "demo",
        help="run the whole study on the fictional demo county",
        description="Write the fictional Varrowby County data into OUT/data, then run the demo study into OUT.",
    )
    p.add_argument("--out", "-o", type=Path, default=Path("demo-results"), help="output folder (demo-results)")
    _common(p)

    return parser


def _network_and_bases(args: argparse.Namespace):
    """The saved network and the bases projected to its CRS (commands taking NETWORK and --bases)."""
    from coverkit.network import RoadNetwork
    from coverkit.travel import read_points

    net = RoadNetwork.load(args.network)
    return net, read_points(args.bases, net.crs, id_field=args.id_field, what="bases")


@command("network")
def _cmd_network(args: argparse.Namespace) -> int:
    from coverkit.network import build_network
    from coverkit.network.centerlines import parse_fields

    fields = parse_fields(args.fields) if args.fields else None
    layer_options = {}
    if fields:
        layer_options = {"layer": args.layer, "snap_tolerance_m": args.snap_tolerance_m}
    net, report = build_network(
        args.source,
        profile=args.profile,
        boundary=args.boundary,
        buffer_m=args.buffer_m,
        crs=args.crs,
        fields=fields,
        **layer_options,
    )
    net.save(args.out)
    print(report.summary_text())
    print(f"\nwrote {args.out}")
    print(CAUTION)
    return 0


@command("isochrones")
def _cmd_isochrones(args: argparse.Namespace) -> int:
    from coverkit.isochrones import drive_time_polygons, summary_table, write_polygons, write_travel_surface

    net, bases = _network_and_bases(args)
    polygons = drive_time_polygons(
        net,
        bases,
        args.minutes,
        reach_m=args.reach_m,
        exact=args.exact,
        cell_m=args.grid_m,
        direction=args.direction,
        max_snap_m=args.snap_m,
    )
    table = summary_table(polygons)
    write_polygons(polygons, args.out)
    if args.surface:
        write_travel_surface(
            net,
            bases,
            args.surface,
            max(args.minutes),
            cell_m=args.surface_cell_m,
            reach_m=args.reach_m,
            direction=args.direction,
            max_snap_m=args.snap_m,
        )
    print(f"{'base':<16}{'band min':>9}{'area km2':>10}{'road km':>10}")
    for r in table.itertuples(index=False):
        print(f"{r.base!s:<16}{r.band_min:>9g}{r.area_km2:>10.2f}{r.road_km:>10.1f}")
    print(f"\nwrote {args.out}" + (f" and {args.surface}" if args.surface else ""))
    print(
        f"profile '{net.profile.name}', reach {args.reach_m:g} m from the road, travel {args.direction}bound; "
        "turnout not included"
    )
    print(CAUTION)
    return 0


@command("cover")
def _cmd_cover(args: argparse.Namespace) -> int:
    import pyogrio

    from coverkit.atomic import write_gpkg_layers
    from coverkit.coverage import Standard, area_layers, compliance_by, compliance_by_zone, evaluate_coverage, per_base
    from coverkit.demand import load_demand
    from coverkit.errors import FieldError
    from coverkit.network.build import read_boundary
    from coverkit.study import standard_layers

    if (args.zones is None) != (args.zone_field is None):
        raise FieldError("--zones and --zone-field go together: give the polygon layer and its id field.")
    std = Standard(single_standard_name(args.minutes), args.minutes * 60.0, args.turnout_s, args.fractile)
    dname = demand_name_of(args.demand)
    net, bases = _network_and_bases(args)
    demand = load_demand(
        args.demand,
        net,
        where=args.where,
        population_field=args.population_field,
        weight_field=args.weight_field,
        id_field=args.demand_id_field,
        time_field=args.time_field,
        start=args.start,
        end=args.end,
        max_rejected_share=args.max_rejected,
    )
    res = evaluate_coverage(
        net, bases, demand, std, max_snap_m=args.demand_snap_m, base_snap_m=args.snap_m, direction=args.direction
    )
    is_points = demand["source"].iloc[0] == "points"
    area = read_boundary(args.boundary).to_crs(net.crs).union_all() if args.boundary else None
    areas = area_layers(net, res, area=area)
    out_demand = res.demand.assign(gap_id=areas.demand_gap_id)
    by_base = per_base(res)
    tables = {"by_base": {dname: by_base}}
    if args.zones:
        zones = pyogrio.read_dataframe(args.zones)
        tables["by_zone"] = {dname: compliance_by_zone(res, zones, args.zone_field)}
    if "priority" in out_demand.columns:
        tables["by_priority"] = {dname: compliance_by(res, "priority")}
    layers = {layer_name("bases"): bases, **standard_layers(std.name, {dname: out_demand}, areas, tables)}
    rejected = _rejected(demand, layers, dname)
    summary = res.summary()
    import pandas as pd

    kind = "incidents" if is_points else "residents"
    row = {"standard": std.name, "demand": dname, "kind": kind, **summary}
    layers[layer_name("summary")] = pd.DataFrame([row]).drop(columns=["standard_text"])
    write_gpkg_layers(args.out, layers)
    unit = "calls" if is_points else "people"
    where_word = "cells" if demand["source"].iloc[0] == "raster" else "points"
    frac = summary["fractile_response_s"]
    print(std.describe())
    print(
        f"demand       {summary['demand_total']:,.0f} {unit} in {summary['demand_points']:,} {where_word} "
        f"({summary['off_network_points']:,} off the network, {summary['off_network']:,.0f} {unit})"
    )
    if rejected:
        print(f"rejected     {rejected}")
    print(f"covered      {summary['covered']:,.0f} {unit} = {summary['covered_share'] * 100:.1f} %")
    print(f"depth        once {summary['covered_once']:,.0f}, twice or more {summary['covered_twice_or_more']:,.0f}")
    frac_text = "not reached" if frac == float("inf") else f"{frac:,.0f} s ({frac / 60:.1f} min)"
    verdict = "meets" if summary["meets_standard"] else "misses"
    print(f"fractile     {args.fractile * 100:g}th percentile response {frac_text}: {verdict} {std.response_s:,.0f} s")
    count = areas.gap_counts()[0]
    outside = areas.uncovered_outside[count]
    print(
        f"gaps         {len(areas.gaps)} holding {areas.gaps[count].sum():,.0f} uncovered {unit}"
        + (f" ({outside:,.0f} more lie outside every gap, beyond the grid)" if outside > 0 else "")
        + (
            f"; largest {areas.gaps[count].iloc[0]:,.0f} {unit}, {areas.gaps['area_km2'].iloc[0]:.1f} km2"
            if len(areas.gaps)
            else ""
        )
    )
    print("\nper base (first due)")
    for r in by_base.itertuples(index=False):
        print(
            f"  {r.base_id:<12}{r.first_due_demand:>12,.0f} {unit} ({r.first_due_share * 100:5.1f} %), "
            f"sole cover {r.sole_cover:,.0f}"
        )
    print(f"\nwrote {args.out}")
    print(CAUTION)
    return 0


def _minutes(seconds: float) -> str:
    return "not reached" if not math.isfinite(seconds) else f"{seconds / 60:.1f} min"


def _site_headline(s: dict) -> str:
    """Who the answer is from, how sure it is, in words."""
    who = "the exact solver (HiGHS)" if s["answer_from"] == "milp" else "greedy plus interchange"
    gap = s["within_share"]
    sure = (
        f"within {gap * 100:.3f} % of the best possible ({s['bound_source']})"
        if math.isfinite(gap)
        else "no bound on the best possible"
    )
    return f"{s['model']}: answer from {who}; {s['status']}; {sure}; {s['solve_s']:.1f} s"


def _site_objective_text(model: str, value: float, total: float) -> str:
    if model == "p-median":
        return f"{value:,.1f} s ({value / 60:.2f} min)"
    if model == "lscp":
        return f"{int(value)}"
    return f"{value:,.1f} of {total:,.1f} ({value / total * 100:.1f} %)"


@command("site")
def _cmd_site(args: argparse.Namespace) -> int:
    import pandas as pd

    from coverkit.atomic import write_csv_atomic, write_gpkg_layers
    from coverkit.coverage import Standard
    from coverkit.demand import load_demand
    from coverkit.errors import FieldError
    from coverkit.report.study_report import site_curve_chart, site_curve_values
    from coverkit.site_plan import build_problem, generate_candidates, ranking_table, solve
    from coverkit.travel import read_points

    if (args.candidates is None) == (args.generate_candidates is None):
        raise FieldError("give either --candidates FILE or --generate-candidates CLASS (not both, not neither).")
    net, bases = _network_and_bases(args)
    if args.candidates:
        candidates = read_points(args.candidates, net.crs, what="candidates")
    else:
        candidates = generate_candidates(net, args.generate_candidates, args.spacing_m)
    demand = load_demand(
        args.demand,
        net,
        where=args.where,
        population_field=args.population_field,
        max_rejected_share=args.max_rejected,
    )
    std = Standard(single_standard_name(args.minutes), args.minutes * 60.0, args.turnout_s, args.fractile)
    problem = build_problem(net, bases, candidates, demand, std, relocate=args.relocate, base_snap_m=args.snap_m)
    folder = args.out.parent
    if args.rank:
        ranking = ranking_table(problem)
        write_gpkg_layers(args.out, {layer_name("site_ranking"): ranking, layer_name("site_candidates"): problem.sites})
        write_csv_atomic(table_file(folder, "site_ranking"), ranking)
        print(f"{'candidate':<12}{'adds':>12}{'adds %':>8}  name")
        for r in ranking.itertuples(index=False):
            print(f"{r.id:<12}{r.added_weight:>12,.0f}{r.added_share * 100:>8.2f}  {r.name}")
        print(f"\n{std.describe()}; wrote {args.out}")
        print(CAUTION)
        return 0
    plan = solve(
        problem,
        args.model,
        add=args.add,
        target=args.target,
        q=args.busy_fraction,
        method=args.method,
        time_limit_s=args.time_limit_s,
        curve_to=args.curve,
    )
    s = plan.summary
    chart = site_curve_chart(plan, map_file(folder, "site_curve"), std.describe(with_source=False))
    layers = {
        layer_name("site_chosen"): plan.chosen,
        layer_name("site_ranking"): plan.ranking,
        layer_name("site_curve"): plan.curve,
        layer_name("site_candidates"): problem.sites,
        layer_name("site_summary"): pd.DataFrame([plan.summary]),
    }
    rejected = _rejected(demand, layers, demand_name_of(args.demand))
    write_gpkg_layers(args.out, layers)
    if rejected:
        print(f"rejected: {rejected}")
    chosen_table = pd.DataFrame(plan.chosen.drop(columns="geometry"))
    write_csv_atomic(table_file(folder, "site_chosen"), chosen_table)
    write_csv_atomic(table_file(folder, "site_curve"), plan.curve)
    write_csv_atomic(table_file(folder, "site_ranking"), plan.ranking)
    print(_site_headline(s))
    print(std.describe())
    print(f"{s['objective_name']}: {_site_objective_text(s['model'], s['objective'], s['total_weight'])}")
    print(
        f"covered within the standard: before {s['covered_share_before'] * 100:.1f} % (existing bases), "
        f"after {s['covered_share_after'] * 100:.1f} %; {std.fractile * 100:g}th percentile response "
        f"{_minutes(s['fractile_response_before_s'])} -> {_minutes(s['fractile_response_after_s'])}"
    )
    print("\nchosen sites (adds: beyond the existing bases; loss: what the objective loses without it)")
    for r in plan.chosen.itertuples(index=False):
        forced = "  forced: the only site reaching some demand" if r.forced else ""
        print(
            f"  {r.id:<10} adds {r.added_demand:>10,.0f}  only this site {r.only_this_site:>10,.0f}  "
            f"loss {r.objective_loss:>10,.1f}  {r.name}{forced}"
        )
    obj_col, obj_label = site_curve_values(s["model"], plan.curve)
    print(f"\n{s['model']} curve (new sites: {obj_label}; * proven optimal)")
    print(
        "  "
        + ", ".join(
            f"{int(n)}: {v:,.1f}{'*' if str(st).startswith('proven') else ''}"
            for n, v, st in zip(plan.curve["new_sites"], obj_col, plan.curve["status"], strict=True)
        )
    )
    worst = float(plan.curve["gap"].max())
    if math.isfinite(worst):
        print(f"  every point within {worst * 100:.3f} % of the best possible")
    print(f"\nwrote {args.out}, {chart}")
    print(CAUTION)
    return 0


@command("availability")
def _cmd_availability(args: argparse.Namespace) -> int:
    import pandas as pd

    from coverkit.atomic import write_gpkg_layers
    from coverkit.availability import availability
    from coverkit.coverage import Standard
    from coverkit.demand import load_demand

    net, bases = _network_and_bases(args)
    demand = load_demand(
        args.demand,
        net,
        where=args.where,
        time_field=args.time_field,
        start=args.start,
        end=args.end,
        max_rejected_share=args.max_rejected,
    )
    std = Standard(single_standard_name(args.minutes), args.minutes * 60.0)
    run = availability(
        net,
        bases,
        demand,
        std,
        args.service_min,
        calls_per_h=args.calls_per_h,
        queue=args.queue,
        method=args.method,
        time_field=args.time_field,
        window=(args.start, args.end),
    )
    layers = {
        layer_name("availability_units"): run.units,
        layer_name("availability_demand"): run.demand,
        layer_name("availability_summary"): pd.DataFrame([run.summary]),
    }
    rejected = _rejected(demand, layers, demand_name_of(args.demand))
    write_gpkg_layers(args.out, layers)
    s = run.summary
    if rejected:
        print(f"rejected: {rejected}")
    print(
        f"{s['calls_per_h']:.2f} calls/h x {s['mean_service_min']:g} min = {s['offered_load_erlang']:.2f} erlang on "
        f"{s['units']} units ({s['method']} hypercube, {s['queue']} queue)"
    )
    print(f"chance all units are busy: {s['all_busy_probability'] * 100:.2f} %")
    print(f"\n{'unit':<10}{'base':<8}{'workload':>10}{'calls/h':>9}")
    for r in run.units.itertuples(index=False):
        print(f"{r.unit:<10}{r.base_id:<8}{r.workload:>10.3f}{r.calls_per_h:>9.3f}")
    print(f"\n{std.describe()}")
    print(f"covered by drive time alone      {s['drive_time_coverage'] * 100:6.1f} % of calls")
    print(
        f"covered by the unit that answers {s['availability_coverage'] * 100:6.1f} % of calls (availability-adjusted)"
    )
    print(f"mean travel of the answering unit {s['expected_travel_s'] / 60:.1f} min")
    print(f"\nwrote {args.out}")
    print(CAUTION)
    return 0


def _rejected(demand, layers: dict, name: str) -> str:
    """Add the ``rejected_<demand>`` layer when point demand rows were set aside; the summary line about them."""
    rejected = demand.attrs.get("rejected")
    if not rejected:
        return ""
    layer = layer_name("rejected", name)
    layers[layer] = rejected.table
    return f"{rejected.text(verb=False)}; see layer {layer}"


def _hours(text: str | None) -> list[int] | None:
    from coverkit.errors import FieldError

    if not text:
        return None
    hours: set[int] = set()
    try:
        for part in text.split(","):
            if "-" in part:
                lo, hi = (int(x) for x in part.split("-", 1))
                hours.update(range(lo, hi + 1))
            else:
                hours.add(int(part))
    except ValueError:
        raise FieldError(f"--hours '{text}' is not a list of hours, e.g. 7-19 or 0,1,2.") from None
    if not hours or min(hours) < 0 or max(hours) > 23:
        raise FieldError(f"--hours '{text}' must name hours 0..23.")
    return sorted(hours)


@command("calibrate")
def _cmd_calibrate(args: argparse.Namespace) -> int:
    from coverkit.calibrate import calibrate_files, calibration_chart, summary_text, write_calibrated_profile

    result = calibrate_files(
        args.network,
        args.observed,
        args.bases,
        args.profile,
        hours=_hours(args.hours),
        max_rejected_share=args.max_rejected,
    )
    write_calibrated_profile(result, args.out)
    print(summary_text(result))
    if args.chart:
        calibration_chart(result, args.chart)
    print(f"\nwrote {args.out}" + (f" and {args.chart}" if args.chart else ""))
    print(f"use it with: coverkit network <roads> --profile {args.out} --out calibrated-net.gpkg")
    return 0


@command("compare")
def _cmd_compare(args: argparse.Namespace) -> int:
    from coverkit.compare_run import compare_study
    from coverkit.report.compare_report import write_compare_report

    run = compare_study(args.study, args.scenario, args.out)
    run.outputs.update(write_compare_report(run, args.out))
    print("\n".join(line for line in run.lines() if line != CAUTION))
    print(f"\nwrote {run.outputs['layers']}, {run.outputs['table']} and {run.outputs['report']}")
    print(CAUTION)
    return 0


@command("run")
def _cmd_run(args: argparse.Namespace) -> int:
    from coverkit.study import headline_lines, run_study

    run = run_study(args.study, args.out)
    print("\n".join(headline_lines(run)))
    print(f"\nwrote {len(run.outputs)} outputs to {run.outputs['layers'].parent}")
    if "report" in run.outputs:
        print(f"report: {run.outputs['report']}")
    print(CAUTION)
    return 0


@command("demo")
def _cmd_demo(args: argparse.Namespace) -> int:
    from coverkit.demo import write_demo_study
    from coverkit.study import headline_lines, run_study

    study_path = write_demo_study(args.out)
    run = run_study(study_path, args.out)
    print("\n".join(headline_lines(run)))
    print(f"\ndemo data (fictional) in {args.out / 'data'}; study file {study_path}")
    print(f"report: {run.outputs.get('report', '')}")
    print(CAUTION)
    return 0


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``coverkit`` command."""
    parser = build_parser()
    args, extra = parser.parse_known_args(argv)
    if extra:
        # name the sub-command whose options were mistyped (argparse would blame the top-level command)
        (args._commands.get(args.command) or parser).error(f"unrecognized arguments: {' '.join(extra)}")
    if not args.command:
        parser.print_help()
        return 2
    set_quiet(getattr(args, "quiet", False))
    try:
        return COMMANDS[args.command](args)
    except CoverkitError as exc:
        print(f"coverkit {args.command}: error: {exc}", file=sys.stderr)
        return exc.exit_code
    except BrokenPipeError:  # output piped into `head` and the like
        sys.stdout = open(os.devnull, "w")
        return 0
    except KeyboardInterrupt:
        print("coverkit: interrupted; no output was written", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
