"""``coverkit network``: build a road network from OSM or centerline data."""

from __future__ import annotations

import argparse
from pathlib import Path

from coverkit import CAUTION, settings
from coverkit.cli.options import common, positive_float

NAME = "network"


def add_parser(sub: argparse._SubParsersAction) -> None:
    """The ``network`` sub-command's arguments."""
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
        default=settings.PROFILE,
        help="speed profile: normal, emergency, winter or a .toml file (%(default)s)",
    )
    p.add_argument("--boundary", type=Path, help="polygon layer to clip to (roads within it plus the buffer)")
    p.add_argument(
        "--buffer-m",
        type=positive_float,
        default=settings.BUFFER_M,
        help=f"buffer around --boundary, m ({settings.BUFFER_M:g})",
    )
    p.add_argument("--crs", help="metric CRS for the network (default: the UTM zone of the data)")
    p.add_argument(
        "--fields",
        help="centerline field mapping, e.g. class=ROADCLASS,speed=SPEED_MPH,oneway=ONEWAY, or ng911 for the NENA "
        "NG9-1-1 road centerline fields (ng911,name=St_Name adds to it) "
        "(also name=, id=, bridge=, tunnel=, speed_unit=mph|kph, oneway_forward=FT, oneway_backward=TF, "
        "class_map=LOC:residential;COL:tertiary)",
    )
    p.add_argument("--layer", help="layer name inside a multi-layer centerline file")
    p.add_argument(
        "--snap-tolerance-m",
        type=positive_float,
        default=0.5,
        help="centerlines: join endpoints closer than this",
    )
    common(p)


def run(args: argparse.Namespace) -> int:
    """Run ``coverkit network`` on the parsed ``args``; the exit status (0)."""
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
    from coverkit.travel.snap import snap_index_arrays

    # the snap index goes into the network's columnar copy, so the commands reading the network map it
    net.save(args.out, indexes=(snap_index_arrays,))
    print(report.summary_text())
    print(f"\nwrote {args.out}")
    print(CAUTION)
    return 0
