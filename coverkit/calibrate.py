"""Fitting speed factors per road class to observed travel times, and the published distance-time curve.

Each observed trip (base, incident position, seconds from leaving the base to arrival) is matched to the shortest
route on the network: base and incident are snapped to the nearest road, the route is found on the current edge
times, and its seconds are split by road class (running time, signal delays apart). A multiplier per road class on
the profile's speed factor is then fitted by bounded robust least squares on the log ratio of modelled to observed
time (observed errors are roughly multiplicative: a 10 % error matters as much on a short trip as on a long one).
As faster classes attract routes, the network is re-timed with the fitted factors, routes are found again and the
fit is repeated until the routes stop changing (a few iterations).

The result reports errors before and after (mean absolute error, bias = mean of modelled minus observed, and the
90th percentile of the absolute error), overall and by route-length band, and is written as a profile TOML with the
same keys as the shipped profiles (``factor`` = starting factor x fitted multiplier; ``default_kph`` and ``cap_kph``
kept), which :func:`coverkit.network.load_profile` and the network build accept.

Public functions (the CLI and a notebook call the same ones):

- :func:`read_observed` — read and check an observed-times CSV.
- :func:`calibrate_speeds` — fit from a network, bases and observations; returns a :class:`CalibrationResult`.
- :func:`calibrate_files` — the same from file paths (network GeoPackage, observed CSV, bases file).
- :func:`write_calibrated_profile` / :func:`calibrated_profile_toml` — the calibrated profile as TOML.
- :func:`retime_network` — edge speeds and times of a network recomputed from a profile (as the build does).
- :func:`error_summary` — MAE, bias and 90th percentile of absolute error by distance band.
- :func:`fit_kolesar`, :func:`kolesar_time_s` — the accelerate-to-cruise distance-time curve (defined in
  :mod:`coverkit.distance_time`, re-exported here).
- :func:`calibration_chart` — PNG chart of observed and modelled times against route length.
- :func:`summary_text` — a one-screen text summary.
"""

from __future__ import annotations

import functools
import math
import os
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import scipy.sparse as sp
from scipy.optimize import least_squares

import coverkit
from coverkit.atomic import atomic_path, write_text_atomic
from coverkit.distance_bands import DEFAULT_BANDS_KM, band_labels, band_of, check_bands
from coverkit.distance_time import KolesarFit, fit_kolesar, kolesar_time_s
from coverkit.errors import FieldError, InputFileError, ModelError, OffNetworkError, ProfileError
from coverkit.network.hour_bands import iso_weekdays
from coverkit.network.model import RoadNetwork
from coverkit.network.profile import ClassSpeed, Profile, load_profile, profile_to_toml
from coverkit.network.timing import edge_times
from coverkit.progress import note, warn
from coverkit.spread import SpreadFit, fit_spread
from coverkit.travel.points import (
    DEFAULT_MAX_REJECTED_SHARE,
    DELIMITER_NAMES,
    RejectedRows,
    check_rejected,
    coordinate_fields,
    lonlat_columns,
    read_csv_text,
    read_points,
    rejected_table,
    rejected_text,
)
from coverkit.travel.routes import Routes, shortest_routes
from coverkit.travel.snap import DEFAULT_MAX_SNAP_M, Snapped, snap_points

#: Bounds on the fitted multiplier of a class's speed factor.
DEFAULT_BOUNDS = (0.3, 3.0)
#: Bounds on a fitted signal delay (s).
SIGNAL_DELAY_BOUNDS_S = (0.0, 60.0)
#: Decimals kept in written factors; the calibrated network is timed with the rounded values, so that a profile
#: read back reproduces it exactly.
FACTOR_DECIMALS = 4

_REQUIRED = ("base_id", "lon", "lat", "observed_s")
_LOSSES = ("linear", "soft_l1", "huber", "cauchy", "arctan")


# ------------------------------------------------------------------------------------------------------------------
# Reading observations
# ------------------------------------------------------------------------------------------------------------------


def read_observed(
    path: str | Path,
    base_ids: Iterable[str] | None = None,
    bases_name: str = "the bases file",
    *,
    max_rejected_share: float = DEFAULT_MAX_REJECTED_SHARE,
) -> pd.DataFrame:
    """Read an observed-travel-times CSV.

    Parameters
    ----------
    path
        CSV with columns ``base_id``, ``lon``, ``lat`` (incident position, degrees, EPSG:4326), ``observed_s``
        (seconds from leaving the base to arrival) and optionally ``hour`` (0-23, hour of day) and ``weekday``
        (1-7, ISO 8601 Monday = 1, or an English day name such as ``Mon`` or ``Monday``).
    base_ids
        Known base ids; a row naming another base is an error. ``None`` skips the check.
    bases_name
        Name of the bases file, for messages.
    max_rejected_share
        Rows without a usable incident position (blank, not a number, out of range, 0,0) are left out with a
        warning line; more than this share of them (0..1, default 1 %) stops the reading. The delimiter and the
        coordinate column names are found as for any point file (:func:`coverkit.travel.points.read_points`).

    Returns
    -------
    pandas.DataFrame
        Columns ``line`` (CSV line number, header = 1), ``base_id`` (str), ``lon``, ``lat``, ``observed_s``
        (float), ``hour`` and ``weekday`` (Int64, ISO 8601 Monday = 1 ... Sunday = 7; missing as <NA>), in file
        order; ``attrs["rejected"]`` (a
        :class:`~coverkit.travel.points.RejectedRows`, ``id`` = base id) for the rows left out.

    Raises
    ------
    InputFileError, FieldError
        Missing file, missing column, bad number, observed time not > 0, unknown base id (one line naming the row).
    """
    path = Path(path)
    if not path.is_file():
        raise InputFileError(f"observed-times file {path} not found; give a CSV with {', '.join(_REQUIRED)}[, hour].")
    df, delimiter = read_csv_text(path, "observed times", ",".join(_REQUIRED) + "[,hour]")
    lon_col, lat_col = coordinate_fields(list(df.columns))
    given = {"lon": lon_col, "lat": lat_col}
    df.columns = [str(c).strip().lower() for c in df.columns]
    lon_col, lat_col = (c.lower() if c else None for c in (lon_col, lat_col))
    df = df.rename(columns={c: n for c, n in ((lon_col, "lon"), (lat_col, "lat")) if c is not None and c != n})
    missing = [c for c in _REQUIRED if c not in df.columns]
    if missing:
        raise FieldError(
            f"{path} has no column '{missing[0]}' (columns: {', '.join(df.columns)}); an observed-times CSV needs "
            f"{', '.join(_REQUIRED)} (incident lon/lat in degrees, observed travel seconds) and optionally hour."
        )
    if len(df) == 0:
        raise InputFileError(f"{path} holds no observations; add rows of {','.join(_REQUIRED)}.")
    rows_read = len(df)
    note(
        f"observed times {path.name}: {rows_read:,} rows, {DELIMITER_NAMES[delimiter]}-separated, "
        f"lon from '{given['lon']}', lat from '{given['lat']}'"
    )
    lon, lat, reasons = lonlat_columns(df, path, give="the incident position in degrees", lenient=True)
    bad_pos = ~pd.isna(reasons)
    rejected = pd.DataFrame(
        {"line": df.index.to_numpy()[bad_pos], "id": df["base_id"].to_numpy()[bad_pos], "reason": reasons[bad_pos]}
    )
    check_rejected(rejected, rows_read, max_rejected_share, path, "observations")
    if len(rejected):
        warn(f"{path}: {rejected_text(rejected, rows_read)}")
    df, lon, lat = df[~bad_pos], lon[~bad_pos], lat[~bad_pos]
    line = df.index.to_numpy()
    base = df["base_id"].astype(str).str.strip()
    blank = (base == "").to_numpy()
    if blank.any():
        i = int(np.flatnonzero(blank)[0])
        raise FieldError(f"{path}: line {line[i]} has no base_id; name the base each trip left from.")
    obs = _observed_seconds(path, df, line)
    hour = _observed_hours(path, df, line)
    weekday = _observed_weekdays(path, df, line)
    if base_ids is not None:
        _check_base_ids(path, base, line, base_ids, bases_name)
    out = pd.DataFrame(
        {
            "line": line,
            "base_id": base.to_numpy(dtype=object),
            "lon": lon,
            "lat": lat,
            "observed_s": obs,
            "hour": hour,
            "weekday": weekday,
        }
    )
    out.attrs["rejected"] = RejectedRows(rejected_table(rejected), rows_read)
    return out


def _observed_seconds(path: Path, df: pd.DataFrame, line: np.ndarray) -> np.ndarray:
    """The ``observed_s`` column as seconds; every value must be a number above 0."""
    obs = pd.to_numeric(df["observed_s"].str.strip(), errors="coerce").to_numpy(dtype=float)
    bad = ~np.isfinite(obs)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise FieldError(
            f"{path}: line {line[i]} has observed_s '{df['observed_s'].iloc[i]}', not a number; give seconds."
        )
    bad = obs <= 0
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise FieldError(
            f"{path}: line {line[i]} has observed_s {obs[i]:g}; observed travel times must be more than 0 seconds - "
            "fix or remove the row."
        )
    return obs


def _observed_hours(path: Path, df: pd.DataFrame, line: np.ndarray) -> pd.api.extensions.ExtensionArray:
    """The optional ``hour`` column as Int64 (<NA> where empty or absent); a given hour must be whole, 0-23."""
    hour = pd.array([pd.NA] * len(df), dtype="Int64")
    if "hour" in df.columns:
        text = df["hour"].astype(str).str.strip()
        val = pd.to_numeric(text.replace("", np.nan), errors="coerce").to_numpy(dtype=float)
        given = (text != "").to_numpy()
        bad = given & (~np.isfinite(val) | (val != np.round(val)) | (val < 0) | (val > 23))
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise FieldError(
                f"{path}: line {line[i]} has hour '{df['hour'].iloc[i]}'; give a whole hour of day 0-23 or leave "
                "it empty."
            )
        hour = pd.array(np.where(given, val, np.nan), dtype="Float64").astype("Int64")
    return hour


def _observed_weekdays(path: Path, df: pd.DataFrame, line: np.ndarray) -> pd.api.extensions.ExtensionArray:
    """The optional ``weekday`` column as Int64 ISO weekdays (<NA> where empty or absent)."""
    if "weekday" not in df.columns:
        return pd.array([pd.NA] * len(df), dtype="Int64")
    days, bad = iso_weekdays(df["weekday"].tolist())
    if bad is not None:
        raise FieldError(
            f"{path}: line {line[bad]} has weekday '{df['weekday'].iloc[bad]}'; give 1-7 (ISO 8601, Monday = 1), "
            "a day name such as Mon, or leave it empty."
        )
    return pd.array(np.where(days > 0, days, np.nan), dtype="Float64").astype("Int64")


def _check_base_ids(path: Path, base: pd.Series, line: np.ndarray, base_ids: Iterable[str], bases_name: str) -> None:
    """Every row must name a base in ``base_ids`` (the first that does not is the error)."""
    known = {str(b) for b in base_ids}
    unknown = ~base.isin(known).to_numpy()
    if unknown.any():
        i = int(np.flatnonzero(unknown)[0])
        shown = ", ".join(sorted(known)[:8]) + (" ..." if len(known) > 8 else "")
        raise FieldError(
            f"{path}: line {line[i]} names base '{base.iloc[i]}', which is not in {bases_name} (ids: {shown}); "
            "fix the base_id or add the base."
        )


# ------------------------------------------------------------------------------------------------------------------
# Re-timing a network from a profile
# ------------------------------------------------------------------------------------------------------------------


def retime_network(net: RoadNetwork, profile: Profile, note_text: str = "") -> RoadNetwork:
    """The network with ``speed_kph``, ``delay_s`` and ``travel_s`` recomputed from ``profile``.

    Uses the build's formula, :func:`coverkit.network.timing.edge_times`: speed ``min((posted or default) x
    factor, cap)``, ``travel_s = length_m / (speed_kph / 3.6) x (against-one-way factor) + delay_s`` with the
    profile's signal delay at signal end nodes. The edge set is kept: edges closed in ``net`` stay closed, and
    against-one-way edges the profile does not allow are closed; a profile that allows more against-one-way travel
    needs a rebuild of the network.

    Raises
    ------
    ProfileError
        The network has a road class the profile does not list.
    """
    edges = net.edges
    road_class = edges["road_class"].to_numpy(dtype=object).astype(str)
    missing = sorted(set(np.unique(road_class)) - set(profile.speeds))
    if missing:
        raise ProfileError(
            f"profile '{profile.name}' has no [speeds.{missing[0]}] table, but the network has {missing[0]} roads; "
            "add the class to the profile or use the profile the network was built with."
        )
    against = edges["against_oneway"].to_numpy(dtype=bool)
    allowed = (profile.oneway == "against") & np.isin(road_class, list(profile.against_oneway_classes))
    # the build's own formula, so that a rebuilt network has bit-identical times
    times = edge_times(
        profile,
        road_class=road_class,
        posted_kph=edges["posted_kph"].to_numpy(dtype=float),
        length_m=edges["length_m"].to_numpy(dtype=float),
        against_oneway=against,
        signal_at_end=net.nodes["signal"].to_numpy(dtype=bool)[net.v],
    )
    travel_s = times.travel_s.copy()
    travel_s[~np.isfinite(net.travel_s) | (against & ~allowed)] = np.inf
    new = edges.copy()
    new["speed_kph"] = times.speed_kph
    new["delay_s"] = times.delay_s
    new["travel_s"] = travel_s
    info = dict(net.info)
    if note_text:
        info["changes"] = [*info.get("changes", []), note_text]
    return RoadNetwork(net.nodes, new, net.crs, profile, info, turn_bans=net.turn_bans)


def scaled_profile(profile: Profile, multipliers: dict[str, float], signal_delay_s: float | None = None) -> Profile:
    """``profile`` with each listed class's factor multiplied (rounded to :data:`FACTOR_DECIMALS` decimals).

    ``default_kph`` and ``cap_kph`` are kept; ``signal_delay_s`` replaces the delay when given (rounded to 0.01 s).
    """
    speeds = {
        cls: ClassSpeed(
            rule.default_kph,
            round(rule.factor * float(multipliers[cls]), FACTOR_DECIMALS) if cls in multipliers else rule.factor,
            rule.cap_kph,
        )
        for cls, rule in profile.speeds.items()
    }
    delay = profile.signal_delay_s if signal_delay_s is None else round(float(signal_delay_s), 2)
    return replace(profile, speeds=speeds, signal_delay_s=delay, source_text="")


# ------------------------------------------------------------------------------------------------------------------
# Error summaries and the distance-time curve
# ------------------------------------------------------------------------------------------------------------------


def error_summary(
    modelled_s: np.ndarray,
    observed_s: np.ndarray,
    route_m: np.ndarray,
    bands_km: Sequence[float] = DEFAULT_BANDS_KM,
) -> pd.DataFrame:
    """Errors of modelled against observed travel times, overall and by route-length band.

    Parameters
    ----------
    modelled_s, observed_s
        Times (s) per observation.
    route_m
        Route length (m) per observation, for the bands.
    bands_km
        Upper band edges (km); see :func:`band_of`.

    Returns
    -------
    pandas.DataFrame
        One row ``all`` and one per band: ``band``, ``n``, ``mae_s`` (mean absolute error), ``bias_s`` (mean of
        modelled minus observed), ``p90_abs_s`` (90th percentile of the absolute error, numpy's linear
        interpolation); NaN for an empty band.
    """
    err = np.asarray(modelled_s, dtype=float) - np.asarray(observed_s, dtype=float)
    band = band_of(route_m, bands_km)
    rows = []
    for label, sel in [("all", np.ones(len(err), dtype=bool))] + [
        (lab, band == k) for k, lab in enumerate(band_labels(bands_km))
    ]:
        e = err[sel]
        rows.append(
            {
                "band": label,
                "n": int(sel.sum()),
                "mae_s": float(np.mean(np.abs(e))) if len(e) else math.nan,
                "bias_s": float(np.mean(e)) if len(e) else math.nan,
                "p90_abs_s": float(np.percentile(np.abs(e), 90)) if len(e) else math.nan,
            }
        )
    return pd.DataFrame(rows)


# ------------------------------------------------------------------------------------------------------------------
# Calibration
# ------------------------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class CalibrationResult:
    """What a calibration fitted and how well.

    Attributes
    ----------
    profile_before, profile_after
        Starting and calibrated profiles (``profile_after`` factors rounded to :data:`FACTOR_DECIMALS` decimals).
    classes
        One row per road class of the network: ``road_class``, ``exposure_s`` (observed running seconds on that
        class along the starting routes), ``exposure_km``, ``n_routes`` (routes using it), ``fitted`` (bool),
        ``multiplier``, ``factor_before``, ``factor_after``, ``capped_share`` (share of the calibrated routes'
        seconds on that class driven at the cap speed, where a higher factor changes nothing), ``note``.
    observations
        One row per usable observation: ``line``, ``base_id``, ``hour``, ``observed_s``, ``before_s``, ``after_s``
        (modelled times on the starting and calibrated networks), ``route_m_before``, ``route_m`` (calibrated
        route), ``band``, ``signals`` (signal nodes passed), ``delay_s``, and ``run_s_<class>`` (running seconds
        per class on the calibrated route).
    errors
        :func:`error_summary` for ``stage`` ``before`` and ``after`` (bands by the calibrated route length).
    kolesar
        The distance-time curve fitted to (calibrated route length, observed time).
    signal_delay_before_s, signal_delay_after_s
        Signal delay (s) of the starting and calibrated profiles.
    iterations
        Fit-and-re-route rounds run; ``converged`` whether the routes stopped changing; ``route_status``
        ``"stable"``, ``"alternating"`` (routes came back to an earlier set: the best-fitting state of the cycle is
        kept) or ``"max rounds"`` (the best-fitting round is kept).
    rounds
        One row per round: ``round``, ``fit_cost`` (the fit's robust cost per observation on that round's own
        routes: what decides which round is kept when the routes do not settle), ``mae_s`` (mean absolute error,
        s), ``routes_unchanged``, ``kept`` (the round whose factors are written; its ``mae_s`` is the error after).
    n_rows, n_off_network, n_unreachable, n_outside_hours
        Rows read, rows dropped because the incident is beyond the snap limit, because no route joins base and
        incident, and because their hour was not selected. ``n_rejected``: rows the reader left out for want of
        a usable position.
    source
        Name of the observed-times file (for the profile header).
    settings
        Fit settings (loss, f_scale, bounds, min_exposure_s, min_routes, bands_km, hours).
    network
        The network timed with the calibrated profile.
    spread
        The spread of ``ln(observed / calibrated modelled)`` by route-length band (:func:`coverkit.spread.fit_spread`,
        after Budge, Ingolfsson & Zerom 2010), on the calibrated routes.
    """

    profile_before: Profile
    profile_after: Profile
    classes: pd.DataFrame
    observations: pd.DataFrame
    errors: pd.DataFrame
    kolesar: KolesarFit | None
    signal_delay_before_s: float
    signal_delay_after_s: float
    iterations: int
    converged: bool
    route_status: str
    rounds: pd.DataFrame
    n_rows: int
    n_off_network: int
    n_unreachable: int
    n_outside_hours: int
    source: str
    n_rejected: int = 0
    settings: dict = field(default_factory=dict)
    network: RoadNetwork | None = field(default=None, repr=False, compare=False)
    spread: SpreadFit | None = field(default=None, repr=False, compare=False)

    @property
    def n_used(self) -> int:
        """Observations used in the fit."""
        return len(self.observations)

    @property
    def multipliers(self) -> dict[str, float]:
        """Fitted multiplier per road class (1.0 for classes kept)."""
        return dict(zip(self.classes["road_class"], self.classes["multiplier"].astype(float), strict=True))

    def error(self, stage: str, column: str = "mae_s", band: str = "all") -> float:
        """One figure of :attr:`errors`, e.g. ``error("after", "mae_s")``."""
        e = self.errors
        return float(e.loc[(e["stage"] == stage) & (e["band"] == band), column].iloc[0])


@dataclass
class _EdgeModel:
    """Per-edge pieces of the running time as a function of the class multipliers."""

    length_m: np.ndarray
    base_kph: np.ndarray  # (posted or default) x starting factor, before the cap
    cap_kph: np.ndarray
    against: np.ndarray  # against-one-way travel-time multiplier
    class_code: np.ndarray  # index into classes
    signal_end: np.ndarray  # float 0/1: edge ends at a signal node
    fixed_delay_s: np.ndarray
    closed: np.ndarray

    def run_s(self, mult_per_class: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Running time per edge (s) and whether the edge is below its cap (the multiplier still acts)."""
        raw = self.base_kph * mult_per_class[self.class_code]
        speed = np.minimum(raw, self.cap_kph)
        run = np.where(self.closed, 0.0, self.length_m / (speed / 3.6) * self.against)
        return run, raw < self.cap_kph


def _edge_model(net: RoadNetwork, profile: Profile, classes: list[str]) -> _EdgeModel:
    road_class = net.edges["road_class"].to_numpy(dtype=object).astype(str)
    code = np.searchsorted(np.asarray(classes, dtype=object), road_class)
    posted = net.edges["posted_kph"].to_numpy(dtype=float)
    base = np.empty(net.n_edges)
    cap = np.empty(net.n_edges)
    for k, cls in enumerate(classes):
        rule = profile.speeds[cls]
        sel = code == k
        p = posted[sel]
        base[sel] = np.where(np.isfinite(p) & (p > 0), p, rule.default_kph) * rule.factor
        cap[sel] = rule.cap_kph
    against = np.where(net.edges["against_oneway"].to_numpy(dtype=bool), profile.against_oneway_factor, 1.0)
    signal = net.nodes["signal"].to_numpy(dtype=bool)[net.v].astype(float)
    return _EdgeModel(
        length_m=net.length_m,
        base_kph=base,
        cap_kph=cap,
        against=against,
        class_code=code,
        signal_end=signal,
        fixed_delay_s=net.edges["delay_s"].to_numpy(dtype=float),
        closed=~np.isfinite(net.travel_s),
    )


def _class_seconds(routes: Routes, run: np.ndarray, code: np.ndarray, n_classes: int) -> np.ndarray:
    """(n_routes, n_classes) running seconds per class along each route."""
    ind = sp.csr_matrix((run, (np.arange(len(run)), code)), shape=(len(run), n_classes))
    return np.asarray((routes.run_use @ ind).todense())


def calibrate_speeds(
    net: RoadNetwork,
    bases: gpd.GeoDataFrame,
    observed: pd.DataFrame,
    profile: str | Path | Profile | None = None,
    *,
    bounds: tuple[float, float] = DEFAULT_BOUNDS,
    loss: str = "soft_l1",
    f_scale: float = 0.2,
    min_exposure_s: float = 1800.0,
    min_routes: int = 5,
    min_observations: int = 10,
    max_iterations: int = 5,
    fit_signal_delay: bool = False,
    max_snap_m: float = DEFAULT_MAX_SNAP_M,
    hours: Iterable[int] | None = None,
    bands_km: Sequence[float] = DEFAULT_BANDS_KM,
    source: str = "",
) -> CalibrationResult:
    """Fit a speed-factor multiplier per road class to observed travel times.

    Parameters
    ----------
    net
        Road network (its edge set is used; times are recomputed from ``profile``).
    bases
        Bases with ``id`` and point geometry (e.g. from :func:`coverkit.travel.read_points`).
    observed
        Observations as returned by :func:`read_observed` (``base_id``, ``lon``, ``lat``, ``observed_s``,
        ``hour``; ``line`` used in messages when present).
    profile
        Starting profile (name, TOML path or :class:`Profile`); default the one the network was built with.
    bounds
        Bounds on each class's multiplier.
    loss, f_scale
        Robust loss of :func:`scipy.optimize.least_squares` and its soft margin, applied to the residual
        ``log(modelled / observed)`` (0.2 ~ a 20 % error; larger errors weigh less than quadratically).
    min_exposure_s, min_routes
        A class is fitted only when the starting routes drive at least this many seconds on it, in at least this
        many routes; other classes keep their factor and are reported.
    min_observations
        Fewest usable observations to fit at all (and at least 2 more than the number of fitted parameters).
    max_iterations
        Fit-and-re-route rounds at most.
    fit_signal_delay
        Also fit the profile's signal delay (s, bounds :data:`SIGNAL_DELAY_BOUNDS_S`) when routes pass enough
        signals (``min_routes`` routes).
    max_snap_m
        Snap limit (m) for incident positions; farther ones are dropped and counted.
    hours
        Use only observations with these hours of day (needs the ``hour`` column).
    bands_km
        Route-length bands for the error tables (upper edges, km).
    source
        Name of the observations file (for reports and the profile header).

    Returns
    -------
    CalibrationResult

    Raises
    ------
    FieldError
        ``hours`` given but no ``hour`` column, or a bad loss or bounds.
    OffNetworkError
        No usable observation after snapping, or a base off-network.
    ModelError
        Too few usable observations, or no class with enough exposure.
    ProfileError
        The profile lacks a road class of the network.
    """
    lo, hi = _check_fit_options(bands_km, loss, bounds)
    prof0 = net.profile if profile is None else profile if isinstance(profile, Profile) else load_profile(profile)
    obs, n_rows, n_rejected, n_outside = _prepare_observed(observed, hours, source)

    base0 = retime_network(net, prof0, note_text=f"timed with profile '{prof0.name}'")
    trips = _snap_trips(base0, bases, obs, max_snap_m, source)
    classes = sorted(set(net.edges["road_class"].astype(str)))
    model = _edge_model(base0, prof0, classes)

    network_for = functools.partial(_calibrated_network, net, prof0, classes, fit_signal_delay)
    limits = dict(
        max_snap_m=max_snap_m, min_observations=min_observations, min_exposure_s=min_exposure_s, min_routes=min_routes
    )
    routes, usable, exposure, n_off, n_unreach = _starting_routes(
        trips, base0, obs, model, len(classes), fit_signal_delay, n_outside=n_outside, source=source, limits=limits
    )
    obs_s = obs["observed_s"].to_numpy(dtype=float)
    before_s = routes.time_s[usable].copy()
    before_m = routes.length_m(base0)[usable]
    fitted = _fit_rounds(
        routes,
        usable,
        obs_s[usable],
        model,
        exposure,
        prof0.signal_delay_s,
        fit=dict(log_bounds=(math.log(lo), math.log(hi)), loss=loss, f_scale=f_scale),
        reroute=lambda mult, delay: trips.route(network_for(mult, delay)[1]),
        max_iterations=max_iterations,
    )
    counts = dict(n_rows=n_rows, n_rejected=n_rejected, n_off_network=n_off, n_unreachable=n_unreach)
    return _calibration_result(
        fitted,
        usable,
        obs,
        obs_s,
        before=(before_s, before_m),
        model=model,
        prof0=prof0,
        classes=classes,
        exposure=exposure,
        network_for=network_for,
        options=dict(bands_km=bands_km, bounds=(lo, hi), min_exposure_s=min_exposure_s, min_routes=min_routes),
        counts=dict(counts, n_outside_hours=n_outside),
        source=source,
        settings_table=_settings(
            loss, f_scale, (lo, hi), min_exposure_s, min_routes, exposure.fit_delay, bands_km, hours, max_snap_m
        ),
    )


# -- stages of calibrate_speeds ---------------------------------------------------------------------------------------
def _calibrated_network(
    net: RoadNetwork, prof0: Profile, classes: list[str], fit_delay: bool, mult: np.ndarray, delay_s: float
) -> tuple[Profile, RoadNetwork]:
    """The profile scaled by ``mult`` per class (signal delay ``delay_s`` when it is fitted) and ``net`` timed by it."""
    multipliers = {c: float(m) for c, m in zip(classes, mult, strict=True) if m != 1.0}
    p = scaled_profile(prof0, multipliers, delay_s if fit_delay else None)
    return p, retime_network(net, p, note_text=f"timed with calibrated profile '{p.name}'")


def _calibration_result(
    fitted, usable, obs, obs_s, *, before, model, prof0, classes, exposure, network_for, options, counts, source,
    settings_table,
) -> CalibrationResult:  # fmt: skip
    """The result from the last round: the calibrated profile and network, and the tables on the kept routes."""
    mult, delay, routes = fitted.mult, fitted.delay_s, fitted.routes
    prof_after, net_after = network_for(mult, delay)
    after_s = routes.time_s[usable]
    route_m = routes.length_m(net_after)[usable]
    class_table, table, errors, kfit = _after_tables(
        routes,
        usable,
        obs.iloc[usable],
        obs_s[usable],
        before=before,
        after=(after_s, route_m),
        model=model,
        net_after=net_after,
        profiles=(prof0, prof_after),
        classes=classes,
        mult=mult,
        exposure=exposure,
        options=options,
    )
    return CalibrationResult(
        profile_before=prof0,
        profile_after=prof_after,
        classes=class_table,
        observations=table,
        errors=errors,
        kolesar=kfit,
        signal_delay_before_s=float(prof0.signal_delay_s),
        signal_delay_after_s=float(prof_after.signal_delay_s),
        iterations=fitted.iterations,
        converged=fitted.status == "stable",
        route_status=fitted.status,
        rounds=fitted.rounds,
        **counts,
        source=source,
        settings=settings_table,
        network=net_after,
        spread=fit_spread(obs_s[usable], after_s, route_m, bands_km=options["bands_km"], source=source),
    )


def _starting_routes(trips, base0, obs, model, n_classes, fit_signal_delay, *, n_outside, source, limits):
    """Route the observed trips on the starting network and check enough are usable: the routes, the usable rows,
    the class exposure and the counts of trips off the network and unreachable."""
    note("calibrate: routing the observed trips on the starting network")
    routes = trips.route(base0)
    n_off = int((~trips.incidents.on_network).sum())
    n_unreach = int((trips.incidents.on_network & ~routes.found).sum())
    usable = np.flatnonzero(routes.found)
    min_exposure_s, min_routes = limits["min_exposure_s"], limits["min_routes"]
    exposure = _exposure(routes, usable, model, n_classes, min_exposure_s, min_routes, fit_signal_delay)
    _check_usable(
        len(usable),
        exposure,
        dropped={"off-network": n_off, "unreachable": n_unreach, "outside the chosen hours": n_outside},
        n_obs=len(obs),
        source=source,
        limits=limits,
    )
    return routes, usable, exposure, n_off, n_unreach


def _check_fit_options(bands_km: Sequence[float], loss: str, bounds: tuple[float, float]) -> tuple[float, float]:
    """Check the bands, the loss and the multiplier bounds; the bounds as floats."""
    check_bands(bands_km)
    if loss not in _LOSSES:
        raise FieldError(f"loss '{loss}' is not known; use one of {', '.join(_LOSSES)}.")
    lo, hi = (float(b) for b in bounds)
    if not (0 < lo < 1 < hi and math.isfinite(hi)):
        raise FieldError(f"multiplier bounds ({lo:g}, {hi:g}) must satisfy 0 < low < 1 < high, e.g. (0.3, 3.0).")
    return lo, hi


def _settings(loss, f_scale, bounds, min_exposure_s, min_routes, fit_delay, bands_km, hours, max_snap_m) -> dict:
    """The settings a calibration ran with, as the result (and the profile header) records them."""
    return {
        "loss": loss,
        "f_scale": float(f_scale),
        "bounds": bounds,
        "min_exposure_s": float(min_exposure_s),
        "min_routes": int(min_routes),
        "fit_signal_delay": bool(fit_delay),
        "bands_km": tuple(float(b) for b in bands_km),
        "hours": None if hours is None else sorted({int(h) for h in hours}),
        "max_snap_m": float(max_snap_m),
    }


def _prepare_observed(observed: pd.DataFrame, hours: Iterable[int] | None, source: str):
    """The observations to use (with ``line``, in the chosen hours); rows read, rows rejected, rows out of hours."""
    # rows the reader left out for want of a position count among the rows read (see read_observed)
    n_rejected = len(observed.attrs["rejected"]) if "rejected" in observed.attrs else 0
    n_rows = len(observed) + n_rejected
    obs = observed.reset_index(drop=True)
    if "line" not in obs.columns:
        obs = obs.assign(line=np.arange(len(obs)) + 2)
    obs, n_outside = _select_hours(obs, hours, source)
    return obs, n_rows, n_rejected, n_outside


def _after_tables(
    routes, usable, used_obs, obs_s, *, before, after, model, net_after, profiles, classes, mult, exposure, options
):
    """The result's tables on the kept routes: classes, observations, errors by band, and the Kolesar fit."""
    prof0, prof_after = profiles
    (before_s, _), (after_s, route_m) = before, after
    bands_km = options["bands_km"]
    run_after, below_cap = model.run_s(_rounded_mult(prof0, prof_after, classes))
    secs_after = _class_seconds(routes, run_after, model.class_code, len(classes))[usable]
    capped = _class_seconds(routes, run_after * ~below_cap, model.class_code, len(classes))[usable].sum(axis=0)
    class_table = _class_table(
        classes,
        mult,
        exposure,
        secs_after,
        capped,
        prof0,
        prof_after,
        options["bounds"],
        options["min_exposure_s"],
        options["min_routes"],
    )
    table = _observation_table(
        used_obs,
        routes,
        usable,
        obs_s,
        before=before,
        after=after,
        model=model,
        net_after=net_after,
        secs_after=secs_after,
        classes=classes,
        bands_km=bands_km,
    )
    errors = pd.concat(
        [
            error_summary(before_s, obs_s, route_m, bands_km).assign(stage="before"),
            error_summary(after_s, obs_s, route_m, bands_km).assign(stage="after"),
        ],
        ignore_index=True,
    )[["stage", "band", "n", "mae_s", "bias_s", "p90_abs_s"]]
    try:
        kfit = fit_kolesar(route_m, obs_s)
    except ModelError:
        kfit = None
    return class_table, table, errors, kfit


def _select_hours(obs: pd.DataFrame, hours: Iterable[int] | None, source: str) -> tuple[pd.DataFrame, int]:
    """The observations in the chosen hours of day, and how many were left out."""
    if hours is None:
        return obs, 0
    wanted = sorted({int(h) for h in hours})
    if "hour" not in obs.columns or obs["hour"].isna().all():
        raise FieldError(
            f"hours {wanted} were chosen, but {source or 'the observed times'} has no hour column; "
            "add hour (0-23) or leave the hours out."
        )
    keep = obs["hour"].isin(wanted).fillna(False).to_numpy(dtype=bool)
    obs = obs[keep].reset_index(drop=True)
    if len(obs) == 0:
        raise ModelError(f"no observation has an hour in {wanted}; choose other hours or leave them out.")
    return obs, int((~keep).sum())


def _check_usable(n_usable: int, exposure: _Exposure, *, dropped: dict[str, int], n_obs: int, source: str, limits):
    """Stop when no observation, too few observations or no road class is left to fit."""
    n_off, n_unreach, n_outside = dropped["off-network"], dropped["unreachable"], dropped["outside the chosen hours"]
    if n_usable == 0:
        raise OffNetworkError(
            f"no usable observation in {source or 'the observed times'}: {n_off} of {n_obs} incidents lie farther "
            f"than {limits['max_snap_m']:g} m from a road and {n_unreach} cannot be reached from their base; check "
            "lon/lat (degrees, EPSG:4326), that the network covers them, or raise the snap limit."
        )
    n_params = int(exposure.fit_mask.sum()) + int(exposure.fit_delay)
    need = max(limits["min_observations"], n_params + 2)
    if n_usable < need:
        raise ModelError(
            f"only {n_usable} usable observations ({n_off} off-network, {n_unreach} unreachable"
            + (f", {n_outside} outside the chosen hours" if n_outside else "")
            + f"); the fit needs at least {need} - add observations."
        )
    if n_params == 0:
        raise ModelError(
            f"no road class has at least {limits['min_exposure_s']:g} s of observed travel in {limits['min_routes']} "
            "routes; add observations or lower the exposure threshold."
        )


def _observation_table(
    used_obs, routes, usable, obs_s, *, before, after, model, net_after, secs_after, classes, bands_km
) -> pd.DataFrame:
    """One row per usable observation: observed, modelled before and after, route, band, signals, class seconds."""
    (before_s, before_m), (after_s, route_m) = before, after
    table = pd.DataFrame(
        {
            "line": used_obs["line"].to_numpy(),
            "base_id": used_obs["base_id"].astype(str).to_numpy(),
            "hour": used_obs["hour"].to_numpy() if "hour" in used_obs else pd.array([pd.NA] * len(usable)),
            "observed_s": obs_s,
            "before_s": before_s,
            "after_s": after_s,
            "route_m_before": before_m,
            "route_m": route_m,
            "band": np.asarray(band_labels(bands_km), dtype=object)[band_of(route_m, bands_km)],
            "signals": np.asarray(routes.delay_use[usable] @ model.signal_end),
            "delay_s": np.asarray(routes.delay_use[usable] @ net_after.edges["delay_s"].to_numpy(dtype=float)),
        }
    )
    for k, cls in enumerate(classes):
        table[f"run_s_{cls}"] = secs_after[:, k]
    return table


@dataclass(frozen=True)
class _Trips:
    """The observed trips snapped to the network: base and incident points, and which base each trip starts at."""

    bases: Snapped
    incidents: Snapped
    src_idx: np.ndarray
    tgt_idx: np.ndarray

    def route(self, net: RoadNetwork) -> Routes:
        """The trips' shortest routes on ``net`` (the same edge set, timed by some profile)."""
        return shortest_routes(net, self.bases, self.incidents, self.src_idx, self.tgt_idx)


def _snap_trips(
    base0: RoadNetwork, bases: gpd.GeoDataFrame, obs: pd.DataFrame, max_snap_m: float, source: str
) -> _Trips:
    """Snap the bases the observations name (strictly: a base off the road is a data error) and the incidents."""
    base_ids = bases["id"].astype(str).to_numpy()
    unknown = sorted(set(obs["base_id"].astype(str)) - set(base_ids))
    if unknown:
        row = obs.loc[obs["base_id"].astype(str) == unknown[0], "line"].iloc[0]
        raise FieldError(
            f"{source or 'observed times'}: line {row} names base '{unknown[0]}', which is not among the bases; "
            "fix the base_id or add the base."
        )
    used_bases = np.flatnonzero(np.isin(base_ids, obs["base_id"].astype(str).unique()))
    b_snap = snap_points(base0, bases.iloc[used_bases], ids=base_ids[used_bases], what="bases", warn_islands=False)
    pos = {b: i for i, b in enumerate(base_ids[used_bases])}
    src_idx = np.array([pos[b] for b in obs["base_id"].astype(str)], dtype=np.int64)
    inc = gpd.GeoSeries(gpd.points_from_xy(obs["lon"], obs["lat"]), crs="EPSG:4326").to_crs(base0.crs)
    i_snap = snap_points(
        base0,
        inc,
        ids=obs["line"].to_numpy(),
        max_snap_m=max_snap_m,
        off_network="mask",
        what="observed incidents",
        warn_islands=False,
    )
    return _Trips(b_snap, i_snap, src_idx, np.arange(len(obs)))


@dataclass(frozen=True)
class _Exposure:
    """Travel per class on the starting routes, and which classes (and the signal delay) are fitted."""

    exposure_s: np.ndarray
    exposure_km: np.ndarray
    n_routes: np.ndarray
    fit_mask: np.ndarray
    fit_delay: bool


def _exposure(routes, usable, model, n_classes, min_exposure_s, min_routes, fit_signal_delay) -> _Exposure:
    """Exposure on the starting routes decides which classes are fitted (kept fixed so rounds cannot oscillate)."""
    run0, _ = model.run_s(np.ones(n_classes))
    secs0 = _class_seconds(routes, run0, model.class_code, n_classes)[usable]
    km0 = _class_seconds(routes, model.length_m, model.class_code, n_classes)[usable] / 1000.0
    exposure_s = secs0.sum(axis=0)
    n_routes = (secs0 > 0).sum(axis=0)
    signal_routes = int((np.asarray(routes.delay_use[usable] @ model.signal_end) > 0).sum())
    return _Exposure(
        exposure_s=exposure_s,
        exposure_km=np.array([km0[:, k].sum() for k in range(n_classes)]),
        n_routes=n_routes,
        fit_mask=(exposure_s >= min_exposure_s) & (n_routes >= min_routes),
        fit_delay=bool(fit_signal_delay and signal_routes >= min_routes),
    )


@dataclass(frozen=True)
class _Rounds:
    """The kept state of the fit-and-re-route rounds and their log."""

    mult: np.ndarray
    delay_s: float
    routes: Routes
    iterations: int
    status: str  # "stable", "alternating" or "max rounds"
    rounds: pd.DataFrame


def _fit_rounds(routes, usable, obs_s, model, exposure, delay0, *, fit, reroute, max_iterations) -> _Rounds:
    """Fit on the current routes, re-time, re-route, until the routes stop changing.

    Stop when the routes no longer change (a fixed point); when they come back to an earlier set (routes
    alternating between near-equal choices) or the rounds run out, keep the visited state whose own routes fit the
    observations best (the fit's robust cost). The log shows, per round, the quantity that decides (the fit's
    robust cost per observation, on that round's own routes) beside the mean absolute error, and says which round
    is kept. ``obs_s`` are the usable observations; ``reroute(mult, delay_s)`` gives the routes on the re-timed
    network.
    """
    fit_classes = np.flatnonzero(exposure.fit_mask)
    mult = np.ones(len(exposure.fit_mask))
    delay = delay0
    states: list[tuple[np.ndarray, float, Routes, float, int]] = []
    round_rows: list[dict] = []
    iterations, status = 0, "max rounds"
    for it in range(1, max_iterations + 1):
        mult_new, delay_new = _fit_once(
            routes,
            usable,
            obs_s,
            model,
            mult,
            delay,
            fit_classes,
            exposure.fit_delay,
            fit["log_bounds"],
            fit["loss"],
            fit["f_scale"],
        )
        new_routes = reroute(mult_new, delay_new)
        iterations = it
        same = new_routes.same_paths(routes)
        earlier = [k for k, st in enumerate(states[:-1]) if new_routes.same_paths(st[2])]
        cost = _robust_cost(np.log(np.maximum(new_routes.time_s[usable], 1.0) / obs_s), fit["loss"], fit["f_scale"])
        cost /= len(usable)
        states.append((mult_new, delay_new, new_routes, cost, it))
        mult, delay, routes = mult_new, delay_new, new_routes
        err = float(np.mean(np.abs(routes.time_s[usable] - obs_s)))
        round_rows.append({"round": it, "fit_cost": cost, "mae_s": err, "routes_unchanged": bool(same)})
        note(
            f"calibrate: round {it}: fit cost {cost:.6f}, mean absolute error {err:.1f} s"
            + (" (routes unchanged)" if same else "")
        )
        if same:
            status = "stable"
            break
        if earlier:
            status = "alternating"
            states = states[earlier[0] :]
            break
    if status != "stable":
        mult, delay, routes, _, kept_round = min(states, key=lambda st: (st[3], st[4]))
    else:
        kept_round = iterations
    rounds = pd.DataFrame(round_rows)
    rounds["kept"] = rounds["round"] == kept_round
    kept = rounds.loc[rounds["kept"]].iloc[0]
    note(
        f"calibrate: kept round {kept_round}"
        + (", routes stable" if status == "stable" else ", lowest fit cost")
        + f" {kept['fit_cost']:.6f}: mean absolute error {kept['mae_s']:.1f} s"
    )
    return _Rounds(mult, delay, routes, iterations, status, rounds)


def _class_table(
    classes, mult, exposure: _Exposure, secs_after, capped, prof0, prof_after, bounds, min_exposure_s, min_routes
) -> pd.DataFrame:
    """One row per road class: exposure, whether fitted, the multiplier, factors before and after, and a note."""
    lo, hi = bounds
    class_rows = []
    for k, cls in enumerate(classes):
        fitted = bool(exposure.fit_mask[k])
        m_k = float(mult[k]) if fitted else 1.0
        tot = float(secs_after[:, k].sum())
        if not fitted:
            why = (
                f"kept: {exposure.exposure_s[k]:.0f} s observed in {exposure.n_routes[k]} routes "
                f"(needs {min_exposure_s:g} s in {min_routes})"
            )
        elif m_k <= lo * (1 + 1e-6) or m_k >= hi * (1 - 1e-6):
            why = "at the bound of the multiplier: check the data"
        else:
            why = ""
        if fitted and tot > 0 and capped[k] / tot > 0.5:
            why = (why + "; " if why else "") + "mostly at the cap speed: a higher factor has little effect"
        class_rows.append(
            {
                "road_class": cls,
                "exposure_s": float(exposure.exposure_s[k]),
                "exposure_km": float(exposure.exposure_km[k]),
                "n_routes": int(exposure.n_routes[k]),
                "fitted": fitted,
                "multiplier": m_k,
                "factor_before": prof0.speeds[cls].factor,
                "factor_after": prof_after.speeds[cls].factor,
                "capped_share": float(capped[k] / tot) if tot > 0 else 0.0,
                "note": why,
            }
        )
    return pd.DataFrame(class_rows)


def _rounded_mult(prof0: Profile, prof_after: Profile, classes: list[str]) -> np.ndarray:
    """Multipliers implied by the rounded calibrated factors (so class splits match the written profile)."""
    return np.array([prof_after.speeds[c].factor / prof0.speeds[c].factor for c in classes])


def _robust_cost(resid: np.ndarray, loss: str, f_scale: float) -> float:
    """The cost ``least_squares`` minimises: ``f_scale^2 * sum rho((r / f_scale)^2)`` (its documented losses)."""
    z = (np.asarray(resid, dtype=float) / f_scale) ** 2
    rho = {
        "linear": lambda z: z,
        "soft_l1": lambda z: 2.0 * (np.sqrt(1.0 + z) - 1.0),
        "huber": lambda z: np.where(z <= 1.0, z, 2.0 * np.sqrt(z) - 1.0),
        "cauchy": np.log1p,
        "arctan": np.arctan,
    }[loss]
    return float(f_scale**2 * np.sum(rho(z)))


def _fit_once(
    routes: Routes,
    usable: np.ndarray,
    obs_s: np.ndarray,
    model: _EdgeModel,
    mult: np.ndarray,
    delay_s: float,
    fit_classes: np.ndarray,
    fit_delay: bool,
    log_bounds: tuple[float, float],
    loss: str,
    f_scale: float,
) -> tuple[np.ndarray, float]:
    """One bounded robust least-squares fit on fixed routes; returns (multiplier per class, signal delay s)."""
    run_use = routes.run_use[usable]
    delay_use = routes.delay_use[usable]
    turn_s = routes.turn_s[usable] if routes.turn_s is not None else 0.0  # turn costs: fixed, not fitted
    sig = np.asarray(delay_use @ model.signal_end)
    n_e = len(model.length_m)
    fe = np.flatnonzero(np.isin(model.class_code, fit_classes))
    col = np.searchsorted(fit_classes, model.class_code[fe])
    k = len(fit_classes)
    log_obs = np.log(np.maximum(obs_s, 1.0))

    def unpack(x: np.ndarray) -> tuple[np.ndarray, float]:
        m = mult.copy()
        m[fit_classes] = np.exp(x[:k])
        return m, float(x[k]) if fit_delay else delay_s

    def modelled(x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        m, d = unpack(x)
        run, below = model.run_s(m)
        delay_e = model.signal_end * d if fit_delay else model.fixed_delay_s
        pred = run_use @ run + delay_use @ delay_e + turn_s
        return np.maximum(pred, 1.0), run, below

    def resid(x: np.ndarray) -> np.ndarray:
        pred, _, _ = modelled(x)
        return np.log(pred) - log_obs

    def jac(x: np.ndarray) -> np.ndarray:
        pred, run, below = modelled(x)
        # running time scales as 1/multiplier below the cap and not at all above it
        w = sp.csr_matrix(((run * below)[fe], (fe, col)), shape=(n_e, k))
        j = -np.asarray((run_use @ w).todense()) / pred[:, None]
        if fit_delay:
            j = np.column_stack([j, sig / pred])
        return j

    x0 = np.log(np.clip(mult[fit_classes], math.exp(log_bounds[0]), math.exp(log_bounds[1])))
    lower = np.full(k, log_bounds[0])
    upper = np.full(k, log_bounds[1])
    if fit_delay:
        x0 = np.append(x0, np.clip(delay_s, *SIGNAL_DELAY_BOUNDS_S))
        lower = np.append(lower, SIGNAL_DELAY_BOUNDS_S[0])
        upper = np.append(upper, SIGNAL_DELAY_BOUNDS_S[1])
    sol = least_squares(
        resid, x0, jac=jac, bounds=(lower, upper), loss=loss, f_scale=f_scale, method="trf", x_scale="jac"
    )
    return unpack(sol.x)


def calibrate_files(
    network_path: str | Path,
    observed_path: str | Path,
    bases_path: str | Path,
    profile: str | Path | Profile | None = None,
    *,
    max_rejected_share: float = DEFAULT_MAX_REJECTED_SHARE,
    **options: object,
) -> CalibrationResult:
    """:func:`calibrate_speeds` from files: a network GeoPackage, an observed-times CSV and a bases file.

    ``max_rejected_share`` goes to :func:`read_observed`; ``options`` are the keyword options of
    :func:`calibrate_speeds` (``source`` is set to the observed file name).
    """
    net, bases, observed = calibration_inputs(network_path, observed_path, bases_path, max_rejected_share)
    return calibrate_speeds(net, bases, observed, profile, source=Path(observed_path).name, **options)


def calibration_inputs(
    network_path: str | Path, observed_path: str | Path, bases_path: str | Path, max_rejected_share: float
) -> tuple[RoadNetwork, gpd.GeoDataFrame, pd.DataFrame]:
    """The network, the bases and the checked observations a calibration from files reads."""
    net = RoadNetwork.load(network_path)
    bases = read_points(bases_path, net.crs, what="bases")
    observed = read_observed(
        observed_path,
        bases["id"].astype(str),
        bases_name=Path(bases_path).name,
        max_rejected_share=max_rejected_share,
    )
    return net, bases, observed


# ------------------------------------------------------------------------------------------------------------------
# Outputs
# ------------------------------------------------------------------------------------------------------------------


def calibrated_profile_toml(result: CalibrationResult) -> str:
    """The calibrated profile as TOML, with header comments saying how it was fitted (no date: deterministic)."""
    s = result.settings
    kept = result.classes.loc[~result.classes["fitted"], "road_class"].tolist()
    before, after = result.error("before"), result.error("after")
    src = " ".join(str(result.source or "observed travel times").split())
    dropped = f"{result.n_off_network} off-network, {result.n_unreachable} unreachable"
    if result.n_outside_hours:
        dropped += f", {result.n_outside_hours} outside hours {s['hours']}"
    lines = [
        "# Calibrated speed profile written by coverkit (calibrate).",
        f"# Fitted to observed travel times in {src}: {result.n_used} of {result.n_rows} observations used "
        f"({dropped}).",
        f"# Starting profile '{result.profile_before.name}'. factor = starting factor x fitted multiplier "
        f"(robust least squares on log(modelled/observed), {s['loss']} loss, f_scale {s['f_scale']:g}, "
        f"multiplier bounds {s['bounds'][0]:g}-{s['bounds'][1]:g}, {result.iterations} re-routing rounds); "
        "default_kph and cap_kph kept.",
        "# Kept at the starting factor (too little observed travel): " + (", ".join(kept) if kept else "none") + ".",
    ]
    if s.get("fit_signal_delay"):
        lines.append(f"# signal_delay_s fitted: {result.signal_delay_before_s:g} -> {result.signal_delay_after_s:g} s.")
    lines += [
        f"# Mean absolute error {before:.1f} -> {after:.1f} s; bias (modelled - observed) "
        f"{result.error('before', 'bias_s'):.1f} -> {result.error('after', 'bias_s'):.1f} s; 90th percentile of "
        f"absolute error {result.error('before', 'p90_abs_s'):.1f} -> {result.error('after', 'p90_abs_s'):.1f} s.",
        f"# {coverkit.CAUTION}",
    ]
    prof = replace(
        result.profile_after,
        name=_calibrated_name(result.profile_before.name),
        description=f"{result.profile_before.name} profile calibrated to {result.n_used} observed travel times",
    )
    return profile_to_toml(prof, header="\n".join(lines))


def _calibrated_name(name: str) -> str:
    return name if name.endswith("-calibrated") else f"{name}-calibrated"


def write_calibrated_profile(result: CalibrationResult, out_toml: str | Path) -> Path:
    """Write :func:`calibrated_profile_toml` to ``out_toml`` atomically; returns the path."""
    out = Path(out_toml)
    if out.suffix.lower() != ".toml":
        raise InputFileError(f"{out}: a calibrated profile is a TOML file; give a path ending in .toml.")
    return write_text_atomic(out, calibrated_profile_toml(result))


def summary_text(result: CalibrationResult, extra: Sequence[str] = ()) -> str:
    """A one-screen summary: observations used, factors per class, errors before and after by band (then the
    ``extra`` lines, e.g. the hour bands, before the caution)."""
    lines = [
        f"observations  {result.n_used} used of {result.n_rows} ({result.n_off_network} off-network, "
        f"{result.n_unreachable} unreachable"
        + (f", {result.n_rejected} without a usable position" if result.n_rejected else "")
        + (f", {result.n_outside_hours} outside the chosen hours" if result.n_outside_hours else "")
        + ")",
        f"fit           {result.iterations} rounds, routes {_STATUS_TEXT[result.route_status]}; " + _kept_text(result),
        "",
        f"{'road class':<16}{'exposure':>10}{'routes':>8}{'factor':>9}{'-> new':>9}  note",
    ]
    for r in result.classes.itertuples(index=False):
        lines.append(
            f"{r.road_class:<16}{r.exposure_s / 60:>6.0f} min{r.n_routes:>8}{r.factor_before:>9.3f}"
            f"{r.factor_after:>9.3f}  {r.note}"
        )
    if result.settings.get("fit_signal_delay"):
        lines.append(f"signal delay  {result.signal_delay_before_s:g} -> {result.signal_delay_after_s:g} s")
    lines += ["", f"{'band':<12}{'n':>5}{'MAE s':>16}{'bias s':>16}{'P90 |err| s':>18}"]
    e = result.errors
    for band in e.loc[e["stage"] == "before", "band"]:
        b = e[(e["stage"] == "before") & (e["band"] == band)].iloc[0]
        a = e[(e["stage"] == "after") & (e["band"] == band)].iloc[0]
        lines.append(
            f"{band:<12}{int(a['n']):>5}{b['mae_s']:>8.1f}{a['mae_s']:>8.1f}{b['bias_s']:>8.1f}{a['bias_s']:>8.1f}"
            f"{b['p90_abs_s']:>9.1f}{a['p90_abs_s']:>9.1f}"
        )
    lines.append("(each pair: before, after)")
    k = result.kolesar
    if k is not None:
        lines.append(
            f"distance-time curve (Kolesar, Walker, Hausner 1975): acceleration {k.accel_mps2:.2f} m/s2, cruise "
            f"{k.cruise_kph:.1f} km/h, critical distance {k.critical_m:.0f} m, RMSE {k.rmse_s:.0f} s"
        )
    lines += _spread_lines(result)
    lines += [*extra, "", coverkit.CAUTION]
    return "\n".join(lines)


def _spread_lines(result: CalibrationResult) -> list[str]:
    """The travel-time spread by band: sigma of ln(observed / modelled) with its standard error."""
    if result.spread is None:
        return []
    lines = ["", "travel-time spread, ln(observed/modelled) after calibration (after Budge, Ingolfsson & Zerom 2010)"]
    lines.append(f"{'band':<12}{'n':>5}{'mu':>9}{'+-se':>8}{'sigma':>9}{'+-se':>8}")
    for r in result.spread.table.itertuples(index=False):
        note_text = "  (few trips: all trips' figures)" if r.from_all else ""
        lines.append(f"{r.band:<12}{r.n:>5}{r.mu:>9.3f}{r.mu_se:>8.3f}{r.sigma:>9.3f}{r.sigma_se:>8.3f}{note_text}")
    return lines


_STATUS_TEXT = {
    "stable": "stable",
    "alternating": "alternating between near-equal choices",
    "max rounds": "still changing after the last round",
}


def _kept_text(result: CalibrationResult) -> str:
    """Which round is kept and why, in the terms of the log."""
    kept = result.rounds.loc[result.rounds["kept"]].iloc[0]
    why = "routes stable, fit cost" if result.route_status == "stable" else "lowest fit cost"
    return f"round {int(kept['round'])} kept ({why} {kept['fit_cost']:.6f}, mean absolute error {kept['mae_s']:.1f} s)"


def calibration_chart(result: CalibrationResult, out_png: str | os.PathLike[str]) -> Path:
    """Chart observed travel times against route length with the fitted curve and modelled medians by band.

    Shows the observed trips (points), the fitted Kolesar-Walker-Hausner (1975) curve, and the median modelled
    time before and after calibration in each route-length band (at the band's median route length). Written as
    PNG atomically; the caution line is printed at the bottom.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    out = Path(out_png)
    if out.suffix.lower() != ".png":
        raise InputFileError(f"{out}: the calibration chart is a PNG file; give a path ending in .png.")
    t = result.observations
    km = t["route_m"].to_numpy(dtype=float) / 1000.0
    fig = Figure(figsize=(9.0, 6.2), dpi=110)
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0.09, 0.2, 0.88, 0.68))
    ax.scatter(km, t["observed_s"] / 60.0, s=9, color="#9a9a9a", alpha=0.7, lw=0, label="observed trips")
    k = result.kolesar
    if k is not None:
        x = np.linspace(0.0, max(float(km.max()), 0.1) * 1.02, 300)
        ax.plot(
            x,
            kolesar_time_s(x * 1000.0, k.accel_mps2, k.cruise_mps) / 60.0,
            color="#1b4f72",
            lw=1.8,
            label=f"distance-time curve: a = {k.accel_mps2:.2f} m/s², v = {k.cruise_kph:.0f} km/h",
        )
    order = band_labels(result.settings["bands_km"])
    g = t.groupby("band", sort=False)
    med = g[["route_m", "before_s", "after_s", "observed_s"]].median()
    med = med.reindex([b for b in order if b in med.index])
    ax.plot(
        med["route_m"] / 1000.0,
        med["before_s"] / 60.0,
        "s--",
        color="#c0392b",
        ms=6,
        lw=1.2,
        label="modelled before, median by band",
    )
    ax.plot(
        med["route_m"] / 1000.0,
        med["after_s"] / 60.0,
        "o-",
        color="#117a65",
        ms=6,
        lw=1.2,
        label="modelled after, median by band",
    )
    ax.set_xlabel("route length (km)")
    ax.set_ylabel("travel time (min)")
    ax.set_xlim(left=0)
    ax.set_ylim(bottom=0)
    ax.grid(True, color="#e2e2e2", lw=0.6)
    ax.set_axisbelow(True)
    ax.legend(fontsize=8.5, frameon=False, loc="upper left")
    fig.text(0.09, 0.965, "Observed and modelled travel times", fontsize=13, fontweight="bold", va="top")
    fig.text(
        0.09,
        0.925,
        f"{result.n_used} trips from {result.source or 'observed times'}; mean absolute error "
        f"{result.error('before'):.0f} s before, {result.error('after'):.0f} s after calibration",
        fontsize=9,
        va="top",
    )
    import textwrap

    fig.text(0.03, 0.075, "\n".join(textwrap.wrap(coverkit.CAUTION, 130)), fontsize=7.5, color="#333", va="top")
    with atomic_path(out) as tmp:
        # no 'Software' entry: the matplotlib version would make identical runs differ
        fig.savefig(tmp, format="png", metadata={"Software": None, "Comment": coverkit.CAUTION})
    return out


__all__ = [
    "DEFAULT_BANDS_KM",
    "DEFAULT_BOUNDS",
    "CalibrationResult",
    "KolesarFit",
    "band_labels",
    "band_of",
    "calibrate_files",
    "calibrate_speeds",
    "calibrated_profile_toml",
    "calibration_chart",
    "error_summary",
    "fit_kolesar",
    "kolesar_time_s",
    "read_observed",
    "retime_network",
    "scaled_profile",
    "summary_text",
    "write_calibrated_profile",
]
