"""The fleet and its travel times: units at bases, and base-to-point and point-to-base times from the engine.

Both tables come from one sparse table each (:func:`coverkit.coverage.travel_table`, out and in), with no horizon:
a unit from far away still answers when it is the closest free one. A demand point that some base cannot reach on
the network (or that lies off the network) is left out of the simulation and counted.
"""

from __future__ import annotations

from dataclasses import dataclass

import geopandas as gpd
import numpy as np
import pandas as pd

from coverkit.coverage import travel_table
from coverkit.errors import PARAM, ModelError
from coverkit.network.model import RoadNetwork
from coverkit.queueing import expand_station_units


@dataclass(frozen=True)
class Fleet:
    """Units and their travel tables.

    Attributes
    ----------
    unit_station
        Station (base row) of each unit, shape (n_units,).
    unit_id, base_id
        Labels of the units (``<base>-<n>``) and the bases (station order).
    out_s
        Travel time from each base to each demand point (s), shape (n_bases, n_points); ``inf`` where unreached.
    back_s
        Travel time from each demand point back to each base (s), same shape.
    move_s
        Travel time from base to base (s), shape (n_bases, n_bases): the moves of cover rules.
    """

    unit_station: np.ndarray
    unit_id: tuple[str, ...]
    base_id: tuple[str, ...]
    out_s: np.ndarray
    back_s: np.ndarray
    move_s: np.ndarray | None = None

    @property
    def served(self) -> np.ndarray:
        """Points every base reaches both ways: the points the simulation can serve."""
        return np.isfinite(self.out_s).all(axis=0) & np.isfinite(self.back_s).all(axis=0)

    @property
    def first_due(self) -> np.ndarray:
        """The first-due station of each point (smallest base-to-point time; ties to the lower row)."""
        return np.argmin(self.out_s, axis=0)


def units_per_station(bases: pd.DataFrame) -> np.ndarray:
    """Units at each base: its ``units`` column (missing values 1), else 1 each."""
    if "units" not in bases.columns:
        return np.ones(len(bases), dtype=np.int64)
    return pd.to_numeric(bases["units"], errors="coerce").fillna(1).astype(np.int64).to_numpy()


def fleet_from_tables(base_ids, units: np.ndarray, out_s: np.ndarray, back_s: np.ndarray, move_s=None) -> Fleet:
    """A fleet from given tables (s, shape (n_bases, n_points); ``move_s`` base to base, default 0); raises when
    there is no unit."""
    units = np.asarray(units, dtype=np.int64)
    if units.sum() < 1:
        raise ModelError("no units: every base has units = 0 (or the scenario removes them all); keep at least one.")
    station, number = expand_station_units(units)
    ids = tuple(str(b) for b in base_ids)
    unit_id = tuple(f"{ids[s]}-{n}" for s, n in zip(station, number, strict=True))
    moves = np.zeros((len(ids), len(ids))) if move_s is None else np.asarray(move_s, float)
    return Fleet(station.astype(np.int64), unit_id, ids, np.asarray(out_s, float), np.asarray(back_s, float), moves)


def _dense(table, n_bases: int, n_points: int) -> np.ndarray:
    dense = np.full((n_bases, n_points), np.inf)
    coo = table.times.tocoo()
    dense[coo.row, coo.col] = coo.data
    return dense


def fleet_on_network(net: RoadNetwork, bases: gpd.GeoDataFrame, points: gpd.GeoDataFrame, max_snap_m: float) -> Fleet:
    """The fleet of ``bases`` with the engine's travel times to and from ``points``."""
    units = units_per_station(bases)
    if units.sum() < 1:
        fleet_from_tables(bases["id"], units, np.zeros((len(bases), 0)), np.zeros((len(bases), 0)))
    out = travel_table(net, bases, points, np.inf, max_snap_m, direction="out", what="call points")
    back = travel_table(net, bases, points, np.inf, max_snap_m, direction="in", what="call points")
    between = travel_table(net, bases, bases, np.inf, max_snap_m, what="bases")
    n, b = len(points), len(bases)
    move = _dense(between, b, b)
    np.fill_diagonal(move, 0.0)
    return fleet_from_tables(bases["id"], units, _dense(out, b, n), _dense(back, b, n), move)


def cover_rules(rules, base_ids) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Cover rules ``"EMPTY:FROM:MINUTES"`` as the event loop's arrays (station rows and seconds).

    >>> [a.tolist() for a in cover_rules(["S3:S1:10"], ["S1", "S2", "S3"])]
    [[2], [0], [600.0]]
    """
    row = {str(b): i for i, b in enumerate(base_ids)}
    empty, send, after = [], [], []
    for rule in rules:
        parts = str(rule).split(":")
        try:
            e, f, minutes = row[parts[0].strip()], row[parts[1].strip()], float(parts[2])
        except (IndexError, KeyError, ValueError):
            raise ModelError(
                f"{PARAM}: '{rule}' is not EMPTY:FROM:MINUTES with two base ids ({', '.join(row)}) and minutes, "
                "e.g. S3:S1:10.", param="cover") from None  # fmt: skip
        if not (minutes > 0) or e == f:
            raise ModelError(f"{PARAM}: '{rule}' needs minutes > 0 and two different bases.", param="cover")
        empty.append(e), send.append(f), after.append(minutes * 60.0)
    return np.array(empty, np.int64), np.array(send, np.int64), np.array(after, float)
