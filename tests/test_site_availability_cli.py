"""`coverkit site` and `coverkit availability` on the demo county, checked against independent computations.

Sources: MCLP optimum by exhaustive enumeration (Church & ReVelle 1974 define the objective); coverage after the
chosen sites by the separate coverage module; in an M/M/N queue with waiting the mean number of busy servers equals
the offered load lambda/mu (Erlang 1917; Little's law) - so unit workloads must sum to it.
"""

from __future__ import annotations

import itertools

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest

from coverkit.cli import main
from coverkit.coverage import Standard, evaluate_coverage
from coverkit.demand import load_demand
from coverkit.network import RoadNetwork, build_network
from coverkit.site_plan import build_problem
from coverkit.travel import read_points

from .conftest import DEMO, site_cli


def test_mclp_choice_is_the_enumerated_optimum_and_coverage_agrees(demo_net_path, tmp_path):
    out = tmp_path / "site.gpkg"
    assert site_cli(demo_net_path, out, "--add", "2", "--model", "mclp") == 0
    chosen = gpd.read_file(out, layer="site_chosen")
    assert len(chosen) == 2
    net = RoadNetwork.load(demo_net_path)
    bases = read_points(DEMO / "stations.csv", net.crs, what="bases")
    cands = read_points(DEMO / "candidates.csv", net.crs, what="candidates")
    demand = load_demand(DEMO / "population.tif", net)
    std = Standard("8", 480.0)
    prob = build_problem(net, bases, cands, demand, std)
    cov = prob.covers.toarray()
    w = prob.weights
    fixed_cov = cov[:, prob.fixed].any(axis=1)
    free = np.flatnonzero(~prob.fixed)
    best = max((w[fixed_cov | cov[:, list(pair)].any(axis=1)].sum(), pair) for pair in itertools.combinations(free, 2))
    summary = gpd.read_file(out, layer="site_summary")
    assert summary["covered_share_after"].iloc[0] * w.sum() == pytest.approx(best[0], rel=1e-9)
    # an independent evaluation with the chosen sites as bases gives the same covered share
    chosen_pts = cands[cands["id"].isin(chosen["id"].astype(str))]
    all_bases = pd.concat([bases[["id", "geometry"]], chosen_pts[["id", "geometry"]]], ignore_index=True)
    res = evaluate_coverage(net, gpd.GeoDataFrame(all_bases, crs=net.crs), demand, std)
    assert res.summary()["covered_share"] == pytest.approx(summary["covered_share_after"].iloc[0], rel=1e-9)
    curve = gpd.read_file(out, layer="site_curve")
    assert list(curve["new_sites"]) == [0, 1, 2, 3]
    assert curve["covered_share"].is_monotonic_increasing
    assert (tmp_path / "maps" / "site_curve.png").is_file()


def test_rank_lists_every_candidate_alone(demo_net_path, tmp_path):
    out = tmp_path / "rank.gpkg"
    assert site_cli(demo_net_path, out, "--rank") == 0
    ranking = gpd.read_file(out, layer="site_ranking")
    src = pd.read_csv(DEMO / "candidates.csv")
    assert sorted(ranking["id"].astype(str)) == sorted(src["id"].astype(str))
    assert ranking["added_weight"].is_monotonic_decreasing


def test_lscp_target_is_reached_with_fewest_sites(demo_net_path, tmp_path):
    out = tmp_path / "lscp.gpkg"
    assert site_cli(demo_net_path, out, "--model", "lscp", "--target", "0.95") == 0
    summary = gpd.read_file(out, layer="site_summary").iloc[0]
    curve = gpd.read_file(out, layer="site_curve")
    assert summary["covered_share_after"] >= 0.95
    n = int(summary["new_sites"])
    assert len(curve) > 0
    # one site fewer cannot reach the target: exhaustive enumeration of every set of n - 1 candidates (Toregas et
    # al. 1971 define the LSCP; enumeration is the reference), on the coverage matrix of the same instance
    net = RoadNetwork.load(demo_net_path)
    bases = read_points(DEMO / "stations.csv", net.crs, what="bases")
    cands = read_points(DEMO / "candidates.csv", net.crs, what="candidates")
    demand = load_demand(DEMO / "population.tif", net)
    prob = build_problem(net, bases, cands, demand, Standard("8", 480.0))
    cov = prob.covers.toarray()
    w = prob.weights
    fixed_cov = cov[:, prob.fixed].any(axis=1)
    free = np.flatnonzero(~prob.fixed)
    best = max(
        (w[fixed_cov | cov[:, list(c)].any(axis=1)].sum() for c in itertools.combinations(free, n - 1)),
        default=w[fixed_cov].sum(),
    )
    assert best / w.sum() < 0.95
    chosen = gpd.read_file(out, layer="site_chosen")
    assert len(chosen) == n
    site_ids = prob.sites["id"].astype(str).to_numpy()
    picked = np.flatnonzero(~prob.fixed & np.isin(site_ids, chosen["id"].astype(str).to_numpy()))
    assert len(picked) == n
    reached = fixed_cov | cov[:, picked].any(axis=1)
    assert w[reached].sum() / w.sum() == pytest.approx(summary["covered_share_after"], rel=1e-9)


def test_site_bad_input(demo_net_path, tmp_path, capsys):
    far = pd.DataFrame({"id": ["X1"], "name": ["at sea"], "lon": [-36.5], "lat": [41.0]})
    path = tmp_path / "far.csv"
    far.to_csv(path, index=False)
    out = tmp_path / "x.gpkg"
    code = main(
        [
            "site",
            str(demo_net_path),
            "--bases",
            str(DEMO / "stations.csv"),
            "--candidates",
            str(path),
            "--demand",
            str(DEMO / "population.tif"),
            "--minutes",
            "8",
            "--add",
            "1",
            "--out",
            str(out),
            "-q",
        ]
    )
    assert code == 2 and "X1" in capsys.readouterr().err
    assert site_cli(demo_net_path, out, "--add", "20") == 2
    err = capsys.readouterr().err
    assert "--add 20" in err and len(err.strip().splitlines()) == 1
    assert not out.exists()


def test_availability_units_table_and_workloads(demo_net_path, tmp_path, capsys):
    out = tmp_path / "avail.gpkg"
    code = main(
        [
            "availability",
            str(demo_net_path),
            "--bases",
            str(DEMO / "stations.csv"),
            "--demand",
            str(DEMO / "incidents.csv"),
            "--minutes",
            "8",
            "--service-min",
            "45",
            "--calls-per-h",
            "3",
            "--out",
            str(out),
            "-q",
        ]
    )
    assert code == 0
    units = gpd.read_file(out, layer="availability_units")
    stations = pd.read_csv(DEMO / "stations.csv")
    assert len(units) == stations["units"].sum()
    assert list(units.columns[:3]) == ["base_id", "unit", "workload"]
    offered = 3 * 45 / 60  # erlangs
    assert units["workload"].sum() == pytest.approx(offered, rel=1e-6)
    demand = gpd.read_file(out, layer="availability_demand")
    # the hypercube's all-busy probability is the M/M/N one (Larson 1974): every call waits with the Erlang C
    # probability, computed here by the Erlang B recursion and C = B / (1 - rho (1 - B)) (Erlang 1917)
    n_units = len(units)
    b = 1.0
    for k in range(1, n_units + 1):
        b = offered * b / (k + offered * b)
    c = b / (1 - offered / n_units * (1 - b))
    reached = np.isfinite(demand["travel_s"].to_numpy(dtype=float))
    assert reached.mean() > 0.99
    demand = demand[reached]
    np.testing.assert_allclose(demand["wait_probability"], c, rtol=1e-6)
    # a point's first choice answers exactly when it is free, plus its 1/N share of the queued calls (Poisson
    # arrivals see time averages; Larson 1974): first_unit_share = 1 - workload(first unit) + P_wait / N
    shares = 1 - units["workload"].to_numpy() + c / n_units
    gap = np.abs(demand["first_unit_share"].to_numpy()[:, None] - shares[None, :]).min(axis=1)
    assert gap.max() < 1e-6
    # no unit within the standard: no answering unit can cover the call
    assert (demand.loc[~demand["drive_time_covered"].astype(bool), "availability_covered"] == 0).all()
    text = capsys.readouterr().out
    assert "availability-adjusted" in text and "Planning estimates only" in text


def test_availability_unstable_queue_is_a_clear_error(demo_net_path, tmp_path, capsys):
    code = main(
        [
            "availability",
            str(demo_net_path),
            "--bases",
            str(DEMO / "stations.csv"),
            "--demand",
            str(DEMO / "incidents.csv"),
            "--minutes",
            "8",
            "--service-min",
            "60",
            "--calls-per-h",
            "9",
            "--out",
            str(tmp_path / "a.gpkg"),
            "-q",
        ]
    )
    err = capsys.readouterr().err
    assert code == 2 and "unstable" in err and len(err.strip().splitlines()) == 1


def test_calibrate_writes_a_profile_the_network_builder_accepts(demo_net_path, tmp_path, capsys):
    """The written profile loads and builds; its factors are the starting factors times the fitted multipliers."""
    from coverkit.network import load_profile

    out = tmp_path / "cal.toml"
    code = main(
        [
            "calibrate",
            str(demo_net_path),
            "--observed",
            str(DEMO / "observed_times.csv"),
            "--bases",
            str(DEMO / "stations.csv"),
            "--out",
            str(out),
            "--chart",
            str(tmp_path / "c.png"),
            "-q",
        ]
    )
    assert code == 0
    text = capsys.readouterr().out
    assert "MAE" in text and "Kolesar" in text
    prof = load_profile(out)
    start = load_profile("emergency")
    assert set(prof.speeds) == set(start.speeds)
    # the written factors are the printed "-> new" column, and the printed error falls for all trips
    # (the fit's direction against the demo's true speeds is judged in test_references.py)
    printed = {}
    for line in text.splitlines():
        parts = line.split()
        if parts and parts[0] in prof.speeds and len(parts) >= 6 and parts[2] == "min":
            printed[parts[0]] = float(parts[5])
    assert len(printed) >= 5
    for cls, new in printed.items():
        assert prof.speeds[cls].factor == pytest.approx(new, abs=5e-4), cls
    mae_all = next(line.split() for line in text.splitlines() if line.split()[:1] == ["all"])
    assert float(mae_all[3]) < float(mae_all[2])
    net, _ = build_network(DEMO / "varrowby.osm.bz2", out)
    assert net.profile.name == prof.name
    assert (tmp_path / "c.png").is_file()


def test_calibrate_unknown_base_id_names_the_row(demo_net_path, tmp_path, capsys):
    obs = pd.read_csv(DEMO / "observed_times.csv").head(30)
    obs.loc[4, "base_id"] = "S99"
    path = tmp_path / "obs.csv"
    obs.to_csv(path, index=False)
    out = tmp_path / "cal.toml"
    code = main(
        [
            "calibrate",
            str(demo_net_path),
            "--observed",
            str(path),
            "--bases",
            str(DEMO / "stations.csv"),
            "--out",
            str(out),
            "-q",
        ]
    )
    err = capsys.readouterr().err
    assert code == 2 and "S99" in err and "line 6" in err and len(err.strip().splitlines()) == 1
    assert not out.exists()


@pytest.mark.parametrize("model", ["mclp", "p-median"])
def test_heuristic_is_within_one_percent_of_the_exact_optimum_on_the_demo(demo_net_path, model):
    """Greedy plus interchange against HiGHS on the demo county (stated gap: 1 % of the objective)."""
    from coverkit.site_plan import solve

    net = RoadNetwork.load(demo_net_path)
    bases = read_points(DEMO / "stations.csv", net.crs, what="bases")
    cands = read_points(DEMO / "candidates.csv", net.crs, what="candidates")
    demand = load_demand(DEMO / "population.tif", net)
    prob = build_problem(net, bases, cands, demand, Standard("8", 480.0))
    exact = solve(prob, model, add=3, method="milp", curve_to=0).result
    heur = solve(prob, model, add=3, method="heuristic", curve_to=0).result
    assert exact.status.startswith("proven optimal")
    assert abs(heur.objective - exact.objective) <= 0.01 * abs(exact.objective)
