"""Synthetic calls, common random numbers for a scenario, an unstable system, and the study's [simulation] table.

Sources: the Poisson process's count over ``h`` hours at rate ``r`` is Poisson(``r h``), mean and variance ``r h``
(standard property; e.g. S. M. Ross, *Introduction to Probability Models*, ch. 5); common random numbers make the
difference of two systems on the same draws exactly zero when the systems are the same (A. M. Law, *Simulation
Modeling and Analysis*, 2015, §11.2); an M/M/1 queue with load above 1 has no steady state and its queue grows
without bound (standard queueing texts, e.g. Kleinrock 1975, §3.2).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from coverkit.coverage import Standard
from coverkit.errors import CoverkitError
from coverkit.settings import SimulationSettings
from coverkit.simulate.aggregate import difference_table, interval, summary_table
from coverkit.simulate.calls import draw_calls, rate_source, replay_source, weekly_source
from coverkit.simulate.replicate import SimInputs, run_replications
from coverkit.simulate.system import fleet_from_tables

STD = (Standard("any", 480.0, 60.0),)


def test_poisson_counts_have_the_rate_times_the_span():
    """200 draws of 50 h at 3 calls/h: mean count 150 inside its 95 % interval, variance / mean near 1, times
    sorted inside the span, points by weight (a point of weight 0 never called)."""
    src = rate_source(np.array([1.0, 3.0, 0.0]), 3.0, 50.0)
    counts, shares = [], []
    for r in range(200):
        t, point, _ = draw_calls(src, np.random.default_rng(r))
        assert np.all(np.diff(t) >= 0) and (t < 50 * 3600).all() and not (point == 2).any()
        counts.append(t.size)
        shares.append(np.mean(point == 1))
    _, lo, hi = interval(counts)
    assert lo <= 150 <= hi
    assert 0.7 < np.var(counts, ddof=1) / np.mean(counts) < 1.3  # Poisson: variance = mean
    _, lo, hi = interval(shares)
    assert lo <= 0.75 <= hi


def test_the_weekly_rate_reproduces_the_record_by_hour_of_week():
    """Incidents every Monday 08:00-09:00 for four weeks (3 a week): drawn calls fall in that hour of the week only,
    3 per week on average."""
    stamps = [f"2026-01-{d:02d}T08:{m:02d}:00" for d in (5, 12, 19, 26) for m in (5, 25, 45)]
    stamps.append("2026-02-01T23:59:00")  # a Sunday: the span ends there (4 weeks of Mondays)
    rec = pd.DataFrame({"received_at": stamps, "priority": 1})
    src = weekly_source(replay_source(rec, "received_at", "priority", None), None)
    counts = []
    for r in range(100):
        t, _, _ = draw_calls(src, np.random.default_rng(r))
        hours = (t // 3600).astype(int) % 168
        assert set(hours) <= {8, 167} or len(t) == 0  # Monday 08 h (the clock starts Monday 00:00), or the Sunday
        counts.append(np.sum(hours == 8))
    weeks = src.span_s / (168 * 3600)  # the clock runs from Monday 5 January 00:00 to the last call
    _, lo, hi = interval(counts)
    assert lo <= 12 / weeks * 4 <= hi  # 12 calls over the weeks spanned, at each of the span's 4 Monday 08 h


def _fleet(units):
    out = np.array([[120.0, 400.0], [380.0, 150.0]])
    return fleet_from_tables(["A", "B"], units, out, out.copy())


def test_common_random_numbers_give_a_zero_difference_for_the_same_system():
    cfg = SimulationSettings(service_min=40.0, turnout_s=60.0, replications=6, seed=3)
    src = rate_source(np.array([1.0, 1.0]), 2.0, 500.0)
    res = run_replications(SimInputs(src, (_fleet([1, 1]), _fleet([1, 1])), cfg, STD, 60.0), 6, processes=1)
    diff = difference_table(summary_table([r[0] for r in res]), summary_table([r[1] for r in res]))
    assert (diff["difference"].abs() < 1e-12).all() and (diff["high_95"] - diff["low_95"]).abs().max() < 1e-12
    # a second unit at A: fewer calls wait, and the paired interval says so
    res = run_replications(SimInputs(src, (_fleet([1, 1]), _fleet([2, 1])), cfg, STD, 60.0), 6, processes=1)
    diff = difference_table(summary_table([r[0] for r in res]), summary_table([r[1] for r in res]))
    waited = diff.set_index("figure").loc["waited_share"]
    assert waited["high_95"] < 0


def test_an_unstable_system_is_simulated_and_its_queue_grows():
    """One unit, 2 calls/h of 45 min (1.5 erlang): no error; the queue found by arrivals keeps growing."""
    fleet = fleet_from_tables(["A"], [1], np.zeros((1, 1)), np.zeros((1, 1)))
    cfg = SimulationSettings(service_min=45.0, service_dist="exponential", turnout_s=0.0, replications=2)
    res = run_replications(SimInputs(rate_source(np.ones(1), 2.0, 500.0), (fleet,), cfg, STD, 0.0), 2, processes=1)
    q = res[0][0].trace[:, 1]
    assert q[-len(q) // 10 :].mean() > 5 * q[: len(q) // 10].mean() + 50  # about 0.5 calls/h more than served
    assert res[0][0].units["utilisation"].iloc[0] > 0.97


def test_no_units_is_an_error():
    with pytest.raises(CoverkitError, match="no units"):
        fleet_from_tables(["A"], [0], np.zeros((1, 1)), np.zeros((1, 1)))


def test_the_study_file_takes_a_simulation_table(tmp_path):
    from coverkit.study import load_study

    from .conftest import DEMO, demo_study_head

    body = (
        demo_study_head("sim")
        + f"""[[demand]]
name = "calls"
points = "{DEMO / "incidents.csv"}"
kind = "incidents"
[[standard]]
name = "ALS 8 min"
travel_s = 480
[simulation]
replications = 7
queue = "zero"
service_cv = 0.3
"""
    )
    path = tmp_path / "s.toml"
    path.write_text(body)
    sim = load_study(path).simulation
    assert (sim.replications, sim.queue, sim.service_cv, sim.max_wait_s) == (7, "zero", 0.3, 0.0)
    path.write_text(body.replace("replications = 7", 'replications = "many"'))
    with pytest.raises(CoverkitError, match="replications"):
        load_study(path)


class _ListRunner:
    """A runner that is not the in-process default: it maps the blocks itself, as a cluster would (in order)."""

    def __init__(self):
        self.blocks = 0

    def map(self, fn, blocks, shared):
        self.blocks += len(blocks)
        return [fn(b, **shared) for b in blocks]


def test_replications_as_blocks_of_a_cluster_runner_give_the_same_numbers():
    """On a front end's runner (a Dask cluster in use) each replication is one block; same seeds, same figures."""
    from coverkit.compute import use_runner

    cfg = SimulationSettings(service_min=40.0, turnout_s=60.0, replications=3, seed=9)
    inputs = SimInputs(rate_source(np.array([1.0, 2.0]), 2.0, 200.0), (_fleet([1, 1]),), cfg, STD, 60.0)
    local = summary_table([r[0] for r in run_replications(inputs, 3, processes=1)])
    runner = _ListRunner()
    with use_runner(runner):
        blocks = summary_table([r[0] for r in run_replications(inputs, 3)])
    assert runner.blocks == 3
    pd.testing.assert_frame_equal(local, blocks)
