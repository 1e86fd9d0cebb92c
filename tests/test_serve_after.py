"""`coverkit serve`'s fast comparison equals the plain one, and what it adds after the change (demo county).

:meth:`coverkit.serve.state.BaseState.evaluate` keeps the before side on the base state and times only the road-near
grid cells after a change; here every figure is recomputed the plain way (``compare_results`` and ``changed_areas``
without caches, the grid after timed by a fresh search with :func:`coverkit.travel.point_times`) and must be equal
to the last bit. Outside checks: the per base figures against a plain groupby of the points (the definitions in
:func:`coverkit.coverage.per_base`); lost and gained changed-area weights add up to the comparison's lost and gained
demand (the invariant of :func:`coverkit.scenario.changed_areas`); a closure never shortens a drive time (removing
edges from a graph cannot shorten a shortest path: Dijkstra 1959, common knowledge); the busy-unit figure after a
change in units against the Erlang C formula computed here (A. K. Erlang 1917; e.g. Kleinrock, *Queueing Systems*
vol. 1, 1975, eq. 3.40).
"""

from __future__ import annotations

import dataclasses
import json
import math

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from starlette.testclient import TestClient

from coverkit.compare_run import comparison_rows
from coverkit.coverage import per_base
from coverkit.scenario import changed_areas, compare_results, load_scenario, scenario_from_table
from coverkit.serve.app import create_app
from coverkit.serve.state import AREA_KINDS, BaseState, area_json
from coverkit.travel import point_times

from .conftest import DEMO, REPO, demo_study_head

TOKEN = "t"
BASE_CHANGES = {
    "add N1": [{"add": {"id": "N1", "lon": -34.875526, "lat": 41.058088}}],
    "move S4": [{"move": {"id": "S4", "lon": -34.954717, "lat": 41.037323}}],
    "remove S3": [{"remove": "S3"}],
    "units S2": [{"units": {"id": "S2", "units": 4}}],
    "remove S1, add N2": [{"remove": "S1"}, {"add": {"id": "N2", "lon": -35.077775, "lat": 41.058979}}],
}


@pytest.fixture(scope="module")
def state(tmp_path_factory):
    folder = tmp_path_factory.mktemp("serve-after")
    path = folder / "study.toml"
    path.write_text(
        demo_study_head("serve after")
        + f"""
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
[[standard]]
name = "First due 4 min"
turnout_s = 60
travel_s = 240
[availability]
service_min = 45
queue = "infinite"
demand = "calls"
standard = "ALS 8 min"
[outputs]
folder = "{folder / "out"}"
"""
    )
    return BaseState(path)


@pytest.fixture(scope="module")
def client(state):
    return TestClient(create_app(state, token=TOKEN, hosts={"testserver"}))


def plain(state: BaseState, scenario, std: str):
    """The comparisons, changed areas and area layers after, without anything the base state keeps."""
    w = state.whatif
    outcome = w.run(scenario)
    keys = [(s.name, name) for name in w.demand for s in state.study.standards]  # the rows' order
    comparisons = {k: compare_results(w.results[k], outcome.results[k]) for k in keys}
    g = state.grid
    times = point_times(outcome.network, outcome.base_snap, g.table.point_snap, w.horizon_s, direction=w.direction)
    grid_after = dataclasses.replace(g, table=dataclasses.replace(g.table, base_snap=outcome.base_snap, times=times))
    res, inc = state.residents, state.incidents
    ca = changed_areas(
        w.net, outcome.network, w.results[(std, res)], outcome.results[(std, res)], incidents=w.demand[inc],
        grid_before=g, grid_after=grid_after, calls_before=w.results[(std, inc)],
        calls_after=outcome.results[(std, inc)],
    )  # fmt: skip
    return outcome, comparisons, ca


def assert_same_frame(a, b, what: str) -> None:
    assert list(a.columns) == list(b.columns), what
    assert len(a) == len(b), what
    for col in a.columns:
        x, y = a[col], b[col]
        if col == "geometry" or str(x.dtype) == "geometry":
            assert shapely.equals_exact(x.to_numpy(), y.to_numpy(), tolerance=0.0).all(), what
        else:
            pd.testing.assert_series_equal(x, y, check_exact=True, obj=f"{what}.{col}")


def assert_same_layers(a, b, what: str) -> None:
    for name in ("first_due", "gaps", "single"):
        assert_same_frame(getattr(a, name), getattr(b, name), f"{what}.{name}")
    for k in range(3):
        assert_same_frame(a.due[k], b.due[k], f"{what}.due[{k}]")
    np.testing.assert_array_equal(a.depth_grid, b.depth_grid)
    np.testing.assert_array_equal(a.demand_gap_id, b.demand_gap_id)


def assert_fast_equals_plain(state: BaseState, scenario, std: str, *, layers: bool = True) -> None:
    ev = state.evaluate(scenario, std)
    outcome, comps, ca = plain(state, scenario, std)
    kinds = state.kinds
    assert comparison_rows("x", ev.comparisons, kinds) == comparison_rows("x", comps, kinds)
    for k, c in comps.items():
        f = ev.comparisons[k]
        assert f.unchanged == c.unchanged, k
        assert_same_frame(f.bases, c.bases, f"bases {k}")
        assert_same_frame(f.points, c.points, f"points {k}")
        pd.testing.assert_frame_equal(f.table, c.table, check_exact=True)
        assert_same_frame(ev.per_base_after[k], per_base(outcome.results[k]), f"per_base_after {k}")
    assert_same_frame(ev.changed.polygons, ca.polygons, "changed areas")
    np.testing.assert_array_equal(ev.changed.status_grid, ca.status_grid)
    np.testing.assert_array_equal(ev.changed.delta_grid, ca.delta_grid)
    if layers:
        # the before layers the base state serves are the plain ones; the layers after equal a plain build
        assert_same_layers(ev.changed.before, ca.before, "before")
        assert_same_layers(ev.changed.after, ca.after, "after")


@pytest.mark.parametrize("name", ["ambrel-bridge-closed", "station-s3-closed", "flood-and-winter"])
def test_examples_fast_equals_plain(state, name):
    """The three example scenarios (data/demo/README.md): the same rows, changed areas, per base figures and
    layers before and after as the plain path, for both standards."""
    scenario = load_scenario(REPO / "examples" / "scenarios" / f"{name}.toml")
    for std in ("ALS 8 min", "First due 4 min"):
        assert_fast_equals_plain(state, scenario, std, layers=std == "ALS 8 min")


@pytest.mark.parametrize("label", list(BASE_CHANGES))
def test_base_changes_fast_equals_plain(state, label):
    scenario = scenario_from_table({"scenario": {"name": label}, "base_change": BASE_CHANGES[label]}, where=label)
    assert_fast_equals_plain(state, scenario, "ALS 8 min")


def test_per_base_after_against_groupby(state, client):
    """per_base_after holds every standard x demand x base after the change, with the figures of a plain groupby of
    the points after (first-due demand = weight of the points a base reaches first; covered: of those, the ones
    within the standard; sole cover: of those, the ones only it reaches; reaches: weight of the points it reaches
    within the standard, from the travel-time table)."""
    body = {"scenario": {"name": "x"}, "base_change": BASE_CHANGES["remove S1, add N2"]}
    r = client.post(f"/api/compare?token={TOKEN}", json=body)
    assert r.status_code == 200, r.text
    rows = r.json()["per_base_after"]
    outcome = state.whatif.run(scenario_from_table(body, where="b"))
    assert len(rows) == len(outcome.results) * len(outcome.bases)
    for (std, dem), res in outcome.results.items():
        d = res.demand
        got = {row["base_id"]: row for row in rows if row["standard"] == std and row["demand"] == dem}
        assert list(got) == outcome.bases["id"].tolist()
        by = d.groupby("first_base")["weight"]
        times = res.times.tocoo()
        ok = times.data <= res.standard.travel_s
        for i, base in enumerate(outcome.bases["id"]):
            mine = d[d["first_base"] == base]
            assert got[base]["first_due_demand"] == pytest.approx(by.sum().get(base, 0.0), rel=1e-12)
            assert got[base]["first_due_covered"] == pytest.approx(mine.loc[mine["covered"], "weight"].sum())
            assert got[base]["sole_cover"] == pytest.approx(mine.loc[mine["depth"] == 1, "weight"].sum())
            reach = d["weight"].to_numpy()[times.col[ok & (times.row == i)]].sum()
            assert got[base]["reaches_in_standard"] == pytest.approx(reach, rel=1e-12)
            assert got[base]["first_due_share"] == pytest.approx(by.sum().get(base, 0.0) / d["weight"].sum())


def test_layers_query(state, client):
    """``?layers=`` adds exactly the named layers after the change (equal to the layers of a plain build), and an
    unknown name is a one-line 422 naming the query field."""
    body = {"scenario": {"name": "x"}, "base_change": BASE_CHANGES["remove S3"]}
    r = client.post(f"/api/compare?token={TOKEN}&layers=gaps,depth", json=body)
    assert r.status_code == 200, r.text
    answer = r.json()
    assert "gaps_after" in answer and "depth_after" in answer and "first_due_after" not in answer
    assert answer["availability_after"] is None  # not asked for
    _, _, ca = plain(state, scenario_from_table(body, where="b"), "ALS 8 min")
    crs = state.whatif.net.crs
    for kind in ("gaps", "depth"):
        assert answer[f"{kind}_after"] == json.loads(json.dumps(area_json(ca.after, kind, crs))), kind
    bare = client.post(f"/api/compare?token={TOKEN}", json=body).json()
    assert not any(f"{k}_after" in bare for k in AREA_KINDS)
    r = client.post(f"/api/compare?token={TOKEN}&layers=gaps,roads", json=body)
    assert r.status_code == 422 and "'layers'" in r.json()["error"] and "roads" in r.json()["error"]
    assert "\n" not in r.json()["error"]


def erlang_c(a: float, n: int) -> float:
    """Probability that a call waits in an M/M/n queue with offered load ``a`` Erlang (Erlang C)."""
    top = a**n / math.factorial(n) * n / (n - a)
    return top / (sum(a**k / math.factorial(k) for k in range(n)) + top)


def test_availability_after_units(state, client):
    """Two more units at S2: the availability after counts them, its all-busy probability is Erlang C of the same
    offered load with the new number of units, and no change gives the base state's answer."""
    body = {"scenario": {"name": "x"}, "base_change": BASE_CHANGES["units S2"]}
    r = client.post(f"/api/compare?token={TOKEN}&layers=availability", json=body)
    assert r.status_code == 200, r.text
    after, before = r.json()["availability_after"], state.availability_answer()
    assert after["standard"] == "ALS 8 min" and after["demand"] == "calls"
    added = 4 - int(state.whatif.bases.set_index("id").loc["S2", "units"])
    assert after["summary"]["units"] == before["summary"]["units"] + added == len(after["units"])
    s = after["summary"]
    load = s["calls_per_h"] * s["mean_service_min"] / 60.0
    assert s["offered_load_erlang"] == pytest.approx(load, rel=1e-12)
    assert s["all_busy_probability"] == pytest.approx(erlang_c(load, s["units"]), rel=1e-9)
    assert sum(u["base_id"] == "S2" for u in after["units"]) == 4
    units = int(state.whatif.bases.set_index("id").loc["S1", "units"])
    keep = {"scenario": {"name": "x"}, "base_change": [{"units": {"id": "S1", "units": units}}]}
    same = client.post(f"/api/compare?token={TOKEN}&layers=availability", json=keep)
    assert same.json()["availability_after"] == before


_edge = st.integers(0, 3353)
_lonlat = st.tuples(st.floats(-35.12, -34.85), st.floats(40.93, 41.10))


@st.composite
def scenarios(draw):
    """Random base changes (on the demo's stations, snapped to a road node) and closures of directed edges."""
    body = {"scenario": {"name": "drawn"}}
    closed = draw(st.lists(_edge, min_size=1, max_size=12, unique=True))
    if closed:
        body["closure"] = [{"edge_ids": closed}]
    changes = []
    for i, (lon, lat) in enumerate(draw(st.lists(_lonlat, max_size=2))):
        changes.append({"add": {"id": f"N{i}", "lon": lon, "lat": lat}})
    gone = draw(st.lists(st.sampled_from(["S1", "S2", "S3", "S4"]), max_size=3, unique=True))
    changes += [{"remove": b} for b in gone]
    if changes:
        body["base_change"] = changes
    return body


def _snap_to_nodes(state: BaseState, body: dict) -> dict:
    """Added bases moved onto the nearest road node (a drawn point may lie beyond the snap limit)."""
    net = state.whatif.net
    for ch in body.get("base_change", []):
        if "add" in ch:
            p = gpd.GeoSeries(shapely.points([[ch["add"]["lon"], ch["add"]["lat"]]]), crs="EPSG:4326")
            xy = shapely.get_coordinates(p.to_crs(net.crs).to_numpy())[0]
            node = int(np.argmin(((net.xy - xy) ** 2).sum(axis=1)))
            lonlat = gpd.GeoSeries(shapely.points([net.xy[node]]), crs=net.crs).to_crs("EPSG:4326")
            ch["add"]["lon"], ch["add"]["lat"] = shapely.get_coordinates(lonlat.to_numpy())[0].tolist()
    return body


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(body=scenarios())
def test_drawn_scenarios(state, body):
    """On drawn base changes and closures: the fast path equals the plain one; lost and gained changed-area weights
    add up to the comparison's lost and gained demand; with closures alone no point's drive time gets shorter."""
    body = _snap_to_nodes(state, body)
    scenario = scenario_from_table(body, where="drawn")
    std = "ALS 8 min"
    assert_fast_equals_plain(state, scenario, std, layers=False)
    ev = state.evaluate(scenario, std)
    comp = ev.comparisons[(std, state.residents)]
    polys = ev.changed.polygons
    lost = polys.loc[polys["change"] == "lost", "weight"].sum()
    gained = polys.loc[polys["change"] == "gained", "weight"].sum()
    assert lost == pytest.approx(comp.lost_weight, rel=1e-9, abs=1e-6)
    assert gained == pytest.approx(comp.gained_weight, rel=1e-9, abs=1e-6)
    assert polys.loc[polys["change"] == "lost", "points"].sum() == comp.lost_points
    if "base_change" not in body:
        for k, res in ev.outcome.results.items():
            t_before = state.whatif.results[k].demand["travel_s"].to_numpy()
            t_after = res.demand["travel_s"].to_numpy()
            assert (t_after >= t_before).all(), k
        assert comp.gained_weight == 0.0
