"""Busy units: availability-adjusted coverage from the hypercube model on the travel engine's times.

Glue between :mod:`coverkit.coverage` (travel tables) and :mod:`coverkit.queueing` (the models). The call rate
comes from the incidents' timestamps (calls over the span of the record) or is given; each demand point's share of
the calls is its share of the demand weight.
"""

from __future__ import annotations

from dataclasses import dataclass, fields
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd

from coverkit import settings
from coverkit.coverage import Standard, travel_table, weighted_fractile
from coverkit.errors import PARAM, FieldError, ModelError
from coverkit.network.model import RoadNetwork
from coverkit.queueing import (
    availability_coverage,
    erlang_b,
    erlang_c,
    expand_station_units,
    expected_travel_s,
    hypercube,
    offered_load,
    preference_lists,
    unit_travel_s,
)


def call_rate_per_h(
    demand: gpd.GeoDataFrame,
    time_field: str = settings.TIME_FIELD,
    *,
    start: str | None = None,
    end: str | None = None,
) -> float:
    """Calls per hour from incident timestamps: (number of calls) / (span of the record in hours).

    The span is the time window the calls were selected from (``start`` to ``end``, ISO 8601) where it is given,
    else from the first to the last timestamp; for a record of one calendar year this is close to 8,760 h. A window
    bound left open falls back to the first or last timestamp. Raises :class:`FieldError` when the timestamps are
    missing or the span is less than one day.
    """
    if time_field not in demand.columns:
        raise FieldError(
            f"demand has no time field '{time_field}' to derive the call rate; give {PARAM}, the call rate "
            "(calls per hour), or name the time field.",
            param="calls_per_h",
        )
    stamps = pd.to_datetime(demand[time_field], errors="coerce", format="ISO8601")
    if stamps.isna().any():
        raise FieldError(
            f"field '{time_field}' has values that are not ISO 8601 times; fix them or give {PARAM}, the call "
            "rate (calls per hour).",
            param="calls_per_h",
        )
    first = pd.Timestamp(start) if start else stamps.min()
    last = pd.Timestamp(end) if end else stamps.max()
    span_h = (last - first).total_seconds() / 3600.0
    if not span_h >= 24:
        raise FieldError(
            f"the incidents span only {span_h:.1f} h; give {PARAM}, the call rate (calls per hour), for so short a "
            "record.",
            param="calls_per_h",
        )
    return float(demand["weight"].sum()) / span_h


@dataclass
class AvailabilityRun:
    """Per unit and per demand point results of the hypercube model."""

    units: pd.DataFrame  # base_id, unit, workload
    demand: gpd.GeoDataFrame  # id, weight, drive_time_covered, availability_covered, expected_travel_s, ...
    summary: dict
    result: object  # HypercubeResult


@dataclass(frozen=True)
class AvailabilityOptions:
    """Options of a hypercube run beyond its inputs: the one home of their names, defaults and checks, for
    :func:`availability` and :func:`coverkit.availability_types.availability_by_type` (both take them as keywords).

    Attributes
    ----------
    calls_per_h
        Total call rate (calls per hour); None or 0: counted from the incidents' timestamps (:func:`call_rate_per_h`).
    queue
        ``"infinite"`` (calls wait) or ``"zero"`` (calls that find every unit busy are lost, e.g. to mutual aid).
    method
        ``"exact"`` (2^N states), ``"approx"`` (Larson 1975) or ``"auto"`` (exact for small N).
    time_field
        Demand field holding the incidents' ISO 8601 times (for the counted call rate).
    max_snap_m
        Farthest a base or demand point may lie from the road network (m).
    window
        The (start, end) the incidents were selected from (ISO 8601, either open): the call rate is counted over it.

    Raises
    ------
    ModelError
        ``calls_per_h`` is negative or not a number.
    """

    calls_per_h: float | None = None
    queue: str = settings.QUEUE
    method: str = settings.AVAILABILITY_METHOD
    time_field: str = settings.TIME_FIELD
    max_snap_m: float = settings.SNAP_M
    window: tuple[str | None, str | None] = (None, None)

    def __post_init__(self) -> None:
        if self.calls_per_h is not None and not self.calls_per_h >= 0:  # 0 or None: counted from the timestamps
            raise ModelError(
                f"{PARAM}, the call rate, must be a number of calls per hour >= 0, got {self.calls_per_h}.",
                param="calls_per_h",
            )

    @classmethod
    def of(cls, caller: str, options: dict[str, Any]) -> AvailabilityOptions:
        """The options given to ``caller`` as keywords; a ``TypeError`` naming the first unknown one."""
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(options) - known)
        if unknown:
            raise TypeError(
                f"{caller}() got an unexpected keyword argument '{unknown[0]}' (options: {', '.join(sorted(known))})"
            )
        return cls(**options)

    def rate_per_h(self, demand: gpd.GeoDataFrame) -> float:
        """The total call rate (calls per hour): the one given, else counted from ``demand``'s timestamps."""
        if self.calls_per_h:
            return float(self.calls_per_h)
        return call_rate_per_h(demand, self.time_field, start=self.window[0], end=self.window[1])


def availability(
    net: RoadNetwork,
    bases: gpd.GeoDataFrame,
    demand: gpd.GeoDataFrame,
    standard: Standard,
    mean_service_min: float,
    **options: Any,
) -> AvailabilityRun:
    """Hypercube model with closest-available dispatch on the road network's travel times.

    Parameters
    ----------
    bases
        Bases with an optional ``units`` column (units per station, default 1).
    demand
        Demand points (incidents, or population with ``calls_per_h`` given); weight sets each point's call share.
    standard
        Travel standard used for "reached within the standard".
    mean_service_min
        Mean time a unit is busy per call (minutes): travel, on scene, transport, return.
    **options
        The fields of :class:`AvailabilityOptions` (call rate, queue, method, time field, snap distance, window).
    """
    if not mean_service_min > 0:
        raise ModelError(
            f"{PARAM}, the mean service time, must be positive minutes, got {mean_service_min}.",
            param="mean_service_min",
        )
    opts = AvailabilityOptions.of("availability", options)
    queue = opts.queue
    units_per_station = (
        pd.to_numeric(bases["units"], errors="coerce").fillna(1).astype(int).to_numpy()
        if "units" in bases.columns
        else np.ones(len(bases), dtype=int)
    )
    if units_per_station.sum() == 0:
        raise ModelError("no units: every base has units = 0; give at least one unit.")
    rate = opts.rate_per_h(demand)
    # no horizon: a backup unit may come from far away, and its full travel time counts
    table = travel_table(net, bases, demand, np.inf, opts.max_snap_m)
    dense = np.full((len(bases), len(demand)), np.inf)
    coo = table.times.tocoo()
    dense[coo.row, coo.col] = coo.data
    station_t = dense.T  # (n_atoms, n_stations)
    w_all = demand["weight"].to_numpy(dtype=float)
    # demand off the network, or on a piece no base reaches, cannot be served: it stays uncovered and out of the model
    ok = np.isfinite(station_t).all(axis=1)
    if not ok.any():
        raise ModelError("no demand point is reachable from every base; check the bases and the demand area.")
    unit_t = unit_travel_s(station_t[ok], units_per_station)
    pref = preference_lists(unit_t)
    w = w_all[ok]
    # every call still occupies a unit: the calls of unserved points are spread over the served ones
    atom_rate = rate * w / w.sum()
    res = hypercube(atom_rate, pref, mean_service_min, queue=queue, method=opts.method)
    cov = np.zeros(len(demand))
    cov[ok] = availability_coverage(res, unit_t, standard.travel_s)
    exp_t = np.full(len(demand), np.inf)
    exp_t[ok] = expected_travel_s(res, unit_t)
    first_share = np.zeros(len(demand))
    first_share[ok] = res.dispatch_fraction[np.arange(len(pref)), pref[:, 0]]
    station_of_unit, unit_no = expand_station_units(units_per_station)
    base_ids = bases["id"].astype(str).to_numpy()
    units = pd.DataFrame(
        {
            "base_id": base_ids[station_of_unit],
            "unit": [f"{base_ids[s]}-{n}" for s, n in zip(station_of_unit, unit_no, strict=True)],
            "workload": res.workload,
            "calls_per_h": (res.dispatch_fraction * atom_rate[:, None]).sum(axis=0),
        }
    )
    nearest = np.min(station_t, axis=1)
    drive_cov = nearest <= standard.travel_s
    out = demand[["id", "weight", "geometry"]].copy()
    out["travel_s"] = nearest
    out["drive_time_covered"] = drive_cov
    out["availability_covered"] = cov
    out["expected_travel_s"] = exp_t
    out["first_unit_share"] = first_share
    wait = np.zeros(len(demand))
    wait[ok] = res.wait_probability
    loss = np.zeros(len(demand))
    loss[ok] = res.loss_probability
    out["wait_probability"] = wait
    out["loss_probability"] = loss
    w = w_all
    load = offered_load(rate, mean_service_min)
    n_units = int(units_per_station.sum())
    summary = {
        "calls_per_h": rate,
        "mean_service_min": mean_service_min,
        "offered_load_erlang": load,
        "units": n_units,
        "mean_workload": float(res.workload.mean()),
        "method": res.method,
        "queue": queue,
        "all_busy_probability": erlang_b(load, n_units) if queue == "zero" else erlang_c(load, n_units),
        "drive_time_coverage": float(np.average(drive_cov, weights=w)),
        "availability_coverage": float(np.average(cov, weights=w)),
        "drive_time_fractile_s": weighted_fractile(nearest + standard.turnout_s, w, standard.fractile),
        "expected_travel_s": float(np.average(exp_t[ok], weights=w[ok])),
        "unserved_points": int((~ok).sum()),
        "standard": standard.describe(),
    }
    return AvailabilityRun(units, out, summary, res)
