"""Options and helpers shared by the ``coverkit`` sub-commands.

Argument types (numbers, shares, lists of minutes), the argument groups several commands take (network, bases,
demand, standard), the one-line argument errors, and the wording of a library error on the command line: a
:class:`~coverkit.errors.CoverkitError` names the library parameter (``param``); :func:`flag_for` turns it into the
flag the user typed.
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path

from coverkit import settings
from coverkit.layer_names import layer_name
from coverkit.travel.points import DEFAULT_MAX_REJECTED_SHARE

#: library parameter -> flag, where the flag's name is not the parameter's; any other parameter is looked up among
#: the sub-command's own options by its name (``calls_per_h`` -> ``--calls-per-h``)
FLAG_OF_PARAM = {
    "hour": "--units-hour",
    "q": "--busy-fraction",
    "mean_service_min": "--service-min",
}


class Parser(argparse.ArgumentParser):
    """Argument errors as one line (what is wrong and where to look), exit status 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        self.exit(2, f"{self.prog}: error: {message}; see `{self.prog} --help`.\n")


def flag_for(parser: argparse.ArgumentParser, param: str) -> str:
    """The flag of ``parser`` that sets the library parameter ``param`` (the parameter's name when none does).

    >>> p = Parser(prog="x")
    >>> _ = p.add_argument("--calls-per-h", type=float)
    >>> flag_for(p, "calls_per_h"), flag_for(p, "elsewhere")
    ('--calls-per-h', 'elsewhere')
    """
    flags = {}
    for action in parser._actions:
        longs = [s for s in action.option_strings if s.startswith("--")]
        if longs:
            flags[action.dest] = longs[0]
    if param in FLAG_OF_PARAM and FLAG_OF_PARAM[param] in flags.values():
        return FLAG_OF_PARAM[param]
    return flags.get(param, param)


def common(p: argparse.ArgumentParser) -> None:
    """``--quiet``, which every sub-command takes."""
    p.add_argument("--quiet", "-q", action="store_true", help="no progress messages on stderr")


def compute(p: argparse.ArgumentParser) -> None:
    """``--scheduler`` and ``--workers``: where the command's independent blocks run (:mod:`coverkit.compute`)."""
    g = p.add_argument_group("compute (optional)")
    g.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        default=None,
        help="run on the Dask scheduler at ADDRESS (tcp://host:8786): the per-base searches (times from the bases "
        "to the demand points, area cells and call points; siting's coverage matrix) and simulation replications; "
        "the nearest-base searches, the models and the maps stay in this process",
    )
    g.add_argument("--workers", type=int, metavar="N", default=None,
                   help="start a local Dask cluster of N worker processes for those steps of this command")  # fmt: skip


def positive_float(text: str) -> float:
    """A number >= 0 (argparse type)."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a number") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"'{text}' must not be negative")
    return value


def share(text: str) -> float:
    """A share 0..1, written ``0.01`` or ``1%`` (argparse type)."""
    try:
        value = float(text.rstrip("%")) / (100.0 if text.endswith("%") else 1.0)
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a share, e.g. 0.01 or 1%") from None
    if not 0.0 <= value <= 1.0:
        raise argparse.ArgumentTypeError(f"'{text}' must be a share 0..1, e.g. 0.01 or 1%")
    return value


def minutes_list(text: str) -> list[float]:
    """Comma-separated positive minutes, sorted, without repeats (argparse type).

    >>> minutes_list("8,4,12,4")
    [4.0, 8.0, 12.0]
    """
    try:
        values = sorted({float(v) for v in text.split(",") if v.strip()})
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a comma-separated list of minutes, e.g. 4,8,12") from None
    if not values or values[0] <= 0:
        raise argparse.ArgumentTypeError("minutes must be positive, e.g. 4,8,12")
    return values


def coverage_inputs(
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
        type=share,
        default=DEFAULT_MAX_REJECTED_SHARE,
        help="point demand: stop when more than this share of rows has no usable position, 0..1 (0.01 = 1 %%)",
    )
    p.add_argument("--minutes", type=positive_float, required=True, help="travel-time standard in minutes")
    if standard:
        p.add_argument("--population-field", help="population field of a polygon demand layer")
        p.add_argument(
            "--turnout-s",
            type=positive_float,
            default=settings.TURNOUT_S,
            help=f"turnout added to travel, s ({settings.TURNOUT_S:g})",
        )
        p.add_argument(
            "--fractile",
            type=float,
            default=settings.FRACTILE,
            help=f"share of demand to reach, 0..1 ({settings.FRACTILE:g})",
        )


def units_options(p: argparse.ArgumentParser, standard: bool = True) -> None:
    """``--units`` (a units table) and, with ``standard``, the standard by unit type or force."""
    g = p.add_argument_group("units by type and staffing (optional)")
    g.add_argument(
        "--units", type=Path, help="units table: CSV or layer with unit_id, base_id, type, staffing[, hours]"
    )
    g.add_argument(
        "--units-hour", type=float, help="with --units: only the units in service at this clock hour (0..24)"
    )
    if not standard:
        return
    judged = g.add_mutually_exclusive_group()
    judged.add_argument("--unit-type", help="judge the first arriving unit of this type (e.g. engine)")
    judged.add_argument("--personnel", type=int, help="judge the time at which this many people are on scene")
    judged.add_argument("--assignment", help="judge the time a whole assignment has arrived: engine=2,ladder=1,...")
    g.add_argument("--nth", type=int, default=1, help="with --unit-type: judge the nth unit of that type (1)")


def unit_standard(args: argparse.Namespace) -> dict:
    """The :class:`coverkit.coverage.Standard` keywords of ``--unit-type/--nth/--personnel/--assignment``."""
    from coverkit.errors import CoverkitError
    from coverkit.units import parse_assignment

    if args.nth != 1 and args.unit_type is None:
        raise CoverkitError("--nth goes with --unit-type (the nth unit of that type).")
    out: dict = {}
    if args.unit_type is not None:
        out = {"unit_type": args.unit_type, "nth": args.nth}
    elif args.personnel is not None:
        out = {"personnel": args.personnel}
    elif args.assignment is not None:
        out = {"assignment": parse_assignment(args.assignment)}
    return out


def read_fleet(args: argparse.Namespace, bases):
    """The ``--units`` table checked against the bases, or None."""
    from coverkit.units import read_units

    if not args.units:
        return None
    fleet = read_units(args.units, bases["id"].astype(str).tolist())
    hour = getattr(args, "units_hour", None)
    return fleet if hour is None else fleet.on_duty(hour)


def points_options(p: argparse.ArgumentParser) -> None:
    """The bases' id field and snap limit."""
    p.add_argument("--id-field", default=settings.ID_FIELD, help=f"id field of --bases ({settings.ID_FIELD})")
    p.add_argument(
        "--snap-m", type=positive_float, default=settings.SNAP_M, help=f"base snap limit, m ({settings.SNAP_M:g})"
    )


def time_of_day(p: argparse.ArgumentParser) -> None:
    """``--at``: time the network for a moment of the day (the profile's hour bands)."""
    p.add_argument(
        "--at",
        help="time of day HH:MM (optionally after a day, 'sat 08:15'), or an hour band's name: edge times scaled "
        "by the profile's hour-band speed factors (default: the profile's own times)",
    )


def network_and_bases(args: argparse.Namespace):
    """The saved network and the bases projected to its CRS (commands taking NETWORK and --bases); with ``--at``,
    the network retimed for that moment (:func:`coverkit.network.hour_bands.network_at`, the one shared stage)."""
    from coverkit.network import RoadNetwork
    from coverkit.network.hour_bands import network_at, parse_at
    from coverkit.travel import read_points

    at = getattr(args, "at", None)
    if at and ":" in at:
        parse_at(at)  # a bad time fails before the network is read
    net = RoadNetwork.load(args.network)
    if at:
        timed = network_at(net, at)
        changes = timed.info.get("changes", [])
        said = changes[-1] if timed is not net and changes else "outside every hour band: the profile's own times"
        print(f"at {at}: {said}")
        net = timed
    return net, read_points(args.bases, net.crs, id_field=args.id_field, what="bases")


def rejected_layer(demand, layers: dict, name: str) -> str:
    """Add the ``rejected_<demand>`` layer when point demand rows were set aside; the summary line about them."""
    found = demand.attrs.get("rejected")
    if not found:
        return ""
    layer = layer_name("rejected", name)
    layers[layer] = found.table
    return f"{found.text(verb=False)}; see layer {layer}"


def minutes_text(seconds: float) -> str:
    """Seconds as minutes with one decimal, or "not reached".

    >>> minutes_text(450.0), minutes_text(float("inf"))
    ('7.5 min', 'not reached')
    """
    return "not reached" if not math.isfinite(seconds) else f"{seconds / 60:.1f} min"
