"""The travel-time multiplier's spread from observed responses: how far real trips scatter around the model's.

For every observed trip (``[calibration]``'s file: base, incident position, observed seconds) the model's time is
the engine's base-to-point time on the study's network. The residual is ``ln(observed / modelled)``; its sample
standard deviation ``sigma`` is the spread of a lognormal multiplier, whose coefficient of variation is
``sqrt(exp(sigma^2) - 1)`` (lognormal moments). Only the spread is taken: the multiplier keeps mean 1, since a
systematic bias is the calibration's job (fitted speed factors), not noise.

The fit itself (``mu`` and ``sigma`` of the residuals per route-length band, with standard errors) is
:func:`coverkit.spread.fit_spread`, the one home shared with the coverage probabilities; the simulation draws one
multiplier per trip from the spread of all trips (:func:`travel_cv_from_spread`).
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import shapely

from coverkit.coverage import travel_table
from coverkit.errors import FieldError
from coverkit.network.model import RoadNetwork
from coverkit.spread import SpreadFit, fit_spread


def lognormal_cv(log_residuals: np.ndarray) -> float:
    """Coefficient of variation of the lognormal whose log has the residuals' sample standard deviation.

    >>> round(lognormal_cv(np.array([-0.1, 0.1])), 4)  # sigma = 0.1414: sqrt(exp(0.02) - 1)
    0.1421
    """
    return cv_of_sigma(float(np.std(log_residuals, ddof=1)))


def cv_of_sigma(sigma: float) -> float:
    """Coefficient of variation ``sqrt(exp(sigma^2) - 1)`` of a lognormal with log-scale spread ``sigma``
    (lognormal moments).

    >>> round(cv_of_sigma(0.5), 4)
    0.5329
    """
    return float(np.sqrt(np.expm1(sigma * sigma)))


def travel_cv_from_spread(fit: SpreadFit) -> float:
    """The multiplier's coefficient of variation from a calibration's spread fit (its all-trips ``sigma``)."""
    return cv_of_sigma(fit.sigma_all)


def travel_cv_from_observed(net: RoadNetwork, bases: gpd.GeoDataFrame, observed, max_snap_m: float) -> float:
    """The multiplier's coefficient of variation from observed trips (``read_observed``'s table)."""
    pts = gpd.GeoDataFrame(
        {"id": np.arange(len(observed))},
        geometry=shapely.points(observed["lon"].to_numpy(float), observed["lat"].to_numpy(float)),
        crs="EPSG:4326",
    ).to_crs(net.crs)
    times = travel_table(net, bases, pts, np.inf, max_snap_m, what="observed trips").times.toarray()
    row = {str(b): i for i, b in enumerate(bases["id"].astype(str))}
    modelled = times[[row[b] for b in observed["base_id"]], np.arange(len(observed))]
    obs = observed["observed_s"].to_numpy(float)
    ok = (modelled > 0) & (obs > 0)
    if ok.sum() < 3:
        raise FieldError("fewer than 3 observed trips match a modelled route; give the travel spread instead.")
    # no route lengths here: every trip in the first band; only the all-trips sigma is used
    return travel_cv_from_spread(fit_spread(obs[ok], modelled[ok], np.zeros(int(ok.sum()))))
