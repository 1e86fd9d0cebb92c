"""`coverkit site` prints each model's own figures, checked against the separate coverage module.

Source of each check: the covered share within the standard and the share covered twice come from
``coverage.evaluate_coverage`` run with the chosen sites as bases (an independent path from the siting code); the
p-median's mean travel time is recomputed here from that run's per-point travel times (Hakimi 1964 defines it as
the weighted mean distance to the nearest open site).
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest

from coverkit.coverage import Standard, evaluate_coverage
from coverkit.demand import load_demand
from coverkit.network import RoadNetwork
from coverkit.travel import read_points

from .conftest import DEMO, site_cli


def _coverage_of(demo_net_path, ids):
    net = RoadNetwork.load(demo_net_path)
    bases = read_points(DEMO / "stations.csv", net.crs, what="bases")
    cands = read_points(DEMO / "candidates.csv", net.crs, what="candidates")
    pts = pd.concat([bases[["id", "geometry"]], cands[["id", "geometry"]]], ignore_index=True)
    pts = pts[pts["id"].astype(str).isin([str(i) for i in ids])]
    demand = load_demand(DEMO / "population.tif", net)
    return evaluate_coverage(net, gpd.GeoDataFrame(pts, crs=net.crs), demand, Standard("8", 480.0))


def _existing_ids():
    return list(pd.read_csv(DEMO / "stations.csv")["id"].astype(str))


def test_p_median_prints_the_share_within_the_standard_and_its_mean_time(demo_net_path, tmp_path, capsys):
    """Before the fix the p-median printed the share reached at all (99.8 %) as "covered"."""
    out = tmp_path / "pm.gpkg"
    assert site_cli(demo_net_path, out, "--model", "p-median", "--add", "2") == 0
    text = capsys.readouterr().out
    summary = gpd.read_file(out, layer="site_summary").iloc[0]
    chosen = gpd.read_file(out, layer="site_chosen")
    res = _coverage_of(demo_net_path, _existing_ids() + list(chosen["id"].astype(str)))
    s = res.summary()
    assert summary["covered_share_after"] == pytest.approx(s["covered_share"], rel=1e-9)
    assert f"after {s['covered_share'] * 100:.1f} %" in text
    d = res.demand
    w = d["weight"].to_numpy(float)
    t = d["travel_s"].to_numpy(float) if "travel_s" in d else d["response_s"].to_numpy(float)
    ok = np.isfinite(t) & (w > 0)
    mean_s = float((w[ok] * t[ok]).sum() / w[ok].sum())
    assert summary["objective"] == pytest.approx(mean_s, rel=1e-3)
    assert "mean travel time" in text


def test_backup_prints_its_own_objective_and_curve(demo_net_path, tmp_path, capsys):
    """Backup's objective is demand covered twice; its curve is its own, not MCLP's."""
    out = tmp_path / "bk.gpkg"
    assert site_cli(demo_net_path, out, "--model", "backup", "--add", "2") == 0
    text = capsys.readouterr().out
    summary = gpd.read_file(out, layer="site_summary").iloc[0]
    chosen = gpd.read_file(out, layer="site_chosen")
    s = _coverage_of(demo_net_path, _existing_ids() + list(chosen["id"].astype(str))).summary()
    assert summary["objective"] == pytest.approx(s["covered_twice_or_more"], rel=1e-9)
    assert "demand covered twice" in text and "backup curve" in text
    curve = gpd.read_file(out, layer="site_curve")
    assert curve.loc[curve["new_sites"] == 2, "objective"].iloc[0] == pytest.approx(s["covered_twice_or_more"])
    assert curve["objective"].is_monotonic_increasing or curve["covered_share"].is_monotonic_increasing


def test_relocate_baseline_is_the_existing_layout(demo_net_path, tmp_path, capsys):
    """Before the fix `--relocate` printed "covered before 0.0 %" and an infinite response time."""
    out = tmp_path / "rl.gpkg"
    assert site_cli(demo_net_path, out, "--model", "mclp", "--add", "3", "--relocate") == 0
    text = capsys.readouterr().out
    summary = gpd.read_file(out, layer="site_summary").iloc[0]
    s = _coverage_of(demo_net_path, _existing_ids()).summary()
    assert summary["covered_share_before"] == pytest.approx(s["covered_share"], rel=1e-9)
    assert summary["fractile_response_before_s"] == pytest.approx(s["fractile_response_s"], rel=1e-9)
    assert f"before {s['covered_share'] * 100:.1f} %" in text and "inf" not in text.split("chosen")[0]
