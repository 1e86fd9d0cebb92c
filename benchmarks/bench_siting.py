"""Siting at county size, against a plain greedy pick run side by side in the same process.

Instances are generated here: the 90,000-node synthetic network of ``bench_isochrones.py``, 10 existing bases,
candidate sites and weighted demand points uniform over it, an 8 min travel standard; coverage matrices and travel
times come from the travel engine exactly as ``coverkit site`` builds them (``site_plan.build_problem``).

Rows (``--rows``, default all):

* ``mclp`` -- 500 candidates x 50,000 points, MCLP with ``--add 10`` and its curve (target: whole <= 60 s, every p
  within 0.5 % of the LP bound);
* ``mexclp``, ``backup`` -- the same instance (target <= 120 s);
* ``median`` -- p-median, 500 x 20,000, p = 10 (target <= 60 s, within 1 % of the bound);
* ``cli`` -- the MCLP row as a user runs it: ``coverkit site ... --model mclp --add 10`` in a child process on
  GeoPackages written to a temporary folder (network, bases, candidates, weighted demand points), timed end to
  end with file reading, the travel-time build and the written layers; against the in-process library run of the
  same instance (``build_problem`` + ``solve``, the baseline) as a ratio, and its curve checked equal to it;
* ``scale`` -- 2,000 x 1,000,000, MCLP heuristic with ``--add 20`` (target <= 60 s, <= 6 GB peak memory, measured
  in a child process that loads the saved coverage matrix, so the instance build does not count).

Each row prints the whole time (problem build + curve), the time budget given, per-p statuses and gaps, and as ratios
against the baseline: the answer's objective / the plain greedy pick's (>= 1 is better) and the time ratio.
Timings are wall-clock on whatever else the machine runs: rerun on a quiet machine for figures to quote.
Run: ``python benchmarks/bench_siting.py [--rows mclp,median] [--budget-s 40]``.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import scipy.sparse as sp
import shapely

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_isochrones import synthetic_network

from coverkit import CAUTION, siting
from coverkit.coverage import Standard, travel_table
from coverkit.progress import set_quiet
from coverkit.site_plan import build_problem, covered_share, solve

STANDARD = Standard("8 min", 480.0, 60.0, 0.9)


def points(net, n: int, prefix: str, rng) -> gpd.GeoDataFrame:
    lo, hi = net.xy.min(axis=0), net.xy.max(axis=0)
    xy = lo + rng.random((n, 2)) * (hi - lo)
    return gpd.GeoDataFrame({"id": [f"{prefix}{i}" for i in range(n)]}, geometry=shapely.points(xy), crs=net.crs)


def instance(net, n_candidates: int, n_demand: int, seed: int = 11):
    rng = np.random.default_rng(seed)
    bases = points(net, 10, "B", rng)
    candidates = points(net, n_candidates, "C", rng)
    demand = points(net, n_demand, "D", rng)
    demand["weight"] = rng.gamma(1.0, 20.0, n_demand).round()  # people per point, many small, a few large
    return bases, candidates, demand


def plain_greedy(covers: sp.csr_array, w: np.ndarray, fixed: np.ndarray, p: int) -> tuple[list[float], float]:
    """Baseline: the textbook greedy pick (each step the site adding most weight); covered weight per step."""
    t0 = time.perf_counter()
    at = sp.csr_array(covers.T, dtype=float)
    covered = np.asarray(covers[:, np.flatnonzero(fixed)].sum(axis=1)).ravel() > 0
    out = [float(w[covered].sum())]
    is_open = fixed.copy()
    for _ in range(p):
        gain = at @ (w * ~covered)
        gain[is_open] = -1
        j = int(np.argmax(gain))
        is_open[j] = True
        covered[at[[j]].indices] = True
        out.append(float(w[covered].sum()))
    return out, time.perf_counter() - t0


def report_curve(name: str, plan, t_whole: float, t_build: float, budget: float, greedy, t_greedy, key) -> None:
    c = plan.curve
    gaps = c["gap"].to_numpy()
    proven = c["status"].iloc[1:].str.startswith("proven").sum()
    vals = c[key].to_numpy()
    mono = bool((np.diff(vals) >= -1e-12).all()) if name != "p-median" else bool((np.diff(vals) <= 1e-9).all())
    if name == "backup":  # lexicographic: single cover first, then double cover (which may fall as single rises)
        one, two = c["covered_share"].to_numpy(), vals
        d1, d2 = np.diff(one), np.diff(two)
        mono = bool(((d1 > 1e-12) | ((np.abs(d1) <= 1e-12) & (d2 >= -1e-12))).all())
    print(
        f"{name}: whole {t_whole:.1f} s (problem build {t_build:.1f} s, solving budget {budget:g} s); "
        f"worst gap {np.nanmax(gaps) * 100:.3f} %; proven optimal {proven} of {len(c) - 1} points "
        f"(plus p = 0); curve monotone{' (single, then double)' if name == 'backup' else ''}: {mono}"
    )
    for r in c.itertuples(index=False):
        print(f"  p={r.new_sites:2d} {key} {getattr(r, key):14.4f}  gap {r.gap * 100:7.4f} %  {r.status}")
    if greedy is not None:
        ratio = np.array(c["covered_share"]) / (np.array(greedy) / plan.summary["total_weight"])
        print(
            f"  covered share / plain greedy's: min {ratio[1:].min():.5f}, at p = {len(c) - 1}: {ratio[-1]:.5f}; "
            f"time ratio whole / greedy {t_whole / max(t_greedy, 1e-9):.0f}"
        )


def run_model(net, name: str, budget: float, n_demand: int, add: int = 10, **kw) -> None:
    bases, candidates, demand = instance(net, 500, n_demand)
    t0 = time.perf_counter()
    problem = build_problem(net, bases, candidates, demand, STANDARD)
    t_build = time.perf_counter() - t0
    plan = solve(problem, name, add=add, time_limit_s=budget, **kw)
    t_whole = time.perf_counter() - t0
    greedy, t_greedy = plain_greedy(problem.covers, problem.weights, problem.fixed, len(plan.curve) - 1)
    key = {"p-median": "objective", "backup": "second_share", "mexclp": "objective"}.get(name, "covered_share")
    report_curve(name, plan, t_whole, t_build, budget, None if name == "p-median" else greedy, t_greedy, key)
    if name == "p-median":
        share = covered_share(problem, plan.result.open_sites)
        print(f"  covered within the standard with the p-median's sites {share * 100:.2f} %")


def run_cli(net, budget: float, n_demand: int = 50_000, add: int = 10) -> None:
    bases, candidates, demand = instance(net, 500, n_demand)
    t0 = time.perf_counter()
    problem = build_problem(net, bases, candidates, demand, STANDARD)
    plan = solve(problem, "mclp", add=add, time_limit_s=budget)
    t_lib = time.perf_counter() - t0
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        net.save(folder / "county.gpkg")
        for name, layer in (("bases", bases), ("candidates", candidates), ("demand", demand)):
            layer.to_file(folder / f"{name}.gpkg", driver="GPKG")
        argv = [
            *("site", str(folder / "county.gpkg"), "--bases", str(folder / "bases.gpkg")),
            *("--candidates", str(folder / "candidates.gpkg"), "--demand", str(folder / "demand.gpkg")),
            *("--minutes", f"{STANDARD.travel_s / 60:g}", "--turnout-s", f"{STANDARD.turnout_s:g}"),
            *("--fractile", f"{STANDARD.fractile:g}", "--model", "mclp", "--add", str(add)),
            *("--time-limit-s", f"{budget:g}", "--out", str(folder / "plan.gpkg"), "--quiet"),
        ]
        code = "import sys; from coverkit.cli import main; sys.exit(main(sys.argv[1:]))"
        env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[1])}
        t1 = time.perf_counter()
        out = subprocess.run([sys.executable, "-c", code, *argv], capture_output=True, text=True, env=env)
        t_cli = time.perf_counter() - t1
        if out.returncode != 0:
            print(f"cli: exit {out.returncode}\n{out.stderr.strip()[-2000:]}")
            return
        curves = sorted(folder.rglob("*site_curve*.csv"))
        same = "no curve table found"
        if curves:
            cli_share = pd.read_csv(curves[0])["covered_share"].to_numpy()
            lib_share = plan.curve["covered_share"].to_numpy()
            equal = cli_share.shape == lib_share.shape and np.allclose(cli_share, lib_share)
            same = f"curve equal to the library's: {equal}"
    print(
        f"cli: coverkit site --model mclp --add {add}, 500 x {n_demand:,} points, whole command {t_cli:.1f} s "
        f"(files in, travel times, solving budget {budget:g} s, layers out); in-process library run (baseline) "
        f"{t_lib:.1f} s; ratio cli / library {t_cli / max(t_lib, 1e-9):.2f}; {same}"
    )


def run_scale(net, n_candidates: int, n_demand: int, add: int) -> None:
    bases, candidates, demand = instance(net, n_candidates, n_demand, seed=12)
    t0 = time.perf_counter()
    sites = gpd.GeoDataFrame(
        {"id": list(bases["id"]) + list(candidates["id"])},
        geometry=list(bases.geometry) + list(candidates.geometry),
        crs=net.crs,
    )
    table = travel_table(net, sites, demand, STANDARD.travel_s)
    t = table.times.tocoo()
    ok = t.data <= STANDARD.travel_s
    covers = sp.csr_array((np.ones(int(ok.sum()), bool), (t.col[ok], t.row[ok])), shape=(t.shape[1], t.shape[0]))
    t_build = time.perf_counter() - t0
    fixed = np.zeros(covers.shape[1], bool)
    fixed[: len(bases)] = True
    print(f"scale: {n_candidates} x {n_demand:,} points, {covers.nnz:,} covering pairs, built {t_build:.0f} s")
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "covers.npz"
        sp.save_npz(path, sp.csr_matrix(covers))
        np.save(Path(tmp) / "w.npy", demand["weight"].to_numpy(float))
        np.save(Path(tmp) / "f.npy", fixed)
        for what in ("greedy", "heuristic"):
            out = subprocess.run(
                [sys.executable, __file__, "--child", tmp, "--child-what", what, "--add", str(add)],
                capture_output=True,
                text=True,
                check=True,
            )
            r = json.loads(out.stdout.strip().splitlines()[-1])
            print(
                f"  {what:9s}: {r['seconds']:.1f} s, peak memory {r['peak_gb']:.2f} GB (child process, loading "
                f"included), covered {r['share'] * 100:.3f} %  {r.get('status', '')}"
            )


def child(folder: str, what: str, add: int) -> None:
    covers = sp.csr_array(sp.load_npz(Path(folder) / "covers.npz"))
    w = np.load(Path(folder) / "w.npy")
    fixed = np.load(Path(folder) / "f.npy")
    t0 = time.perf_counter()
    if what == "greedy":
        vals, _ = plain_greedy(covers, w, fixed, add)
        share, status = vals[-1] / w.sum(), "plain greedy (baseline)"
    else:
        res = siting.mclp(covers, w, add, fixed, method="heuristic")
        share, status = res.covered_share, f"{res.status}; gap {res.mip_gap * 100:.3f} % to {res.bound_source}"
    seconds = time.perf_counter() - t0
    peak_gb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024**2
    print(json.dumps({"seconds": seconds, "peak_gb": peak_gb, "share": share, "status": status}))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", default="mclp,mexclp,backup,median,cli,scale")
    ap.add_argument("--budget-s", type=float, default=40.0, help="solving budget of the 60 s rows (mclp, median)")
    ap.add_argument(
        "--budget-long-s",
        type=float,
        default=siting.DEFAULT_TIME_LIMIT_S,
        help="solving budget of mexclp and backup (default: the library's own default budget)",
    )
    ap.add_argument("--scale-demand", type=int, default=1_000_000)
    ap.add_argument("--scale-candidates", type=int, default=2_000)
    ap.add_argument("--add", type=int, default=20)
    ap.add_argument("--child")
    ap.add_argument("--child-what")
    args = ap.parse_args()
    set_quiet(True)
    if args.child:
        child(args.child, args.child_what, args.add)
        return
    net = synthetic_network()
    print(f"synthetic network: {net.n_nodes:,} nodes; standard {STANDARD.describe()}")
    rows = args.rows.split(",")
    if "mclp" in rows:
        run_model(net, "mclp", args.budget_s, 50_000)
    if "mexclp" in rows:
        run_model(net, "mexclp", args.budget_long_s, 50_000, q=0.3)
    if "backup" in rows:
        run_model(net, "backup", args.budget_long_s, 50_000)
    if "median" in rows:
        run_model(net, "p-median", args.budget_s, 20_000)
    if "cli" in rows:
        run_cli(net, args.budget_s)
    if "scale" in rows:
        run_scale(net, args.scale_candidates, args.scale_demand, args.add)
    print(CAUTION)


if __name__ == "__main__":
    main()
