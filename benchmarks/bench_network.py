"""Benchmark: road data to a saved network, on the demo county and on a synthetic ~200,000-node PBF.

Run: ``python benchmarks/bench_network.py [--nodes 200000]``. Each build runs in a fresh child process so that its
peak memory (max RSS) is its own; seconds are wall-clock for read + build + GeoPackage save. The synthetic PBF is a
jittered street grid with shape nodes between junctions, written with pyosmium.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]

CHILD = """
import json, resource, sys, time
from coverkit.progress import set_quiet
from coverkit.network import build_network
set_quiet(True)
t0 = time.perf_counter()
net, report = build_network(sys.argv[1], "emergency")
t1 = time.perf_counter()
net.save(sys.argv[2])
t2 = time.perf_counter()
print(json.dumps({"build_s": t1 - t0, "save_s": t2 - t1, "total_s": t2 - t0, "nodes": net.n_nodes,
                  "edges": net.n_edges, "peak_rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))
"""


def write_synthetic_pbf(path: Path, target_nodes: int, seed: int = 3) -> int:
    """A grid of junctions ~150 m apart with two shape nodes per block side; returns the number of OSM nodes."""
    import osmium
    from osmium.osm.mutable import Node, Way

    shape = 2
    side = int(np.sqrt(target_nodes / (1 + 2 * shape)))
    rng = np.random.default_rng(seed)
    lon0, lat0, step = -35.0, 41.0, 0.0018
    ids = np.arange(side * side).reshape(side, side) + 1
    next_id = side * side + 1
    nodes: list[tuple[int, float, float]] = []
    jitter = rng.normal(0, step * 0.05, size=(side, side, 2))
    for r in range(side):
        for c in range(side):
            nodes.append((int(ids[r, c]), lon0 + c * step + jitter[r, c, 0], lat0 + r * step + jitter[r, c, 1]))
    ways = []
    way_id = 1
    classes = ["residential", "residential", "tertiary", "secondary", "primary"]
    for horizontal in (True, False):
        for r in range(side):
            refs = []
            for c in range(side):
                a = ids[r, c] if horizontal else ids[c, r]
                refs.append(int(a))
                if c < side - 1:
                    b = ids[r, c + 1] if horizontal else ids[c + 1, r]
                    pa, pb = nodes[a - 1], nodes[b - 1]
                    for k in range(1, shape + 1):
                        f = k / (shape + 1)
                        wob = rng.normal(0, step * 0.02)
                        nodes.append((next_id, pa[1] + f * (pb[1] - pa[1]) + wob, pa[2] + f * (pb[2] - pa[2]) + wob))
                        refs.append(next_id)
                        next_id += 1
            tags = {"highway": classes[r % len(classes)], "name": f"Grid {'Row' if horizontal else 'Col'} {r}"}
            if r % 7 == 3:
                tags["maxspeed"] = "50"
            ways.append((way_id, refs, tags))
            way_id += 1
    nodes.sort()
    with osmium.SimpleWriter(str(path)) as writer:
        for nid, lon, lat in nodes:
            tags = {"highway": "traffic_signals"} if nid <= side * side and nid % 97 == 0 else {}
            writer.add_node(Node(id=nid, location=(lon, lat), tags=tags, version=1))
        for wid, refs, tags in ways:
            writer.add_way(Way(id=wid, nodes=refs, tags=tags, version=1))
    return len(nodes)


def run_child(source: Path, out: Path) -> dict:
    proc = subprocess.run([sys.executable, "-c", CHILD, str(source), str(out)], capture_output=True, text=True)
    if proc.returncode != 0:
        raise SystemExit(proc.stderr)
    return json.loads(proc.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--nodes", type=int, default=200_000)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        rows = []
        demo = sorted((REPO / "data" / "demo").glob("*.osm.bz2"))
        if demo:
            rows.append(
                ("demo county (OSM XML, bz2)", demo[0].stat().st_size, None, run_child(demo[0], tmp / "d.gpkg"))
            )
        pbf = tmp / "synthetic.osm.pbf"
        t0 = time.perf_counter()
        n_osm = write_synthetic_pbf(pbf, args.nodes)
        write_s = time.perf_counter() - t0
        rows.append(
            (f"synthetic PBF ({n_osm:,} OSM nodes)", pbf.stat().st_size, write_s, run_child(pbf, tmp / "s.gpkg"))
        )
    print(
        f"{'input':<36}{'MB':>7}{'graph nodes':>13}{'edges':>10}{'build s':>9}{'save s':>8}{'total s':>9}{'peak MB':>9}"
    )
    for name, size, _, r in rows:
        print(
            f"{name:<36}{size / 1e6:>7.1f}{r['nodes']:>13,}{r['edges']:>10,}{r['build_s']:>9.2f}{r['save_s']:>8.2f}"
            f"{r['total_s']:>9.2f}{r['peak_rss_mb']:>9.0f}"
        )
    print("target: ~200k-node PBF to saved network in under 15 s")


if __name__ == "__main__":
    main()
