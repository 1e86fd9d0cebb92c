"""The simulation's event loop written with SimPy, for the engine choice in ``bench_simulate.py`` only.

Same model and tie rules as :mod:`coverkit.simulate.kernel` (clears before arrivals at one instant, ties to the
lower unit); SimPy is not a dependency of coverkit: the benchmark runs this when ``simpy`` can be imported.
"""

from __future__ import annotations

from collections import deque

import numpy as np
import simpy


def run_calls_simpy(arrival, point, priority, service, turnout, mult, unit_station, out_s, back_s, max_wait_s, n_prio,
                    move_s=None, rules=None):  # fmt: skip
    """One replication on SimPy; the results of :func:`coverkit.simulate.kernel.run_calls`."""
    env = simpy.Environment()
    n, m = len(arrival), len(unit_station)
    unit_of_call = np.full(n, -1, np.int64)
    wait, travel = np.zeros(n), np.full(n, np.nan)
    queue_len = np.zeros(n, np.int64)
    busy, n_calls = np.zeros(m), np.zeros(m, np.int64)
    committed, back_t = [False] * m, [0.0] * m
    queues = [deque() for _ in range(n_prio)]
    state = {"committed": 0, "from": 0.0, "all_busy": 0.0}

    def waiting(t):
        for q in queues:
            while q and arrival[q[0]] + max_wait_s < t:
                q.popleft()
        return sum(len(q) for q in queues)

    def dispatch(u, c, eff):
        t = env.now
        unit_of_call[c], wait[c], travel[c] = u, t - arrival[c], eff
        hold = turnout[c] + eff + service[c]
        back_t[u] = t + hold + back_s[unit_station[u], point[c]] * mult[c]
        busy[u] += hold
        n_calls[u] += 1
        committed[u] = True
        return hold

    def unit_run(u, hold):
        # a unit process: committed for turnout + travel + service, then free (returning home) or sent again
        while hold is not None:
            yield env.timeout(hold)
            committed[u] = False
            waiting(env.now)
            c = next((q.popleft() for q in queues if q), -1)
            hold = None
            if c >= 0:
                eff = max(0.0, back_t[u] - env.now) + out_s[unit_station[u], point[c]] * mult[c]
                hold = dispatch(u, c, eff)
            else:
                if state["committed"] == m:
                    state["all_busy"] += env.now - state["from"]
                state["committed"] -= 1

    def calls():
        for c in range(n):
            yield env.timeout(arrival[c] - env.now)
            # yield once more at the same instant so that units clearing now are free first
            yield env.timeout(0)
            t = env.now
            queue_len[c] = waiting(t)
            best, best_s = -1, np.inf
            for u in range(m):
                if not committed[u]:
                    eff = max(0.0, back_t[u] - t) + out_s[unit_station[u], point[c]] * mult[c]
                    if eff < best_s:
                        best, best_s = u, eff
            if best >= 0:
                state["committed"] += 1
                if state["committed"] == m:
                    state["from"] = t
                env.process(unit_run(best, dispatch(best, c, best_s)))
            elif max_wait_s > 0:
                queues[priority[c]].append(c)

    env.process(calls())
    env.run()
    return unit_of_call, wait, travel, queue_len, busy, n_calls, state["all_busy"], np.zeros(0, np.int64)
