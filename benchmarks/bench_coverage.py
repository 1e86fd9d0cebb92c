"""Benchmark: coverage of 100,000 demand points from 30 bases on a ~90,000-node network, against the bare search.

(b) bare search: one ``scipy.sparse.csgraph.dijkstra`` call from the 30 base nodes with the same limit;
(c) coverkit ``evaluate_coverage``: snapping 100,000 points and 30 bases to edges, the bounded search with partial
    edges, first- and second-due bases, coverage depth (how many bases within the standard; reported up to 3+).
Both run side by side in this process; the ratio (c)/(b) is printed (target <= 3). Run:
``python benchmarks/bench_coverage.py``.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
from scipy.sparse.csgraph import dijkstra

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_isochrones import county_inputs, synthetic_network

from coverkit.coverage import Standard, evaluate_coverage, travel_table
from coverkit.progress import set_quiet
from coverkit.travel import snap_points


def main() -> int:
    set_quiet(True)
    net = synthetic_network()
    bases, demand = county_inputs(net)
    std = Standard("8 min", 480.0)
    horizon = 1800.0
    csr = net.csr()
    rows = []
    for _ in range(3):
        t0 = time.perf_counter()
        dijkstra(csr, indices=bases["node"].to_numpy(), limit=horizon)
        t1 = time.perf_counter()
        res = evaluate_coverage(net, bases, demand, std, horizon_s=horizon)
        t2 = time.perf_counter()
        # the same with the points already snapped (a study snaps each layer once for all its standards)
        table = travel_table(net, bases, demand, horizon)
        t3 = time.perf_counter()
        evaluate_coverage(net, bases, demand, std, table=table)
        t4 = time.perf_counter()
        snap_points(net, demand, off_network="mask", warn_islands=False)
        t5 = time.perf_counter()
        rows.append((t1 - t0, t2 - t1, t4 - t3, t5 - t4))
    bare, cov, cov_given, snap = (min(c) for c in zip(*rows, strict=True))
    search_depth = cov - snap
    depth = np.minimum(res.demand["depth"].to_numpy(), 3)
    print(
        f"network {net.n_nodes:,} nodes, {net.n_edges:,} edges; 30 bases; {len(demand):,} demand points; "
        f"horizon {horizon:g} s"
    )
    print(f"(b) bare csgraph dijkstra from 30 nodes     {bare:8.3f} s (best of 3)")
    print(f"(c) coverkit coverage incl. snapping, depth {cov:8.3f} s (best of 3)")
    print(f"    of which snapping 100,000 points to edges {snap:8.3f} s")
    print(f"    search with partial edges, first/second due, depth {search_depth:8.3f} s")
    print(f"    reusing a travel table (next standard)   {cov_given:8.3f} s")
    print(f"ratio (c)/(b) = {cov / bare:.1f} with snapping, {search_depth / bare:.1f} without  (target <= 3)")
    print(
        "depth shares: " + ", ".join(f"{k}{'+' if k == 3 else ''}: {np.mean(depth == k) * 100:.1f} %" for k in range(4))
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
