"""Quick what-if against the full recomputation on the demo county, side by side.

Run: ``python benchmarks/bench_whatif.py [--study examples/demo-study.toml] [--repeat 3]``.

The base state is the demo study (both demand layers, every standard, the study's horizon). Each case is answered
twice: by :class:`coverkit.whatif.WhatIf` (searches again only from the bases the change can affect, snaps
again only the points on closed roads) and by the full path a study run takes (``travel_table`` on the changed
network for every demand layer, then ``evaluate_coverage`` for every standard). Both give the same results (the
tests check it bit for bit; here the covered weight is compared as a guard). Prints the best of ``--repeat`` runs
in seconds and the ratio full / what-if. Target: a single-closure what-if under 2 s.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from coverkit import CAUTION
from coverkit.compare_run import whatif_from_study
from coverkit.coverage import evaluate_coverage, travel_table
from coverkit.progress import set_quiet
from coverkit.whatif import WhatIf

REPO = Path(__file__).resolve().parents[1]


def best_of(fn, repeat: int):
    best, out = float("inf"), None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def full_recompute(wi: WhatIf, net, bases) -> dict:
    results = {}
    for name, dem in wi.demand.items():
        table = travel_table(net, bases, dem, wi.horizon_s, wi.demand_snap_m[name], wi.base_snap_m, wi.direction)
        for s in wi.standards:
            results[(s.name, name)] = evaluate_coverage(net, bases, dem, s, table=table)
    return results


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--study", default=str(REPO / "examples" / "demo-study.toml"))
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    set_quiet(True)
    with tempfile.TemporaryDirectory() as cache:
        t0 = time.perf_counter()
        wi = whatif_from_study(args.study, cache_folder=cache)
        t_base = time.perf_counter() - t0
    net = wi.net
    e = net.edges
    n_pts = sum(len(d) for d in wi.demand.values())
    print(
        f"base state: {net.n_nodes} nodes, {net.n_edges} edges, {len(wi.bases)} bases, {n_pts:,} demand points "
        f"in {len(wi.demand)} layers, {len(wi.standards)} standards, horizon {wi.horizon_s:g} s "
        f"(network, inputs and base searches {t_base:.2f} s)"
    )
    bridge_ways = sorted(set(e.loc[e["bridge"] & e["name"].isin(["Ambrel Bridge", "Ferry Bridge", "Oxle Bridge"]),
                                   "source_id"]))  # fmt: skip
    ambrel = int(e.loc[e["bridge"] & (e["name"] == "Ambrel Bridge"), "source_id"].iloc[0])
    cand = pd.read_csv(REPO / "data" / "demo" / "candidates.csv").iloc[0]
    cases = {
        "close Ambrel Bridge (one way id)": lambda: wi.close_ways([ambrel]),
        "close the three river bridges": lambda: wi.close_ways(bridge_ways),
        "close one directed edge": lambda: wi.close_edges([int(np.flatnonzero(e["bridge"])[0])]),
        "residential x 1.5 (winter)": lambda: wi.slow_edges(np.flatnonzero(e["road_class"] == "residential"), 1.5),
        "remove base S3": lambda: wi.change_base("remove", "S3"),
        f"add base at {cand['id']}": lambda: wi.change_base("add", str(cand["id"]), cand["lon"], cand["lat"]),
    }
    print(f"{'case':36s} {'what-if s':>10s} {'full s':>8s} {'full/what-if':>13s}  searched again")
    for label, run in cases.items():
        t_w, out = best_of(run, args.repeat)
        t_f, full = best_of(lambda out=out: full_recompute(wi, out.network, out.bases), args.repeat)
        for key, res in full.items():  # guard: same answer
            assert res.summary()["covered"] == out.results[key].summary()["covered"], key
        print(
            f"{label:36s} {t_w:10.3f} {t_f:8.3f} {t_f / t_w:13.1f}  {len(out.recomputed_bases)}/{len(out.bases)} bases"
        )
    print(CAUTION)


if __name__ == "__main__":
    main()
