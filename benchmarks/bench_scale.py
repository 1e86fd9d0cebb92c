"""Metro and state scale: whole commands on generated data, wall time and peak memory beside their floors.

Run: ``python benchmarks/bench_scale.py --case cover [--n-side 1000] [--bases 300] [--points 1000000]
[--minutes 8] [--work DIR] [--workers 4]``.

``--case cover``: the synthetic county of ``bench_isochrones.py`` (``--n-side`` squared nodes: 1000 gives a million)
with ``--bases`` bases and ``--points`` weighted demand points at random places, generated here and kept in
``--work`` (reused when present: the network's GeoPackage takes a while to write). ``coverkit cover`` runs as a
child process; its wall time and peak resident size (``resource.getrusage(RUSAGE_CHILDREN)``) are reported beside
the floor measured in another child of the same run on the same data: loading the network, one multi-source search
for the first-due times and the bases' searches bounded at the travel standard (no tables, no points, no files).
The ratios are what to watch; the targets of issue 13 are <= 60 s and <= 4 GB for the whole command at a million
nodes, 300 bases and a million points.

``--workers N`` also runs the same command on a local Dask cluster of N worker processes (one thread each, as
``coverkit cover --workers N`` starts it), started here so each worker's peak resident size can be read from the
worker itself (``client.run``) before the cluster stops: the command gets ``--scheduler`` with the cluster's
address. Reported: its wall time beside the single-process run, the command process's own peak (``os.wait4``),
each worker's peak, and whether every layer it wrote equals the single-process output (it must).

Other cases (network build and load) can be added beside ``cover`` as further ``--case`` values.

Careful on a shared machine: run large cases under a memory cap, e.g. ``bash -c 'ulimit -v 12000000; python
benchmarks/bench_scale.py --case cover --n-side 500'``, and try 250,000 nodes before a million.

Results are planning estimates, not for live dispatch; see ``coverkit.CAUTION``.
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
REPO = HERE.parent
# this checkout's coverkit, here and in the children: the scheduler and workers of the cluster case start with this
# process's import path, and every part of a cluster must run the command's version of coverkit
sys.path.insert(0, str(REPO))

#: The floor, run in a child process: network load, one multi-source search, the bounded searches.
FLOOR_CODE = """
import sys, time
import numpy as np
from coverkit.network import RoadNetwork
from coverkit.travel import read_points, snap_points
from coverkit.travel.reach import nearest_k_nodes
from coverkit.travel.search import node_time_blocks
t0 = time.perf_counter()
net = RoadNetwork.load(sys.argv[1])
bases = read_points(sys.argv[2], net.crs, what="bases")
snap = snap_points(net, bases, off_network="raise", what="bases")
t1 = time.perf_counter()
nearest_k_nodes(net, snap, float(sys.argv[3]), k=1)
t2 = time.perf_counter()
for _ in node_time_blocks(net, snap, float(sys.argv[4])):
    pass
t3 = time.perf_counter()
print(f"{t1 - t0:.3f} {t2 - t1:.3f} {t3 - t2:.3f}")
"""


def peak_children_gb() -> float:
    """Peak resident size of the largest child waited for so far (GB; Linux reports KiB)."""
    return resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss * 1024 / 1e9


def run_child(cmd: list[str], env: dict[str, str]) -> tuple[float, float, int, str]:
    """Run ``cmd``; its wall time (s), its own peak resident size (GB, from ``os.wait4``), exit status, stderr."""
    with tempfile.TemporaryFile("w+") as err:
        t0 = time.perf_counter()
        child = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=err, env=env, text=True)
        _, status, usage = os.wait4(child.pid, 0)
        wall = time.perf_counter() - t0
        child.returncode = os.waitstatus_to_exitcode(status)
        err.seek(0)
        return wall, usage.ru_maxrss * 1024 / 1e9, child.returncode, err.read()


def worker_rss_gb() -> tuple[float, float]:
    """On a worker: (resident size now, peak resident size) in GB (Linux reports the peak in KiB)."""
    with open("/proc/self/statm") as f:
        now = int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE") / 1e9
    return now, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024 / 1e9


def same_layers(a: Path, b: Path) -> tuple[bool, str]:
    """Whether two GeoPackages hold the same layers with equal values (geometry as WKB); the first difference."""
    import pyogrio

    names = sorted(n for n, _ in pyogrio.list_layers(a))
    if names != sorted(n for n, _ in pyogrio.list_layers(b)):
        return False, "layer names differ"
    for name in names:
        fa = pyogrio.read_dataframe(a, layer=name, read_geometry=True)
        fb = pyogrio.read_dataframe(b, layer=name, read_geometry=True)
        if list(fa.columns) != list(fb.columns) or len(fa) != len(fb):
            return False, f"{name}: columns or rows differ"
        for col in fa.columns:
            if col == "geometry":
                if not (fa.geometry.to_wkb() == fb.geometry.to_wkb()).all():
                    return False, f"{name}.geometry"
            elif not fa[col].equals(fb[col]):
                return False, f"{name}.{col}"
    return True, f"{len(names)} layers equal"


def case_cover_cluster(args, cmd: list[str], env: dict[str, str], out: Path, wall_1: float) -> None:
    """The same ``coverkit cover`` on a local cluster of ``args.workers`` processes: time, peaks, same output."""
    from dask.distributed import Client, LocalCluster

    t0 = time.perf_counter()
    cluster = LocalCluster(n_workers=args.workers, threads_per_worker=1, processes=True, dashboard_address=None)
    client = Client(cluster)
    start_s = time.perf_counter() - t0
    try:
        before = client.run(worker_rss_gb)
        out_d = out.with_name("cover_out_dask.gpkg")
        wall, peak_gb, rc, err = run_child(
            [*cmd[:-2], str(out_d), "--quiet", "--scheduler", cluster.scheduler_address], env
        )
        if rc != 0:
            print(err[-4000:])
            raise SystemExit(f"coverkit cover --scheduler exited {rc}")
        after = client.run(worker_rss_gb)
    finally:
        client.close()
        cluster.close()
    same, what = same_layers(out, out_d)
    print(f"  {args.workers} Dask workers (local cluster, 1 thread each; started in {start_s:.1f} s, not counted)")
    print(f"    whole command      {wall:8.1f} s   command process peak {peak_gb:5.2f} GB   {wall / wall_1:5.2f} x the "
          f"single-process time")  # fmt: skip
    for i, addr in enumerate(sorted(after)):
        print(f"    worker {i}           peak {after[addr][1]:5.2f} GB (idle after start {before[addr][0]:4.2f} GB)")
    print(f"    output             {'identical' if same else 'DIFFERENT'} to the single-process run ({what})")
    print(f"    machine            {os.cpu_count()} cores (workers beyond the cores share them)")


def make_cover_inputs(work: Path, n_side: int, n_bases: int, n_points: int, seed: int = 13) -> dict[str, Path]:
    """The synthetic network (GeoPackage), bases (CSV, degrees) and weighted points (GeoPackage) in ``work``."""
    import geopandas as gpd
    import pandas as pd
    import shapely
    from pyproj import Transformer

    sys.path.insert(0, str(HERE))
    from bench_isochrones import synthetic_network

    work.mkdir(parents=True, exist_ok=True)
    net_path = work / f"net_{n_side}.gpkg"
    bases_path = work / f"bases_{n_side}_{n_bases}.csv"
    points_path = work / f"points_{n_side}_{n_points}.gpkg"
    if net_path.exists() and bases_path.exists() and points_path.exists():
        return {"network": net_path, "bases": bases_path, "demand": points_path}
    t0 = time.perf_counter()
    net = synthetic_network(n_side=n_side)
    print(f"generated {net.n_nodes:,} nodes, {net.n_edges:,} edges in {time.perf_counter() - t0:.1f} s", flush=True)
    rng = np.random.default_rng(seed)
    x0, y0, x1, y1 = net.nodes.total_bounds
    bx = rng.uniform(x0 + 0.02 * (x1 - x0), x1 - 0.02 * (x1 - x0), n_bases)
    by = rng.uniform(y0 + 0.02 * (y1 - y0), y1 - 0.02 * (y1 - y0), n_bases)
    lon, lat = Transformer.from_crs(net.crs, "EPSG:4326", always_xy=True).transform(bx, by)
    pd.DataFrame({"id": [f"B{i:03d}" for i in range(n_bases)], "lon": lon, "lat": lat}).to_csv(bases_path, index=False)
    px, py = rng.uniform(x0, x1, n_points), rng.uniform(y0, y1, n_points)
    points = gpd.GeoDataFrame(
        {"id": np.arange(n_points).astype(str), "weight": rng.integers(1, 30, n_points).astype(float)},
        geometry=shapely.points(np.column_stack([px, py])),
        crs=net.crs,
    )
    points.to_file(points_path, driver="GPKG", engine="pyogrio")
    t0 = time.perf_counter()
    net.save(net_path)
    print(f"saved the network in {time.perf_counter() - t0:.1f} s", flush=True)
    return {"network": net_path, "bases": bases_path, "demand": points_path}


def case_cover(args: argparse.Namespace) -> None:
    """``coverkit cover`` at scale beside its floor."""
    from coverkit.coverage import Standard, default_horizon_s

    files = make_cover_inputs(Path(args.work), args.n_side, args.bases, args.points)
    travel_s = args.minutes * 60.0
    horizon_s = default_horizon_s(Standard("x", travel_s))
    env_python = [sys.executable]
    # the children import coverkit from this checkout
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(REPO), os.environ.get("PYTHONPATH", "")])}
    t0 = time.perf_counter()
    floor = subprocess.run(
        [*env_python, "-c", FLOOR_CODE, str(files["network"]), str(files["bases"]), str(horizon_s), str(travel_s)],
        check=True,
        capture_output=True,
        text=True,
        env=env,
    )
    floor_wall = time.perf_counter() - t0
    floor_gb = peak_children_gb()
    load_s, multi_s, bounded_s = (float(x) for x in floor.stdout.split())
    out = Path(args.work) / "cover_out.gpkg"
    cmd = [
        *env_python, "-m", "coverkit", "cover", str(files["network"]), "--bases", str(files["bases"]),
        "--demand", str(files["demand"]), "--minutes", f"{args.minutes:g}", "--out", str(out), "--quiet",
    ]  # fmt: skip
    wall, own_gb, rc, err = run_child(cmd, env)
    peak_gb = max(own_gb, floor_gb)  # as before: the largest child so far
    if rc != 0:
        print(err[-4000:])
        raise SystemExit(f"coverkit cover exited {rc}")
    search_s = multi_s + bounded_s
    print(
        f"cover: {args.n_side**2:,} nodes, {args.bases} bases, {args.points:,} points, {args.minutes:g} min "
        f"(horizon {horizon_s:g} s)"
    )
    print(f"  whole command        {wall:8.1f} s   peak {peak_gb:5.2f} GB")
    print(
        f"  floor (child)        {floor_wall:8.1f} s   peak {floor_gb:5.2f} GB   (load {load_s:.1f} s, "
        f"one multi-source search {multi_s:.2f} s, {args.bases} searches within {travel_s:g} s {bounded_s:.2f} s)"
    )
    print(f"  ratio to the bare searches   {wall / search_s:6.1f} x time")
    print(f"  ratio to the floor child     {wall / floor_wall:6.1f} x time, {peak_gb / floor_gb:5.2f} x memory")
    print("  targets (issue 13, 1 M nodes, 300 bases, 1 M points): <= 60 s, <= 4 GB")
    if args.workers:
        case_cover_cluster(args, cmd, env, out, wall)


CASES = {"cover": case_cover}


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--case", choices=sorted(CASES), default="cover")
    p.add_argument("--n-side", type=int, default=1000, help="grid side: n_side^2 nodes (1000: a million)")
    p.add_argument("--bases", type=int, default=300)
    p.add_argument("--points", type=int, default=1_000_000)
    p.add_argument("--minutes", type=float, default=8.0, help="travel standard (min)")
    p.add_argument("--workers", type=int, default=0, help="also run on a local Dask cluster of this many workers")
    work = Path(tempfile.gettempdir()) / "coverkit_bench_scale"
    p.add_argument("--work", default=str(work), help="folder for the generated data (reused)")
    args = p.parse_args()
    CASES[args.case](args)


if __name__ == "__main__":
    main()
