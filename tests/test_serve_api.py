"""`coverkit serve`'s JSON API on the demo county (Starlette's TestClient, no socket).

The comparison rows are checked against `coverkit compare`'s comparison.csv of the same study and scenario (the
project's own command, itself checked against an independent recomputation in tests/test_scenario.py). The safety
rules come from issue 12: token on every write, foreign Host refused (the usual defence against DNS rebinding,
common practice), one-line 4xx on a bad body with the base state unchanged, fuzzed bodies never a 500.
"""

from __future__ import annotations

import hashlib
import json
import math
import tomllib

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from starlette.testclient import TestClient

from coverkit.cli import main
from coverkit.compare_run import COMPARISON_COLUMNS
from coverkit.scenario import load_scenario, scenario_from_table
from coverkit.serve.app import create_app
from coverkit.serve.security import MAX_BODY_BYTES
from coverkit.serve.state import BaseState

from .conftest import REPO, demo_serve_study

TOKEN = "test-token"
BRIDGE = {"scenario": {"name": "Ambrel Bridge closed"}, "closure": [{"road_name": "Ambrel Bridge"}]}


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    return demo_serve_study(tmp_path_factory.mktemp("serve"))


@pytest.fixture(scope="module")
def state(study):
    return BaseState(study)


@pytest.fixture(scope="module")
def client(state):
    return TestClient(create_app(state, token=TOKEN, hosts={"testserver"}))


def fingerprint(state: BaseState) -> str:
    """Digest of everything a request could disturb: edge times, bases, every base result's per-point figures."""
    w = state.whatif
    h = hashlib.sha256(np.ascontiguousarray(w.net.travel_s).tobytes())
    h.update(w.bases.to_json().encode())
    for key, res in sorted(w.results.items()):
        d = res.demand
        h.update(str(key).encode())
        h.update(np.ascontiguousarray(d["travel_s"].to_numpy(dtype=float)).tobytes())
        h.update("|".join(d["first_base"].astype(str)).encode())
        h.update(",".join(d.columns).encode())
    for _name, table in sorted(w.tables.items()):
        h.update(np.ascontiguousarray(table.times.data).tobytes())
    return h.hexdigest()


def post(client, body, **kw):
    return client.post(f"/api/compare?token={TOKEN}", json=body, **kw)


@pytest.mark.parametrize("name", ["ambrel-bridge-closed", "station-s3-closed", "flood-and-winter"])
def test_rows_equal_compare_csv(client, state, study, tmp_path, name):
    """The API's rows hold exactly the keys and values of `coverkit compare`'s comparison.csv, for the three example
    scenarios; the flood scenario names a polygon file, which a request may not, so the base state answers it from
    the file and the API refuses it."""
    scen = REPO / "examples" / "scenarios" / f"{name}.toml"
    assert main(["compare", str(study), str(scen), "--out", str(tmp_path / "cmp"), "--quiet"]) == 0
    table = pd.read_csv(tmp_path / "cmp" / "comparison.csv")
    body = tomllib.loads(scen.read_text())
    r = post(client, body)
    if "polygon" in scen.read_text():
        assert r.status_code == 422 and "refused" in r.json()["error"]
        rows = state.compare(load_scenario(scen))["rows"]
    else:
        assert r.status_code == 200, r.text
        rows = r.json()["rows"]
    assert list(table.columns) == list(COMPARISON_COLUMNS) == list(rows[0])
    assert len(rows) == len(table) == 2
    for api, (_, csv) in zip(rows, table.iterrows(), strict=True):
        for col in COMPARISON_COLUMNS:
            want = csv[col]
            if isinstance(want, str):
                assert api[col] == want, col
            elif isinstance(want, float) and not math.isfinite(want):
                assert api[col] is None, col  # JSON has no inf: the API sends null
            else:
                assert api[col] == pytest.approx(float(want), rel=1e-12, abs=1e-9), col
    # each example changes coverage on the demo county (data/demo/README.md describes the scenarios)
    assert any(row["lost_weight"] > 0 for row in rows)


def test_saved_scenario_reads_back(client, state, tmp_path):
    """The saved TOML is a scenario file `coverkit compare` reads: the same changes, the same rows."""
    body = {
        "scenario": {"name": "two changes", "description": 'quote " and accent é'},
        "closure": [{"road_name": "Ambrel Bridge", "note": "repairs"}],
        "base_change": [{"remove": "S3"}, {"add": {"id": "N1", "lon": -34.875526, "lat": 41.058088, "units": 1}}],
    }
    r = client.post(f"/api/scenario.toml?token={TOKEN}", json=body)
    assert r.status_code == 200, r.text
    assert tomllib.loads(r.text) == body
    path = tmp_path / "saved.toml"
    path.write_text(r.text, encoding="utf-8")
    from_file = state.compare(load_scenario(path))["rows"]
    assert post(client, body).json()["rows"] == from_file


def test_write_needs_token(client):
    assert client.post("/api/compare", json=BRIDGE).status_code == 403
    assert client.post("/api/compare?token=wrong", json=BRIDGE).status_code == 403
    r = client.post("/api/compare", json=BRIDGE, headers={"Authorization": f"Bearer {TOKEN}"})
    assert r.status_code == 200


def test_foreign_host_refused(client):
    for path in ("/api/study", "/", "/api/layers/roads"):
        r = client.get(path, headers={"Host": "evil.example:8750"})
        assert r.status_code == 421 and "not the served address" in r.json()["error"]
    assert client.post(f"/api/compare?token={TOKEN}", json=BRIDGE, headers={"Host": "evil.example"}).status_code == 421


def test_bad_body_one_line_and_state_unchanged(client, state):
    before = fingerprint(state)
    cases = [
        ({"scenario": {"name": "x"}, "closure": [{"road_name": "No Such Road"}]}, "closure[0]"),
        ({"scenario": {"name": "x"}, "base_change": [{"remove": "S42"}]}, "S42"),
        ({"scenario": {"name": "x"}, "slowdown": [{"road_class": "residential", "factor": -1}]}, "factor"),
        ({"scenario": {"name": "x"}, "closure": [{"polygon": "/etc/passwd"}]}, "refused"),
        ({"scenario": {"name": "x"}, "base_change": [{"add": {"id": "N1", "lon": 0.0, "lat": 0.0}}]}, "N1"),
        ({"scenario": {"name": "x"}, "closure": [{"edge_ids": [2**60]}]}, "closure[0].edge_ids[0]"),
        ({"scenario": {}}, "name"),
        ([1, 2], "JSON object"),
    ]
    for body, word in cases:
        r = post(client, body)
        assert r.status_code == 422, (body, r.text)
        message = r.json()["error"]
        assert word in message and "\n" not in message, message
    r = client.post(f"/api/compare?token={TOKEN}", content=b"{not json")
    assert r.status_code == 422 and "not JSON" in r.json()["error"]
    r = client.post(f"/api/compare?token={TOKEN}", content=b" " * (MAX_BODY_BYTES + 1))
    assert r.status_code == 413
    assert fingerprint(state) == before


def test_compare_leaves_base_state_and_layers(client, state):
    """A successful what-if does not write into the base state: the base figures and layers stay as served."""
    before, study = fingerprint(state), client.get("/api/study").json()
    roads = client.get("/api/layers/roads").content
    assert post(client, {"scenario": {"name": "x"}, "base_change": [{"remove": "S1"}]}).status_code == 200
    assert fingerprint(state) == before
    assert client.get("/api/study").json() == study
    assert client.get("/api/layers/roads").content == roads


def test_layers_are_geojson_in_degrees(client):
    study = client.get("/api/study").json()
    for name in ("roads", "bases", "gaps", "first_due", "depth"):
        fc = client.get(f"/api/layers/{name}").json()
        assert fc["type"] == "FeatureCollection" and fc["features"], name
        xy = np.array(_first_coords(fc["features"][0]["geometry"]["coordinates"]))
        # the demo county lies near 35 W, 41 N (data/demo/README.md): degrees, not metres
        assert -36 < xy[0] < -34 and 40 < xy[1] < 42, name
    minutes = [f["properties"]["minutes"] for f in client.get("/api/layers/roads").json()["features"]]
    reached = [m for m in minutes if m is not None]
    # a base stands part-way along a road: the nearest road end is under a minute away, far roads many minutes
    assert 0.0 <= min(reached) < 1.0 and max(reached) > 8.0
    assert len(study["bases"]["features"]) == 4
    r = client.get("/api/layers/gaps?standard=nope")
    assert r.status_code == 422 and "ALS 8 min" in r.json()["error"]
    assert client.get("/api/layers/nothing").status_code == 404


def _first_coords(c):
    while isinstance(c[0], list):
        c = c[0]
    return c


_names = st.text(min_size=0, max_size=12)
_numbers = st.one_of(st.integers(-(2**70), 2**70), st.floats(allow_nan=True, allow_infinity=True), st.booleans())
_leaf = st.one_of(_names, _numbers, st.none(), st.lists(st.one_of(_numbers, _names), max_size=3))
_base = st.one_of(
    st.fixed_dictionaries({"remove": st.one_of(st.sampled_from(["S1", "S2", "S9", ""]), _leaf)}),
    st.fixed_dictionaries(
        {"add": st.fixed_dictionaries({"id": _names, "lon": st.floats(-36, -34), "lat": st.floats(40, 42)})}
    ),
    st.dictionaries(st.sampled_from(["add", "move", "units", "bogus"]), st.dictionaries(_names, _leaf, max_size=3)),
)
_closure = st.one_of(
    st.fixed_dictionaries({"edge_ids": st.lists(st.integers(-5, 5000), max_size=3)}),
    st.fixed_dictionaries({"road_name": st.one_of(_names, st.just("Ambrel Bridge"))}),
    st.dictionaries(st.sampled_from(["way_ids", "polygon", "only_bridges", "note"]), _leaf, max_size=2),
)
_body = st.fixed_dictionaries(
    {"scenario": st.one_of(st.fixed_dictionaries({"name": _names}), _leaf)},
    optional={
        "closure": st.one_of(st.lists(_closure, max_size=2), _leaf),
        "slowdown": st.lists(st.dictionaries(st.sampled_from(["road_class", "factor", "polygon"]), _leaf), max_size=2),
        "base_change": st.one_of(st.lists(_base, max_size=2), _leaf),
        "extra": _leaf,
    },
)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(body=_body)
def test_fuzzed_bodies_never_500(client, state, body):
    before = fingerprint(state)
    # sent as Python's json writes it (inf as Infinity, which the server's reader accepts; httpx's json= refuses it)
    r = client.post(f"/api/compare?token={TOKEN}", content=json.dumps(body).encode())
    assert r.status_code in (200, 422), (body, r.status_code, r.text)
    if r.status_code == 422:
        assert "\n" not in r.json()["error"]
    else:
        scenario_from_table(body, where="check")  # a 200 only for a body the scenario schema accepts
    assert fingerprint(state) == before


def test_loopback_hosts():
    """Only loopback addresses (RFC 6890: 127.0.0.0/8, ::1) and localhost count as local; others get a warning."""
    from coverkit.serve import is_loopback

    assert all(is_loopback(h) for h in ("127.0.0.1", "127.8.0.1", "localhost", "::1", "[::1]"))
    assert not any(is_loopback(h) for h in ("0.0.0.0", "192.168.1.4", "example.org", "::"))
