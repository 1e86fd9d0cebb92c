"""`coverkit serve` under concurrent requests: a real uvicorn server in a thread, 20 what-ifs at once.

Issue 12 asks that 20 concurrent requests give the same answers as the same requests in series and leave the base
state unchanged (common practice for a shared read-only engine; no published source). The bodies are the scenario
schema's actions as the API tests build them: add, move and remove a station, close a road by name, slow a class.
"""

from __future__ import annotations

import socket
import threading
import time
from concurrent.futures import ThreadPoolExecutor

import httpx
import pytest
import uvicorn

from coverkit.serve.app import create_app

from .test_serve_api import TOKEN, fingerprint, state, study  # noqa: F401  (fixtures shared with the API tests)

BODIES = [
    {"scenario": {"name": "add C05"}, "base_change": [{"add": {"id": "N1", "lon": -34.875526, "lat": 41.058088}}]},
    {"scenario": {"name": "move S4"}, "base_change": [{"move": {"id": "S4", "lon": -34.954717, "lat": 41.037323}}]},
    {"scenario": {"name": "remove S3"}, "base_change": [{"remove": "S3"}]},
    {"scenario": {"name": "bridge out"}, "closure": [{"road_name": "Ambrel Bridge"}]},
    {"scenario": {"name": "winter"}, "slowdown": [{"road_class": "residential", "factor": 1.5}]},
    # an off-network station is refused plainly (422), concurrently as in series
    {"scenario": {"name": "off map"}, "base_change": [{"add": {"id": "N2", "lon": 0.0, "lat": 0.0}}]},
]


@pytest.fixture(scope="module")
def server(state):  # noqa: F811
    """A uvicorn server on a free loopback port (bound first, so the Host check knows the port), in a thread."""
    sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    sock.bind(("127.0.0.1", 0))
    port = sock.getsockname()[1]
    app = create_app(state, token=TOKEN, hosts={f"127.0.0.1:{port}"})
    srv = uvicorn.Server(uvicorn.Config(app, log_level="warning"))
    thread = threading.Thread(target=srv.run, kwargs={"sockets": [sock]}, daemon=True)
    thread.start()
    deadline = time.monotonic() + 20
    while not srv.started:
        assert time.monotonic() < deadline and thread.is_alive(), "server did not start"
        time.sleep(0.02)
    yield f"http://127.0.0.1:{port}"
    srv.should_exit = True
    thread.join(timeout=10)
    sock.close()


def _ask(url: str, body: dict) -> tuple[int, dict]:
    r = httpx.post(f"{url}/api/compare", params={"token": TOKEN}, json=body, timeout=60)
    return r.status_code, r.json()


def test_twenty_concurrent_equal_serial(server, state):  # noqa: F811
    before = fingerprint(state)
    serial = [_ask(server, body) for body in BODIES]
    assert [code for code, _ in serial] == [200, 200, 200, 200, 200, 422]
    # the what-ifs differ from each other (a test that every answer is the same one would pass vacuously)
    assert len({repr(answer["rows"]) for _, answer in serial[:5]}) == 5
    order = [i % len(BODIES) for i in range(20)]
    with ThreadPoolExecutor(max_workers=20) as pool:
        at_once = list(pool.map(lambda i: _ask(server, BODIES[i]), order))
    for i, got in zip(order, at_once, strict=True):
        assert got == serial[i], BODIES[i]["scenario"]["name"]
    assert fingerprint(state) == before
