"""Units, stations and dispatch preference lists: several units at a station are several servers."""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from coverkit.errors import ModelError


def expand_station_units(units_per_station: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """Unit ids for stations with several units: unit ``u`` sits at station ``station[u]``.

    Parameters
    ----------
    units_per_station
        Number of units at each station, shape (n_stations,), whole numbers >= 0.

    Returns
    -------
    station : numpy.ndarray
        Station index of each unit, shape (N,), in station order.
    unit_at_station : numpy.ndarray
        1-based number of the unit within its station (1, 2, ... at each station), shape (N,).
    """
    counts = np.asarray(units_per_station)
    if counts.ndim != 1 or counts.size == 0:
        raise ModelError("units_per_station must be a non-empty 1-D list of unit counts, one per station")
    if not np.all(np.isfinite(counts)) or np.any(counts < 0) or np.any(counts != np.round(counts)):
        bad = int(np.flatnonzero(~np.isfinite(counts) | (counts < 0) | (counts != np.round(counts)))[0])
        raise ModelError(
            f"units_per_station row {bad} is {counts[bad]!r}: give a whole number of units >= 0 per station"
        )
    counts = counts.astype(np.int64)
    if counts.sum() == 0:
        raise ModelError("units_per_station adds up to 0 units: give at least one station one unit")
    station = np.repeat(np.arange(counts.size), counts)
    start = np.repeat(np.cumsum(counts) - counts, counts)
    return station, np.arange(station.size) - start + 1


def unit_travel_s(station_travel_s: ArrayLike, units_per_station: ArrayLike) -> np.ndarray:
    """Travel times per unit from travel times per station (each unit starts from its station).

    Parameters
    ----------
    station_travel_s
        Travel time from each station to each demand atom, seconds, shape (n_atoms, n_stations).
    units_per_station
        Number of units at each station, shape (n_stations,).

    Returns
    -------
    numpy.ndarray
        Shape (n_atoms, N), columns in the unit order of :func:`expand_station_units`.
    """
    times = np.asarray(station_travel_s, dtype=float)
    station, _ = expand_station_units(units_per_station)
    if times.ndim != 2 or times.shape[1] != np.asarray(units_per_station).size:
        raise ModelError(
            f"station_travel_s has shape {times.shape}; expected (n_atoms, {np.asarray(units_per_station).size}), "
            "one column per station"
        )
    return times[:, station]


def preference_lists(travel_s: ArrayLike) -> np.ndarray:
    """Dispatch preference lists: for each atom every unit, closest first (ties by unit id).

    Parameters
    ----------
    travel_s
        Travel time from each unit to each atom, seconds, shape (n_atoms, N); unreachable may be ``inf``.

    Returns
    -------
    numpy.ndarray
        int64, shape (n_atoms, N); row a lists unit ids 0..N-1 in order of dispatch.
    """
    times = np.asarray(travel_s, dtype=float)
    if times.ndim != 2 or times.shape[1] == 0:
        raise ModelError(f"travel_s must be a 2-D (n_atoms, n_units) table, got shape {times.shape}")
    if np.isnan(times).any():
        row = int(np.argwhere(np.isnan(times))[0, 0])
        raise ModelError(f"travel_s row {row} has a missing (NaN) time: use inf for an unreachable unit")
    return np.argsort(times, axis=1, kind="stable").astype(np.int64)
