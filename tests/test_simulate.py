"""The simulation against outside references: Erlang B and C (one station, zero travel), the exact hypercube
(several stations, fixed preferences), and a replay worked by hand to the second.

Sources: A. K. Erlang (1917) for the loss and waiting formulas (values by the recursion in ../shared/REFERENCES.md,
checked there against the standard Erlang-B tables); the mean wait of M/M/c, ``Wq = C / (c mu - lambda)``, from the
standard queueing texts (e.g. L. Kleinrock, *Queueing Systems* vol. 1, 1975, §3.5); R. C. Larson (1974) for the
exact hypercube, solved here by the project's own ``coverkit.queueing.hypercube_exact`` (itself checked against
the birth-death chain in tests/test_queueing.py). Each simulated figure must hold the reference inside its 95 %
interval across replications.
"""

from __future__ import annotations

import numpy as np
import pytest

from coverkit.coverage import Standard
from coverkit.errors import CoverkitError
from coverkit.queueing import erlang_b, erlang_c, hypercube_exact, preference_lists
from coverkit.settings import SimulationSettings
from coverkit.simulate.aggregate import interval
from coverkit.simulate.calls import rate_source
from coverkit.simulate.heap_loop import run_calls_heap
from coverkit.simulate.kernel import run_calls
from coverkit.simulate.replicate import SimInputs, run_replications
from coverkit.simulate.system import cover_rules, fleet_from_tables

STD = (Standard("any", 480.0, 0.0),)


def _runs(fleet, weights, calls_per_h, mean_min, queue, hours, reps=20, seed=11):
    cfg = SimulationSettings(
        service_min=mean_min, service_dist="exponential", turnout_s=0.0, queue=queue, seed=seed, replications=reps
    )
    inputs = SimInputs(rate_source(np.asarray(weights, float), calls_per_h, hours), (fleet,), cfg, STD, 0.0)
    return [r[0] for r in run_replications(inputs, reps, processes=1)]


def _inside(values, reference, checks=1):
    """The reference inside the t-interval of the replication figures: 95 % for the family of ``checks`` checks
    of one test (Bonferroni: each at 1 - 0.05 / checks), so that a correct model fails a test 5 % of the time at
    most, whatever the number of figures it holds."""
    m, lo, hi = interval(values, 1 - 0.05 / checks)
    assert lo <= reference <= hi, (
        f"reference {reference:.5f} outside the 95 % interval [{lo:.5f}, {hi:.5f}] (mean {m:.5f})"
    )


@pytest.mark.parametrize("c, calls_per_h, mean_min", [(3, 3.0, 45.0), (5, 4.0, 60.0)])
def test_one_station_waits_as_erlang_c(c, calls_per_h, mean_min):
    """M/M/c, infinite queue: P(wait) = Erlang C, mean wait C / (c mu - lambda), utilisation A / c (Erlang 1917)."""
    fleet = fleet_from_tables(["S"], [c], np.zeros((1, 1)), np.zeros((1, 1)))
    reps = _runs(fleet, [1.0], calls_per_h, mean_min, "infinite", hours=10000.0)
    load = calls_per_h * mean_min / 60.0
    p_wait = erlang_c(load, c)
    _inside([r.summary["waited_share"] for r in reps], p_wait, 3)
    _inside([r.summary["mean_wait_s"] for r in reps], p_wait / (c * 60.0 / mean_min - calls_per_h) * 3600.0, 3)
    _inside([r.units["utilisation"].mean() for r in reps], load / c, 3)
    assert all(r.summary["lost_share"] == 0 for r in reps)


@pytest.mark.parametrize("c, load", [(5, 1.36), (10, 5.08)])
def test_one_station_loses_as_erlang_b(c, load):
    """Zero queue: the share of calls lost (to mutual aid) is Erlang B; the table rows of REFERENCES.md
    (5 servers carry 1.36 E at 1 % blocking, 10 servers 5.08 E at 2 %)."""
    fleet = fleet_from_tables(["S"], [c], np.zeros((1, 1)), np.zeros((1, 1)))
    reps = _runs(fleet, [1.0], load, 60.0, "zero", hours=10000.0)
    _inside([r.summary["lost_share"] for r in reps], erlang_b(load, c), 2)
    _inside([r.units["utilisation"].mean() for r in reps], load * (1 - erlang_b(load, c)) / c, 2)
    assert all(r.summary["waited_share"] == 0 for r in reps)


@pytest.mark.parametrize("queue", ["zero", "infinite"])
def test_several_stations_match_the_exact_hypercube(queue):
    """Three one-unit stations, three demand points with fixed preferences: unit workloads and the share of each
    point's calls each unit answers hold the exact hypercube (Larson 1974) in their 95 % intervals. Travel times are
    microseconds, so the busy time is the exponential service time alone, as the hypercube assumes."""
    travel = np.array([[1.0, 3.0, 2.0], [2.0, 1.0, 3.0], [3.0, 2.0, 1.0]]) * 1e-6  # (station, point)
    fleet = fleet_from_tables(["A", "B", "C"], [1, 1, 1], travel, np.zeros_like(travel))
    rates = np.array([0.5, 0.3, 0.2]) * 2.0  # calls per hour per point; 30 min service: 1 erlang on 3 units
    reps = _runs(fleet, rates, rates.sum(), 30.0, queue, hours=20000.0)
    ref = hypercube_exact(rates, preference_lists(travel.T), 30.0, queue=queue)
    for u in range(3):
        _inside([r.units["utilisation"][u] for r in reps], ref.workload[u], 12)
    for a in range(3):  # point a's first-due station is a, so the dispatch row of station a holds point a's calls
        for u in range(3):
            _inside([r.dispatch[a, u] / r.dispatch[a].sum() for r in reps], ref.dispatch_fraction[a, u], 12)


def _hand_case():
    out = np.array([[100.0, 300.0], [200.0, 150.0]])  # base -> point (s); the way back takes as long
    calls = (np.array([0.0, 100.0, 200.0]), np.array([0, 0, 1]), np.zeros(3, np.int64), np.array([600.0, 600.0, 300.0]),
             np.full(3, 60.0), np.ones(3), np.array([0, 1]), out, out.copy())  # fmt: skip
    return calls


@pytest.mark.parametrize("engine", [run_calls, run_calls_heap])
def test_a_replay_worked_by_hand(engine):
    """Two units (A at base 0, B at base 1), three calls, worked by hand:

    call 0 at t=0 to point 0: A (100 s) is closer than B (200 s); A clears at 0+60+100+600 = 760, home at 860.
    call 1 at t=100 to point 0: only B is free: travel 200 s, clears at 100+60+200+600 = 960.
    call 2 at t=200 to point 1: both busy, it waits. A clears at 760 with 100 s of its way home left and is sent:
    100 + 300 = 400 s of travel, a wait of 560 s, response 560 + 60 + 400 = 1020 s; A clears at 1520.
    Every unit is busy from t=100 until B clears at 960: 860 s. A was committed 760 + 760 = 1520 s, B 860 s.
    """
    unit, wait, travel, qlen, busy, n_calls, all_busy, _moves = engine(*_hand_case(), np.inf, 1)
    assert unit.tolist() == [0, 1, 0]
    assert wait.tolist() == [0.0, 0.0, 560.0]
    assert travel.tolist() == [100.0, 200.0, 400.0]
    assert (wait + 60.0 + travel).tolist() == [160.0, 260.0, 1020.0]
    assert busy.tolist() == [1520.0, 860.0] and n_calls.tolist() == [2, 1] and all_busy == 860.0
    assert qlen.tolist() == [0, 0, 0]


@pytest.mark.parametrize("engine", [run_calls, run_calls_heap])
def test_the_hand_replay_with_mutual_aid(engine):
    """Same calls: with a zero queue call 2 goes to mutual aid at once; waiting at most 300 s it is gone at t=500,
    before A clears at 760; waiting up to 600 s (until 800) A takes it as before. All busy 100..760 without it."""
    for max_wait, expect in ((0.0, [0, 1, -1]), (300.0, [0, 1, -1]), (600.0, [0, 1, 0])):
        unit, _, _, _, busy, _, all_busy, _moves = engine(*_hand_case(), max_wait, 1)
        assert unit.tolist() == expect
        assert all_busy == (660.0 if expect[2] < 0 else 860.0)
        assert busy.tolist() == ([760.0, 860.0] if expect[2] < 0 else [1520.0, 860.0])


def test_a_cover_rule_worked_by_hand():
    """Stations A and B, one unit each, 300 s apart; rule "A:B:10": when A has had no free unit for 10 min, B's
    free unit moves to A. Travel (s): A->p0 100, A->p1 500, B->p0 400, B->p1 100 (the same way back); no turnout.

    t=0 call to p0 (3000 s on scene): A's unit goes (100 s), clears at 3100. A is empty from t=0; at t=600 B's
    unit moves to A, there at 900. t=1000 call to p0: B's unit answers from A in 100 s (400 s from B without the
    rule); clears at 1600, back at A at 1700. t=2000 call to p1: B's unit, still posted at A, takes 500 s; clears at
    2600. t=3100 A's unit is free at home: B's unit goes home (there at 3400). t=3200 call to p1: B's unit, 200 s
    from home, 100 s beyond: 300 s; A's unit would need 500 s. One move. Without the rule: 100, 400, 400, 100.
    """
    out = np.array([[100.0, 500.0], [400.0, 100.0]])
    calls = (np.array([0.0, 1000.0, 2000.0, 3200.0]), np.array([0, 0, 1, 1]), np.zeros(4, np.int64),
             np.array([3000.0, 500.0, 100.0, 100.0]), np.zeros(4), np.ones(4), np.array([0, 1]), out, out.copy(),
             np.inf, 1)  # fmt: skip
    move = np.array([[0.0, 300.0], [300.0, 0.0]])
    rules = cover_rules(["A:B:10"], ["A", "B"])
    unit, _, travel, *_, moves = run_calls(*calls, move, rules)
    assert unit.tolist() == [0, 1, 1, 1]
    assert travel.tolist() == [100.0, 100.0, 500.0, 300.0]
    assert moves.tolist() == [1]
    unit, _, travel, *_, moves = run_calls(*calls, move)
    assert travel.tolist() == [100.0, 400.0, 400.0, 100.0] and moves.size == 0
    with pytest.raises(CoverkitError, match="EMPTY:FROM:MINUTES"):
        cover_rules(["A:C:10"], ["A", "B"])
