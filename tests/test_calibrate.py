"""Calibration of speed factors to observed travel times, the distance-time curve, and route extraction.

Sources of the checks:

- Speed-factor recovery: synthetic ground truth. A small OSM-like grid is built twice with the project's network
  build, once with a starting profile and once with every class factor scaled by a known multiplier; observed times
  are the true network's shortest times (an independent heap Dijkstra over its exported edges,
  tests/reference_search.py) times seeded lognormal noise. The oracle is
  the known multipliers, not a stored result.
- Profile round trip: the network build (coverkit.network.build_network) reading the written TOML must give the
  calibrated edge times exactly.
- Distance-time curve: P. Kolesar, W. Walker, J. Hausner (1975), "Determining the relation between fire engine
  travel times and travel distances in New York City", Operations Research 23(4): T = 2 sqrt(D/a) below
  d_c = v^2/a, else v/a + D/v. Data generated from the formula with noise; parameter values are ours (the paper's
  values are from memory only and not used).
- Routes: networkx Dijkstra (reference library) on the same graph with the two points inserted as nodes.
- Error statistics: arithmetic worked by hand; the percentile is numpy's default (linear) definition.
"""

from __future__ import annotations

import itertools
import math

import geopandas as gpd
import networkx as nx
import numpy as np
import pandas as pd
import pytest
import shapely

from coverkit.calibrate import (
    calibrate_files,
    calibrate_speeds,
    calibration_chart,
    error_summary,
    fit_kolesar,
    kolesar_time_s,
    read_observed,
    retime_network,
    write_calibrated_profile,
)
from coverkit.errors import CoverkitError, FieldError, ModelError, OffNetworkError
from coverkit.network import RoadNetwork, build_network, load_profile, network_from_arrays
from coverkit.travel import point_times, read_points, snap_points
from coverkit.travel.routes import shortest_routes
from coverkit.travel.search import run_s
from tests import reference_search as ref

# A fictional grid in open ocean (no real place).
LON0, LAT0 = -35.6, 40.5
N_GRID = 12
DLAT = 0.004  # about 445 m
DLON = 0.0053  # about 447 m at 40.5 N

PRIMARY_ROWS = (1, 6, 10)
TERTIARY_ROWS = (3, 8)
SECONDARY_COLS = (2, 7)
TERTIARY_COLS = (5, 10)
SIGNAL_NODES = ((1, 2), (6, 7), (10, 2), (6, 2))  # (row, col)

START_PROFILE = """
name = "grid-start"
description = "test profile"
signal_delay_s = 5.0
oneway = "obey"
against_oneway_factor = 1.0
against_oneway_classes = []
private_access = false

[speeds.primary]
default_kph = 60.0
factor = 1.1
cap_kph = 250.0

[speeds.secondary]
default_kph = 50.0
factor = 1.0
cap_kph = 250.0

[speeds.tertiary]
default_kph = 40.0
factor = 1.0
cap_kph = 250.0

[speeds.residential]
default_kph = 30.0
factor = 1.0
cap_kph = 250.0
"""

TRUE_MULT = {"primary": 1.3, "secondary": 0.8, "tertiary": 1.15, "residential": 0.75}
NOISE_SIGMA = 0.06
N_OBS = 600
BASES = {"A": (2, 2), "B": (9, 8), "C": (5, 10)}  # (row, col) of grid nodes, nudged 30 m off


def _node_id(r: int, c: int) -> int:
    return r * N_GRID + c + 1


def _grid_osm() -> str:
    signals = {_node_id(r, c) for r, c in SIGNAL_NODES}
    out = ['<?xml version="1.0" encoding="UTF-8"?>\n<osm version="0.6" generator="coverkit-tests">\n']
    for r in range(N_GRID):
        for c in range(N_GRID):
            nid = _node_id(r, c)
            tag = '<tag k="highway" v="traffic_signals"/>' if nid in signals else ""
            out.append(
                f'<node id="{nid}" version="1" lat="{LAT0 + r * DLAT:.7f}" lon="{LON0 + c * DLON:.7f}">{tag}</node>\n'
            )
    wid = 1000
    for r in range(N_GRID):
        cls = "primary" if r in PRIMARY_ROWS else "tertiary" if r in TERTIARY_ROWS else "residential"
        tags = {"highway": cls, **({"maxspeed": "70"} if r == 6 else {})}
        out.append(_way(wid, [_node_id(r, c) for c in range(N_GRID)], tags))
        wid += 1
    for c in range(N_GRID):
        cls = "secondary" if c in SECONDARY_COLS else "tertiary" if c in TERTIARY_COLS else "residential"
        out.append(_way(wid, [_node_id(r, c) for r in range(N_GRID)], {"highway": cls}))
        wid += 1
    out.append("</osm>\n")
    return "".join(out)


def _way(wid: int, refs, tags: dict) -> str:
    nds = "".join(f'<nd ref="{r}"/>' for r in refs)
    tg = "".join(f'<tag k="{k}" v="{v}"/>' for k, v in tags.items())
    return f'<way id="{wid}" version="1">{nds}{tg}</way>\n'


def _true_profile_text() -> str:
    prof = load_profile_from_text(START_PROFILE)
    lines = START_PROFILE
    for cls, m in TRUE_MULT.items():
        old = f"[speeds.{cls}]\ndefault_kph = {prof.speeds[cls].default_kph!r}\nfactor = {prof.speeds[cls].factor!r}"
        new = (
            f"[speeds.{cls}]\ndefault_kph = {prof.speeds[cls].default_kph!r}\nfactor = {prof.speeds[cls].factor * m!r}"
        )
        assert old in lines
        lines = lines.replace(old, new)
    return lines


def load_profile_from_text(text: str):
    import tomllib

    from coverkit.network.profile import profile_from_dict

    return profile_from_dict(tomllib.loads(text), where="test")


@pytest.fixture(scope="module")
def grid_case(tmp_path_factory):
    """Files of the synthetic case and the fitted result (built once for the module)."""
    d = tmp_path_factory.mktemp("calib")
    osm = d / "grid.osm"
    osm.write_text(_grid_osm())
    start_toml = d / "start.toml"
    start_toml.write_text(START_PROFILE)
    true_toml = d / "true.toml"
    true_toml.write_text(_true_profile_text())
    net, _ = build_network(osm, start_toml)
    true_net, _ = build_network(osm, true_toml)
    net_path = net.save(d / "net.gpkg")

    rng = np.random.default_rng(20260)
    ids = sorted(BASES)
    b_lon = np.array([LON0 + BASES[b][1] * DLON for b in ids])
    b_lat = np.array([LAT0 + BASES[b][0] * DLAT + 0.00027 for b in ids])  # ~30 m off the node
    pd.DataFrame({"id": ids, "lon": b_lon, "lat": b_lat}).to_csv(d / "bases.csv", index=False)
    inc_lon = rng.uniform(LON0, LON0 + (N_GRID - 1) * DLON, N_OBS)
    inc_lat = rng.uniform(LAT0, LAT0 + (N_GRID - 1) * DLAT, N_OBS)
    base_of = rng.integers(0, len(ids), N_OBS)

    # true times from the independent reference (tests/reference_search.py: the true network as exported, shapely
    # snapping, heap Dijkstra), not from coverkit's own search
    ex = ref.read_exported(true_net.save(d / "true.gpkg"))
    roads = ref.roads_of(ex)
    graph = ref.HeapGraph(ex)
    b_xy = gpd.GeoSeries(gpd.points_from_xy(b_lon, b_lat), crs="EPSG:4326").to_crs(true_net.crs)
    inc = gpd.GeoSeries(gpd.points_from_xy(inc_lon, inc_lat), crs="EPSG:4326").to_crs(true_net.crs)
    bsn = ref.snap(roads, shapely.get_coordinates(b_xy.to_numpy()))
    isn = ref.snap(roads, shapely.get_coordinates(inc.to_numpy()))
    table = np.vstack(
        [
            ref.target_times(ex, roads, graph.search(ref.base_seeds(ex, roads, bsn, i)), isn, bsn, i)
            for i in range(len(ids))
        ]
    )
    true_s = table[base_of, np.arange(N_OBS)]
    assert np.all(true_s > 0)
    observed = true_s * rng.lognormal(0.0, NOISE_SIGMA, N_OBS)
    obs_path = d / "observed.csv"
    pd.DataFrame(
        {
            "base_id": np.asarray(ids)[base_of],
            "lon": inc_lon,
            "lat": inc_lat,
            "observed_s": np.round(observed, 1),
            "hour": rng.integers(0, 24, N_OBS),
        }
    ).to_csv(obs_path, index=False)
    result = calibrate_files(net_path, obs_path, d / "bases.csv")
    return {
        "dir": d,
        "osm": osm,
        "net_path": net_path,
        "obs_path": obs_path,
        "bases_path": d / "bases.csv",
        "result": result,
        "true_s": true_s,
    }


# -- recovery and round trip --------------------------------------------------------------------------------------


def test_recovers_known_speed_multipliers_within_5_percent(grid_case):
    """Synthetic ground truth (see module docstring): fitted multipliers within 5 % of the true ones."""
    res = grid_case["result"]
    table = res.classes.set_index("road_class")
    for cls, true_m in TRUE_MULT.items():
        assert table.loc[cls, "fitted"], cls
        assert table.loc[cls, "multiplier"] == pytest.approx(true_m, rel=0.05), cls
        # new factor = old factor x multiplier (rounded to 4 decimals)
        start = load_profile_from_text(START_PROFILE).speeds[cls].factor
        assert table.loc[cls, "factor_after"] == pytest.approx(start * table.loc[cls, "multiplier"], abs=1e-4)
    assert res.n_used == N_OBS
    assert res.error("after") < res.error("before")
    # lognormal noise has median 1: after calibration the median log ratio is near 0
    obs = res.observations
    assert abs(np.median(np.log(obs["after_s"] / obs["observed_s"]))) < 0.03


def test_noise_free_observations_give_the_true_multipliers(grid_case):
    """Synthetic ground truth without noise: the fit is exact up to the solver tolerance (0.1 %)."""
    net = RoadNetwork.load(grid_case["net_path"])
    bases = read_points(grid_case["bases_path"], net.crs, what="bases")
    obs = read_observed(grid_case["obs_path"], bases["id"]).assign(observed_s=grid_case["true_s"])
    res = calibrate_speeds(net, bases, obs)
    for cls, true_m in TRUE_MULT.items():
        assert res.multipliers[cls] == pytest.approx(true_m, rel=1e-3), cls
    assert res.error("after") < 0.01 * res.error("before")


def test_written_profile_rebuilds_the_fitted_travel_times(grid_case):
    """The network build reading the calibrated TOML gives the fitted edge times and route times."""
    res = grid_case["result"]
    out = write_calibrated_profile(res, grid_case["dir"] / "calibrated.toml")
    text = out.read_text()
    assert "observed.csv" in text and f"{N_OBS} of {N_OBS} observations" in text
    prof = load_profile(out)
    for cls in TRUE_MULT:
        assert prof.speeds[cls].factor == res.profile_after.speeds[cls].factor
        start = load_profile_from_text(START_PROFILE).speeds[cls]
        assert prof.speeds[cls].default_kph == start.default_kph and prof.speeds[cls].cap_kph == start.cap_kph
    rebuilt, _ = build_network(grid_case["osm"], out)
    np.testing.assert_allclose(rebuilt.travel_s, res.network.travel_s, rtol=1e-12)
    # and the routes on the rebuilt network give the reported calibrated times
    bases = read_points(grid_case["bases_path"], rebuilt.crs, what="bases")
    obs = read_observed(grid_case["obs_path"], bases["id"])
    b_snap = snap_points(rebuilt, bases)
    inc = gpd.GeoSeries(gpd.points_from_xy(obs["lon"], obs["lat"]), crs="EPSG:4326").to_crs(rebuilt.crs)
    i_snap = snap_points(rebuilt, inc)
    src = np.searchsorted(bases["id"].to_numpy(), obs["base_id"].to_numpy())
    times = point_times(rebuilt, b_snap, i_snap, limit_s=1e9).toarray()[src, np.arange(len(obs))]
    np.testing.assert_allclose(times, res.observations["after_s"].to_numpy(), rtol=1e-9)


def test_retime_with_the_build_profile_reproduces_the_build(grid_case):
    """Re-timing a network with the profile it was built with gives the build's own times (build_network)."""
    net = RoadNetwork.load(grid_case["net_path"])
    again = retime_network(net, load_profile(grid_case["dir"] / "start.toml"))
    np.testing.assert_allclose(again.travel_s, net.travel_s, rtol=1e-12)


def test_chart_is_written_and_deterministic(grid_case, tmp_path):
    """Determinism rule of the project: the same result gives the same PNG bytes."""
    res = grid_case["result"]
    a = calibration_chart(res, tmp_path / "a.png")
    b = calibration_chart(res, tmp_path / "b.png")
    assert a.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert a.read_bytes() == b.read_bytes()
    with pytest.raises(CoverkitError):
        calibration_chart(res, tmp_path / "chart.jpg")


def test_hour_filter_uses_only_the_chosen_hours(grid_case):
    """Counting check: the rows kept are exactly those with the chosen hours."""
    net = RoadNetwork.load(grid_case["net_path"])
    bases = read_points(grid_case["bases_path"], net.crs, what="bases")
    obs = read_observed(grid_case["obs_path"], bases["id"])
    hours = list(range(0, 12))
    res = calibrate_speeds(net, bases, obs, hours=hours, max_iterations=2)
    expect = int(obs["hour"].isin(hours).sum())
    assert res.n_used == expect and res.n_outside_hours == len(obs) - expect
    assert set(res.observations["hour"].astype(int)) <= set(hours)


# -- the distance-time curve ---------------------------------------------------------------------------------------


def test_kolesar_curve_is_continuous_at_the_critical_distance():
    """Kolesar, Walker, Hausner (1975): both pieces equal 2v/a at d_c = v^2/a (exact)."""
    a, v = 0.7, 16.0
    dc = v * v / a
    below = kolesar_time_s(np.array([dc * (1 - 1e-12)]), a, v)[0]
    above = kolesar_time_s(np.array([dc]), a, v)[0]
    assert below == pytest.approx(2 * v / a, rel=1e-9) and above == pytest.approx(2 * v / a, rel=1e-12)
    # below d_c the time grows as sqrt(D): a quarter of the distance takes half the time
    assert kolesar_time_s(np.array([dc / 4]), a, v)[0] == pytest.approx(v / a, rel=1e-12)


def test_kolesar_fit_recovers_acceleration_and_cruise_speed():
    """Data from the Kolesar et al. (1975) formula with 4 % lognormal noise: a and v within 5 %."""
    rng = np.random.default_rng(7)
    a, v = 0.6, 18.0  # d_c = 540 m
    d = np.exp(rng.uniform(np.log(60.0), np.log(15000.0), 600))
    # the curve written here from the paper's model (accelerate at a to v, cruise, brake at a), not coverkit's
    t = np.where(d < v * v / a, 2.0 * np.sqrt(d / a), v / a + d / v) * rng.lognormal(0.0, 0.04, d.size)
    fit = fit_kolesar(d, t)
    assert fit.accel_mps2 == pytest.approx(a, rel=0.05)
    assert fit.cruise_mps == pytest.approx(v, rel=0.05)
    assert fit.critical_m == pytest.approx(fit.cruise_mps**2 / fit.accel_mps2)
    assert fit.cruise_kph == pytest.approx(fit.cruise_mps * 3.6)
    with pytest.raises(ModelError):
        fit_kolesar(np.array([100.0, 0.0]), np.array([30.0, 10.0]))


# -- routes against networkx ---------------------------------------------------------------------------------------


def test_routes_match_networkx_dijkstra_with_points_inserted():
    """networkx.dijkstra_path_length / dijkstra_path on the same graph plus the snapped points as nodes."""
    rng = np.random.default_rng(3)
    nxn, nyn, sp_m = 7, 6, 200.0
    ix, iy = np.meshgrid(np.arange(nxn), np.arange(nyn), indexing="xy")
    ids = (iy * nxn + ix).ravel()
    xy = np.column_stack([500000.0 + ix.ravel() * sp_m, 5000000.0 + iy.ravel() * sp_m])
    right = ids[ix.ravel() < nxn - 1]
    up = ids[iy.ravel() < nyn - 1]
    u = np.concatenate([right, right + 1, up, up + nxn])
    v = np.concatenate([right + 1, right, up + nxn, up])
    drop = rng.uniform(size=len(u)) < 0.1  # some one-way streets
    drop[: len(right)] = False  # keep one direction of every street
    drop[2 * len(right) : 2 * len(right) + len(up)] = False
    u, v = u[~drop], v[~drop]
    speed = rng.uniform(20.0, 80.0, len(u))
    signal = rng.uniform(size=len(xy)) < 0.2
    net = network_from_arrays(xy, u, v, speed, profile=load_profile("emergency"), signal=signal)
    pts_s = xy[[0, 20, 33]] + np.array([[70.0, 15.0], [-20.0, 90.0], [55.0, -12.0]])
    pts_t = np.column_stack(
        [rng.uniform(xy[:, 0].min(), xy[:, 0].max(), 30), rng.uniform(xy[:, 1].min(), 5e6 + 900, 30)]
    )
    # one target on the same street as a source, ahead of it, for the direct trip
    pts_t[0] = pts_s[0] + np.array([60.0, 0.0])
    s_snap, t_snap = snap_points(net, pts_s), snap_points(net, pts_t)
    si = rng.integers(0, 3, 30)
    si[0] = 0
    ti = np.arange(30)
    routes = shortest_routes(net, s_snap, t_snap, si, ti)

    run = run_s(net)
    delay = net.edges["delay_s"].to_numpy()
    g = nx.DiGraph()
    for e, (a, b) in enumerate(zip(net.u, net.v, strict=True)):
        g.add_edge(int(a), int(b), w=float(net.travel_s[e]), e=e)
    for k in range(30):
        h = g.copy()
        s, t = ("s", si[k]), ("t", k)
        for e, f in zip(
            s_snap.entry_edge[s_snap.entry_point == si[k]], s_snap.entry_frac[s_snap.entry_point == si[k]], strict=True
        ):
            w = (1 - f) * run[e] + delay[e]
            if not h.has_edge(s, int(net.v[e])) or h[s][int(net.v[e])]["w"] > w:
                h.add_edge(s, int(net.v[e]), w=w)
            for e2, f2 in zip(
                t_snap.entry_edge[t_snap.entry_point == k], t_snap.entry_frac[t_snap.entry_point == k], strict=True
            ):
                if e2 == e and f2 >= f:
                    h.add_edge(s, t, w=(f2 - f) * run[e])
        for e, f in zip(
            t_snap.entry_edge[t_snap.entry_point == k], t_snap.entry_frac[t_snap.entry_point == k], strict=True
        ):
            w = f * run[e]
            if not h.has_edge(int(net.u[e]), t) or h[int(net.u[e])][t]["w"] > w:
                h.add_edge(int(net.u[e]), t, w=w)
        ref = nx.dijkstra_path_length(h, s, t, weight="w")
        assert routes.time_s[k] == pytest.approx(ref, abs=1e-6)
        path = nx.dijkstra_path(h, s, t, weight="w")
        inner = {h[a][b]["e"] for a, b in itertools.pairwise(path[1:-1])}
        full = set(routes.run_use[k].indices[np.isclose(routes.run_use[k].data, 1.0)])
        assert inner == full  # the whole edges driven are those of networkx's path
    assert routes.direct[0]
    # re-pricing the routes with the network's own times gives the route times
    np.testing.assert_allclose(routes.priced_s(run, delay), routes.time_s, rtol=1e-12, atol=1e-9)


# -- error summary -------------------------------------------------------------------------------------------------


def test_error_summary_worked_by_hand():
    """Arithmetic by hand: errors -2, +2, -10, +6 s; bands 0-2 km holds the first two, 2-5 km the rest."""
    modelled = np.array([10.0, 20.0, 30.0, 46.0])
    observed = np.array([12.0, 18.0, 40.0, 40.0])
    route_m = np.array([500.0, 2000.0, 2500.0, 4000.0])
    t = error_summary(modelled, observed, route_m, bands_km=(2.0, 5.0)).set_index("band")
    assert t.loc["all", "n"] == 4 and t.loc["all", "mae_s"] == pytest.approx(5.0)
    assert t.loc["all", "bias_s"] == pytest.approx(-1.0)
    # numpy linear percentile of |e| = 2, 2, 6, 10 at 90 %: 6 + 0.7 * 4
    assert t.loc["all", "p90_abs_s"] == pytest.approx(8.8)
    assert t.loc["0-2 km", "n"] == 2 and t.loc["0-2 km", "bias_s"] == pytest.approx(0.0)
    assert t.loc["2-5 km", "mae_s"] == pytest.approx(8.0)
    assert t.loc[">5 km", "n"] == 0 and math.isnan(t.loc[">5 km", "mae_s"])


# -- bad input -----------------------------------------------------------------------------------------------------


def _write(tmp_path, text: str, name: str = "obs.csv"):
    p = tmp_path / name
    p.write_text(text)
    return p


def _one_line(exc: pytest.ExceptionInfo) -> str:
    msg = str(exc.value)
    assert "\n" not in msg
    return msg


def test_unknown_base_id_names_row_and_id(tmp_path):
    """Project rule: one line naming the file, the row and the id."""
    p = _write(tmp_path, "base_id,lon,lat,observed_s\nA,-35.6,40.5,100\nS9,-35.6,40.5,100\n")
    with pytest.raises(FieldError) as exc:
        read_observed(p, ["A", "B"], bases_name="bases.csv")
    msg = _one_line(exc)
    assert "line 3" in msg and "'S9'" in msg and "bases.csv" in msg


@pytest.mark.parametrize("value", ["0", "-12.5"])
def test_zero_or_negative_observed_time_names_the_row(tmp_path, value):
    p = _write(tmp_path, f"base_id,lon,lat,observed_s\nA,-35.6,40.5,100\nA,-35.6,40.5,80\nA,-35.6,40.5,{value}\n")
    with pytest.raises(FieldError) as exc:
        read_observed(p, ["A"])
    msg = _one_line(exc)
    assert "line 4" in msg and "observed_s" in msg and "more than 0" in msg


def test_missing_column_is_named(tmp_path):
    p = _write(tmp_path, "base_id,lon,lat,seconds\nA,-35.6,40.5,100\n")
    with pytest.raises(FieldError) as exc:
        read_observed(p)
    assert "'observed_s'" in _one_line(exc)


def test_bad_hour_is_named(tmp_path):
    p = _write(tmp_path, "base_id,lon,lat,observed_s,hour\nA,-35.6,40.5,100,7\nA,-35.6,40.5,100,25\n")
    with pytest.raises(FieldError) as exc:
        read_observed(p)
    assert "line 3" in _one_line(exc)


def test_no_usable_observation_says_how_many_were_off_network(grid_case, tmp_path):
    """Incidents 0.1 degree (about 11 km) north of every road are all off-network."""
    net = RoadNetwork.load(grid_case["net_path"])
    bases = read_points(grid_case["bases_path"], net.crs, what="bases")
    rows = "".join(f"A,{LON0 + 0.01 * i},{LAT0 + 0.15},{100 + i}\n" for i in range(3))
    obs = read_observed(_write(tmp_path, "base_id,lon,lat,observed_s\n" + rows), bases["id"])
    with pytest.raises(OffNetworkError) as exc:
        calibrate_speeds(net, bases, obs, source="obs.csv")
    msg = _one_line(exc)
    assert "3 of 3 incidents lie farther than 500 m" in msg and "obs.csv" in msg


def test_too_few_observations(grid_case, tmp_path):
    net = RoadNetwork.load(grid_case["net_path"])
    bases = read_points(grid_case["bases_path"], net.crs, what="bases")
    obs = read_observed(grid_case["obs_path"], bases["id"]).iloc[:6]
    with pytest.raises(ModelError) as exc:
        calibrate_speeds(net, bases, obs)
    msg = _one_line(exc)
    assert "only 6 usable" in msg


def test_hours_without_hour_column(grid_case, tmp_path):
    net = RoadNetwork.load(grid_case["net_path"])
    bases = read_points(grid_case["bases_path"], net.crs, what="bases")
    obs = read_observed(grid_case["obs_path"], bases["id"]).drop(columns=["hour"])
    with pytest.raises(FieldError) as exc:
        calibrate_speeds(net, bases, obs, hours=[8])
    assert "hour" in _one_line(exc)


def test_spread_of_the_calibrated_residuals_recovers_the_noise_sigma(grid_case, tmp_path, capsys):
    """Synthetic ground truth: observed = true time x lognormal(0, NOISE_SIGMA); after calibration the fitted
    spread of ln(observed / modelled) over all trips is NOISE_SIGMA within 3 standard errors, and the CLI writes it."""
    from coverkit.calibrate import summary_text
    from coverkit.cli import main
    from coverkit.spread import read_spread

    res = grid_case["result"]
    whole = res.spread.table.iloc[-1]
    assert whole["band"] == "all" and whole["n"] == N_OBS
    assert abs(whole["sigma"] - NOISE_SIGMA) <= 3 * whole["sigma_se"]
    assert "travel-time spread" in summary_text(res)
    out = tmp_path / "cal.toml"
    args = ["calibrate", str(grid_case["net_path"]), "--observed", str(grid_case["obs_path"])]
    assert main([*args, "--bases", str(grid_case["bases_path"]), "--out", str(out), "--quiet"]) == 0
    back = read_spread(tmp_path / "cal_spread.csv")
    assert back.sigma_all == pytest.approx(whole["sigma"], rel=1e-5)
    assert "cal_spread.csv" in capsys.readouterr().out
