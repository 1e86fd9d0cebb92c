"""Travel-time spread: how widely real trips scatter around the modelled times, by route-length band.

For each observed trip the residual is ``r = ln(observed_s / modelled_s)``. Within a route-length band
(:mod:`coverkit.distance_bands`) the residuals are taken as normal with mean ``mu`` and standard deviation
``sigma``, so a trip modelled at ``m`` seconds takes ``T = m * exp(r)``: lognormal with median ``m * exp(mu)`` and
log-scale spread ``sigma``. That travel times are right-skewed, close to lognormal, and that their spread depends on
the distance driven is the finding of Budge, Ingolfsson & Zerom (2010), "Empirical analysis of ambulance travel
times: the case of Calgary emergency medical services", *Management Science* 56(4), 716-723 (from memory); their
model lets the median and the coefficient of variation vary smoothly with distance and uses a t distribution on
the log scale. Ours is the simpler banded lognormal: one ``mu`` and one ``sigma`` per band, which the simulation
and the coverage probabilities read from one fit.

Standard errors (large-sample results for a normal sample, e.g. Kendall & Stuart, *The Advanced Theory of
Statistics*, vol. 1; from memory): ``se(mu) = s / sqrt(n)`` and ``se(sigma) = s / sqrt(2 (n - 1))``.

The probability of arriving within ``S`` seconds is the lognormal CDF, ``Phi((ln S - ln m - mu) / sigma)``.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
from scipy.special import ndtr

from coverkit.atomic import write_text_atomic
from coverkit.distance_bands import DEFAULT_BANDS_KM, band_labels, band_of, check_bands
from coverkit.errors import FieldError, InputFileError

if TYPE_CHECKING:
    from coverkit.coverage import CoverageResult
    from coverkit.network.model import RoadNetwork

#: Fewest trips in a band for its own ``mu`` and ``sigma``; a band with fewer takes the figures of all trips.
#: Our choice: a standard deviation of fewer than 10 trips is too rough to be worth a band of its own.
MIN_BAND_TRIPS = 10

#: Columns of the spread table (and of its CSV file), in order.
COLUMNS = ("band", "upper_km", "n", "mu", "mu_se", "sigma", "sigma_se", "from_all")


@dataclass(frozen=True)
class SpreadFit:
    """The spread of ``ln(observed / modelled)`` per route-length band.

    Attributes
    ----------
    bands_km
        Upper band edges (km); the last band is open.
    table
        One row per band then one row ``all``: ``band``, ``upper_km`` (NaN for the open band and ``all``), ``n``
        (trips), ``mu``, ``mu_se``, ``sigma``, ``sigma_se`` (log scale; see the module docstring), ``from_all``
        (``True`` where the band had fewer than :data:`MIN_BAND_TRIPS` trips and carries the figures of all trips).
    source
        Where it was fitted or read from (for reports).
    """

    bands_km: tuple[float, ...]
    table: pd.DataFrame
    source: str = ""

    def band_values(self, route_m: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """``(mu, sigma)`` of each trip's band from its route length (m); NaN lengths get the ``all`` figures."""
        route_m = np.asarray(route_m, dtype=float)
        bands = self.table.iloc[: len(self.bands_km) + 1]
        k = band_of(np.where(np.isfinite(route_m), route_m, 0.0), self.bands_km)
        mu, sigma = bands["mu"].to_numpy(float)[k], bands["sigma"].to_numpy(float)[k]
        whole = self.table.iloc[-1]
        mu[~np.isfinite(route_m)], sigma[~np.isfinite(route_m)] = whole["mu"], whole["sigma"]
        return mu, sigma

    @property
    def sigma_all(self) -> float:
        """``sigma`` of all trips together (log scale)."""
        return float(self.table["sigma"].iloc[-1])


def _moments(r: np.ndarray) -> tuple[float, float, float, float]:
    """``mu, se(mu), sigma, se(sigma)`` of a normal sample (see the module docstring)."""
    n = len(r)
    s = float(np.std(r, ddof=1))
    return float(np.mean(r)), s / np.sqrt(n), s, s / np.sqrt(2.0 * (n - 1))


def fit_spread(
    observed_s: np.ndarray,
    modelled_s: np.ndarray,
    route_m: np.ndarray,
    *,
    bands_km: Sequence[float] = DEFAULT_BANDS_KM,
    source: str = "",
) -> SpreadFit:
    """Fit ``mu`` and ``sigma`` of ``ln(observed / modelled)`` per route-length band, with standard errors.

    Parameters
    ----------
    observed_s, modelled_s
        Observed and modelled travel times (s) per trip; trips where either is not positive and finite are left out.
    route_m
        Modelled route length (m) per trip, for the bands.
    bands_km
        Upper band edges (km), :func:`coverkit.distance_bands.band_of`.

    Raises
    ------
    FieldError
        Fewer than 3 usable trips.

    >>> fit = fit_spread(np.array([90.0, 110.0, 100.0]), np.full(3, 100.0), np.full(3, 1000.0))
    >>> round(fit.sigma_all, 4), bool(fit.table["from_all"].iloc[0])  # sd of ln 0.9, ln 1.1, ln 1
    (0.1004, True)
    """
    check_bands(bands_km)
    obs, mod = np.asarray(observed_s, dtype=float), np.asarray(modelled_s, dtype=float)
    route_m = np.asarray(route_m, dtype=float)
    ok = np.isfinite(obs) & np.isfinite(mod) & (obs > 0) & (mod > 0) & np.isfinite(route_m)
    if ok.sum() < 3:
        raise FieldError(f"{int(ok.sum())} usable observed trips; the travel-time spread needs at least 3.")
    r, band = np.log(obs[ok] / mod[ok]), band_of(route_m[ok], bands_km)
    whole = _moments(r)
    rows = []
    uppers = [*map(float, bands_km), np.nan]
    for k, label in enumerate(band_labels(bands_km)):
        sel = r[band == k]
        small = len(sel) < MIN_BAND_TRIPS
        rows.append((label, uppers[k], len(sel), *(whole if small else _moments(sel)), small))
    rows.append(("all", np.nan, len(r), *whole, False))
    table = pd.DataFrame(rows, columns=list(COLUMNS))
    return SpreadFit(tuple(float(b) for b in bands_km), table, source)


def arrival_probability(modelled_s: np.ndarray, within_s: float, mu: np.ndarray, sigma: np.ndarray) -> np.ndarray:
    """Probability that a trip modelled at ``modelled_s`` arrives within ``within_s`` seconds (lognormal CDF).

    ``P = Phi((ln within_s - ln modelled_s - mu) / sigma)``; 0 where the modelled time is infinite (not reached),
    and the deterministic answer (1 or 0) where ``sigma`` is 0.

    >>> float(arrival_probability(np.array([480.0]), 480.0, np.zeros(1), np.full(1, 0.2))[0])  # at the median
    0.5
    """
    m = np.asarray(modelled_s, dtype=float)
    mu, sigma = np.broadcast_to(mu, m.shape), np.broadcast_to(sigma, m.shape)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = (np.log(within_s) - np.log(m) - mu) / sigma
    out = ndtr(z)
    flat = sigma <= 0
    out[flat] = (m * np.exp(mu) <= within_s)[flat]
    out[~np.isfinite(m)] = 0.0
    return out


def spread_csv(fit: SpreadFit) -> str:
    """The fit as CSV text (:data:`COLUMNS`; a first comment line names its source)."""
    head = f"# travel-time spread, ln(observed/modelled) by route length; source: {fit.source or '-'}\n"
    return head + fit.table.to_csv(index=False, float_format="%.6g", lineterminator="\n")


def write_spread(fit: SpreadFit, path: str | Path) -> Path:
    """Write the fit as CSV, atomically (:func:`spread_csv`)."""
    return write_text_atomic(Path(path), spread_csv(fit))


def read_spread(path: str | Path) -> SpreadFit:
    """Read a spread CSV written by :func:`write_spread` (a calibration output), checked.

    Raises
    ------
    InputFileError
        The file is missing or not such a table (one line naming the file and what is wrong).
    """
    path = Path(path)
    try:
        table = pd.read_csv(path, comment="#")
    except (OSError, ValueError, pd.errors.ParserError) as exc:
        raise InputFileError(f"travel-time spread {path}: not readable ({str(exc)[:60]}).") from None
    missing = [c for c in COLUMNS if c not in table.columns]
    if missing or len(table) < 2 or str(table["band"].iloc[-1]) != "all":
        raise InputFileError(
            f"travel-time spread {path}: not a spread table (columns {', '.join(COLUMNS)}, last row 'all'); "
            "give the spread CSV written by coverkit calibrate."
        )
    sigma = pd.to_numeric(table["sigma"], errors="coerce").to_numpy(float)
    mu = pd.to_numeric(table["mu"], errors="coerce").to_numpy(float)
    if not (np.all(np.isfinite(sigma)) and np.all(sigma >= 0) and np.all(np.isfinite(mu))):
        raise InputFileError(f"travel-time spread {path}: mu and sigma must be numbers, sigma at least 0.")
    uppers = pd.to_numeric(table["upper_km"], errors="coerce").to_numpy(float)[:-2]
    try:
        check_bands(uppers)
    except FieldError:
        raise InputFileError(f"travel-time spread {path}: upper_km must increase from above 0.") from None
    table = table[list(COLUMNS)].astype({"from_all": bool})
    return SpreadFit(tuple(float(u) for u in uppers), table, path.name)


def add_arrival_probability(net: RoadNetwork, result: CoverageResult, fit: SpreadFit) -> CoverageResult:
    """Add to ``result.demand`` each point's probability of arriving within the standard's travel time.

    The first-due base's unit is the one sent (dispatch goes by modelled times), so the probability is that of its
    trip: the lognormal CDF (:func:`arrival_probability`) at the standard's travel time, for the modelled first-due
    time and the ``mu`` and ``sigma`` of the band of the first-due route's length (outbound route, also when the
    coverage searched inbound: the length only picks the band). Columns added: ``first_route_m`` (m; NaN where
    not reached) and ``p_in_standard``; the deterministic ``covered`` stays beside it.
    """
    from coverkit.travel.routes import shortest_routes

    d = result.demand
    travel = d["travel_s"].to_numpy(float)
    base_row = {str(b): i for i, b in enumerate(result.bases["id"].astype(str))}
    reached = np.flatnonzero(np.isfinite(travel) & d["first_base"].astype(str).isin(base_row).to_numpy())
    route_m = np.full(len(d), np.nan)
    if len(reached):
        src = np.array([base_row[b] for b in d["first_base"].astype(str).to_numpy()[reached]], dtype=np.int64)
        # bounded just past the farthest first-due time: the outbound routes wanted all end within it (an inbound
        # coverage's outbound routes may be longer: unbounded then)
        limit_s = float(travel[reached].max()) * (1 + 1e-9) + 1.0 if result.direction == "out" else np.inf
        routes = shortest_routes(
            net, result.extra["base_snap"], result.extra["demand_snap"], src, reached, limit_s=limit_s
        )
        route_m[reached] = routes.length_m(net)
    mu, sigma = fit.band_values(route_m)
    d["first_route_m"] = route_m
    d["p_in_standard"] = arrival_probability(travel, result.standard.travel_s, mu, sigma)
    result.extra["spread"] = fit
    return result
