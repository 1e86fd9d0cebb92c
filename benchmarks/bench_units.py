"""Benchmark: standards by unit type and force against today's plain standard, on the same inputs side by side.

The 90,000-node synthetic network (``bench_isochrones.synthetic_network``), 30 bases, 100,000 demand points and a
fleet of 3 types (an engine at every base, a ladder at every third, a medic unit at every other; 55 units):

(a) plain: ``evaluate_coverage`` under an 8 min travel standard, no units (today's run);
(b) the same call with the fleet under a standard by type (second engine), by force (15 people) and by assignment
    (engine=2, ladder=1, medic-als=1), each from scratch (snapping, searches, arrivals, and the arrival times past
    the standard up to the horizon: the k-nearest searches of ``coverkit.unit_reach``).

Ratios (b)/(a) are printed (target <= 3). Run: ``python benchmarks/bench_units.py``.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_isochrones import county_inputs, synthetic_network

from coverkit.coverage import Standard, evaluate_coverage
from coverkit.progress import set_quiet
from coverkit.units import fleet_from_table

N_BASES, N_POINTS, REPEATS = 30, 100_000, 2


def _fleet(ids: list[str]):
    rows = []
    for i, b in enumerate(ids):
        rows.append((f"E{i}", b, "engine", 4))
        if i % 3 == 0:
            rows.append((f"L{i}", b, "ladder", 4))
        if i % 2 == 0:
            rows.append((f"M{i}", b, "medic-als", 2))
    return fleet_from_table(pd.DataFrame(rows, columns=["unit_id", "base_id", "type", "staffing"]), ids)


def main() -> int:
    set_quiet(True)
    net = synthetic_network()
    bases, demand = county_inputs(net, N_BASES, N_POINTS)
    ids = bases["id"].tolist()
    fleet = _fleet(ids)
    horizon = 1800.0
    cases = {
        "second engine": Standard("e2", 480.0, unit_type="engine", nth=2),
        "force 15 people": Standard("f15", 480.0, personnel=15),
        "assignment E2+L1+M1": Standard("asg", 480.0, assignment=(("engine", 2), ("ladder", 1), ("medic-als", 1))),
    }
    plain = Standard("plain", 480.0)
    best = {name: np.inf for name in ["plain", *cases]}
    for _ in range(REPEATS):
        t0 = time.perf_counter()
        evaluate_coverage(net, bases, demand, plain, horizon_s=horizon)
        best["plain"] = min(best["plain"], time.perf_counter() - t0)
        for name, std in cases.items():
            t0 = time.perf_counter()
            evaluate_coverage(net, bases, demand, std, horizon_s=horizon, fleet=fleet)
            best[name] = min(best[name], time.perf_counter() - t0)
    print(
        f"network {net.n_nodes:,} nodes, {net.n_edges:,} edges; {N_BASES} bases; {len(fleet)} units of "
        f"{len(fleet.types)} types; {N_POINTS:,} demand points; 480 s standard, horizon {horizon:g} s"
    )
    print(f"(a) plain standard, no units          {best['plain']:8.3f} s (best of {REPEATS})")
    for name in cases:
        ratio = best[name] / best["plain"]
        print(f"(b) {name:<34}{best[name]:8.3f} s  ratio (b)/(a) = {ratio:.2f}  (target <= 3)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
