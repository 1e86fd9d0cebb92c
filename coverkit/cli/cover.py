"""``coverkit cover``: coverage of demand against one response standard."""

from __future__ import annotations

import argparse
from pathlib import Path

from coverkit import CAUTION
from coverkit.cli.options import (
    common,
    coverage_inputs,
    network_and_bases,
    points_options,
    positive_float,
    rejected_layer,
)
from coverkit.layer_names import demand_name_of, layer_name, single_standard_name

NAME = "cover"


def add_parser(sub: argparse._SubParsersAction) -> None:
    """The ``cover`` sub-command's arguments."""
    p = sub.add_parser(
        "cover",
        help="coverage of demand against a response standard",
        description="Who is reached within turnout + travel, by which base, how many times over, and where the gaps "
        "are. Demand: a population raster (.tif), a polygon layer with --population-field, or points (CSV with "
        "id, lon, lat[, weight] or a point layer).",
    )
    coverage_inputs(p, bases_help="bases: CSV with id, lon, lat or a point layer")
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
    p.add_argument("--demand-snap-m", type=positive_float, default=500.0, help="demand snap limit, m (500)")
    p.add_argument("--direction", choices=["out", "in"], default="out", help="out: base to demand (default)")
    points_options(p)
    common(p)


def run(args: argparse.Namespace) -> int:
    """Run ``coverkit cover`` on the parsed ``args``; the exit status (0)."""
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
    net, bases = network_and_bases(args)
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
    rejected = rejected_layer(demand, layers, dname)
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
