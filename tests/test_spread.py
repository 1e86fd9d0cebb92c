"""Travel-time spread: the banded lognormal fit, its standard errors, and the per-point arrival probability.

Sources of the checks:

- Fit: samples drawn from known lognormals (numpy's seeded generator). The oracle is the known sigma per band.
- Standard errors: se(sigma) = s / sqrt(2 (n - 1)) for a normal sample is a large-sample result (Kendall & Stuart,
  The Advanced Theory of Statistics, vol. 1; from memory); checked here by its coverage over many replications
  (about 68.3 % of fits within one standard error, the normal's central 1-sigma mass).
- Probability: scipy.stats.lognorm.cdf (reference library) at the standard, scale = modelled time x exp(mu).
- Model: Budge, Ingolfsson & Zerom (2010), Management Science 56(4): lognormal-like travel times whose spread
  depends on distance (from memory; our banded form is a simplification).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from coverkit.cli import main
from coverkit.errors import InputFileError
from coverkit.spread import arrival_probability, fit_spread, read_spread, write_spread

SIGMA_BY_BAND = (0.35, 0.25, 0.15, 0.10)  # known spreads of bands 0-2, 2-5, 5-10, >10 km (our values)
MID_M = (1000.0, 3500.0, 7500.0, 15000.0)


def _sample(rng, n_per_band: int, mu: float = 0.0):
    route = np.repeat(MID_M, n_per_band)
    sigma = np.repeat(SIGMA_BY_BAND, n_per_band)
    modelled = route / 15.0  # 54 km/h
    observed = modelled * np.exp(rng.normal(mu, sigma))
    return observed, modelled, route


def test_fitted_sigma_per_band_within_its_standard_error_of_the_known_one():
    rng = np.random.default_rng(7)
    fit = fit_spread(*_sample(rng, 400, mu=0.05))
    bands = fit.table.iloc[:4]
    assert not bands["from_all"].any() and list(bands["n"]) == [400] * 4
    for (_, row), true in zip(bands.iterrows(), SIGMA_BY_BAND, strict=True):
        # a single fit: within 3 se (99.7 % each); the 1-se coverage is the next test's check
        assert abs(row["sigma"] - true) <= 3 * row["sigma_se"], row["band"]
        assert row["sigma_se"] == pytest.approx(true / np.sqrt(2 * 399), rel=0.15)
        assert abs(row["mu"] - 0.05) <= 3 * row["mu_se"]


def test_sigma_standard_error_covers_about_68_percent():
    """Over 400 replications the known sigma lies within one se of the fit in about 68.3 % of them."""
    rng = np.random.default_rng(11)
    hits1 = hits2 = 0
    reps = 400
    for _ in range(reps):
        r = rng.normal(0.0, 0.3, 150)
        fit = fit_spread(np.exp(r) * 100.0, np.full(150, 100.0), np.full(150, 500.0))
        row = fit.table.iloc[0]
        err = abs(row["sigma"] - 0.3)
        hits1 += err <= row["sigma_se"]
        hits2 += err <= 2 * row["sigma_se"]
    # binomial sd of the share at p = 0.683, n = 400: 0.023; allow about 3 sd
    assert 0.61 <= hits1 / reps <= 0.75
    assert hits2 / reps >= 0.92


def test_a_band_with_few_trips_takes_the_figures_of_all_trips():
    rng = np.random.default_rng(3)
    obs, mod, route = _sample(rng, 50)
    keep = ~((route > 5000) & (route <= 10000)) | (np.arange(len(route)) % 50 < 5)  # 5 trips left in 5-10 km
    fit = fit_spread(obs[keep], mod[keep], route[keep])
    row, whole = fit.table.iloc[2], fit.table.iloc[-1]
    assert row["from_all"] and row["n"] == 5 and row["sigma"] == whole["sigma"]
    assert whole["n"] == keep.sum()


def test_probability_equals_the_scipy_lognormal_cdf():
    rng = np.random.default_rng(5)
    fit = fit_spread(*_sample(rng, 100, mu=-0.02))
    modelled = np.array([300.0, 420.0, 479.0, 480.0, 600.0, 900.0, np.inf])
    route = np.array([1500.0, 3000.0, 6000.0, 6000.0, 12000.0, 800.0, np.nan])
    mu, sigma = fit.band_values(route)
    p = arrival_probability(modelled, 480.0, mu, sigma)
    for i in range(len(modelled) - 1):
        expect = stats.lognorm.cdf(480.0, s=sigma[i], scale=modelled[i] * np.exp(mu[i]))
        assert p[i] == pytest.approx(expect, rel=1e-12, abs=1e-15)
    assert p[-1] == 0.0  # not reached
    assert sigma[0] == fit.table["sigma"].iloc[0] and sigma[4] == fit.table["sigma"].iloc[3]


def test_written_fit_reads_back_and_bad_files_are_one_line(tmp_path):
    rng = np.random.default_rng(2)
    fit = fit_spread(*_sample(rng, 40), source="obs.csv")
    path = write_spread(fit, tmp_path / "spread.csv")
    back = read_spread(path)
    assert back.bands_km == fit.bands_km
    pd.testing.assert_series_equal(back.table["sigma"], fit.table["sigma"], rtol=1e-5)
    bad = tmp_path / "bad.csv"
    bad.write_text("band,sigma\nall,0.2\n")
    with pytest.raises(InputFileError, match="not a spread table") as err:
        read_spread(bad)
    assert len(str(err.value).splitlines()) == 1
    neg = tmp_path / "neg.csv"
    neg.write_text(path.read_text().replace(f"{fit.table['sigma'].iloc[0]:.6g}", "-1", 1))
    with pytest.raises(InputFileError, match="sigma at least 0"):
        read_spread(neg)


def _demo_spread(tmp_path, sigma=0.25):
    rows = [f"{b},{u},{n},0,0.01,{sigma},0.01,False" for b, u, n in (("0-2 km", 2, 50), ("2-5 km", 5, 50))]
    rows += [f"5-10 km,10,50,0,0.01,{sigma},0.01,False", f">10 km,,50,0,0.01,{sigma},0.01,False"]
    rows += [f"all,,200,0,0.01,{sigma},0.01,False"]
    path = tmp_path / "spread.csv"
    path.write_text("band,upper_km,n,mu,mu_se,sigma,sigma_se,from_all\n" + "\n".join(rows) + "\n")
    return path


def test_cover_with_spread_gives_point_probabilities_and_expected_cover(demo_net_path, tmp_path, capsys):
    """Each point's p_in_standard is the scipy lognormal CDF at the standard for its modelled first-due time."""
    import geopandas as gpd

    from tests.conftest import DEMO

    out = tmp_path / "cover.gpkg"
    args = ["cover", str(demo_net_path), "--bases", str(DEMO / "stations.csv"), "--demand", str(DEMO / "incidents.csv")]
    args += ["--minutes", "8", "--out", str(out), "--quiet", "--spread", str(_demo_spread(tmp_path))]
    assert main(args) == 0
    text = capsys.readouterr().out
    assert "expected " in text and "deterministic" in text
    layers = gpd.list_layers(out)["name"].tolist()
    demand = gpd.read_file(out, layer=next(n for n in layers if n.startswith("demand_")))
    t = demand["travel_s"].to_numpy(float)
    reached = np.isfinite(t)
    expect = np.where(reached, stats.lognorm.cdf(480.0, s=0.25, scale=np.where(reached, t, 1.0)), 0.0)
    np.testing.assert_allclose(demand["p_in_standard"].to_numpy(float), expect, rtol=1e-9, atol=1e-12)
    assert np.all(demand.loc[reached, "first_route_m"] > 0)
    summary = gpd.read_file(out, layer="summary")
    w = demand["weight"].to_numpy(float)
    assert summary["expected_covered"].iloc[0] == pytest.approx(np.sum(w * expect), rel=1e-9)
    # the deterministic figure stays: points with modelled time within the standard
    assert summary["covered"].iloc[0] == pytest.approx(w[t <= 480.0].sum())


def test_cover_with_a_bad_spread_file_exits_2_and_writes_nothing(demo_net_path, tmp_path, capsys):
    from tests.conftest import DEMO

    bad = tmp_path / "bad.csv"
    bad.write_text("nothing,here\n1,2\n")
    out = tmp_path / "cover.gpkg"
    args = ["cover", str(demo_net_path), "--bases", str(DEMO / "stations.csv"), "--demand", str(DEMO / "incidents.csv")]
    assert main([*args, "--minutes", "8", "--out", str(out), "--quiet", "--spread", str(bad)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "bad.csv" in err
    assert not out.exists()


def _spread_study(tmp_path, extra: str) -> object:
    from tests.conftest import DEMO, demo_study_head

    path = tmp_path / "study.toml"
    path.write_text(
        demo_study_head("spread test")
        + f'[[demand]]\nname = "calls"\npoints = "{DEMO / "incidents.csv"}"\nkind = "incidents"\n'
        + '[[standard]]\nname = "8 min"\ntravel_s = 480\n'
        + f'[outputs]\nfolder = "{tmp_path / "out"}"\nmaps = false\nisochrone_minutes = [8]\n'
        # a 200 m area grid: the checks are on point figures and report text, not the grid's areas
        + "grid_cell_m = 200\n"
        + extra
    )
    return path


def test_a_study_names_the_fit_and_the_simulation_draws_from_it(tmp_path):
    """[travel_spread] file = ...: the study's simulation takes the fit's all-trips sigma as its lognormal
    multiplier, whose coefficient of variation is sqrt(exp(sigma^2) - 1) (lognormal moments)."""
    from coverkit.errors import StudyError
    from coverkit.simulate.study_run import study_settings
    from coverkit.study import load_study

    fit_path = _demo_spread(tmp_path, sigma=0.25)
    study = load_study(_spread_study(tmp_path, f'[travel_spread]\nfile = "{fit_path}"\n'))
    assert study.spread.sigma_all == 0.25
    cfg = study_settings(study, None, None, {})
    assert cfg.travel_cv == pytest.approx(np.sqrt(np.expm1(0.0625)), rel=1e-12)
    assert cfg.travel_cv_source.endswith("spread.csv")
    # a caller's own spread still wins
    assert study_settings(study, None, None, {"travel_cv": 0.1}).travel_cv == 0.1
    with pytest.raises(StudyError, match=r"travel_spread\.file"):
        load_study(_spread_study(tmp_path, '[travel_spread]\nfile = "missing.csv"\n'))


def test_a_study_run_with_a_spread_fit_reports_expected_cover(tmp_path):
    from coverkit.study import run_study

    fit_path = _demo_spread(tmp_path, sigma=0.2)
    run = run_study(_spread_study(tmp_path, f'[travel_spread]\nfile = "{fit_path}"\n'))
    res = run.runs[0].results["calls"]
    d = res.demand
    t = d["travel_s"].to_numpy(float)
    ok = np.isfinite(t)
    expect = np.zeros(len(t))
    expect[ok] = stats.lognorm.cdf(480.0, s=0.2, scale=t[ok])
    np.testing.assert_allclose(d["p_in_standard"].to_numpy(float), expect, rtol=1e-9, atol=1e-12)
    assert res.summary()["expected_covered"] == pytest.approx(np.sum(d["weight"].to_numpy(float) * expect))
    from coverkit.report.study_report import report_study

    out = report_study(run)
    page = out["report"].read_text()
    assert "Covered demand with the travel-time spread" in page and "deterministic figure" in page
