"""Time of day: hour-band speed factors in a profile, the network retimed for a moment, and their calibration.

Sources of the checks:

- Calibration: synthetic ground truth on the grid of tests/test_calibrate.py. Observed times are the shortest times
  of networks built (coverkit.network.build_network) with the true profile and, for each band, the true profile
  with every class factor times the band's known factor (no cap binds, so that is the band's speed factor), found
  by the tests' own heap Dijkstra over the exported edges (tests/reference_search.py), times seeded lognormal
  noise. The oracle is the known factors (our values), recovered within 5 %.
- Retiming: the network timed for a moment (network_at) equals the network built with the band's factors folded
  into the profile (the build's own formula, built independently from the OSM file).
- Bad input: the project's rule (one-line CoverkitError, exit status 2, nothing written).
"""

from __future__ import annotations

import tomllib

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely

from coverkit.calibrate import read_observed, write_calibrated_profile
from coverkit.calibrate_hours import calibrate_hour_bands
from coverkit.cli import main
from coverkit.errors import FieldError, ProfileError
from coverkit.network import build_network, load_profile
from coverkit.network.hour_bands import network_at, parse_at, parse_band_spec
from coverkit.network.profile import profile_from_dict
from coverkit.travel import read_points
from tests import reference_search as ref
from tests.test_calibrate import (
    BASES,
    DLAT,
    DLON,
    LAT0,
    LON0,
    N_GRID,
    NOISE_SIGMA,
    START_PROFILE,
    _grid_osm,
    _true_profile_text,
)
from tests.test_calibrate import TRUE_MULT as BASE_MULT

#: Known speed factors per band (our values).
BAND_FACTORS = {
    "am": {"primary": 0.7, "secondary": 0.85, "tertiary": 0.9, "residential": 0.95},
    "pm": {"primary": 0.8, "secondary": 0.75, "tertiary": 1.0, "residential": 0.9},
}
SPEC = "am=7-9@weekday,pm=16-18@weekday"
N_PER_GROUP = 450


def _scaled_profile_text(text: str, factors: dict[str, float]) -> str:
    data = tomllib.loads(text)
    for cls, f in factors.items():
        data["speeds"][cls]["factor"] *= f
    lines = [f'name = "{data["name"]}"', "signal_delay_s = 5.0"]
    for cls, rule in data["speeds"].items():
        lines += [f"[speeds.{cls}]", *(f"{k} = {v!r}" for k, v in rule.items())]
    return "\n".join(lines) + "\n"


def _true_times(d, name, profile_text, b_lonlat, inc_lonlat, base_of):
    prof = d / f"{name}.toml"
    prof.write_text(profile_text)
    true_net, _ = build_network(d / "grid.osm", prof)
    ex = ref.read_exported(true_net.save(d / f"{name}.gpkg"))
    roads, graph = ref.roads_of(ex), ref.HeapGraph(ex)
    b_xy = gpd.GeoSeries(gpd.points_from_xy(*b_lonlat), crs="EPSG:4326").to_crs(true_net.crs)
    inc = gpd.GeoSeries(gpd.points_from_xy(*inc_lonlat), crs="EPSG:4326").to_crs(true_net.crs)
    bsn = ref.snap(roads, shapely.get_coordinates(b_xy.to_numpy()))
    isn = ref.snap(roads, shapely.get_coordinates(inc.to_numpy()))
    table = np.vstack(
        [
            ref.target_times(ex, roads, graph.search(ref.base_seeds(ex, roads, bsn, i)), isn, bsn, i)
            for i in range(len(b_lonlat[0]))
        ]
    )
    return table[base_of, np.arange(len(base_of))]


@pytest.fixture(scope="module")
def case(tmp_path_factory):
    d = tmp_path_factory.mktemp("tod")
    (d / "grid.osm").write_text(_grid_osm())
    (d / "start.toml").write_text(START_PROFILE)
    net, _ = build_network(d / "grid.osm", d / "start.toml")
    net_path = net.save(d / "net.gpkg")
    ids = sorted(BASES)
    b_lon = np.array([LON0 + BASES[b][1] * DLON for b in ids])
    b_lat = np.array([LAT0 + BASES[b][0] * DLAT + 0.00027 for b in ids])
    pd.DataFrame({"id": ids, "lon": b_lon, "lat": b_lat}).to_csv(d / "bases.csv", index=False)
    rng = np.random.default_rng(4242)
    true_text = _true_profile_text()
    groups = {
        "off": (true_text, rng.choice([10, 11, 12, 13, 14, 20, 21], N_PER_GROUP), rng.integers(1, 8, N_PER_GROUP)),
        "am": (_scaled_profile_text(true_text, BAND_FACTORS["am"]), rng.choice([7, 8], N_PER_GROUP), None),
        "pm": (_scaled_profile_text(true_text, BAND_FACTORS["pm"]), rng.choice([16, 17], N_PER_GROUP), None),
    }
    frames = []
    for name, (text, hours, days) in groups.items():
        days = rng.integers(1, 6, N_PER_GROUP) if days is None else days
        if name == "off":  # weekend rows at band hours are off-band: the bands are weekday only
            weekend = days >= 6
            hours = np.where(weekend & (rng.random(N_PER_GROUP) < 0.5), 8, hours)
        lon = rng.uniform(LON0, LON0 + (N_GRID - 1) * DLON, N_PER_GROUP)
        lat = rng.uniform(LAT0, LAT0 + (N_GRID - 1) * DLAT, N_PER_GROUP)
        base_of = rng.integers(0, len(ids), N_PER_GROUP)
        true_s = _true_times(d, name, text, (b_lon, b_lat), (lon, lat), base_of)
        observed = true_s * rng.lognormal(0.0, NOISE_SIGMA, N_PER_GROUP)
        frames.append(
            pd.DataFrame(
                {"base_id": np.asarray(ids)[base_of], "lon": lon, "lat": lat, "observed_s": np.round(observed, 1),
                 "hour": hours, "weekday": np.asarray(["mon", "tue", "wed", "thu", "fri", "sat", "sun"])[days - 1]}
            )
        )  # fmt: skip
    pd.concat(frames, ignore_index=True).to_csv(d / "observed.csv", index=False)
    bases = read_points(d / "bases.csv", net.crs, what="bases")
    obs = read_observed(d / "observed.csv", bases["id"])
    cal = calibrate_hour_bands(net, bases, obs, bands=parse_band_spec(SPEC), source="observed.csv")
    return {"dir": d, "net_path": net_path, "cal": cal}


def test_calibration_recovers_known_per_band_factors_within_5_percent(case):
    cal = case["cal"]
    for cls, true_m in BASE_MULT.items():
        assert cal.base.multipliers[cls] == pytest.approx(true_m, rel=0.05), cls
    assert cal.base.n_used == N_PER_GROUP  # the weekend rows at 08 h are outside the weekday bands
    for band in cal.profile.hour_bands:
        for cls, true_f in BAND_FACTORS[band.name].items():
            assert band.factors[cls] == pytest.approx(true_f, rel=0.05), (band.name, cls)
        assert cal.bands[band.name].n_used == N_PER_GROUP
    # the error report per band: after the fit, each band's error is below its error before
    e = cal.errors[cal.errors["band"] == "all"].set_index(["hour_band", "stage"])["mae_s"]
    for name in ("am", "pm"):
        assert e[(name, "after")] < e[(name, "before")]


def test_written_profile_carries_the_bands_and_network_at_equals_the_folded_build(case, tmp_path):
    cal = case["cal"]
    out = write_calibrated_profile(cal.result(), tmp_path / "cal.toml")
    prof = load_profile(out)
    assert [b.name for b in prof.hour_bands] == ["am", "pm"]
    assert prof.hour_bands[0].factors == cal.profile.hour_bands[0].factors
    net, _ = build_network(case["dir"] / "grid.osm", out)
    am = network_at(net, "tue 08:30")
    # independent: the build with the band's factors folded into the profile factors (no cap binds)
    folded = tmp_path / "folded.toml"
    folded.write_text(_scaled_profile_text(out.read_text().split("[hour_bands")[0], dict(prof.hour_bands[0].factors)))
    ref_net, _ = build_network(case["dir"] / "grid.osm", folded)
    np.testing.assert_allclose(am.travel_s, ref_net.travel_s, rtol=1e-9)
    assert network_at(net, "sat 08:30") is net and network_at(net, "12:00") is net
    np.testing.assert_array_equal(network_at(net, "am").travel_s, am.travel_s)  # a band by its name


def test_cover_at_a_time_of_day_and_bad_input(case, tmp_path, capsys):
    cal = case["cal"]
    prof = write_calibrated_profile(cal.result(), tmp_path / "cal.toml")
    net, _ = build_network(case["dir"] / "grid.osm", prof)
    net_path = net.save(tmp_path / "net.gpkg")
    bases = case["dir"] / "bases.csv"
    demand = tmp_path / "points.csv"
    rows = pd.read_csv(case["dir"] / "observed.csv")
    rows.assign(id=np.arange(len(rows)))[["id", "lon", "lat"]].to_csv(demand, index=False)
    base = ["cover", str(net_path), "--bases", str(bases), "--demand", str(demand), "--minutes", "3", "--quiet"]
    assert main([*base, "--out", str(tmp_path / "noon.gpkg"), "--at", "12:00"]) == 0
    assert main([*base, "--out", str(tmp_path / "am.gpkg"), "--at", "08:15"]) == 0
    assert "hour band am" in capsys.readouterr().out
    layer = "demand_points_3_min"
    noon = gpd.read_file(tmp_path / "noon.gpkg", layer=layer)["travel_s"].to_numpy(float)
    peak = gpd.read_file(tmp_path / "am.gpkg", layer=layer)["travel_s"].to_numpy(float)
    ok = np.isfinite(noon) & np.isfinite(peak)
    assert ok.sum() > 100 and np.all(peak[ok] >= noon[ok] - 1e-9) and np.mean(peak[ok] > noon[ok]) > 0.9
    for bad, word in (("25:00", "not a time of day"), ("evening", "neither HH:MM nor an hour band")):
        out = tmp_path / f"bad-{bad[:2]}.gpkg"
        assert main([*base, "--out", str(out), "--at", bad]) == 2
        err = capsys.readouterr().err.strip()
        assert len(err.splitlines()) == 1 and word in err and "--at" in err
        assert not out.exists()
    # a network whose profile has no hour bands
    plain = ["cover", str(case["net_path"]), "--bases", str(bases), "--demand", str(demand), "--minutes", "3"]
    assert main([*plain, "--quiet", "--out", str(tmp_path / "plain.gpkg"), "--at", "08:00"]) == 2
    assert "has none" in capsys.readouterr().err and not (tmp_path / "plain.gpkg").exists()


def test_bad_hour_bands_are_one_line_errors(tmp_path, capsys):
    with pytest.raises(FieldError, match="not NAME=START-END"):
        parse_band_spec("am=7-9@weekdays")
    with pytest.raises(FieldError, match="overlap"):
        parse_band_spec("am=7-9,x=8-10")
    with pytest.raises(FieldError, match="not a time of day"):
        parse_at("7.30")
    data = tomllib.loads(START_PROFILE)
    data["hour_bands"] = {"a": {"days": "weekday", "start_h": 7, "end_h": 9, "factors": {"motorway": 0.8}}}
    with pytest.raises(ProfileError, match=r"no \[speeds\.motorway\] table"):
        profile_from_dict(data, where="p.toml")
    data["hour_bands"] = {
        "a": {"days": "weekday", "start_h": 7, "end_h": 9},
        "b": {"days": "all", "start_h": 8, "end_h": 10},
    }
    with pytest.raises(ProfileError, match="overlap") as err:
        profile_from_dict(data, where="p.toml")
    assert len(str(err.value).splitlines()) == 1
    # the CLI: a bad --hour-bands stops before any work, exit 2
    out = tmp_path / "cal.toml"
    code = main(["calibrate", "missing.gpkg", "--observed", "o.csv", "--bases", "b.csv", "--out", str(out),
                 "--hour-bands", "am=9", "--quiet"])  # fmt: skip
    assert code == 2 and "--hour-bands" in capsys.readouterr().err and not out.exists()


def _demo_banded_profile(folder):
    """The shipped emergency profile with a weekday morning band (factors: our test values)."""
    from importlib import resources

    text = (resources.files("coverkit.network") / "profiles" / "emergency.toml").read_text()
    band = '\n[hour_bands.am]\ndays = "weekday"\nstart_h = 7\nend_h = 9\n'
    band += "factors = { primary = 0.6, secondary = 0.6, tertiary = 0.7, residential = 0.8 }\n"
    path = folder / "banded.toml"
    path.write_text(text + band)
    return path


#: Area grid cell (m) of the period studies and of their reference coverage stages: the checks are on point
#: figures (covered shares), which the grid's cell size does not enter; 200 m keeps the grid small.
GRID_CELL_M = 200.0
#: The periods of the shared study run.
PERIODS = '[[period]]\nname = "night"\nat = "03:00"\n[[period]]\nname = "morning"\nat = "mon 08:00"\n'


def _period_study(folder, periods: str, out=None):
    """The study file in ``folder`` (outputs to ``out``, default ``folder/out``) with ``periods``."""
    from tests.conftest import DEMO, demo_study_head

    head = demo_study_head("periods").replace("[bases]", f'profile = "{_demo_banded_profile(folder)}"\n[bases]')
    path = folder / "study.toml"
    path.write_text(
        head
        + f'[[demand]]\nname = "calls"\npoints = "{DEMO / "incidents.csv"}"\nkind = "incidents"\n'
        + '[[standard]]\nname = "8 min"\ntravel_s = 480\n'
        + f'[outputs]\nfolder = "{out or folder / "out"}"\nmaps = false\nisochrone_minutes = [8]\n'
        + f"grid_cell_m = {GRID_CELL_M}\n"
        + periods
    )
    return path


@pytest.fixture(scope="module")
def period_run(tmp_path_factory):
    """The period study (night and Monday morning) run once; its summary is the untimed network's."""
    from coverkit.study import run_study

    return run_study(_period_study(tmp_path_factory.mktemp("periods"), PERIODS))


def _timed_share(run, at: str) -> float:
    """Covered share of the coverage stage on the run's network timed by network_at (the --at stage)."""
    from coverkit.stages import coverage_stage
    from coverkit.study import load_inputs

    bases, demand, _, _ = load_inputs(run.study, run.network)
    stage = coverage_stage(network_at(run.network, at), bases, demand, run.study.standards[0], cell_m=GRID_CELL_M)
    return stage.summary_rows()[0]["covered_share"]


def test_a_study_reports_compliance_per_period_side_by_side(period_run):
    """Each period's figures equal the coverage stage on the network timed by network_at (the --at stage)."""
    from coverkit.report.study_report import report_study

    run = period_run
    p = run.periods.set_index("period")
    assert list(p.index) == ["night", "morning"]
    assert p.loc["night", "covered_share"] == pytest.approx(run.summary["covered_share"].iloc[0])
    assert p.loc["morning", "covered_share"] == pytest.approx(_timed_share(run, "08:00"), rel=1e-12)
    assert p.loc["morning", "covered_share"] < p.loc["night", "covered_share"]  # slower roads, less cover
    page = report_study(run)["report"].read_text()
    assert "Compliance by time of day" in page and "morning" in page


def test_a_study_with_a_bad_period_stops_in_one_line(tmp_path):
    from coverkit.errors import StudyError
    from coverkit.study import load_study

    for at, word in (("25:00", "not a time of day"), ("rush", "neither HH:MM nor an hour band")):
        with pytest.raises(StudyError, match=word) as err:
            load_study(_period_study(tmp_path, f'[[period]]\nname = "x"\nat = "{at}"\n'))
        assert len(str(err.value).splitlines()) == 1 and "period.at" in str(err.value)


def test_compare_at_a_time_of_day_starts_from_the_timed_network(period_run, tmp_path, capsys):
    """`compare --at`: the 'before' figures are the coverage stage on the network timed by network_at (the study
    without periods; its network and untimed figures are those of the shared period run: same inputs)."""
    from tests.conftest import REPO

    # outputs beside the period run's: compare reads the network that run cached (same inputs, read only)
    study = _period_study(tmp_path, "", out=period_run.study.folder / period_run.study.outputs.folder)
    scenario = REPO / "examples" / "scenarios" / "station-s3-closed.toml"
    out = tmp_path / "cmp"
    assert main(["compare", str(study), str(scenario), "--out", str(out), "--at", "tue 07:30", "--quiet"]) == 0
    assert "hour band am" in capsys.readouterr().out
    table = pd.read_csv(out / "comparison.csv")
    before = table["covered_share_before"].iloc[0]
    assert before == pytest.approx(_timed_share(period_run, "07:30"), rel=1e-12)
    assert before < period_run.summary["covered_share"].iloc[0]


def test_isochrones_at_a_peak_hour_reach_less_road(case, tmp_path, capsys):
    """With every band factor below 1 the peak network is slower on every class: the polygons hold less road."""
    prof = write_calibrated_profile(case["cal"].result(), tmp_path / "cal.toml")
    net, _ = build_network(case["dir"] / "grid.osm", prof)
    net_path = net.save(tmp_path / "net.gpkg")
    base = ["isochrones", str(net_path), "--bases", str(case["dir"] / "bases.csv"), "--minutes", "2", "--quiet"]
    assert main([*base, "--out", str(tmp_path / "noon.gpkg"), "--at", "12:00"]) == 0
    assert main([*base, "--out", str(tmp_path / "pm.gpkg"), "--at", "thu 17:10"]) == 0
    assert "hour band pm" in capsys.readouterr().out
    noon = gpd.read_file(tmp_path / "noon.gpkg", layer="reach_by_base").sort_values("base_id")
    pm = gpd.read_file(tmp_path / "pm.gpkg", layer="reach_by_base").sort_values("base_id")
    assert np.all(pm["road_km"].to_numpy() < noon["road_km"].to_numpy())


def test_a_bad_weekday_names_the_row(tmp_path):
    path = tmp_path / "obs.csv"
    path.write_text("base_id,lon,lat,observed_s,hour,weekday\nA,-35.59,40.51,100,8,Mon\nA,-35.59,40.51,100,8,Funday\n")
    with pytest.raises(FieldError, match="line 3 has weekday 'Funday'") as err:
        read_observed(path)
    assert len(str(err.value).splitlines()) == 1
    good = path.with_name("good.csv")
    good.write_text("base_id,lon,lat,observed_s,weekday\nA,-35.59,40.51,100,7\nA,-35.59,40.51,100,\n")
    assert read_observed(good)["weekday"].tolist() == [7, pd.NA]
