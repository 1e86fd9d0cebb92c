"""``coverkit cover``: coverage of demand against one response standard."""

from __future__ import annotations

import argparse
from pathlib import Path

from coverkit import CAUTION, settings
from coverkit.cli.options import (
    common,
    coverage_inputs,
    network_and_bases,
    points_options,
    positive_float,
    read_fleet,
    rejected_layer,
    time_of_day,
    unit_standard,
    units_options,
)
from coverkit.cli.options import compute as compute_options
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
    p.add_argument(
        "--demand-id-field", default=settings.ID_FIELD, help=f"id field of point demand ({settings.ID_FIELD})"
    )
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
    p.add_argument(
        "--demand-snap-m",
        type=positive_float,
        default=settings.SNAP_M,
        help=f"demand snap limit, m ({settings.SNAP_M:g})",
    )
    p.add_argument(
        "--direction",
        choices=settings.DIRECTIONS,
        default=settings.DIRECTION,
        help="out: base to demand; in: demand to base (default %(default)s)",
    )
    p.add_argument(
        "--spread",
        type=Path,
        help="travel-time spread CSV from `coverkit calibrate`: also give each point's chance of arriving within "
        "the standard and the expected covered demand",
    )
    points_options(p)
    time_of_day(p)
    units_options(p)
    common(p)
    compute_options(p)


def run(args: argparse.Namespace) -> int:
    """Run ``coverkit cover`` on the parsed ``args``; the exit status (0)."""
    import pandas as pd

    from coverkit.arrivals import check_fleet
    from coverkit.atomic import write_gpkg_layers
    from coverkit.coverage import Standard
    from coverkit.demand import load_demand
    from coverkit.errors import FieldError
    from coverkit.network.build import read_boundary
    from coverkit.stages import coverage_stage, read_zones

    if (args.zones is None) != (args.zone_field is None):
        raise FieldError("--zones and --zone-field go together: give the polygon layer and its id field.")
    spread = None
    if args.spread:
        from coverkit.spread import read_spread

        spread = read_spread(args.spread)
    judged = unit_standard(args)
    std = Standard("", args.minutes * 60.0, **judged)  # what it judges, in words, names it
    name = single_standard_name(args.minutes, std.judged().removesuffix(" in "))
    std = Standard(name, args.minutes * 60.0, args.turnout_s, args.fractile, **judged)
    dname = demand_name_of(args.demand)
    zones = read_zones(args.zones, args.zone_field) if args.zones else None
    net, bases = network_and_bases(args)
    fleet = read_fleet(args, bases)
    check_fleet(fleet, std)
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
    area = read_boundary(args.boundary).to_crs(net.crs).union_all() if args.boundary else None
    stage = coverage_stage(
        net,
        bases,
        {dname: demand},
        std,
        zones=zones,
        zone_id_field=args.zone_field if zones is not None else None,
        area=area,
        demand_snap_m={dname: args.demand_snap_m},
        base_snap_m=args.snap_m,
        direction=args.direction,
        spread=spread,
        fleet=fleet,
    )
    layers = {layer_name("bases"): bases, **stage.layers()}
    rejected_layer(demand, layers, dname)
    layers[layer_name("summary")] = pd.DataFrame(stage.summary_rows()).drop(columns=["standard_text"])
    write_gpkg_layers(args.out, layers)
    print("\n".join(stage.lines(dname)))
    print(f"\nwrote {args.out}")
    print(CAUTION)
    return 0
