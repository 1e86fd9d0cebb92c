"""Arrivals of typed units past the standard's travel time, up to the search horizon, from few multi-source searches.

Why: the per-base times a coverage run keeps stop at the standard's travel time, so the time of a force not
complete by then is unknown and its fractile response would read "beyond the standard". One search per base to the
horizon would cost as many whole-network searches as there are bases. The figures a standard judges need only the
few nearest bases of each point:

- the ``n``-th unit of a type comes from one of the ``m`` nearest bases holding that type, ``m`` the least count of
  such bases whose smallest unit counts add up to ``n`` (each holds at least one, so ``m <= n``);
- a force of ``P`` people is complete by the time the units of the ``m`` nearest staffed bases have arrived, ``m``
  the least count of bases whose smallest crews (summed per base) add up to ``P``: before the ``m``-th nearest base's
  time every base that has arrived is among the ``m``, so the running staffing is the one over all bases, and at
  that time it is already ``>= P``;
- an assignment is the latest of its types' ``count``-th units.

So each type takes the ``m`` nearest of its bases, the force the ``m`` nearest staffed bases, both from
:func:`coverkit.travel.reach.nearest_k_nodes` (``m`` multi-source searches bounded at the horizon, exact; the
nearest bases of every node the table already holds are extended, not searched again), and only for the points not
complete within the standard. The same arrivals engine (:mod:`coverkit.arrivals`) turns those (base, point) times
into the figures, in blocks of points so the expanded (unit, point) pairs stay small.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from coverkit.arrivals import arrivals, force_time, nth_of_type, standard_time
from coverkit.network.model import RoadNetwork
from coverkit.travel.reach import NodeReach, nearest_k_nodes, nearest_k_points
from coverkit.units import Fleet, type_column

#: Points whose arrivals are expanded together (bounds the (unit, point) pairs held at once).
POINT_BLOCK = 200_000


def orders_needed(amounts: np.ndarray, need: int) -> int:
    """The least number of bases that always hold ``need`` (units or people), whichever of them are nearest: the
    count of the smallest ``amounts`` (per base, > 0) adding up to ``need``; all of them when they never do.

    >>> orders_needed(np.array([4, 8, 4, 6]), 10)  # 4 + 4 = 8 < 10, 4 + 4 + 6 = 14
    3
    >>> orders_needed(np.array([1, 1]), 5)
    2
    """
    cum = np.cumsum(np.sort(np.asarray(amounts)))
    return int(min(np.searchsorted(cum, need, side="left") + 1, len(cum)))


class _Searches:
    """The nearest bases of a set of bases, searched once per set and extended when more orders are asked for."""

    def __init__(self, net: RoadNetwork, table: object) -> None:
        self.net, self.table = net, table
        self.found: dict[bytes, NodeReach] = {}
        n_bases = len(table.base_snap)
        reach = table.node_reach
        if reach is not None and reach.limit_s == table.horizon_s:
            self.found[np.ones(n_bases, dtype=bool).tobytes()] = reach

    def times(self, holds: np.ndarray, m: int, points: np.ndarray) -> sp.coo_matrix:
        """(n_bases, len(points)) times (s) of the ``m`` nearest bases among ``holds`` (bool per base) to
        ``points`` (indices into the table's points), up to the horizon."""
        t = self.table
        index = np.flatnonzero(holds)
        key = holds.tobytes()
        reach = self.found.get(key)
        sub = t.base_snap.subset(index)
        if reach is None or reach.k < m:
            reach = nearest_k_nodes(self.net, sub, t.horizon_s, t.direction, k=m, start=reach)
            self.found[key] = reach
        src, time_s = nearest_k_points(self.net, sub, t.point_snap.subset(points), reach, k=m)
        ok = src >= 0
        col = np.broadcast_to(np.arange(len(points))[:, None], src.shape)
        return sp.coo_matrix((time_s[ok], (index[src[ok]], col[ok])), shape=(len(holds), len(points)))


def _blocks(times: sp.coo_matrix, fleet: Fleet, limit_s: float, figure) -> np.ndarray:
    """``figure(arrivals)`` over blocks of points (columns of ``times``), joined."""
    csc = times.tocsc()
    n = times.shape[1]
    parts = [np.zeros(0)]
    for lo in range(0, n, POINT_BLOCK):
        hi = min(lo + POINT_BLOCK, n)
        parts.append(figure(arrivals(csc[:, lo:hi].tocoo(), fleet, limit_s)))
    return np.concatenate(parts)


def fill_beyond(
    net: RoadNetwork, table: object, fleet: Fleet, standard: object, cols: dict, judged: np.ndarray | None
) -> tuple[dict, np.ndarray | None]:
    """The unit columns and the judged time of :func:`coverkit.arrivals.unit_columns` (``inf`` past the
    standard's travel time) with their times filled up to ``table``'s horizon.

    Parameters
    ----------
    net
        Road network of the table.
    table
        The :class:`coverkit.coverage.TravelTable` behind the run (its snapped bases and points, horizon,
        direction, and the nearest bases of every node it holds).
    fleet, standard
        The units and the standard judged (a plain standard fills the ``first_<type>_s`` columns only).
    cols, judged
        The columns and the judged time (s) within the standard.
    """
    n_bases = len(table.base_snap)
    cols = {k: np.array(v, copy=True) for k, v in cols.items()}
    if table.within_s is None:  # every pair within the horizon is stored: the arrivals engine reads them all
        return _from_full(table, fleet, standard, cols, judged)
    searches = _Searches(net, table)
    orders = _orders_per_type(fleet, standard, n_bases)
    for unit_type in fleet.types:
        column = type_column(unit_type)
        need = np.flatnonzero(np.isinf(cols[column]))
        if len(need) and fleet.count(unit_type):
            times = searches.times(fleet.holds(unit_type, n_bases), orders[unit_type], need)
            cols[column][need] = _blocks(times, fleet, table.horizon_s, lambda a, t=unit_type: nth_of_type(a, fleet, t))
    if judged is None:
        return cols, None
    judged = judged.copy()
    need = np.flatnonzero(np.isinf(judged))
    if len(need) == 0:
        return cols, judged
    if standard.kind == "personnel":
        staff = np.bincount(fleet.base, weights=fleet.staffing, minlength=n_bases)
        if not (staff > 0).any():  # no unit left at all
            return cols, judged
        m = orders_needed(staff[staff > 0], int(standard.personnel))
        times = searches.times(staff > 0, m, need)
        judged[need] = _blocks(times, fleet, table.horizon_s, lambda a: force_time(a, fleet, int(standard.personnel)))
        return cols, judged
    wanted = ((standard.unit_type, standard.nth),) if standard.kind == "unit_type" else standard.assignment
    far = np.zeros(len(need))
    for unit_type, count in wanted:
        if fleet.count(unit_type) == 0:  # every unit of it left with its base: never arrives
            far[:] = np.inf
            break
        times = searches.times(fleet.holds(unit_type, n_bases), orders[unit_type], need)
        nth = _blocks(times, fleet, table.horizon_s, lambda a, t=unit_type, c=int(count): nth_of_type(a, fleet, t, c))
        far = np.maximum(far, nth)
    judged[need] = far
    return cols, judged


def _orders_per_type(fleet: Fleet, standard: object, n_bases: int) -> dict[str, int]:
    """Per type how many of its nearest bases the standard and the first arrival need (searched once per type)."""
    wanted = {t: 1 for t in fleet.types}
    kind = getattr(standard, "kind", "base")
    pairs = ((standard.unit_type, standard.nth),) if kind == "unit_type" else ()
    pairs = standard.assignment if kind == "assignment" else pairs
    for unit_type, count in pairs:
        per_base = np.bincount(fleet.base[fleet.type == unit_type], minlength=n_bases)
        wanted[unit_type] = max(wanted[unit_type], orders_needed(per_base[per_base > 0], int(count)))
    return wanted


def _from_full(table: object, fleet: Fleet, standard: object, cols: dict, judged: np.ndarray | None):
    """:func:`fill_beyond` from a table holding every pair within the horizon."""
    arr = arrivals(table.times, fleet, table.horizon_s)
    for unit_type in fleet.types:
        cols[type_column(unit_type)] = nth_of_type(arr, fleet, unit_type)
    return cols, (None if judged is None else standard_time(arr, fleet, standard))


__all__ = ["fill_beyond", "orders_needed"]
