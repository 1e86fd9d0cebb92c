"""Fitting time-of-day speed factors: one calibration outside the hour bands, then one per band.

Observed rows carry ``hour`` (and ``weekday`` when known, :func:`coverkit.calibrate.read_observed`). The rows
outside every band fit the profile's own factors (:func:`coverkit.calibrate.calibrate_speeds`, the one engine).
Each band's rows are then fitted starting from that calibrated profile: the band's fitted multiplier per road class
is its speed factor (:mod:`coverkit.network.hour_bands`). Where a class's speed is at its cap the multiplier of the
profile factor and the band's speed factor differ (the band scales the speed after the cap); the class table's
``capped_share`` says how much of the driving is at the cap. A class with too little driving in a band keeps
factor 1 there (it is reported, as in the main fit). Errors before and after are reported per band.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from coverkit.calibrate import FACTOR_DECIMALS, CalibrationResult, calibrate_speeds, calibration_inputs
from coverkit.errors import CoverkitError, FieldError
from coverkit.network.hour_bands import HourBand
from coverkit.network.model import RoadNetwork
from coverkit.network.profile import Profile, load_profile
from coverkit.progress import note
from coverkit.travel.points import DEFAULT_MAX_REJECTED_SHARE

#: Name of the rows outside every band in the tables.
OUTSIDE = "outside bands"


@dataclass(frozen=True)
class HourBandCalibration:
    """The calibration outside the bands, one per band, and the fitted profile with its hour bands.

    Attributes
    ----------
    base
        The fit on the rows outside every band (its ``profile_after`` holds the off-band factors).
    bands
        ``{band name: CalibrationResult}``, each started from ``base.profile_after``.
    profile
        ``base.profile_after`` with the fitted hour bands.
    factors
        One row per band and road class: ``hour_band``, ``road_class``, ``fitted``, ``factor`` (the band's speed
        factor), ``n_routes``, ``capped_share``.
    errors
        The error tables (:attr:`CalibrationResult.errors`) of the base fit and of each band, with ``hour_band``.
    n_without_hour
        Rows left out because they carry no hour.
    """

    base: CalibrationResult
    bands: dict[str, CalibrationResult]
    profile: Profile
    factors: pd.DataFrame
    errors: pd.DataFrame
    n_without_hour: int

    def result(self) -> CalibrationResult:
        """The base result carrying the banded profile (what the written profile and the summary show)."""
        return replace(self.base, profile_after=self.profile)


def _band_rows(observed: pd.DataFrame, bands: Sequence[HourBand]) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Row masks per band, and the rows with an hour (the others are left out)."""
    hour = observed["hour"].to_numpy(dtype=float, na_value=np.nan)
    has = np.isfinite(hour)
    day = observed["weekday"].fillna(0).to_numpy(dtype=np.int64) if "weekday" in observed else np.zeros(len(hour))
    h = np.where(has, hour, -1).astype(np.int64)
    return {b.name: has & b.holds(day, h) for b in bands}, has


def calibrate_hour_bands(
    net: RoadNetwork,
    bases,
    observed: pd.DataFrame,
    profile: str | Profile | None = None,
    *,
    bands: Sequence[HourBand] | None = None,
    source: str = "",
    **options: object,
) -> HourBandCalibration:
    """Fit the profile's factors outside the hour bands and a speed factor per class in each band.

    Parameters
    ----------
    net, bases, observed, profile, source, options
        As :func:`coverkit.calibrate.calibrate_speeds` (``observed`` needs ``hour``; ``weekday`` when present
        decides weekday and weekend bands, a row without it counts as any day).
    bands
        The bands to fit; default the starting profile's own (their factors are replaced).

    Raises
    ------
    FieldError
        No bands, no ``hour`` column, or a band without rows (names the band).
    ModelError
        Too few usable rows outside the bands or in a band (the message names it).
    """
    prof0 = net.profile if profile is None else profile if isinstance(profile, Profile) else load_profile(profile)
    bands = tuple(bands if bands is not None else prof0.hour_bands)
    if not bands:
        raise FieldError(
            "time-of-day calibration needs hour bands: give them (e.g. am=7-9@weekday) or start from a profile "
            "with [hour_bands] tables."
        )
    if "hour" not in observed.columns or observed["hour"].isna().all():
        raise FieldError(f"{source or 'the observed times'}: hour bands need an hour column (0-23) on the rows.")
    masks, has_hour = _band_rows(observed, bands)
    outside = has_hour & ~np.any(np.vstack(list(masks.values())), axis=0)
    base = _fit(net, bases, observed[outside], replace(prof0, hour_bands=(), source_text=""), OUTSIDE, source, options)
    fitted, results, rows = [], {}, []
    for band in bands:
        res = _fit(net, bases, observed[masks[band.name]], base.profile_after, band.label(), source, options)
        results[band.name] = res
        table = res.classes
        factors = {
            str(r.road_class): round(float(r.multiplier), FACTOR_DECIMALS)
            for r in table.itertuples(index=False)
            if r.fitted
        }
        fitted.append(replace(band, factors=factors))
        rows += [
            {
                "hour_band": band.name,
                "road_class": str(r.road_class),
                "fitted": bool(r.fitted),
                "factor": factors.get(str(r.road_class), 1.0),
                "n_routes": int(r.n_routes),
                "capped_share": float(r.capped_share),
            }
            for r in table.itertuples(index=False)
        ]
    profile_out = replace(base.profile_after, hour_bands=tuple(fitted), source_text="")
    errors = pd.concat(
        [base.errors.assign(hour_band=OUTSIDE)] + [r.errors.assign(hour_band=n) for n, r in results.items()],
        ignore_index=True,
    )
    lead = ["hour_band", *[c for c in errors.columns if c != "hour_band"]]
    return HourBandCalibration(base, results, profile_out, pd.DataFrame(rows), errors[lead], int((~has_hour).sum()))


def calibrate_files_by_hour(
    network_path,
    observed_path,
    bases_path,
    profile: str | Profile | None = None,
    *,
    bands: Sequence[HourBand] | None = None,
    max_rejected_share: float = DEFAULT_MAX_REJECTED_SHARE,
    **options: object,
) -> CalibrationResult | HourBandCalibration:
    """From files: :func:`calibrate_hour_bands` when ``bands`` are given or the starting profile has hour bands
    and the rows carry hours; else the plain :func:`coverkit.calibrate.calibrate_speeds` (bands kept as they are)."""
    from pathlib import Path

    net, bases, observed = calibration_inputs(network_path, observed_path, bases_path, max_rejected_share)
    prof0 = net.profile if profile is None else profile if isinstance(profile, Profile) else load_profile(profile)
    source = Path(observed_path).name
    if bands or (prof0.hour_bands and observed["hour"].notna().any()):
        return calibrate_hour_bands(net, bases, observed, prof0, bands=bands, source=source, **options)
    return calibrate_speeds(net, bases, observed, prof0, source=source, **options)


def _fit(net, bases, rows: pd.DataFrame, profile: Profile, label: str, source: str, options: dict):
    """One calibration on ``rows``; an error names the band."""
    if not len(rows):
        raise FieldError(f"{source or 'the observed times'}: no rows in hour band {label}; give rows there or drop it.")
    note(f"calibrate: {len(rows):,} rows in {label}")
    try:
        return calibrate_speeds(net, bases, rows, profile, source=source, **options)
    except CoverkitError as exc:
        raise type(exc)(f"hour band {label}: {exc}") from None


def hour_band_lines(cal: HourBandCalibration) -> list[str]:
    """The fitted speed factors per band and class, and the error per band before and after (for the summary)."""
    lines = ["", "time of day: speed factor per hour band and road class (1 = the calibrated off-band speed)"]
    classes = sorted(set(cal.factors["road_class"]))
    lines.append(f"{'hour band':<30}" + "".join(f"{c[:11]:>12}" for c in classes))
    for band in cal.profile.hour_bands:
        f = cal.factors[cal.factors["hour_band"] == band.name].set_index("road_class")
        cells = [
            f"{f.loc[c, 'factor']:>12.3f}" if c in f.index and f.loc[c, "fitted"] else f"{'kept':>12}" for c in classes
        ]
        lines.append(f"{band.label():<30}" + "".join(cells))
    lines += ["", f"{'rows':<30}{'n':>6}{'MAE s before':>14}{'after':>8}{'bias s after':>14}"]
    e = cal.errors[cal.errors["band"] == "all"]
    for name in [OUTSIDE, *cal.bands]:
        b = e[(e["hour_band"] == name) & (e["stage"] == "before")].iloc[0]
        a = e[(e["hour_band"] == name) & (e["stage"] == "after")].iloc[0]
        label = name if name == OUTSIDE else next(x.label() for x in cal.profile.hour_bands if x.name == name)
        lines.append(f"{label:<30}{int(a['n']):>6}{b['mae_s']:>14.1f}{a['mae_s']:>8.1f}{a['bias_s']:>14.1f}")
    if cal.n_without_hour:
        lines.append(f"({cal.n_without_hour:,} rows without an hour left out)")
    return lines
