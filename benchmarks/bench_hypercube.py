"""Speed of the hypercube model: Larson's approximation at scale, the exact model for growing N.

Run: ``python benchmarks/bench_hypercube.py`` (prints figures; asserts nothing).

Instances are synthetic and seeded: units and demand atoms uniform in a 20 km square, travel time the Manhattan
distance at 50 km/h, preference lists closest first, call rates random and scaled to a utilisation of 0.5, mean
service time 45 min, infinite queue.

BLAS threads are pinned to one (unless set by the caller): on a small shared machine the threads spin on the
short vectors of the iterative solver and make timings erratic.
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import time  # noqa: E402

import numpy as np  # noqa: E402

from coverkit import queueing  # noqa: E402
from coverkit.progress import set_quiet  # noqa: E402

SIDE_M = 20_000.0
SPEED_M_PER_S = 50.0 / 3.6
SERVICE_MIN = 45.0
RHO = 0.5
EXACT_BUDGET_S = 10.0


def instance(n_units: int, n_atoms: int, seed: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Call rates (per hour), preference lists and travel times (s) of a seeded synthetic instance."""
    rng = np.random.default_rng(seed)
    units = rng.random((n_units, 2)) * SIDE_M
    atoms = rng.random((n_atoms, 2)) * SIDE_M
    travel_s = np.abs(atoms[:, None, :] - units[None, :, :]).sum(axis=2) / SPEED_M_PER_S
    rates = rng.random(n_atoms)
    rates *= RHO * n_units * 60.0 / SERVICE_MIN / rates.sum()
    return rates, queueing.preference_lists(travel_s), travel_s


def best_of(fn, repeat: int) -> tuple[float, object]:
    """Smallest wall time of ``repeat`` runs, seconds, and the last result."""
    best = float("inf")
    out = None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def main() -> None:
    set_quiet(True)
    n_atoms = 10_000

    print(f"# hypercube approximation, 50 units, {n_atoms} demand atoms, rho = {RHO}")
    rates, pref, travel_s = instance(50, n_atoms, seed=50)
    for queue in ("infinite", "zero"):
        secs, res = best_of(lambda q=queue: queueing.hypercube_approx(rates, pref, SERVICE_MIN, queue=q), 3)
        t0 = time.perf_counter()
        queueing.expected_travel_s(res, travel_s)
        queueing.availability_coverage(res, travel_s, 480.0)
        post = time.perf_counter() - t0
        print(f"queue={queue:8s} solve {secs:.3f} s ({res.iterations} iterations); travel + coverage {post:.3f} s")

    print(f"\n# exact hypercube model, {n_atoms} demand atoms, rho = {RHO}, queue=infinite")
    print("N   states     exact_s   approx_s   approx/exact   max|workload diff|")
    largest = None
    for n in range(4, queueing.EXACT_MAX_UNITS + 1):
        rates, pref, _ = instance(n, n_atoms, seed=n)
        exact_s, exact = best_of(lambda r=rates, p=pref: queueing.hypercube_exact(r, p, SERVICE_MIN), 1)
        approx_s, approx = best_of(lambda r=rates, p=pref: queueing.hypercube_approx(r, p, SERVICE_MIN), 3)
        diff = float(np.max(np.abs(approx.workload - exact.workload)))
        print(
            f"{n:<3d} {1 << n:<10d} {exact_s:8.3f}  {approx_s:8.4f}   {approx_s / exact_s:12.4f}   {diff:.4f}",
            flush=True,
        )
        if exact_s > EXACT_BUDGET_S:
            break
        largest = n
    print(f"\nlargest N solved exactly within {EXACT_BUDGET_S:.0f} s: {largest}")


if __name__ == "__main__":
    main()
