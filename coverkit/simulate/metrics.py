"""Figures of one replication: from the event loop's per-call results to the summary, units, groups and areas.

A call's response time is its wait for a unit, plus turnout, plus travel; a call that went to mutual aid has no
response by the fleet and counts as not meeting any standard (``inf``). The fractile is the project's one
definition (:func:`coverkit.coverage.weighted_fractile`, the inverted empirical CDF).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from coverkit.coverage import weighted_fractile

#: Most points of the queue-length trace kept for the chart of one replication.
TRACE_POINTS = 2000
#: Bins of the response-time distribution (s): 15 s wide up to 1 h; later responses and mutual aid fall beyond.
HIST_EDGES_S = np.arange(0.0, 3600.0 + 15.0, 15.0)


@dataclass
class CallResults:
    """One replication's calls and what happened to them (arrays of one length, seconds)."""

    arrival_s: np.ndarray
    point: np.ndarray
    priority: np.ndarray
    hour: np.ndarray
    unit: np.ndarray  # answering unit, -1 = mutual aid
    wait_s: np.ndarray
    response_s: np.ndarray  # inf for mutual aid
    queue_len: np.ndarray
    waited: np.ndarray
    first_due_s: np.ndarray  # turnout + travel of the closest unit as if it were always free
    priority_labels: tuple[str, ...] = ("all",)


@dataclass
class RepResult:
    """The figures of one replication of one system."""

    summary: dict
    units: pd.DataFrame
    groups: pd.DataFrame
    dispatch: np.ndarray  # (n_bases first-due, n_bases + 1 answering; last column = mutual aid) call counts
    point_calls: np.ndarray  # calls per point
    point_covered: np.ndarray  # (n_standards, n_points) calls meeting each standard
    trace: np.ndarray  # (k, 2) time (s) and queue length found by arriving calls
    hist: np.ndarray  # calls per response-time bin of HIST_EDGES_S


def _standard_figures(calls: CallResults, standards: list) -> dict:
    """Per standard: share of calls answered within it, fractile response, and the share the closest unit would
    meet if it were always free (the drive-time view of the same calls)."""
    out = {}
    r = calls.response_s
    for std in standards:
        key = std.name
        out[f"covered_share|{key}"] = float(np.mean(r <= std.response_s)) if r.size else np.nan
        out[f"fractile_s|{key}"] = weighted_fractile(r, None, std.fractile)
        out[f"drive_time_share|{key}"] = float(np.mean(calls.first_due_s <= std.response_s)) if r.size else np.nan
    return out


def group_rows(calls: CallResults, standards: list, by: str, codes: np.ndarray, labels) -> list[dict]:
    """Covered share and fractile per group of calls (``by`` names the grouping: priority, hour, zone)."""
    rows = []
    for code in np.unique(codes[codes >= 0]):
        sel = codes == code
        for std in standards:
            r = calls.response_s[sel]
            rows.append(
                {
                    "by": by,
                    "group": str(labels[code]),
                    "standard": std.name,
                    "calls": int(sel.sum()),
                    "covered_share": float(np.mean(r <= std.response_s)),
                    "fractile_s": weighted_fractile(r, None, std.fractile),
                }
            )
    return rows


def trace(calls: CallResults) -> np.ndarray:
    """Queue length found by arriving calls against time, thinned to at most :data:`TRACE_POINTS` points (the
    largest of each stretch kept, so a growing queue shows)."""
    n = calls.arrival_s.size
    if n == 0:
        return np.zeros((0, 2))
    edges = np.linspace(0, n, min(n, TRACE_POINTS) + 1).astype(np.int64)
    peak = np.maximum.reduceat(calls.queue_len, edges[:-1])
    return np.column_stack([calls.arrival_s[edges[:-1]], peak])


def rep_result(calls: CallResults, fleet, standards: list, span_s: float, busy_s, n_calls, all_busy_s, zones):
    """Every figure of one replication of ``fleet``; ``zones`` is (zone code per point, labels) or None."""
    served = calls.unit >= 0
    n = calls.arrival_s.size
    summary = {
        "calls": n,
        "waited_share": float(calls.waited.mean()) if n else np.nan,
        "mean_wait_s": float(calls.wait_s[served].mean()) if served.any() else np.nan,
        "lost_share": float((~served).mean()) if n else np.nan,
        "all_busy_share": float(all_busy_s / span_s),
        "mean_response_s": float(calls.response_s[served].mean()) if served.any() else np.nan,
        "outside_first_due_share": float(
            np.mean(served & (fleet.unit_station[calls.unit] != fleet.first_due[calls.point]))
        )
        if n
        else np.nan,
        "max_queue": int(calls.queue_len.max()) if n else 0,
    }
    summary |= _standard_figures(calls, standards)
    units = pd.DataFrame(
        {
            "unit_id": fleet.unit_id,
            "base_id": [fleet.base_id[s] for s in fleet.unit_station],
            "utilisation": busy_s / span_s,
            "calls": n_calls,
        }
    )
    groups = group_rows(calls, standards, "priority", calls.priority, calls.priority_labels)
    groups += group_rows(calls, standards, "hour", calls.hour, [f"{h:02d}" for h in range(24)])
    if zones is not None:
        groups += group_rows(calls, standards, "zone", zones[0][calls.point], zones[1])
    n_b, n_p = len(fleet.base_id), fleet.out_s.shape[1]
    answer = np.where(served, fleet.unit_station[np.maximum(calls.unit, 0)], n_b)
    dispatch = np.zeros((n_b, n_b + 1), np.int64)
    np.add.at(dispatch, (fleet.first_due[calls.point], answer), 1)
    covered = np.stack(
        [np.bincount(calls.point, weights=calls.response_s <= s.response_s, minlength=n_p) for s in standards]
    )
    hist = np.histogram(calls.response_s[np.isfinite(calls.response_s)], HIST_EDGES_S)[0]
    point_calls = np.bincount(calls.point, minlength=n_p)
    return RepResult(summary, units, pd.DataFrame(groups), dispatch, point_calls, covered, trace(calls), hist)
