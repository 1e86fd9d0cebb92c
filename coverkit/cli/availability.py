"""``coverkit availability``: the hypercube model of busy units."""

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
    units_options,
)
from coverkit.cli.options import compute as compute_options
from coverkit.layer_names import demand_name_of, single_standard_name

NAME = "availability"


def add_parser(sub: argparse._SubParsersAction) -> None:
    """The ``availability`` sub-command's arguments."""
    p = sub.add_parser(
        "availability",
        help="busy units: hypercube model of who actually responds, and availability-adjusted coverage",
        description="Closest-available dispatch with the hypercube model (exact for small N, Larson's approximation "
        "for large N): unit workloads, the chance each unit answers each demand point, expected travel time with "
        "backup responses, and the share of calls reached within the standard by whichever unit responds.",
    )
    coverage_inputs(
        p,
        bases_help="bases with optional units column",
        demand_help="incidents (points with a time field)",
        standard=False,
    )
    p.add_argument("--service-min", type=positive_float, required=True, help="mean time a unit is busy per call, min")
    p.add_argument("--calls-per-h", type=positive_float, help="total call rate (default: from incident timestamps)")
    p.add_argument(
        "--time-field", default=settings.TIME_FIELD, help=f"incident timestamp field ({settings.TIME_FIELD})"
    )
    p.add_argument("--start", help="keep incidents at or after this ISO time")
    p.add_argument("--end", help="keep incidents before this ISO time")
    p.add_argument(
        "--queue",
        choices=settings.QUEUES,
        default=settings.QUEUE,
        help="infinite: calls wait; zero: calls finding all units busy are lost to mutual aid",
    )
    p.add_argument(
        "--method",
        choices=settings.AVAILABILITY_METHODS,
        default=settings.AVAILABILITY_METHOD,
        help="exact 2^N-state model, Larson's approximation, or auto by size",
    )
    p.add_argument(
        "--out",
        "-o",
        type=Path,
        required=True,
        help="GeoPackage to write (layers availability_units, availability_demand, ...)",
    )
    p.add_argument(
        "--needs-field", default="needs", help="with --units: incident field naming the unit types a call needs "
        "(engine+medic-als; default needs; without it every call needs every type)",
    )  # fmt: skip
    points_options(p)
    units_options(p, standard=False)
    common(p)
    compute_options(p)


def run(args: argparse.Namespace) -> int:
    """Run ``coverkit availability`` on the parsed ``args``; the exit status (0)."""

    from coverkit.atomic import write_gpkg_layers
    from coverkit.coverage import Standard
    from coverkit.demand import load_demand
    from coverkit.settings import AvailabilitySettings
    from coverkit.stages import availability_stage

    net, bases = network_and_bases(args)
    fleet = read_fleet(args, bases)
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
    cfg = AvailabilitySettings(
        service_min=args.service_min,
        calls_per_h=args.calls_per_h,
        queue=args.queue,
        method=args.method,
        time_field=args.time_field,
    )
    if fleet is not None and args.needs_field in demand.columns:
        from coverkit.availability_types import needs_mask

        needs_mask(demand, fleet.types[0], fleet.types, args.needs_field)  # a type no unit has: fail before work
    stage = availability_stage(
        net, bases, demand, std, cfg, demand_name=demand_name_of(args.demand), window=(args.start, args.end),
        fleet=fleet, needs_field=args.needs_field,
    )  # fmt: skip
    run = stage.run
    layers = stage.layers()
    rejected = rejected_layer(demand, layers, demand_name_of(args.demand))
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
    if stage.by_type is not None:
        print("\nby unit type, on the calls that need it")
        print("\n".join(stage.type_lines()))
    print(f"\nwrote {args.out}")
    print(CAUTION)
    return 0
