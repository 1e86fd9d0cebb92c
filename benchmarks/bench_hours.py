"""Benchmark: the cost of time of day and of the travel-time spread beside plain coverage (same process).

On the ~90,000-node synthetic network with 100,000 demand points and 30 bases:

(a) coverkit ``evaluate_coverage`` (the baseline);
(b) ``network_at``: the network retimed for an hour band (edge times scaled per class), then (a) on it;
(c) ``add_arrival_probability``: first-due route lengths and the lognormal chance per point, after (a).

Printed as ratios to (a), best of 3. Run: ``python benchmarks/bench_hours.py``.
"""

from __future__ import annotations

import dataclasses
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_isochrones import county_inputs, synthetic_network

from coverkit.coverage import Standard, evaluate_coverage
from coverkit.network.hour_bands import HourBand, network_at
from coverkit.progress import set_quiet
from coverkit.spread import add_arrival_probability, fit_spread


def main() -> int:
    set_quiet(True)
    net = synthetic_network()
    classes = sorted(set(net.edges["road_class"].astype(str)))
    band = HourBand("am", "weekday", 7, 9, {c: 0.8 for c in classes})
    net.profile = dataclasses.replace(net.profile, hour_bands=(band,))
    bases, demand = county_inputs(net)
    rng = np.random.default_rng(12)
    std = Standard("8 min", 480.0)
    route = rng.uniform(0, 15000, 2000)
    fit = fit_spread(np.exp(rng.normal(0, 0.2, 2000)) * 300, np.full(2000, 300.0), route)
    rows = []
    for _ in range(3):
        t0 = time.perf_counter()
        res = evaluate_coverage(net, bases, demand, std, horizon_s=1800.0)
        t1 = time.perf_counter()
        timed = network_at(net, "08:00")
        t2 = time.perf_counter()
        evaluate_coverage(timed, bases, demand, std, horizon_s=1800.0)
        t3 = time.perf_counter()
        add_arrival_probability(net, res, fit)
        t4 = time.perf_counter()
        rows.append((t1 - t0, t2 - t1, t3 - t1, t4 - t3))
    base, retime, at_total, spread = (min(c) for c in zip(*rows, strict=True))
    expected = float((res.demand["weight"] * res.demand["p_in_standard"]).sum())
    covered = float(res.demand.loc[res.demand["covered"], "weight"].sum())
    print(f"network {net.n_nodes:,} nodes, {net.n_edges:,} edges; 30 bases; {len(demand):,} demand points (best of 3)")
    print(f"(a) coverage                         {base:8.3f} s")
    print(f"(b) network_at retiming alone        {retime:8.3f} s   ratio to (a) {retime / base:.3f}")
    print(f"    retiming + coverage              {at_total:8.3f} s   ratio to (a) {at_total / base:.2f}")
    print(f"(c) arrival probability after (a)    {spread:8.3f} s   ratio to (a) {spread / base:.2f}")
    print(f"covered {covered:,.0f}, expected covered with sigma 0.2: {expected:,.0f} (weight)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
