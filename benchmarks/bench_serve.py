"""`coverkit serve`'s what-if round trip against the engine alone, side by side, on the demo county or county size.

Run: ``python benchmarks/bench_serve.py [--size demo|county] [--study STUDY.toml] [--repeat 9] [--browser]``.

``--size demo`` (default): a study on data/demo (residents and calls, ALS 8 min, as the API tests build it) unless
``--study`` names another. ``--size county``: the 90,000-node synthetic network of ``bench_isochrones.py`` (as
``bench_siting.py`` builds its study-size case on it) with 30 bases and 100,000 weighted demand points, written as a
study whose network cache already holds the synthetic network. Each case (add, move and remove a station, close a
road) is answered three ways in the same process: by HTTP ``POST /api/compare`` to a real uvicorn server on a
loopback port (request, recomputed figures and changed layers, JSON response), by ``BaseState.compare`` (the same
work without HTTP) and by ``WhatIf.run`` (the engine only: figures, no layers). Prints the time the base state
takes to be ready, the median of ``--repeat`` runs in seconds and the ratios; the targets of issue 12 are an HTTP
median under 0.1 s on the demo county (J. Nielsen, *Usability Engineering*, 1993: the limit for an answer that
feels instant) and under 1 s at county size (the limit for an uninterrupted flow of thought, same source).
"""

from __future__ import annotations

import argparse
import socket
import statistics
import sys
import tempfile
import threading
import time
from pathlib import Path

import geopandas as gpd
import httpx
import numpy as np
import pandas as pd
import shapely
import uvicorn

from coverkit import CAUTION
from coverkit.progress import set_quiet
from coverkit.scenario import scenario_from_table
from coverkit.serve.app import create_app
from coverkit.serve.security import new_token
from coverkit.serve.state import BaseState

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_isochrones import synthetic_network

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "data" / "demo"
#: County size: bases and demand points on the synthetic network.
COUNTY_BASES, COUNTY_POINTS = 30, 100_000

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


def _lonlat(net, xy: np.ndarray) -> np.ndarray:
    pts = gpd.GeoSeries(shapely.points(xy), crs=net.crs).to_crs("EPSG:4326")
    return shapely.get_coordinates(pts.to_numpy())


def county_study(folder: Path) -> tuple[Path, dict[str, dict]]:
    """A study on the synthetic network (30 bases, 100,000 points) and its four cases; the network is put in the
    study's network cache so the study reads it instead of building one."""
    from coverkit.study import load_study

    t0 = time.perf_counter()
    net = synthetic_network()
    rng = np.random.default_rng(21)
    lo, hi = net.xy.min(axis=0), net.xy.max(axis=0)
    # bases on a jittered 6 x 5 lattice over the county, as stations spread over a district
    gx, gy = np.meshgrid((np.arange(6) + 0.5) / 6, (np.arange(5) + 0.5) / 5)
    bxy = lo + (np.column_stack([gx.ravel(), gy.ravel()]) + rng.uniform(-0.03, 0.03, (30, 2))) * (hi - lo)
    ll = _lonlat(net, bxy)
    ids = [f"S{i:02d}" for i in range(COUNTY_BASES)]
    pd.DataFrame({"id": ids, "name": ids, "lon": ll[:, 0], "lat": ll[:, 1], "units": 1}).to_csv(
        folder / "bases.csv", index=False, float_format="%.7f"
    )
    dxy = lo + rng.random((COUNTY_POINTS, 2)) * (hi - lo)
    ll = _lonlat(net, dxy)
    weight = rng.gamma(1.0, 20.0, COUNTY_POINTS).round() + 1  # people per point, many small, a few large
    pd.DataFrame({"id": np.arange(COUNTY_POINTS), "lon": ll[:, 0], "lat": ll[:, 1], "weight": weight}).to_csv(
        folder / "demand.csv", index=False, float_format="%.7f"
    )
    (folder / "roads.txt").write_text("synthetic network: see the network cache\n")
    path = folder / "study.toml"
    path.write_text(
        f"""[study]
name = "serve benchmark, county size"
[roads]
source = "{folder / "roads.txt"}"
crs = "{net.crs.to_string()}"
[bases]
file = "{folder / "bases.csv"}"
[[demand]]
name = "residents"
points = "{folder / "demand.csv"}"
kind = "residents"
[[standard]]
name = "ALS 8 min"
turnout_s = 60
travel_s = 480
[outputs]
folder = "{folder / "out"}"
"""
    )
    from coverkit.layer_names import output_file

    net.info["cache_key"] = load_study(path).network_cache_key()
    (folder / "out").mkdir()
    net.save(output_file(folder / "out", "network"))
    # the roads at a junction 1 km east of the middle base (on its shortest paths, not cutting it off)
    mid = bxy[14] + np.array([1000.0, 0.0])
    node = int(np.argmin(((net.xy - mid) ** 2).sum(axis=1)))
    near = np.flatnonzero((net.u == node) | (net.v == node))
    move_to, add_at = _lonlat(net, (bxy[7] + bxy[8]) / 2)[0], _lonlat(net, (bxy[14] + bxy[20]) / 2)[0]
    cases = {
        "add station": {"base_change": [{"add": {"id": "N1", "lon": add_at[0], "lat": add_at[1]}}]},
        "move S07": {"base_change": [{"move": {"id": "S07", "lon": move_to[0], "lat": move_to[1]}}]},
        "remove S03": {"base_change": [{"remove": "S03"}]},
        "close a junction": {"closure": [{"edge_ids": [int(e) for e in near]}]},
    }
    print(f"county study written: {net.n_nodes:,} nodes, {COUNTY_BASES} bases, {COUNTY_POINTS:,} points "
          f"({time.perf_counter() - t0:.1f} s)", flush=True)  # fmt: skip
    return path, cases


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
    ap.add_argument("--size", choices=("demo", "county"), default="demo")
    ap.add_argument("--study", default=None, help="study TOML (default: one built on data/demo)")
    ap.add_argument("--repeat", type=int, default=9)
    ap.add_argument(
        "--browser", action="store_true", help="also time the page's first map render in the system's Chromium"
    )
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        cases = CASES
        if args.size == "county":
            study, cases = county_study(Path(tmp))
            print("building the base state (network search, 100,000 points, area grid, base layers) ...", flush=True)
        else:
            set_quiet(True)
            study = Path(args.study) if args.study else demo_study(Path(tmp))
        t0 = time.perf_counter()
        state = BaseState(study)
        t_base = time.perf_counter() - t0
        set_quiet(True)
        w = state.whatif
        n_pts = sum(len(d) for d in w.demand.values())
        print(
            f"base state: {w.net.n_nodes} nodes, {w.net.n_edges} edges, {len(w.bases)} bases, {n_pts:,} demand "
            f"points, {len(state.stages)} standards, ready in {t_base:.2f} s (network, searches, base layers)"
        )
        measure(state, cases, args.repeat)
        if args.browser:
            first_render(state, args.repeat)
    print(CAUTION)


def measure(state: BaseState, cases: dict[str, dict], repeat: int) -> None:
    """The medians of every case by HTTP, by BaseState.compare and by WhatIf.run, and their ratios."""
    w = state.whatif
    token = new_token()
    url, server, thread = start_server(state, token)
    print(f"{'case':22s} {'HTTP s':>8s} {'compare s':>10s} {'WhatIf.run s':>13s} {'HTTP/run':>9s} {'HTTP/cmp':>9s}")
    with httpx.Client(base_url=url, params={"token": token}, timeout=600) as client:
        for label, change in cases.items():
            body = {"scenario": {"name": label}, **change}
            scenario = scenario_from_table(body, where=label)

            def http(body=body):
                r = client.post("/api/compare", json=body)
                assert r.status_code == 200, r.text
                return r.json()

            rows = http()["rows"]
            assert rows == state.compare(scenario)["rows"], label  # guard: the same answer both ways
            assert any(r["lost_weight"] or r["gained_weight"] for r in rows), label  # the case changes coverage
            t_http = median_of(http, repeat)
            t_cmp = median_of(lambda s=scenario: state.compare(s), repeat)
            t_run = median_of(lambda s=scenario: w.run(s), repeat)
            print(f"{label:22s} {t_http:8.3f} {t_cmp:10.3f} {t_run:13.3f} {t_http / t_run:9.2f} {t_http / t_cmp:9.2f}")
    server.should_exit = True
    thread.join(timeout=10)


def first_render(state: BaseState, repeat: int) -> None:
    """The page's first map render (``document.body.dataset.firstRenderMs``: performance.now() at the first frame
    after the study, roads and layers are drawn) in headless Chromium from the system packages, median of
    ``repeat`` fresh loads, beside the time the same browser takes to load the bare page text (the baseline)."""
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    opts = webdriver.ChromeOptions()
    opts.binary_location = "/usr/bin/chromium"
    for a in ("--headless=new", "--no-sandbox", "--disable-gpu", "--window-size=1400,900"):
        opts.add_argument(a)
    token = new_token()
    url, server, thread = start_server(state, token)
    driver = webdriver.Chrome(service=Service("/usr/bin/chromedriver"), options=opts)
    try:
        renders, bare = [], []
        for _ in range(repeat):
            driver.get(f"{url}/?token={token}")
            t0 = time.perf_counter()
            while driver.execute_script("return document.body.dataset.firstRenderMs") is None:
                if time.perf_counter() - t0 > 60:
                    raise RuntimeError("the page did not render within 60 s")
                time.sleep(0.02)
            renders.append(float(driver.execute_script("return document.body.dataset.firstRenderMs")) / 1000.0)
            driver.get(f"{url}/api/openapi.json")
            loaded = "return performance.timing.loadEventEnd - performance.timing.navigationStart"
            bare.append(driver.execute_script(loaded) / 1000.0)
        r, b = statistics.median(renders), statistics.median(bare)
        print(f"first map render in Chromium: {renders[0]:.3f} s on the first load, {r:.3f} s median of {repeat} loads "
              f"(a bare JSON page {b:.3f} s, ratio {r / max(b, 1e-3):.1f}); target 2 s")  # fmt: skip
    finally:
        driver.quit()
        server.should_exit = True
        thread.join(timeout=10)


if __name__ == "__main__":
    main()
