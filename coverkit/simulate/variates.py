"""Random quantities of each call: busy time, turnout and the travel-time multiplier.

Each comes from its own child stream of the replication's seed, drawn per call before any unit is touched, so two
systems run on the same replication see the same calls with the same draws (common random numbers; A. M. Law,
*Simulation Modeling and Analysis*, 5th ed., 2015, §11.2).

Lognormal with mean ``m`` and coefficient of variation ``v``: ``sigma^2 = ln(1 + v^2)``, ``mu = ln m - sigma^2 / 2``
(the lognormal's moments: mean ``exp(mu + sigma^2/2)``, variance ``(exp(sigma^2) - 1) mean^2``).
"""

from __future__ import annotations

import numpy as np

from coverkit.errors import PARAM, ModelError


def lognormal(rng: np.random.Generator, mean: float, cv: float, n: int) -> np.ndarray:
    """``n`` lognormal draws of mean ``mean`` and coefficient of variation ``cv`` (``cv = 0``: the mean itself).

    >>> x = lognormal(np.random.default_rng(3), 10.0, 0.5, 200_000)
    >>> bool(abs(x.mean() - 10) < 0.05), bool(abs(x.std() / x.mean() - 0.5) < 0.01)
    (True, True)
    """
    if cv == 0:
        return np.full(n, float(mean))
    sigma2 = np.log1p(cv * cv)
    return rng.lognormal(np.log(mean) - sigma2 / 2.0, np.sqrt(sigma2), n)


def check_spread(value: float, param: str, what: str) -> None:
    """A coefficient of variation must be a number >= 0."""
    if not (value >= 0):
        raise ModelError(
            f"{PARAM}, the {what} spread (coefficient of variation), must be >= 0, got {value}.", param=param
        )


def service_s(rng, n: int, *, mean_min: float, dist: str, cv: float, per_point_s=None, point=None) -> np.ndarray:
    """Busy time per call (s): the incidents' own values when given, else exponential or lognormal draws."""
    if per_point_s is not None:
        return np.asarray(per_point_s, dtype=float)[point]
    if not (mean_min > 0):
        raise ModelError(f"{PARAM}, the mean service time, must be > 0 minutes, got {mean_min}.", param="service_min")
    if dist == "exponential":
        return rng.exponential(mean_min * 60.0, n)
    check_spread(cv, "service_cv", "service-time")
    return lognormal(rng, mean_min * 60.0, cv, n)


def call_draws(seed: np.random.SeedSequence, n: int, point: np.ndarray, cfg, turnout_s: float, per_point_s=None):
    """Service (s), turnout (s) and travel multiplier of ``n`` calls from the replication's ``seed``."""
    s_service, s_turnout, s_travel = (np.random.default_rng(s) for s in seed.spawn(3))
    service = service_s(
        s_service,
        n,
        mean_min=cfg.service_min,
        dist=cfg.service_dist,
        cv=cfg.service_cv,
        per_point_s=per_point_s,
        point=point,
    )
    turnout = lognormal(s_turnout, turnout_s, cfg.turnout_cv, n) if turnout_s > 0 else np.zeros(n)
    mult = lognormal(s_travel, 1.0, cfg.travel_cv, n)
    return service, turnout, mult
