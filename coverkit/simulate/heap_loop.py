"""The same event loop in plain Python with a heap of events: the measured alternative to the compiled loop.

Kept for two jobs: the benchmark sets its speed beside the compiled loop's (``benchmarks/bench_simulate.py``), and
the tests hold the two to the same numbers call by call (two codings of one model). Same model and same tie rules
as :mod:`coverkit.simulate.kernel`, whose docstring states them.
"""

from __future__ import annotations

import heapq
from collections import deque

import numpy as np


def run_calls_heap(arrival, point, priority, service, turnout, mult, unit_station, out_s, back_s, max_wait_s, n_prio,
                   move_s=None, rules=None):  # fmt: skip
    """One replication; same arguments and results as :func:`coverkit.simulate.kernel.run_calls`, without cover
    rules (the compiled loop alone has them)."""
    if rules is not None and len(rules[0]):
        raise NotImplementedError("the plain heap loop has no cover rules; use coverkit.simulate.kernel.run_calls")
    n, m = len(arrival), len(unit_station)
    unit_of_call = np.full(n, -1, np.int64)
    wait, travel = np.zeros(n), np.full(n, np.nan)
    queue_len = np.zeros(n, np.int64)
    busy, n_calls = np.zeros(m), np.zeros(m, np.int64)
    committed = [False] * m
    back_t = [0.0] * m
    queues: list[deque[int]] = [deque() for _ in range(n_prio)]
    # events: (time, kind, key); kind 0 = a unit clears (handled before an arrival at the same time), 1 = a call
    events = [(float(arrival[c]), 1, c) for c in range(n)]
    heapq.heapify(events)
    state = {"committed": 0, "from": 0.0, "all_busy": 0.0}

    def dispatch(c: int, u: int, t: float, eff: float) -> None:
        unit_of_call[c], wait[c], travel[c] = u, t - arrival[c], eff
        clear = t + turnout[c] + eff + service[c]
        back_t[u] = clear + back_s[unit_station[u], point[c]] * mult[c]
        busy[u] += clear - t
        n_calls[u] += 1
        committed[u] = True
        heapq.heappush(events, (clear, 0, u))

    def waiting(t: float) -> int:
        for q in queues:
            while q and arrival[q[0]] + max_wait_s < t:  # waited too long: gone to mutual aid
                q.popleft()
        return sum(len(q) for q in queues)

    while events:
        t, kind, key = heapq.heappop(events)
        if kind == 1:
            queue_len[key] = waiting(t)
            best, best_s = -1, np.inf
            for u in range(m):
                if not committed[u]:
                    eff = max(0.0, back_t[u] - t) + out_s[unit_station[u], point[key]] * mult[key]
                    if eff < best_s:
                        best, best_s = u, eff
            if best >= 0:
                dispatch(key, best, t, best_s)
                state["committed"] += 1
                if state["committed"] == m:
                    state["from"] = t
            elif max_wait_s > 0:
                queues[priority[key]].append(key)
            continue
        committed[key] = False
        waiting(t)
        nxt = next((q.popleft() for q in queues if q), -1)
        if nxt >= 0:
            eff = max(0.0, back_t[key] - t) + out_s[unit_station[key], point[nxt]] * mult[nxt]
            dispatch(nxt, key, t, eff)
        else:
            if state["committed"] == m:
                state["all_busy"] += t - state["from"]
            state["committed"] -= 1
    return unit_of_call, wait, travel, queue_len, busy, n_calls, state["all_busy"], np.zeros(0, np.int64)
