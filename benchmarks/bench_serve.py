"""`coverkit serve`'s what-if round trip against the engine alone, side by side on the demo county.

Run: ``python benchmarks/bench_serve.py [--study STUDY.toml] [--repeat 9]``.

The base state is a study on data/demo (residents and calls, ALS 8 min, as the API tests build it) unless
``--study`` names another. Each case (add, move and remove a station, close a road by name) is answered three ways
in the same process: by HTTP ``POST /api/compare`` to a real uvicorn server on a loopback port (request, recomputed
figures and changed layers, JSON response), by ``BaseState.compare`` (the same work without HTTP) and by
``WhatIf.run`` (the engine only: figures, no layers). Prints the median of ``--repeat`` runs in seconds and the
ratios; the target of issue 12 is an HTTP median under 0.1 s on the demo county (J. Nielsen, *Usability
Engineering*, 1993). The 90,000-node synthetic network is not measured here (its base state alone takes too long
for a quick benchmark).
"""

from __future__ import annotations

import argparse
import socket
import statistics
import tempfile
import threading
import time
from pathlib import Path

import httpx
import uvicorn

from coverkit import CAUTION
from coverkit.progress import set_quiet
from coverkit.scenario import scenario_from_table
from coverkit.serve.app import create_app
from coverkit.serve.security import new_token
from coverkit.serve.state import BaseState

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "data" / "demo"

CASES = {
    "add station at C05": {"base_change": [{"add": {"id": "N1", "lon": -34.875526, "lat": 41.058088}}]},
    "move S4 to C12": {"base_change": [{"move": {"id": "S4", "lon": -34.954717, "lat": 41.037323}}]},
    "remove S3": {"base_change": [{"remove": "S3"}]},
    "close Ambrel Bridge": {"closure": [{"road_name": "Ambrel Bridge"}]},
}


def demo_study(folder: Path) -> Path:
    path = folder / "study.toml"
    path.write_text(
        f"""[study]
name = "serve benchmark"
[roads]
source = "{DEMO / "varrowby.osm.bz2"}"
boundary = "{DEMO / "boundary.geojson"}"
[bases]
file = "{DEMO / "stations.csv"}"
[[demand]]
name = "residents"
raster = "{DEMO / "population.tif"}"
[[demand]]
name = "calls"
points = "{DEMO / "incidents.csv"}"
kind = "incidents"
[[standard]]
name = "ALS 8 min"
turnout_s = 60
travel_s = 480
[outputs]
folder = "{folder / "out"}"
"""
    )
    return path


def median_of(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def start_server(state: BaseState, token: str) -> tuple[str, uvicorn.Server, threading.Thread]:
    # as coverkit serve does: with IPPROTO_TCP named asyncio sets TCP_NODELAY (no ~40 ms delayed-ACK stall)
    sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM, socket.IPPROTO_TCP)
    sock.bind(("127.0.0.1", 0))
    port = sock.getsockname()[1]
    app = create_app(state, token=token, hosts={f"127.0.0.1:{port}"})
    server = uvicorn.Server(uvicorn.Config(app, log_level="warning"))
    thread = threading.Thread(target=server.run, kwargs={"sockets": [sock]}, daemon=True)
    thread.start()
    while not server.started:
        time.sleep(0.02)
    return f"http://127.0.0.1:{port}", server, thread


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--study", default=None, help="study TOML (default: one built on data/demo)")
    ap.add_argument("--repeat", type=int, default=9)
    args = ap.parse_args()
    set_quiet(True)
    with tempfile.TemporaryDirectory() as tmp:
        study = Path(args.study) if args.study else demo_study(Path(tmp))
        t0 = time.perf_counter()
        state = BaseState(study)
        t_base = time.perf_counter() - t0
        w = state.whatif
        n_pts = sum(len(d) for d in w.demand.values())
        print(
            f"base state: {w.net.n_nodes} nodes, {w.net.n_edges} edges, {len(w.bases)} bases, {n_pts:,} demand "
            f"points, {len(state.stages)} standards, built in {t_base:.2f} s (network, searches, base layers)"
        )
        token = new_token()
        url, server, thread = start_server(state, token)
        print(f"{'case':22s} {'HTTP s':>8s} {'compare s':>10s} {'WhatIf.run s':>13s} {'HTTP/run':>9s} {'HTTP/cmp':>9s}")
        with httpx.Client(base_url=url, params={"token": token}, timeout=60) as client:
            for label, change in CASES.items():
                body = {"scenario": {"name": label}, **change}
                scenario = scenario_from_table(body, where=label)

                def http(body=body):
                    r = client.post("/api/compare", json=body)
                    assert r.status_code == 200, r.text
                    return r.json()

                rows = http()["rows"]
                assert rows == state.compare(scenario)["rows"], label  # guard: the same answer both ways
                t_http = median_of(http, args.repeat)
                t_cmp = median_of(lambda s=scenario: state.compare(s), args.repeat)
                t_run = median_of(lambda s=scenario: w.run(s), args.repeat)
                print(
                    f"{label:22s} {t_http:8.3f} {t_cmp:10.3f} {t_run:13.3f} {t_http / t_run:9.2f} {t_http / t_cmp:9.2f}"
                )
        server.should_exit = True
        thread.join(timeout=10)
    print(CAUTION)


if __name__ == "__main__":
    main()
