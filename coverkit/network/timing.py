"""Edge travel times from a speed profile: the one formula the network build and every retiming use.

``speed_kph = min((posted or class default) x factor, cap)`` (:meth:`coverkit.network.profile.Profile.effective_kph`),
``travel_s = length_m / (speed_kph / 3.6) x f + delay_s`` with ``f`` the profile's against-one-way factor on
against-one-way edges (1 elsewhere) and ``delay_s`` the profile's signal delay on edges ending at a signal node
(3.6 = km/h per m/s). One expression in one order, so a rebuilt and a retimed network have bit-identical times.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from coverkit.network.profile import Profile


@dataclass(frozen=True)
class EdgeTimes:
    """Per-edge results of :func:`edge_times` (arrays of one length)."""

    speed_kph: np.ndarray
    delay_s: np.ndarray
    travel_s: np.ndarray


def edge_times(
    profile: Profile,
    *,
    road_class: np.ndarray,
    posted_kph: np.ndarray,
    length_m: np.ndarray,
    against_oneway: np.ndarray,
    signal_at_end: np.ndarray,
) -> EdgeTimes:
    """Speed (km/h), signal delay (s) and travel time (s) of each directed edge under ``profile``.

    Parameters
    ----------
    profile
        The speed profile (class defaults, factors, caps, signal delay, against-one-way factor).
    road_class
        Road class per edge (every class must have a table in the profile).
    posted_kph
        Posted speed per edge, km/h; NaN where none is known (the class default is used).
    length_m
        Edge length, m.
    against_oneway
        True on edges that travel against a one-way street (timed with ``profile.against_oneway_factor``).
    signal_at_end
        True on edges whose end node is a traffic signal (``profile.signal_delay_s`` added).

    Returns
    -------
    EdgeTimes
    """
    speed_kph = profile.effective_kph(np.asarray(road_class, dtype=object), np.asarray(posted_kph, dtype=float))
    factor = np.where(np.asarray(against_oneway, dtype=bool), profile.against_oneway_factor, 1.0)
    delay_s = np.where(np.asarray(signal_at_end, dtype=bool), profile.signal_delay_s, 0.0)
    travel_s = np.asarray(length_m, dtype=float) / (speed_kph / 3.6) * factor + delay_s
    return EdgeTimes(speed_kph, delay_s, travel_s)


def scaled_running_s(travel_s: np.ndarray, delay_s: np.ndarray, factor: np.ndarray) -> np.ndarray:
    """Edge travel times (s) with the running part's speed multiplied by ``factor`` (delays kept).

    ``(travel_s - delay_s) / factor + delay_s``: the running time is ``length / speed``, so a speed ``factor``
    times higher takes ``1 / factor`` of it; ``inf`` (a closed edge) stays ``inf``. Used by the time-of-day
    retiming (:mod:`coverkit.network.hour_bands`).

    >>> scaled_running_s(np.array([70.0, np.inf]), np.array([10.0, 0.0]), np.array([0.5, 0.5])).tolist()
    [130.0, inf]
    """
    travel_s = np.asarray(travel_s, dtype=float)
    with np.errstate(invalid="ignore"):
        out = (travel_s - delay_s) / factor + delay_s
    return np.where(np.isfinite(travel_s), out, np.inf)
