"""Exact MILP (HiGHS) against greedy + interchange on larger seeded instances, side by side.

Run: ``python benchmarks/bench_siting.py [--demand 20000] [--sites 300] [--p 20] [--time-limit 120]``.
Prints seconds, objective values, the heuristic/exact ratios and the heuristic's gap to the LP bound.
Demand points and candidate sites are uniform in a 30 km square; a site covers a point within 2.5 km (a stand-in
for a drive-time standard); p-median travel at 40 km/h straight-line, unreachable beyond 8 km (1800 s penalty
for a point no open site reaches).
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import scipy.sparse as sp
from scipy.spatial import cKDTree

from coverkit import CAUTION, siting


def instance(n_demand: int, n_sites: int, seed: int = 7):
    rng = np.random.default_rng(seed)
    side_m = 30_000.0
    dem = rng.random((n_demand, 2)) * side_m
    sites = rng.random((n_sites, 2)) * side_m
    weights = rng.integers(0, 120, n_demand).astype(float)
    tree = cKDTree(sites)
    covers = tree.sparse_distance_matrix(cKDTree(dem), 2_500.0, output_type="coo_matrix").T
    covers = sp.csr_array((np.ones(covers.nnz, dtype=bool), (covers.row, covers.col)), shape=(n_demand, n_sites))
    near = tree.sparse_distance_matrix(cKDTree(dem), 8_000.0, output_type="coo_matrix").T
    travel_s = sp.csr_array((near.data / (40 / 3.6), (near.row, near.col)), shape=(n_demand, n_sites))
    fixed = np.zeros(n_sites, dtype=bool)
    fixed[rng.choice(n_sites, 5, replace=False)] = True
    return covers, weights, fixed, travel_s


def compare(name: str, run, maximise: bool) -> None:
    t0 = time.perf_counter()
    exact = run("milp")
    t_exact = time.perf_counter() - t0
    t0 = time.perf_counter()
    heur = run("heuristic")
    t_heur = time.perf_counter() - t0
    ratio = heur.objective / exact.objective if exact.objective else float("nan")
    print(
        f"{name:10s} milp {t_exact:8.2f} s  obj {exact.objective:14.2f}  status {exact.status!r}  "
        f"gap {exact.mip_gap:.2e}\n"
        f"{'':10s} heur {t_heur:8.2f} s  obj {heur.objective:14.2f}  "
        f"gap to its bound ({heur.bound_source}) {heur.mip_gap:.3%}\n"
        f"{'':10s} heuristic/exact objective {ratio:.5f} ({'higher is better' if maximise else 'lower is better'}), "
        f"time ratio milp/heuristic {t_exact / max(t_heur, 1e-9):.1f}"
    )
    if name == "backup":  # lexicographic: compare (single, double) pairs, not the double cover alone
        print(
            f"{'':10s} (single, double) milp ({exact.covered_weight:.0f}, {exact.second_weight:.0f})  "
            f"heuristic ({heur.covered_weight:.0f}, {heur.second_weight:.0f})  "
            f"single-cover ratio {heur.covered_weight / exact.covered_weight:.5f}"
        )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--demand", type=int, default=20_000)
    ap.add_argument("--sites", type=int, default=300)
    ap.add_argument("--p", type=int, default=20)
    ap.add_argument("--time-limit", type=float, default=120.0)
    ap.add_argument("--median-demand", type=int, default=2_000)
    args = ap.parse_args()
    covers, w, fixed, travel_s = instance(args.demand, args.sites)
    print(
        f"{args.demand} demand points, {args.sites} sites ({fixed.sum()} fixed), p = {args.p}, "
        f"{covers.nnz} covering pairs"
    )
    tl = args.time_limit
    compare("MCLP", lambda m: siting.mclp(covers, w, args.p, fixed, method=m, time_limit_s=tl), True)
    compare("backup", lambda m: siting.backup_coverage(covers, w, args.p, fixed, method=m, time_limit_s=tl), True)
    compare("MEXCLP", lambda m: siting.mexclp(covers, w, args.p, 0.3, fixed, method=m, time_limit_s=tl), True)
    k = args.median_demand
    print(f"p-median on the first {k} demand points, {sp.csr_array(travel_s[:k]).nnz} reachable pairs")
    compare(
        "p-median",
        lambda m: siting.p_median(
            travel_s[:k], w[:k], args.p, fixed, unreached_penalty_s=1800.0, method=m, time_limit_s=tl
        ),
        False,
    )
    print(CAUTION)


if __name__ == "__main__":
    main()
