"""``coverkit isochrones``: drive-time polygons and the travel-time surface."""

from __future__ import annotations

import argparse
from pathlib import Path

from coverkit import CAUTION, settings
from coverkit.cli.options import common, minutes_list, network_and_bases, points_options, positive_float, time_of_day

NAME = "isochrones"


def add_parser(sub: argparse._SubParsersAction) -> None:
    """The ``isochrones`` sub-command's arguments."""
    p = sub.add_parser(
        "isochrones",
        help="drive-time polygons per base and band, and a travel-time surface",
        description="Drive-time polygons (nested bands) from each base and for any base, written to a GeoPackage; "
        "optionally a GeoTIFF of minutes to the nearest base.",
    )
    p.add_argument("network", type=Path, help="network GeoPackage from `coverkit network`")
    p.add_argument("--bases", type=Path, required=True, help="bases: CSV with id, lon, lat or a point layer")
    p.add_argument(
        "--minutes",
        type=minutes_list,
        default=list(settings.ISOCHRONE_MINUTES),
        help=f"bands in minutes ({','.join(f'{m:g}' for m in settings.ISOCHRONE_MINUTES)})",
    )
    p.add_argument(
        "--out", "-o", type=Path, required=True, help="GeoPackage to write (layers reach_by_base, reach_any_base)"
    )
    p.add_argument("--surface", type=Path, help="also write a GeoTIFF of minutes to the nearest base")
    p.add_argument(
        "--surface-cell-m",
        type=positive_float,
        default=settings.SURFACE_CELL_M,
        help=f"surface cell size, m ({settings.SURFACE_CELL_M:g})",
    )
    p.add_argument(
        "--reach-m",
        type=positive_float,
        default=settings.REACH_M,
        help=f"reach from a reached road, m ({settings.REACH_M:g})",
    )
    p.add_argument("--exact", action="store_true", help="exact vector construction (slower reference path)")
    p.add_argument(
        "--grid-m", type=positive_float, help="grid spacing of the fast polygons, m (default: a third of the reach)"
    )
    p.add_argument(
        "--direction",
        choices=settings.DIRECTIONS,
        default=settings.DIRECTION,
        help="out: from base; in: to base (default %(default)s)",
    )
    g = p.add_argument_group("units by type (optional)")
    g.add_argument("--units", type=Path, help="units table: CSV or layer with unit_id, base_id, type, staffing")
    g.add_argument("--unit-type", help="with --units: polygons from the bases holding a unit of this type only")
    points_options(p)
    time_of_day(p)
    common(p)


def run(args: argparse.Namespace) -> int:
    """Run ``coverkit isochrones`` on the parsed ``args``; the exit status (0)."""
    from coverkit.cli.startup import collections_paused

    with collections_paused():  # numba, for the compiled polygon kernels
        from coverkit.isochrones import drive_time_polygons, summary_table, write_polygons, write_travel_surface

    net, bases = network_and_bases(args)
    if args.unit_type is not None:
        from coverkit.cli.options import read_fleet
        from coverkit.errors import FieldError

        if args.units is None:
            raise FieldError("--unit-type needs --units, the units table (unit_id, base_id, type, staffing).")
        bases = bases[read_fleet(args, bases).holds(args.unit_type, len(bases))].reset_index(drop=True)
    elif args.units is not None:
        from coverkit.cli.options import read_fleet

        read_fleet(args, bases)  # checked, so a bad table fails here as it would elsewhere
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
