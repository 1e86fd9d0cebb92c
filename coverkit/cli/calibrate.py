"""``coverkit calibrate``: speed factors fitted to observed travel times."""

from __future__ import annotations

import argparse
from pathlib import Path

from coverkit.cli.options import common, share
from coverkit.travel.points import DEFAULT_MAX_REJECTED_SHARE

NAME = "calibrate"


def add_parser(sub: argparse._SubParsersAction) -> None:
    """The ``calibrate`` sub-command's arguments."""
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
    p.add_argument(
        "--spread-out",
        type=Path,
        help="travel-time spread CSV to write (default: beside --out, <name>_spread.csv); cover --spread reads it",
    )
    p.add_argument("--hours", help="only observations in these hours of day, e.g. 7-19 or 0,1,2")
    p.add_argument(
        "--hour-bands",
        help="fit speed factors per road class for these hour bands, e.g. am=7-9@weekday,pm=16-18@weekday "
        "(default: the starting profile's [hour_bands], when the rows carry hours)",
    )
    p.add_argument(
        "--max-rejected",
        type=share,
        default=DEFAULT_MAX_REJECTED_SHARE,
        help="stop when more than this share of observations has no usable position, 0..1 (0.01 = 1 %%)",
    )
    common(p)


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


def run(args: argparse.Namespace) -> int:
    """Run ``coverkit calibrate`` on the parsed ``args``; the exit status (0)."""
    from coverkit.calibrate import calibration_chart, summary_text, write_calibrated_profile
    from coverkit.calibrate_hours import HourBandCalibration, calibrate_files_by_hour, hour_band_lines
    from coverkit.network.hour_bands import parse_band_spec

    bands = parse_band_spec(args.hour_bands) if args.hour_bands else None
    result = calibrate_files_by_hour(
        args.network,
        args.observed,
        args.bases,
        args.profile,
        bands=bands,
        hours=_hours(args.hours),
        max_rejected_share=args.max_rejected,
    )
    banded = None
    if isinstance(result, HourBandCalibration):
        banded, result = result, result.result()
    from coverkit.spread import write_spread

    spread_out = args.spread_out or args.out.with_name(f"{args.out.stem}_spread.csv")
    write_calibrated_profile(result, args.out)
    write_spread(result.spread, spread_out)
    print(summary_text(result, hour_band_lines(banded) if banded is not None else ()))
    if args.chart:
        calibration_chart(result, args.chart)
    print(f"\nwrote {args.out}, {spread_out}" + (f" and {args.chart}" if args.chart else ""))
    print(f"use it with: coverkit network <roads> --profile {args.out} --out calibrated-net.gpkg")
    return 0
