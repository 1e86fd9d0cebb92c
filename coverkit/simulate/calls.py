"""The calls of a simulation: the incidents replayed as they happened, or drawn from a Poisson process.

Replay keeps each incident's time, place and priority. Synthetic calls are a Poisson process: either a rate given
in calls per hour, spread over the demand points by weight (homogeneous in time), or the incidents' own rate by
hour of week (calls in that hour of the week over the number of weeks the record spans), each drawn call taking
the place and priority of an incident drawn at random from the record. Poisson arrivals: the number of calls in an
interval of length ``h`` at rate ``r`` is Poisson(``r h``) and, given the number, their times are independent and
uniform on the interval (standard property of the Poisson process, e.g. S. M. Ross, *Introduction to Probability
Models*, ch. 5).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from coverkit.errors import PARAM, FieldError

S_PER_H = 3600.0
H_PER_WEEK = 168


@dataclass(frozen=True)
class CallSource:
    """Where a replication's calls come from (fixed across replications; the draws use the replication's seed).

    Attributes
    ----------
    mode
        ``"replay"``, ``"rate"`` (a given rate over the points by weight) or ``"weekly"`` (the incidents' rate by
        hour of week).
    arrival_s, point, priority
        Replay: the incidents' times (s from ``start``), point indices and priority codes. Weekly: the incidents
        to draw place and priority from (times unused except their hour of week).
    weights
        Rate mode: each point's share of the calls (sums to 1).
    span_s
        The simulated span (s).
    calls_per_h
        Rate mode: the total rate; weekly: per hour of week (168 values, hour 0 = Monday 00:00).
    service_s
        Busy time per demand point (s) from the incidents' field, or None (drawn from the stated distribution).
    start
        The time the simulated clock starts (hour of day of the outputs), None for a clock that starts at 00:00.
    priority_labels
        The priority value of each code, most urgent first.
    """

    mode: str
    arrival_s: np.ndarray
    point: np.ndarray
    priority: np.ndarray
    weights: np.ndarray | None
    span_s: float
    calls_per_h: np.ndarray
    service_s: np.ndarray | None
    start: pd.Timestamp | None
    priority_labels: tuple[str, ...]


def _stamps(demand: pd.DataFrame, time_field: str) -> pd.Series:
    if time_field not in demand.columns:
        raise FieldError(
            f"the incidents have no time field '{time_field}' to replay; name it, or draw synthetic calls "
            f"({PARAM} synthetic with a call rate).",
            param="calls",
        )
    stamps = pd.to_datetime(demand[time_field], errors="coerce", format="ISO8601")
    bad = np.flatnonzero(stamps.isna().to_numpy())
    if bad.size:
        raise FieldError(
            f"field '{time_field}' row {int(bad[0]) + 1}: '{demand[time_field].iloc[bad[0]]}' is not an ISO 8601 "
            "time; fix it or leave the row out.",
        )
    return stamps


def priority_codes(demand: pd.DataFrame, field: str) -> tuple[np.ndarray, tuple[str, ...]]:
    """Priority codes 0.. (most urgent first: the smallest value) and their labels."""
    if field not in demand.columns:
        return np.zeros(len(demand), np.int64), ("all",)
    values = demand[field]
    numeric = pd.to_numeric(values, errors="coerce")
    key = numeric if numeric.notna().all() else values.astype(str)
    labels, codes = np.unique(key.to_numpy(), return_inverse=True)
    return codes.astype(np.int64), tuple(f"{v:g}" if isinstance(v, float) else str(v) for v in labels)


def service_seconds(demand: pd.DataFrame, field: str | None) -> np.ndarray | None:
    """Busy minutes per incident from ``field``, in seconds; negative or missing values are an error."""
    if field is None:
        return None
    if field not in demand.columns:
        raise FieldError(
            f"the incidents have no service-time field '{field}'; name an existing one.", param="service_field"
        )
    minutes = pd.to_numeric(demand[field], errors="coerce").to_numpy(dtype=float)
    bad = np.flatnonzero(~(minutes >= 0))
    if bad.size:
        raise FieldError(
            f"service-time field '{field}' row {int(bad[0]) + 1}: '{demand[field].iloc[bad[0]]}' is not minutes "
            ">= 0; fix the value or leave the row out.",
        )
    return minutes * 60.0


def replay_source(demand: pd.DataFrame, time_field: str, priority_field: str, service_field: str | None) -> CallSource:
    """The incidents as they happened: one call per row, the clock starting at the first call's day.

    >>> df = pd.DataFrame({"received_at": ["2026-01-01T00:10:00", "2026-01-01T00:00:30"], "priority": [2, 1]})
    >>> src = replay_source(df, "received_at", "priority", None)
    >>> src.arrival_s.tolist(), src.point.tolist(), src.priority.tolist()
    ([30.0, 600.0], [1, 0], [0, 1])
    """
    stamps = _stamps(demand, time_field)
    order = np.argsort(stamps.to_numpy(), kind="stable")
    start = stamps.min().normalize()
    arrival = (stamps - start).dt.total_seconds().to_numpy(dtype=float)
    codes, labels = priority_codes(demand, priority_field)
    service = service_seconds(demand, service_field)
    span = max(float(arrival.max()) if len(arrival) else 0.0, S_PER_H)
    rate = np.array([len(demand) / (span / S_PER_H)])
    return CallSource(
        "replay", arrival[order], order.astype(np.int64), codes[order], None, span, rate, service, start, labels
    )


def rate_source(
    weights: np.ndarray,
    calls_per_h: float,
    hours: float,
    priority: np.ndarray | None = None,
    labels: tuple[str, ...] = ("all",),
    service_s: np.ndarray | None = None,
) -> CallSource:
    """Poisson calls at ``calls_per_h`` over ``hours``, each at a demand point drawn with probability by weight."""
    w = np.asarray(weights, dtype=float)
    if not (calls_per_h > 0):
        raise FieldError(f"{PARAM}, the call rate, must be > 0 calls per hour, got {calls_per_h}.", param="calls_per_h")
    if not (hours > 0):
        raise FieldError(f"{PARAM}, the simulated span, must be > 0 hours, got {hours}.", param="hours")
    if not (w.sum() > 0):
        raise FieldError("the demand points carry no weight to spread the calls over; give them weights.")
    prio = np.zeros(len(w), np.int64) if priority is None else priority
    return CallSource(
        "rate",
        np.empty(0),
        np.empty(0, np.int64),
        prio,
        w / w.sum(),
        hours * S_PER_H,
        np.array([float(calls_per_h)]),
        service_s,
        None,
        labels,
    )


def weekly_source(replay: CallSource, hours: float | None) -> CallSource:
    """The incidents' rate by hour of week, fitted from the record (calls in that hour / weeks spanned)."""
    how = _hour_of_week(replay.start, replay.arrival_s)
    weeks = replay.span_s / (S_PER_H * H_PER_WEEK)
    rate = np.bincount(how, minlength=H_PER_WEEK) / max(weeks, 1e-9)
    span = replay.span_s if hours is None else hours * S_PER_H
    return CallSource(
        "weekly",
        replay.arrival_s,
        replay.point,
        replay.priority,
        None,
        span,
        rate,
        replay.service_s,
        replay.start,
        replay.priority_labels,
    )


def _hour_of_week(start: pd.Timestamp | None, t_s: np.ndarray) -> np.ndarray:
    """Hour of week (Monday 00:00 = 0) of times ``t_s`` after ``start``."""
    offset_h = 0 if start is None else start.day_of_week * 24 + start.hour
    return ((offset_h + np.floor(t_s / S_PER_H)).astype(np.int64)) % H_PER_WEEK


def hour_of_day(source: CallSource, t_s: np.ndarray) -> np.ndarray:
    """Hour of day (0..23) of call times ``t_s`` on the simulated clock."""
    return _hour_of_week(source.start, t_s) % 24


def draw_calls(source: CallSource, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """One replication's calls: arrival times (s, sorted), point indices and priority codes."""
    if source.mode == "replay":
        return source.arrival_s, source.point, source.priority
    if source.mode == "rate":
        n = rng.poisson(source.calls_per_h[0] * source.span_s / S_PER_H)
        t = np.sort(rng.uniform(0.0, source.span_s, n))
        point = rng.choice(len(source.weights), size=n, p=source.weights).astype(np.int64)
        return t, point, source.priority[point]
    hours = np.arange(int(np.ceil(source.span_s / S_PER_H)))
    lam = source.calls_per_h[_hour_of_week(source.start, hours * S_PER_H)]
    counts = rng.poisson(lam)
    t = np.repeat(hours * S_PER_H, counts) + rng.uniform(0.0, S_PER_H, counts.sum())
    keep = t < source.span_s
    t = np.sort(t[keep])
    pick = rng.integers(0, len(source.point), t.size)
    return t, source.point[pick], source.priority[pick]
