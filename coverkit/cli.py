"""The ``coverkit`` command line: parse arguments, call the library, print, set the exit code.

No algorithm lives here. Bad input raises :class:`~coverkit.errors.CoverkitError`; the message is printed as one
line and the exit status is 2.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable, Sequence
from pathlib import Path

from coverkit import CAUTION, __version__
from coverkit.errors import CoverkitError
from coverkit.progress import set_quiet

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


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every sub-command."""
    parser = argparse.ArgumentParser(
        prog="coverkit",
        description="Drive-time polygons and coverage for fire and EMS planning. " + CAUTION,
    )
    parser.add_argument("--version", action="version", version=f"coverkit {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

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

    return parser


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


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``coverkit`` command."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not args.command:
        parser.print_help()
        return 2
    set_quiet(getattr(args, "quiet", False))
    try:
        return COMMANDS[args.command](args)
    except CoverkitError as exc:
        print(f"coverkit {args.command}: error: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("coverkit: interrupted; no output was written", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
