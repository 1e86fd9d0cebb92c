"""The distance-time curve of an emergency vehicle: accelerate to a cruising speed, cruise, decelerate.

Source: P. Kolesar, W. Walker, J. Hausner (1975), "Determining the relation between fire engine travel times and
travel distances in New York City", Operations Research 23(4). :func:`kolesar_time_s` evaluates the curve and
:func:`fit_kolesar` fits its two parameters to observed trips; :mod:`coverkit.calibrate` reports the fit next to the
per-class speed calibration (and re-exports these names).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from coverkit.errors import ModelError


def kolesar_time_s(distance_m: np.ndarray, accel_mps2: float, cruise_mps: float) -> np.ndarray:
    """Travel time (s) for a distance (m) under constant acceleration to a cruising speed.

    ``T = 2 sqrt(D / a)`` for ``D`` below the critical distance ``d_c = v^2 / a``, else ``T = v / a + D / v``
    (accelerate at ``a`` to ``v``, cruise, decelerate at ``a``); the two pieces meet at ``d_c``.

    Source: P. Kolesar, W. Walker, J. Hausner (1975), "Determining the relation between fire engine travel times and
    travel distances in New York City", Operations Research 23(4).

    Parameters
    ----------
    distance_m
        Travel distance (m).
    accel_mps2
        Acceleration ``a`` (m/s^2).
    cruise_mps
        Cruising speed ``v`` (m/s).
    """
    d = np.asarray(distance_m, dtype=float)
    a, v = float(accel_mps2), float(cruise_mps)
    return np.where(d < v * v / a, 2.0 * np.sqrt(np.maximum(d, 0.0) / a), v / a + d / v)


@dataclass(frozen=True)
class KolesarFit:
    """Fitted accelerate-to-cruise curve (see :func:`kolesar_time_s`).

    Attributes
    ----------
    accel_mps2
        Acceleration ``a`` (m/s^2).
    cruise_mps
        Cruising speed ``v`` (m/s); ``cruise_kph`` the same in km/h.
    critical_m
        Critical distance ``v^2 / a`` (m) below which the vehicle never reaches cruising speed.
    rmse_s
        Root mean square residual (s).
    n
        Observations used.
    """

    accel_mps2: float
    cruise_mps: float
    critical_m: float
    rmse_s: float
    n: int

    @property
    def cruise_kph(self) -> float:
        """Cruising speed (km/h)."""
        return self.cruise_mps * 3.6


def fit_kolesar(distance_m: np.ndarray, time_s: np.ndarray, loss: str = "linear") -> KolesarFit:
    """Fit ``a`` and ``v`` of the Kolesar-Walker-Hausner (1975) curve by least squares on time (s).

    The fit runs on ``log a, log v`` (both stay positive) from the best of a small grid of starting points, with the
    analytic Jacobian: below ``d_c`` ``dT/dlog a = -T/2``, ``dT/dlog v = 0``; above, ``dT/dlog a = -v/a`` and
    ``dT/dlog v = v/a - D/v``.

    Parameters
    ----------
    distance_m, time_s
        Route distance (m) and observed time (s) per trip; rows with a non-positive or non-finite value are skipped.
    loss
        ``scipy.optimize.least_squares`` loss (``"linear"`` is ordinary least squares).

    Raises
    ------
    ModelError
        Fewer than 3 usable trips.
    """
    d = np.asarray(distance_m, dtype=float)
    t = np.asarray(time_s, dtype=float)
    ok = np.isfinite(d) & np.isfinite(t) & (d > 0) & (t > 0)
    d, t = d[ok], t[ok]
    if len(d) < 3:
        raise ModelError(
            f"the distance-time curve needs at least 3 trips with a route length and a time; got {len(d)}."
        )

    def resid(x: np.ndarray) -> np.ndarray:
        return kolesar_time_s(d, math.exp(x[0]), math.exp(x[1])) - t

    def jac(x: np.ndarray) -> np.ndarray:
        a, v = math.exp(x[0]), math.exp(x[1])
        below = d < v * v / a
        j = np.empty((len(d), 2))
        j[:, 0] = np.where(below, -np.sqrt(d / a), -v / a)
        j[:, 1] = np.where(below, 0.0, v / a - d / v)
        return j

    starts = [(math.log(a), math.log(v)) for a in (0.1, 0.3, 1.0, 3.0) for v in (5.0, 10.0, 20.0, 35.0)]
    x0 = min(starts, key=lambda x: float(np.sum(resid(np.asarray(x)) ** 2)))
    sol = least_squares(resid, np.asarray(x0), jac=jac, loss=loss, method="trf", x_scale=1.0)
    a, v = math.exp(sol.x[0]), math.exp(sol.x[1])
    r = resid(sol.x)
    return KolesarFit(accel_mps2=a, cruise_mps=v, critical_m=v * v / a, rmse_s=float(np.sqrt(np.mean(r**2))), n=len(d))


__all__ = ["KolesarFit", "fit_kolesar", "kolesar_time_s"]
