"""What the caller sees of a solved hypercube model: mean travel time and availability-adjusted coverage."""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from coverkit.errors import ModelError
from coverkit.queueing._checks import MIN_PER_H, S_PER_H, check_nonneg
from coverkit.queueing.hypercube import HypercubeResult


def _check_times(result: HypercubeResult, travel_s: ArrayLike) -> np.ndarray:
    times = np.asarray(travel_s, dtype=float)
    shape = result.dispatch_fraction.shape
    if times.shape != shape:
        raise ModelError(f"travel_s has shape {times.shape}; expected {shape} (n_atoms, N) as in the model")
    if np.isnan(times).any() or (times < 0).any():
        row = int(np.argwhere(np.isnan(times) | (times < 0))[0, 0])
        raise ModelError(f"travel_s row {row} has a missing or negative time: give seconds >= 0 (inf if unreachable)")
    return times


def expected_travel_s(result: HypercubeResult, travel_s: ArrayLike) -> np.ndarray:
    """Mean travel time per atom over the calls served, including backup responses when closer units are busy.

    sum_n f[a, n] t[a, n] / (1 - loss[a]), with f the dispatch fractions (queued calls included, sent by the unit
    that frees first, travelling from its station).

    Parameters
    ----------
    result
        A solved model.
    travel_s
        Travel time from each unit to each atom, seconds, shape (n_atoms, N) (same unit order as the model).

    Returns
    -------
    numpy.ndarray
        Seconds, shape (n_atoms,); ``inf`` if a unit that may answer cannot reach the atom.

    References
    ----------
    Larson (1974); Larson & Odoni (1981), §5.5 (mean travel time per atom in the hypercube model).
    """
    times = _check_times(result, travel_s)
    f = result.dispatch_fraction
    served = 1.0 - result.loss_probability
    with np.errstate(invalid="ignore"):
        contrib = np.where(f > 0, f * times, 0.0)
    return contrib.sum(axis=1) / np.where(served > 0, served, 1.0)


def availability_coverage(
    result: HypercubeResult, travel_s: ArrayLike, standard_s: float, *, count_wait: bool = True
) -> np.ndarray:
    """Share of each atom's calls reached within the standard by whichever unit actually responds.

    A call dispatched at once to unit n counts if t[a, n] <= standard. A queued call (infinite queue) waits W, which
    in M/M/N given a wait is exponential with rate N mu - lambda; it counts with probability
    P(W <= standard - t[a, n]) for each unit n (each 1 / N likely), or, with ``count_wait=False``, if
    t[a, n] <= standard (travel only). Lost calls never count.

    Parameters
    ----------
    result
        A solved model.
    travel_s
        Travel time from each unit to each atom, seconds, shape (n_atoms, N).
    standard_s
        Travel time standard, seconds.
    count_wait
        Whether a queued call's wait counts against the standard.

    Returns
    -------
    numpy.ndarray
        Shape (n_atoms,), in [0, 1]. The call-weighted mean is ``np.average(cov, weights=result.calls_per_h)``.

    References
    ----------
    Larson & Odoni (1981), §5.5 (fraction of responses within a time); the M/M/N waiting time is from Erlang (1917).
    """
    times = _check_times(result, travel_s)
    standard = check_nonneg(standard_s, "standard_s")
    within = times <= standard
    reached = (result.immediate_fraction * within).sum(axis=1)
    if result.queue == "infinite":
        n = result.n_units
        p_wait = result.wait_probability[:, None]
        if count_wait:
            mu_per_s = MIN_PER_H / result.mean_service_min / S_PER_H
            drain_per_s = n * mu_per_s - float(result.calls_per_h.sum()) / S_PER_H
            slack = np.where(within, standard - np.where(within, times, 0.0), 0.0)
            ok = np.where(within, -np.expm1(-drain_per_s * slack), 0.0)
        else:
            ok = within.astype(float)
        reached += (p_wait / n * ok).sum(axis=1)
    return reached
