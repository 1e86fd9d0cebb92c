"""Benchmark: the response-system simulation, and the choice of its event engine by measurement.

Engines, side by side on the same calls and draws (one replication, one process): the compiled loop coverkit
uses (:mod:`coverkit.simulate.kernel`, numba), the same model as a plain Python heap loop
(:mod:`coverkit.simulate.heap_loop`) and on SimPy (``benchmarks/simpy_loop.py``, when ``simpy`` imports; add it
with ``pip install simpy`` or ``PYTHONPATH=<folder with simpy>``). Then the whole simulation, replications in
worker processes, as ``coverkit.simulate.run.simulate`` runs it:

(a) the demo county's year of incidents (``data/demo``: 6,042 calls), 20 replications - target <= 10 s;
(b) 100,000 synthetic Poisson calls on the 90,000-node synthetic network with 30 one-unit bases
    (``bench_isochrones.synthetic_network``), 20 replications - target <= 60 s on 2 cores.

The travel tables (two sparse tables from the engine, out and back) are timed apart from the replications.
Run: ``python benchmarks/bench_simulate.py [--skip-size]``. Prints figures; asserts nothing.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import geopandas as gpd
import numpy as np
import shapely

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_isochrones import synthetic_network

from coverkit.coverage import Standard
from coverkit.progress import set_quiet
from coverkit.settings import SimulationSettings
from coverkit.simulate.calls import draw_calls
from coverkit.simulate.heap_loop import run_calls_heap
from coverkit.simulate.kernel import run_calls
from coverkit.simulate.replicate import default_processes
from coverkit.simulate.run import call_source, simulate
from coverkit.simulate.system import fleet_on_network
from coverkit.simulate.variates import call_draws

ROOT = Path(__file__).resolve().parents[1]
STANDARDS = (Standard("ALS 8 min", 480.0, 60.0, 0.9),)
REPLICATIONS = 20


def _engines():
    engines = {"compiled loop (numba)": run_calls, "plain heap loop (Python)": run_calls_heap}
    try:
        from simpy_loop import run_calls_simpy

        engines["SimPy 4"] = run_calls_simpy
    except ImportError:
        print("  (SimPy not importable: its figure is left out)")
    return engines


def engine_race(fleet, source, cfg) -> None:
    """One replication on each engine, same calls and draws; the ratio to the compiled loop and agreement."""
    t, point, prio = draw_calls(source, np.random.default_rng(np.random.SeedSequence(cfg.seed, spawn_key=(0, 0))))
    keep = fleet.served[point]
    t, point, prio = t[keep], point[keep], prio[keep]
    service, turnout, mult = call_draws(np.random.SeedSequence(cfg.seed, spawn_key=(0, 1)), t.size, point, cfg, 60.0)
    args = (t, point, prio, service, turnout, mult, fleet.unit_station, fleet.out_s, fleet.back_s, np.inf,
            len(source.priority_labels))  # fmt: skip
    run_calls(*args)  # compile (or load the cache) outside the timing
    ref, base_s = None, None
    for name, fn in _engines().items():
        t0 = time.perf_counter()
        out = fn(*args)
        dt = time.perf_counter() - t0
        ref, base_s = (out, dt) if ref is None else (ref, base_s)
        same = all(np.allclose(a, b, rtol=0, atol=1e-6) for a, b in zip(out, ref, strict=True))
        print(f"  {name:<26}{dt:8.3f} s per replication  x{dt / base_s:8.1f}  same calls and units: {same}")


def whole_run(label, net, bases, demand, cfg) -> None:
    t0 = time.perf_counter()
    fleet = fleet_on_network(net, bases, demand, 500.0)
    t_tables = time.perf_counter() - t0
    source = call_source(demand, cfg)
    print(f"{label}: {len(fleet.unit_id)} units, {demand.shape[0]:,} points; travel tables {t_tables:.1f} s")
    engine_race(fleet, source, cfg)
    t0 = time.perf_counter()
    run = simulate(net, bases, demand, STANDARDS, cfg)
    dt = time.perf_counter() - t0
    calls = run.summary["calls"].iloc[0]
    print(f"  simulate(): {REPLICATIONS} replications x {calls:,.0f} calls on {default_processes()} processes: "
          f"{dt:.1f} s in all (tables included)")  # fmt: skip
    print(f"  ALS 8 min within {run.intervals.set_index('figure').loc['covered_share_als_8_min', 'mean'] * 100:.1f} %")


def demo() -> None:
    from coverkit.compare_run import study_inputs

    inputs = study_inputs(ROOT / "examples" / "demo-study.toml", cache_folder=ROOT / "results")
    cfg = SimulationSettings(replications=REPLICATIONS)
    whole_run("(a) demo county, replayed incidents", inputs["network"], inputs["bases"], inputs["demand"]["calls"],
              cfg)  # fmt: skip


def size() -> None:
    net = synthetic_network()
    rng = np.random.default_rng(21)
    lo, hi = net.xy.min(axis=0), net.xy.max(axis=0)
    gx, gy = np.meshgrid((np.arange(6) + 0.5) / 6, (np.arange(5) + 0.5) / 5)
    bxy = lo + (np.column_stack([gx.ravel(), gy.ravel()]) + rng.uniform(-0.03, 0.03, (30, 2))) * (hi - lo)
    bases = gpd.GeoDataFrame({"id": [f"S{i:02d}" for i in range(30)], "units": 1},
                             geometry=shapely.points(bxy), crs=net.crs)  # fmt: skip
    n = 100_000
    dxy = lo + rng.random((n, 2)) * (hi - lo)
    demand = gpd.GeoDataFrame({"id": np.arange(n), "weight": rng.gamma(1.0, 20.0, n).round() + 1},
                              geometry=shapely.points(dxy), crs=net.crs)  # fmt: skip
    # 100,000 calls: 10 per hour over 10,000 h; 45 min busy is 7.5 erlang on 30 units, plus travel. (At 20 per hour
    # the county is overloaded: queued calls send units across it, the busy time grows and the queue runs away.)
    cfg = SimulationSettings(calls="synthetic", calls_per_h=10.0, hours=10_000.0, replications=REPLICATIONS)
    whole_run("(b) synthetic network, Poisson calls", net, bases, demand, cfg)


if __name__ == "__main__":
    set_quiet(True)
    demo()
    if "--skip-size" not in sys.argv:
        size()
