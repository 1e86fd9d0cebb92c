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
* Cover rules (optional, the planner's): when a station has had no free unit for a stated time, the free unit of a
  named station with the least way home left moves there and answers from there (timed, as above, as its remaining
  return plus the move); it goes back home when a unit of that station is free at home again. Counted per rule.
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
def _station_empty(e, post, committed):
    """No uncommitted unit is posted at station ``e``."""
    for u in range(post.size):
        if post[u] == e and not committed[u]:
            return False
    return True


@njit(cache=True, nogil=True)
def _rule_states(t, rules, empty_since, post, committed):
    """Start (or stop) each rule's clock: since when its station has had no free unit."""
    for k in range(empty_since.size):
        if _station_empty(rules[0][k], post, committed):
            if empty_since[k] == np.inf:
                empty_since[k] = t
        else:
            empty_since[k] = np.inf


@njit(cache=True, nogil=True)
def _apply_rule(k, t, rules, empty_since, moves, post, committed, back_t, move_s):
    """Rule ``k`` is due: the free unit posted at its named station with the least way home left moves to cover
    the empty one (available on the way, timed as remaining return + the move). None free: try again later."""
    e, f = rules[0][k], rules[1][k]
    best, best_s = -1, np.inf
    for u in range(post.size):
        if post[u] == f and not committed[u] and max(0.0, back_t[u] - t) < best_s:
            best, best_s = u, max(0.0, back_t[u] - t)
    if best < 0:
        empty_since[k] = t
        return
    post[best] = e
    back_t[best] = t + best_s + move_s[f, e]
    moves[k] += 1


@njit(cache=True, nogil=True)
def _send_covers_home(h, t, post, home, committed, back_t, move_s):
    """A unit of station ``h`` is free at home again: the uncommitted cover units posted there go back home."""
    for v in range(post.size):
        if post[v] == h and home[v] != h and not committed[v]:
            post[v] = home[v]
            back_t[v] = t + max(0.0, back_t[v] - t) + move_s[h, home[v]]


@njit(cache=True, nogil=True)
def _next_rule(t_arr, rules, empty_since):
    k_rule, t_rule = -1, np.inf
    for k in range(empty_since.size):
        due = empty_since[k] + rules[2][k]
        if due < t_rule:
            k_rule, t_rule = k, due
    return k_rule, t_rule


@njit(cache=True, nogil=True)
def _run(arrival, point, priority, service, turnout, mult, home, out_s, back_s, max_wait_s, n_prio, move_s, rules):
    n, m = arrival.size, home.size
    unit_of_call = np.full(n, -1, np.int64)
    wait = np.zeros(n)
    travel = np.full(n, np.nan)
    queue_len = np.zeros(n, np.int64)
    busy = np.zeros(m)
    n_calls = np.zeros(m, np.int64)
    committed = np.zeros(m, np.bool_)
    clear_t = np.full(m, np.inf)
    back_t = np.zeros(m)
    post = home.copy()  # the station a unit answers from and returns to (its own, unless moved to cover)
    qbuf = np.empty((n_prio, max(n, 1)), np.int64)
    head = np.zeros(n_prio, np.int64)
    tail = np.zeros(n_prio, np.int64)
    empty_since = np.full(rules[0].size, np.inf)
    moves = np.zeros(rules[0].size, np.int64)
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
        t_arr = arrival[i] if i < n else np.inf
        # cover rules act only while calls are still to come (a station with no units would be empty forever)
        k_rule, t_rule = _next_rule(t_arr, rules, empty_since) if i < n else (-1, np.inf)
        if u_next >= 0 and t_clear <= t_arr and t_clear <= t_rule:
            t = t_clear
            committed[u_next] = False
            c = _next_waiting(t, qbuf, head, tail, arrival, max_wait_s)
            if c >= 0:
                eff = max(0.0, back_t[u_next] - t) + out_s[post[u_next], point[c]] * mult[c]
                _dispatch(c, u_next, t, eff, calls, units, committed, clear_t, back_t, post, back_s)
            else:
                if n_committed == m:
                    all_busy_s += t - all_busy_from
                n_committed -= 1
                if post[u_next] == home[u_next]:
                    _send_covers_home(home[u_next], t, post, home, committed, back_t, move_s)
        elif k_rule >= 0 and t_rule <= t_arr:
            t = t_rule
            _apply_rule(k_rule, t, rules, empty_since, moves, post, committed, back_t, move_s)
        elif i < n:
            t = t_arr
            _purge(t, qbuf, head, tail, arrival, max_wait_s)
            queue_len[i] = (tail - head).sum()
            u, eff = _closest(t, point[i], mult[i], post, committed, back_t, out_s)
            if u >= 0:
                _dispatch(i, u, t, eff, calls, units, committed, clear_t, back_t, post, back_s)
                n_committed += 1
                if n_committed == m:
                    all_busy_from = t
            elif max_wait_s > 0:
                p = priority[i]
                qbuf[p, tail[p]] = i
                tail[p] += 1
            i += 1
        else:
            break
        _rule_states(t, rules, empty_since, post, committed)
    return unit_of_call, wait, travel, queue_len, busy, n_calls, all_busy_s, moves


#: No cover rules: (empty station, named station, minutes-as-seconds) arrays of length 0.
NO_RULES = (np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0))


def run_calls(arrival, point, priority, service, turnout, mult, unit_station, out_s, back_s, max_wait_s, n_prio,
              move_s=None, rules=NO_RULES):  # fmt: skip
    """One replication. Returns per call (unit or -1, wait s, travel s, queue length found on arrival), per unit
    (committed s, calls), the time every unit was committed (s), and the moves made by each cover rule.

    ``rules`` are the cover rules as three arrays: the station to cover, the station whose free unit is sent, and
    after how long (s) without a free unit at the first; ``move_s`` the station-to-station travel times (s).
    """
    if move_s is None:
        move_s = np.zeros((out_s.shape[0], out_s.shape[0]))
    return _run(arrival, point, priority, service, turnout, mult, unit_station, out_s, back_s, float(max_wait_s),
                n_prio, move_s, rules)  # fmt: skip
