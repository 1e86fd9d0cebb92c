"""The compiled event loop of the response-system simulation (numba).

One replication of calls through a fleet of units, as plain arrays in and out. The events are the calls' arrivals
(given in time order) and the units' clearing times (at most one pending per unit, so the next one is found by a
scan over the units instead of a heap: the fleet is small and a scan of a few dozen floats beats heap upkeep).

The model (stated in the report as well):

* A call is sent the available unit with the smallest effective travel time; ties go to the lower unit index.
* A unit is *committed* from dispatch until it clears the scene: turnout + travel + on-scene/transport time.
  Then it drives back to its base, and is available while doing so.
* A returning unit's effective travel time to a new call is its remaining return time plus its base's time to the
  call (it is treated as if it first finished the trip home). This is an upper bound on the true time from where it
  is, exact for a unit at its base; the engine's tables hold base-to-point times only.
* When every unit is committed the call waits, first come first served within priority (0 most urgent), for at most
  ``max_wait_s``; a call still waiting then goes to mutual aid (lost to the fleet). ``max_wait_s = 0`` sends it at
  once (zero queue capacity); ``inf`` lets it wait for as long as it takes.
* A unit clearing at the same instant as a call arrives is free for that call (clears are handled first).
"""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True, nogil=True)
def _closest(t, point, mult, unit_station, committed, back_t, out_s):
    """The available unit with the smallest effective travel time to ``point`` (-1 when none) and that time (s)."""
    best = -1
    best_s = np.inf
    for u in range(unit_station.size):
        if committed[u]:
            continue
        eff = max(0.0, back_t[u] - t) + out_s[unit_station[u], point] * mult
        if eff < best_s:
            best_s = eff
            best = u
    return best, best_s


@njit(cache=True, nogil=True)
def _dispatch(c, u, t, eff, calls, units, committed, clear_t, back_t, unit_station, back_s):
    """Send unit ``u`` to call ``c`` at time ``t`` with effective travel ``eff``; record it."""
    arrival, point, service, turnout, mult = calls
    unit_of_call, wait, travel, busy, n_calls = units
    unit_of_call[c] = u
    wait[c] = t - arrival[c]
    travel[c] = eff
    clear_t[u] = t + turnout[c] + eff + service[c]
    back_t[u] = clear_t[u] + back_s[unit_station[u], point[c]] * mult[c]
    busy[u] += clear_t[u] - t
    n_calls[u] += 1
    committed[u] = True


@njit(cache=True, nogil=True)
def _purge(t, qbuf, head, tail, arrival, max_wait_s):
    """Drop waiting calls whose wait ran out before ``t`` (they went to mutual aid); they sit at the queue heads."""
    for p in range(head.size):
        while head[p] < tail[p] and arrival[qbuf[p, head[p]]] + max_wait_s < t:
            head[p] += 1


@njit(cache=True, nogil=True)
def _next_waiting(t, qbuf, head, tail, arrival, max_wait_s):
    """The most urgent, longest-waiting call still waiting at ``t`` (-1 when none), taken off its queue."""
    _purge(t, qbuf, head, tail, arrival, max_wait_s)
    for p in range(head.size):
        if head[p] < tail[p]:
            c = qbuf[p, head[p]]
            head[p] += 1
            return c
    return -1


@njit(cache=True, nogil=True)
def run_calls(arrival, point, priority, service, turnout, mult, unit_station, out_s, back_s, max_wait_s, n_prio):
    """One replication. Returns per call (unit or -1, wait s, travel s, queue length found on arrival) and per
    unit (committed s, calls), and the time every unit was committed (s)."""
    n, m = arrival.size, unit_station.size
    unit_of_call = np.full(n, -1, np.int64)
    wait = np.zeros(n)
    travel = np.full(n, np.nan)
    queue_len = np.zeros(n, np.int64)
    busy = np.zeros(m)
    n_calls = np.zeros(m, np.int64)
    committed = np.zeros(m, np.bool_)
    clear_t = np.full(m, np.inf)
    back_t = np.zeros(m)
    qbuf = np.empty((n_prio, max(n, 1)), np.int64)
    head = np.zeros(n_prio, np.int64)
    tail = np.zeros(n_prio, np.int64)
    calls = (arrival, point, service, turnout, mult)
    units = (unit_of_call, wait, travel, busy, n_calls)
    n_committed = 0
    all_busy_s = 0.0
    all_busy_from = 0.0
    i = 0
    while True:
        u_next = -1
        t_clear = np.inf
        for u in range(m):
            if committed[u] and clear_t[u] < t_clear:
                t_clear = clear_t[u]
                u_next = u
        if i < n and arrival[i] < t_clear:
            t = arrival[i]
            _purge(t, qbuf, head, tail, arrival, max_wait_s)
            queue_len[i] = (tail - head).sum()
            u, eff = _closest(t, point[i], mult[i], unit_station, committed, back_t, out_s)
            if u >= 0:
                _dispatch(i, u, t, eff, calls, units, committed, clear_t, back_t, unit_station, back_s)
                n_committed += 1
                if n_committed == m:
                    all_busy_from = t
            elif max_wait_s > 0:
                p = priority[i]
                qbuf[p, tail[p]] = i
                tail[p] += 1
            i += 1
        elif u_next >= 0:
            t = t_clear
            committed[u_next] = False
            c = _next_waiting(t, qbuf, head, tail, arrival, max_wait_s)
            if c >= 0:
                eff = max(0.0, back_t[u_next] - t) + out_s[unit_station[u_next], point[c]] * mult[c]
                _dispatch(c, u_next, t, eff, calls, units, committed, clear_t, back_t, unit_station, back_s)
            else:
                if n_committed == m:
                    all_busy_s += t - all_busy_from
                n_committed -= 1
        else:
            break
    return unit_of_call, wait, travel, queue_len, busy, n_calls, all_busy_s
