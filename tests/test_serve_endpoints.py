"""`coverkit serve`'s newer endpoints on the demo county: study extras, demand density, rank, scenario read,
GeoPackage export and the OpenAPI document (Starlette's TestClient, no socket).

Outside checks: the rank against independent what-ifs (:class:`coverkit.whatif.WhatIf` adding each candidate, itself
tested to equal a full recomputation) and against the maximal covering model with one new site (Church & ReVelle
1974, :func:`coverkit.siting.mclp` solved exactly by HiGHS); availability against Erlang's offered load (calls per
hour x service hours, textbook queueing) and the drive-time cover of the coverage stage; the export read back with
pyogrio (GDAL's GeoPackage driver); inline polygons through `coverkit compare` (the project's CLI). Safety rules
(token on every write, one-line 422, base state unchanged, fuzzed bodies never a 500) as in tests/test_serve_api.py.
"""

from __future__ import annotations

import json
import tomllib

import numpy as np
import pandas as pd
import pyogrio
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from starlette.routing import Mount, Route
from starlette.testclient import TestClient

from coverkit import CAUTION
from coverkit.cli import main
from coverkit.layer_names import layer_name
from coverkit.scenario import load_scenario, scenario_from_table, scenario_text
from coverkit.serve.app import create_app
from coverkit.serve.openapi import openapi
from coverkit.serve.rank import rank_answer, study_candidates
from coverkit.serve.state import BaseState
from coverkit.whatif import WhatIf

from .conftest import DEMO, REPO, demo_serve_study
from .test_scenario_inline import inline_flood_tables
from .test_serve_api import _body, fingerprint

TOKEN = "test-token"
STD = "ALS 8 min"
REMOVE_S3 = {"scenario": {"name": "S3 out"}, "base_change": [{"remove": "S3"}]}
EXTRA = f"""
[siting]
candidates = "{DEMO / "candidates.csv"}"
model = "mclp"
add = 1
standard = "{STD}"
demand = "residents"
[availability]
service_min = 45
queue = "infinite"
demand = "calls"
standard = "{STD}"
"""


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    return demo_serve_study(tmp_path_factory.mktemp("serve-endpoints"), extra=EXTRA)


@pytest.fixture(scope="module")
def state(study):
    return BaseState(study)


@pytest.fixture(scope="module")
def client(state):
    return TestClient(create_app(state, token=TOKEN, hosts={"testserver"}))


def post(client, path, body, **kw):
    sep = "&" if "?" in path else "?"
    return client.post(f"{path}{sep}token={TOKEN}", json=body, **kw)


# -- GET /api/study ---------------------------------------------------------------------------------------------------
def test_study_per_base_adds_up(client):
    """Per base rows: first-due demand of all bases plus the unreached demand is the whole demand, and first-due
    covered demand adds up to the covered figure (every covered point has one first-due base)."""
    study = client.get("/api/study").json()
    assert [d["unit"] for d in study["demand"]] == ["people", "calls"]
    rows = pd.DataFrame(study["per_base"])
    assert set(rows["base_id"]) == {"S1", "S2", "S3", "S4"}  # data/demo/stations.csv
    for fig in study["figures"]:
        mine = rows[(rows["standard"] == fig["standard"]) & (rows["demand"] == fig["demand"])]
        assert len(mine) == 4
        assert mine["first_due_covered"].sum() == pytest.approx(fig["covered"], rel=1e-9)
        assert mine["first_due_demand"].sum() <= fig["demand_total"] * (1 + 1e-12)
        assert (mine["sole_cover"] <= mine["first_due_covered"] + 1e-9).all()
        assert (mine["reaches_in_standard"] >= mine["first_due_covered"] - 1e-9).all()


def test_study_availability(client):
    """The availability summary: offered load = calls per hour x mean service hours (Erlang, textbook queueing);
    one row per unit (7 units on the demo stations, data/demo/stations.csv); drive-time cover = the coverage stage's
    covered share of the calls (the same standard, a different code path)."""
    study = client.get("/api/study").json()
    a = study["availability"]
    assert a["standard"] == STD and a["demand"] == "calls"
    s = a["summary"]
    assert s["offered_load_erlang"] == pytest.approx(s["calls_per_h"] * s["mean_service_min"] / 60, rel=1e-9)
    units = pd.read_csv(DEMO / "stations.csv")["units"].sum()
    assert len(a["units"]) == s["units"] == units
    workload = np.array([u["workload"] for u in a["units"]])
    assert workload.mean() == pytest.approx(s["mean_workload"], rel=1e-9)
    calls = next(f for f in study["figures"] if f["demand"] == "calls" and f["standard"] == STD)
    assert s["drive_time_coverage"] == pytest.approx(calls["covered_share"], abs=1e-9)


def test_study_road_lists(client, state):
    """Road names and classes of the network; the three river bridges of data/demo/README.md are bridge names."""
    study = client.get("/api/study").json()
    e = state.whatif.net.edges
    assert study["road_names"] == sorted(study["road_names"]) and "" not in study["road_names"]
    assert set(study["road_names"]) == {n.strip() for n in e["name"].dropna() if n.strip()}
    assert {"Ferry Bridge", "Ambrel Bridge", "Oxle Bridge"} <= set(study["bridge_names"])
    assert set(study["bridge_names"]) <= set(study["road_names"])
    assert study["road_classes"] == sorted(set(e["road_class"].astype(str)))


# -- GET /api/layers/demand -------------------------------------------------------------------------------------------
@pytest.mark.parametrize(("name", "unit"), [("residents", "people"), ("calls", "calls")])
def test_demand_density_cells(client, state, name, unit):
    """Cells hold every demand weight once (their sum is the layer's total), per_km2 x cell area = weight, and the
    layer stays light (<= 5,000 cells); the incidents file has one call per row (data/demo/README.md)."""
    fc = client.get(f"/api/layers/demand?demand={name}").json()
    feats = fc["features"]
    assert 0 < len(feats) <= 5000
    props = pd.DataFrame([f["properties"] for f in feats])
    assert (props["unit"] == unit).all()
    dem = state.whatif.demand[name]
    assert props["weight"].sum() == pytest.approx(dem["weight"].sum(), rel=1e-9)
    area_km2 = props["cell_m"] ** 2 / 1e6
    np.testing.assert_allclose(props["per_km2"] * area_km2, props["weight"], rtol=1e-12)
    if name == "calls":
        assert props["weight"].sum() == len(pd.read_csv(DEMO / "incidents.csv"))
    lon, lat = feats[0]["geometry"]["coordinates"][0][0]
    assert -36 < lon < -34 and 40 < lat < 42  # degrees near 35 W, 41 N (data/demo/README.md)
    r = client.get("/api/layers/demand?demand=nope")
    assert r.status_code == 422 and "residents" in r.json()["error"] and "\n" not in r.json()["error"]


# -- POST /api/rank ---------------------------------------------------------------------------------------------------
def _independent_adds(state, body, demand="residents"):
    """Per candidate: covered weight after a what-if adding it as a one-unit station minus covered now."""
    w: WhatIf = state.whatif
    scen = scenario_from_table(body, where="t", allow_empty=True)
    now = w.run(scen).results[(STD, demand)].demand if not _empty(body) else w.results[(STD, demand)].demand
    covered_now = float(now.loc[now["covered"], "weight"].sum())
    cands = pd.read_csv(DEMO / "candidates.csv")
    out = {}
    for c in cands.itertuples():
        add = {"add": {"id": c.id, "lon": float(c.lon), "lat": float(c.lat), "units": 1}}
        tables = {**body, "base_change": [*body.get("base_change", []), add]}
        d = w.run(scenario_from_table(tables, where="t")).results[(STD, demand)].demand
        out[c.id] = float(d.loc[d["covered"], "weight"].sum()) - covered_now
    return covered_now, out


def _empty(body):
    return not any(body.get(k) for k in ("closure", "slowdown", "base_change"))


@pytest.mark.parametrize(
    "body",
    [
        {"scenario": {"name": "base"}},
        REMOVE_S3,
        {"scenario": {"name": "b"}, "closure": [{"road_name": "Ambrel Bridge"}]},
    ],
)
def test_rank_equals_independent_whatifs(client, state, body):
    r = post(client, f"/api/rank?standard={STD}&demand=residents", body)
    assert r.status_code == 200, r.text
    answer = r.json()
    covered_now, adds = _independent_adds(state, body)
    assert answer["covered_now"] == pytest.approx(covered_now, rel=1e-12)
    assert answer["unit"] == "people" and answer["caution"] == CAUTION
    rows = answer["candidates"]
    assert sorted(c["id"] for c in rows) == sorted(adds)
    for c in rows:
        assert c["adds"] == pytest.approx(adds[c["id"]], rel=1e-9, abs=1e-6), c["id"]
        assert c["covered_after"] == pytest.approx(covered_now + adds[c["id"]], rel=1e-12)
    key = [(-c["adds"], c["id"]) for c in rows]
    assert key == sorted(key) and [c["rank"] for c in rows] == list(range(1, len(rows) + 1))
    assert rows[0]["adds"] > 0


def test_rank_top_is_the_one_site_covering_optimum(client, state):
    """On the base state the top candidate is the maximal covering model's choice of one new site (Church & ReVelle
    1974, solved exactly) and adds what that model adds."""
    from coverkit.siting import mclp
    from coverkit.stages import siting_problem

    w, cfg = state.whatif, state.study.siting
    problem = siting_problem(
        w.net, w.bases, w.demand["residents"], state.study.standards[0], cfg,
        max_snap_m=w.demand_snap_m["residents"], base_snap_m=w.base_snap_m,
    )  # fmt: skip
    best = mclp(problem.covers, problem.weights, 1, problem.fixed, method="milp")
    (site,) = best.sites
    answer = post(client, "/api/rank", {"scenario": {"name": "base"}}).json()
    top = answer["candidates"][0]
    assert top["id"] == problem.sites["id"].iloc[site]
    assert top["covered_after"] == pytest.approx(best.covered_weight, rel=1e-9)


def test_rank_refusals(client, state, monkeypatch):
    before = fingerprint(state)
    # a study without a candidates file: the app gets no candidates
    monkeypatch.setattr("coverkit.serve.app.study_candidates", lambda state: None)
    bare = TestClient(create_app(state, token=TOKEN, hosts={"testserver"}))
    r = post(bare, "/api/rank", REMOVE_S3)
    assert r.status_code == 422 and "no candidate sites" in r.json()["error"]
    r = post(client, "/api/rank?demand=nope", REMOVE_S3)
    assert r.status_code == 422 and "query 'demand'" in r.json()["error"]
    r = post(client, "/api/rank?standard=nope", REMOVE_S3)
    assert r.status_code == 422 and STD in r.json()["error"]
    from coverkit.errors import StudyError

    with pytest.raises(StudyError, match="no candidate sites"):
        rank_answer(state, None, scenario_from_table(REMOVE_S3, where="t"), STD, "residents")
    assert len(study_candidates(state)) == 12  # data/demo/candidates.csv
    assert fingerprint(state) == before


# -- POST /api/scenario/read ------------------------------------------------------------------------------------------
def test_scenario_read(client, tmp_path):
    """A scenario file's text comes back as its tables (tomllib's reading); a polygon file is refused with the fix,
    its inline copy accepted and written back unchanged by /api/scenario.toml."""
    text = (REPO / "examples" / "scenarios" / "ambrel-bridge-closed.toml").read_text()
    r = client.post(f"/api/scenario/read?token={TOKEN}", content=text.encode())
    assert r.status_code == 200 and r.json() == {"scenario": tomllib.loads(text)}
    flood = (REPO / "examples" / "scenarios" / "flood-and-winter.toml").read_bytes()
    r = client.post(f"/api/scenario/read?token={TOKEN}", content=flood)
    assert r.status_code == 422 and "inline" in r.json()["error"] and "closure[0].polygon" in r.json()["error"]
    inline = scenario_text(inline_flood_tables())
    r = client.post(f"/api/scenario/read?token={TOKEN}", content=inline.encode())
    assert r.status_code == 200 and r.json()["scenario"] == inline_flood_tables()
    saved = post(client, "/api/scenario.toml", r.json()["scenario"])
    assert saved.status_code == 200 and tomllib.loads(saved.text) == inline_flood_tables()
    for bad, word in (
        (b"[[closure", "not valid TOML"),
        (b"\xff\xfe", "UTF-8"),
        (b'[scenario]\nname = "x"\n', "nothing"),
    ):
        r = client.post(f"/api/scenario/read?token={TOKEN}", content=bad)
        assert r.status_code == 422 and word in r.json()["error"] and "\n" not in r.json()["error"], r.text


def test_inline_polygon_api_equals_compare_cli(client, state, study, tmp_path):
    """The flood scenario with its polygon inline: the API's rows equal `coverkit compare` on the saved file, and
    equal the example's polygon-file scenario (the same edges closed)."""
    body = inline_flood_tables()
    r = post(client, "/api/compare", body)
    assert r.status_code == 200, r.text
    path = tmp_path / "inline-flood.toml"
    path.write_text(post(client, "/api/scenario.toml", body).text, encoding="utf-8")
    assert main(["compare", str(study), str(path), "--out", str(tmp_path / "cmp"), "--quiet"]) == 0
    table = pd.read_csv(tmp_path / "cmp" / "comparison.csv")
    rows = r.json()["rows"]
    for api, (_, csv) in zip(rows, table.iterrows(), strict=True):
        for col, want in csv.items():
            if isinstance(want, str):
                assert api[col] == want, col
            elif np.isfinite(want):
                assert api[col] == pytest.approx(float(want), rel=1e-12, abs=1e-9), col
    from_file = state.compare(load_scenario(REPO / "examples" / "scenarios" / "flood-and-winter.toml"))
    assert r.json()["closed_roads"] == json.loads(json.dumps(from_file["closed_roads"]))
    assert [{k: v for k, v in row.items() if k != "scenario"} for row in rows] == [
        {k: v for k, v in row.items() if k != "scenario"} for row in from_file["rows"]
    ]


# -- POST /api/export.gpkg --------------------------------------------------------------------------------------------
def _read_gpkg(tmp_path, content):
    path = tmp_path / "state.gpkg"
    path.write_bytes(content)
    return path, [name for name, _ in pyogrio.list_layers(path)]


def test_export_base_state(client, tmp_path):
    r = post(client, f"/api/export.gpkg?standard={STD}", {"scenario": {"name": "base"}})
    assert r.status_code == 200, r.text
    assert r.headers["content-type"] == "application/geopackage+sqlite3"
    assert 'filename="coverkit-state.gpkg"' in r.headers["content-disposition"]
    path, names = _read_gpkg(tmp_path, r.content)
    want = [layer_name("bases"), layer_name("road_minutes"), *(layer_name(k, standard=STD) for k in
            ("gaps", "first_due", "depth")), layer_name("about")]  # fmt: skip
    assert names == want
    gaps = pyogrio.read_dataframe(path, layer=layer_name("gaps", standard=STD))
    api = pd.DataFrame([f["properties"] for f in client.get("/api/layers/gaps").json()["features"]])
    np.testing.assert_allclose(gaps["uncovered_people"], api["uncovered_people"], rtol=1e-12)
    np.testing.assert_allclose(gaps["uncovered_calls"], api["uncovered_calls"], rtol=1e-12)
    about = pyogrio.read_dataframe(path, layer="about")
    assert CAUTION in set(about["value"])
    roads = pyogrio.read_dataframe(path, layer=layer_name("road_minutes"))
    minutes = [f["properties"]["minutes"] for f in client.get("/api/layers/roads").json()["features"]]
    np.testing.assert_allclose(roads["minutes"].to_numpy(), np.array(minutes, dtype=float), equal_nan=True)


def test_export_changed_state(client, state, tmp_path):
    """With a change: the closed roads, the changed areas and the gaps after, as the evaluated scenario has them."""
    body = {"scenario": {"name": "b"}, "closure": [{"road_name": "Ambrel Bridge"}]}
    r = post(client, "/api/export.gpkg", body)
    assert r.status_code == 200, r.text
    path, names = _read_gpkg(tmp_path, r.content)
    for kind in ("closed_roads", "slowed_roads"):
        assert layer_name(kind) in names
    assert layer_name("changed_areas", standard=STD) in names
    ev = state.evaluate(scenario_from_table(body, where="t"), STD)
    gaps = pyogrio.read_dataframe(path, layer=layer_name("gaps", standard=STD))
    np.testing.assert_allclose(gaps["uncovered_people"], ev.changed.after.gaps["uncovered_people"], rtol=1e-12)
    closed = pyogrio.read_dataframe(path, layer=layer_name("closed_roads"))
    assert set(closed["name"]) == {"Ambrel Bridge"}
    r = post(client, "/api/export.gpkg?standard=nope", body)
    assert r.status_code == 422 and STD in r.json()["error"]


# -- GET /api/openapi.json --------------------------------------------------------------------------------------------
def _route_paths(app) -> dict[str, set[str]]:
    out = {}
    for route in app.app.routes:  # the Guard wraps the Starlette app
        if isinstance(route, Mount):
            out[route.path + "/{path}"] = {"get"}
        elif isinstance(route, Route):
            out[route.path] = {m.lower() for m in (route.methods or {"GET"}) if m != "HEAD"}
    return out


def test_openapi_lists_every_route(client, state):
    r = client.get("/api/openapi.json")
    assert r.status_code == 200
    doc = json.loads(r.text)
    assert doc == openapi() and doc["openapi"].startswith("3.1.")
    routes = _route_paths(create_app(state, token=TOKEN, hosts={"testserver"}))
    assert {p: set(ops) for p, ops in doc["paths"].items()} == routes
    for path, ops in doc["paths"].items():
        for method, op in ops.items():
            assert "200" in op["responses"], (path, method)
            if method == "post":
                assert "403" in op["responses"] and op["security"], path


def test_every_post_needs_the_token(client, state):
    routes = _route_paths(create_app(state, token=TOKEN, hosts={"testserver"}))
    posts = [p for p, ops in routes.items() if "post" in ops]
    assert len(posts) >= 5
    for path in posts:
        assert client.post(path, json=REMOVE_S3).status_code == 403, path
        assert client.post(path + "?token=wrong", json=REMOVE_S3).status_code == 403, path


# -- fuzz -------------------------------------------------------------------------------------------------------------
_coord = st.one_of(st.floats(allow_nan=True, allow_infinity=True), st.integers(-400, 400), st.text(max_size=2))
_ring = st.lists(st.lists(_coord, min_size=0, max_size=3), max_size=5)
_polygon = st.fixed_dictionaries(
    {"type": st.sampled_from(["Polygon", "MultiPolygon", "Point", ""]),
     "coordinates": st.one_of(st.lists(_ring, max_size=2), st.lists(st.lists(_ring, max_size=2), max_size=2))},
    optional={"crs": st.text(max_size=3)},
)  # fmt: skip
# rings of 3 to 6 points inside the demo county (near 35 W, 41 N): some hold roads, some cross themselves
_near = st.tuples(st.floats(-35.15, -34.85), st.floats(40.9, 41.1))
_drawn = st.lists(_near, min_size=3, max_size=6).map(
    lambda pts: {"type": "Polygon", "coordinates": [[list(p) for p in pts]]}
)
_polygon = st.one_of(_polygon, _drawn)
_inline_body = st.fixed_dictionaries(
    {"scenario": st.fixed_dictionaries({"name": st.text(max_size=5)})},
    optional={
        "closure": st.lists(st.fixed_dictionaries({"polygon": _polygon}), max_size=2),
        "slowdown": st.lists(st.fixed_dictionaries({"polygon": _polygon, "factor": st.floats(0.5, 3)}), max_size=1),
    },
)
_endpoints = st.sampled_from(["/api/rank", "/api/export.gpkg"])


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(body=st.one_of(_body, _inline_body), path=_endpoints)
def test_fuzzed_bodies_never_500(client, state, body, path):
    before = fingerprint(state)
    # Python's json writes inf and NaN as Infinity and NaN, which the server's reader accepts: they reach the checks
    r = client.post(f"{path}?token={TOKEN}", content=json.dumps(body).encode())
    assert r.status_code in (200, 422), (body, r.status_code, r.text)
    if r.status_code == 422:
        assert "\n" not in r.json()["error"]
    else:
        scenario_from_table(body, where="check", allow_empty=True)
    assert fingerprint(state) == before


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(body=st.one_of(_body, _inline_body), junk=st.binary(max_size=40))
def test_fuzzed_scenario_text_never_500(client, state, body, junk):
    """Any TOML (the fuzzed tables written by scenario_text when they can be) or any bytes: 200 or a one-line 422."""
    before = fingerprint(state)
    try:
        text = scenario_text(body).encode()
    except (AttributeError, KeyError, TypeError):
        text = junk
    for content in (text, junk):
        r = client.post(f"/api/scenario/read?token={TOKEN}", content=content)
        assert r.status_code in (200, 422), (content, r.status_code, r.text)
        if r.status_code == 422:
            assert "\n" not in r.json()["error"]
    assert fingerprint(state) == before


def test_deep_nesting_is_a_one_line_422(client, state):
    """Nesting deeper than Python's recursion limit allows a walk of (JSON nearly 1,000 deep, TOML a few hundred):
    a 422, never a 500."""
    before = fingerprint(state)
    deep = 990
    body = ('{"scenario": {"name": "x"}, "closure": ' + "[" * deep + "]" * deep + "}").encode()
    for path in ("/api/rank", "/api/export.gpkg", "/api/compare"):
        r = client.post(f"{path}?token={TOKEN}", content=body)
        assert r.status_code == 422 and "\n" not in r.json()["error"], (path, r.text)
    text = '[scenario]\nname = "x"\n[[closure]]\npolygon = ' + "[" * 600 + "]" * 600 + "\n"
    r = client.post(f"/api/scenario/read?token={TOKEN}", content=text.encode())
    assert r.status_code == 422 and "nested too deep" in r.json()["error"]
    assert fingerprint(state) == before
