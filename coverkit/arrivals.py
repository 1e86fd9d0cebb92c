"""Arrivals of typed, staffed units at every demand point: the nth unit of a type, the force, the assignment.

Built on the per-base times the coverage engine already stores (:class:`coverkit.coverage.TravelTable`, sparse,
within the standard): a unit leaves from its base, so its travel time to a point is its base's. Per point the
arriving units, sorted by time (ties by the unit's place in the units table), give every figure at once:

- the time of the ``nth`` unit of a type (first engine, second engine);
- the effective response force time: the first time the staffing of the units arrived so far, nearest first,
  reaches the required number of people (NFPA 1710 and 1720 state their objectives this way, from memory);
- the assignment time: the latest of the required arrivals, each type's ``count``-th unit (a unit has one type, so
  it is counted once even when its base holds units of several types).

Everything is arrays: one expansion of the reached (base, point) pairs into (unit, point) pairs, one sort, then
group ranks and running sums. Times past the stored bound are not known here and read ``inf``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from coverkit.errors import PARAM, CoverkitError
from coverkit.units import Fleet, type_column

#: The demand column of the people on scene at the standard's travel time.
PERSONNEL_COLUMN = "personnel_in_time"


@dataclass(frozen=True)
class Arrivals:
    """Every unit reaching every point within ``limit_s``, sorted by point, then time, then unit.

    Attributes
    ----------
    point, time_s, unit
        One entry per (unit, point) pair reached: the point's index, the travel time (s), the unit's index in the
        fleet.
    n_points
        Number of points.
    limit_s
        The bound of the times (s).
    """

    point: np.ndarray
    time_s: np.ndarray
    unit: np.ndarray
    n_points: int
    limit_s: float


def arrivals(times: sp.spmatrix, fleet: Fleet, limit_s: float) -> Arrivals:
    """The arrivals of ``fleet``'s units at every point from per-base times ``times`` (n_bases, n_points; s).

    >>> t = sp.csr_matrix(np.array([[100.0, 0.0], [50.0, 300.0]]))  # point 1: only base B, at 300 s, past 240 s
    >>> import pandas as pd
    >>> from coverkit.units import fleet_from_table
    >>> f = fleet_from_table(pd.DataFrame({"unit_id": ["E1", "L1", "E2"], "base_id": ["A", "A", "B"],
    ...     "type": ["engine", "ladder", "engine"], "staffing": [4, 3, 4]}), ["A", "B"])
    >>> a = arrivals(t, f, 240.0)
    >>> a.point.tolist(), a.time_s.tolist(), a.unit.tolist()
    ([0, 0, 0], [50.0, 100.0, 100.0], [2, 0, 1])
    """
    coo = sp.coo_matrix(times)
    keep = coo.data <= limit_s
    row, col, data = coo.row[keep].astype(np.int64), coo.col[keep].astype(np.int64), coo.data[keep]
    n_bases = times.shape[0]
    order = np.argsort(fleet.base, kind="stable")
    count = np.bincount(fleet.base, minlength=n_bases)
    start = np.cumsum(count) - count
    rep = count[row]
    total = int(rep.sum())
    within = np.arange(total) - np.repeat(np.cumsum(rep) - rep, rep)
    unit = order[np.repeat(start[row], rep) + within]
    point, time_s = np.repeat(col, rep), np.repeat(data, rep)
    srt = np.lexsort((unit, time_s, point))
    return Arrivals(point[srt], time_s[srt], unit[srt], times.shape[1], float(limit_s))


def _group_start(point: np.ndarray) -> np.ndarray:
    """Per entry of a sorted ``point`` array, the index of the first entry of its point."""
    first = np.r_[True, point[1:] != point[:-1]] if len(point) else np.zeros(0, dtype=bool)
    return np.maximum.accumulate(np.where(first, np.arange(len(point)), 0))


def nth_of_type(arr: Arrivals, fleet: Fleet, unit_type: str, nth: int = 1) -> np.ndarray:
    """Per point the travel time (s) of the ``nth`` arriving unit of ``unit_type``; ``inf`` where fewer arrive."""
    out = np.full(arr.n_points, np.inf)
    mine = fleet.type[arr.unit] == unit_type
    pt, t = arr.point[mine], arr.time_s[mine]
    rank = np.arange(len(pt)) - _group_start(pt)
    hit = rank == nth - 1
    out[pt[hit]] = t[hit]
    return out


def force_time(arr: Arrivals, fleet: Fleet, personnel: int) -> np.ndarray:
    """Per point the travel time (s) at which the staffing of the arriving units, nearest first, reaches
    ``personnel``; ``inf`` where it never does within the bound.

    >>> import pandas as pd
    >>> from coverkit.units import fleet_from_table
    >>> f = fleet_from_table(pd.DataFrame({"unit_id": ["a", "b", "c"], "base_id": ["A", "B", "C"],
    ...     "type": ["engine"] * 3, "staffing": [4, 3, 4]}), ["A", "B", "C"])
    >>> t = sp.csr_matrix(np.array([[60.0], [120.0], [200.0]]))
    >>> force_time(arrivals(t, f, 480.0), f, 10).tolist()  # 4 + 3 = 7 < 10, 4 + 3 + 4 = 11 at the third arrival
    [200.0]
    """
    out = np.full(arr.n_points, np.inf)
    staff = fleet.staffing[arr.unit]
    cum = np.cumsum(staff)
    on_scene = cum - (cum - staff)[_group_start(arr.point)]
    hit = (on_scene >= personnel) & (on_scene - staff < personnel)
    out[arr.point[hit]] = arr.time_s[hit]
    return out


def assignment_time(arr: Arrivals, fleet: Fleet, assignment: tuple[tuple[str, int], ...]) -> np.ndarray:
    """Per point the travel time (s) at which every required unit has arrived: the latest over the types of the
    ``count``-th unit of that type; ``inf`` where any is missing within the bound."""
    out = np.zeros(arr.n_points)
    for unit_type, count in assignment:
        out = np.maximum(out, nth_of_type(arr, fleet, unit_type, int(count)))
    return out


def people_within(arr: Arrivals, fleet: Fleet, travel_s: float) -> np.ndarray:
    """Per point the people on scene (int64) once every unit within ``travel_s`` of travel has arrived."""
    ok = arr.time_s <= travel_s
    return np.bincount(arr.point[ok], weights=fleet.staffing[arr.unit[ok]], minlength=arr.n_points).astype(np.int64)


def check_fleet(fleet: Fleet | None, standard: object) -> None:
    """Fail in one line when ``standard`` judges units the ``fleet`` cannot supply (or there is no fleet).

    Raises
    ------
    CoverkitError
        No units table for a standard by type or force; a type no unit has.
    """
    kind = getattr(standard, "kind", "base")
    if kind == "base":
        return
    name = getattr(standard, "name", "")
    if fleet is None:
        raise CoverkitError(
            f"standard '{name}' judges {standard.judged().removesuffix(' in ')}; give {PARAM}, a units table "
            "(unit_id, base_id, type, staffing).",
            param="units",
        )
    wanted = [standard.unit_type] if kind == "unit_type" else [t for t, _ in standard.assignment]
    for unit_type in wanted:
        if fleet.count(unit_type) == 0 and unit_type not in fleet.gone_types:
            raise CoverkitError(
                f"standard '{name}' names unit type '{unit_type}', which no unit in {fleet.source} has; "
                f"its types are {', '.join(fleet.types)}."
            )


def standard_time(arr: Arrivals, fleet: Fleet, standard: object) -> np.ndarray:
    """Per point the travel time (s) the standard judges (the nth unit of its type, the force, the assignment)."""
    kind = standard.kind
    if kind == "unit_type":
        return nth_of_type(arr, fleet, standard.unit_type, standard.nth)
    if kind == "personnel":
        return force_time(arr, fleet, int(standard.personnel))
    if kind == "assignment":
        return assignment_time(arr, fleet, standard.assignment)
    raise ValueError(f"standard '{standard.name}' judges the first base, not units")


def unit_columns(times: sp.spmatrix, fleet: Fleet, standard: object) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """The per-point columns of a fleet under ``standard`` (``times`` within the standard's travel time): the first
    arrival per type (``first_<type>_s``), the people on scene in time (:data:`PERSONNEL_COLUMN`), and the travel
    time the standard judges (``None`` for a plain standard)."""
    arr = arrivals(times, fleet, standard.travel_s)
    cols = {type_column(t): nth_of_type(arr, fleet, t) for t in fleet.types}
    cols[PERSONNEL_COLUMN] = people_within(arr, fleet, standard.travel_s)
    judged = None if standard.kind == "base" else standard_time(arr, fleet, standard)
    return cols, judged


__all__ = [
    "Arrivals",
    "arrivals",
    "assignment_time",
    "check_fleet",
    "force_time",
    "nth_of_type",
    "people_within",
    "standard_time",
    "unit_columns",
]
