"""`coverkit simulate` on the demo county: the files and columns of the fixed interface, the same numbers for the
same seed whatever the number of processes, the plain heap loop and the compiled loop agreeing call by call, and
bad input stopping with one line, exit 2 and nothing written.

The checks are of the project's own contract (issue 15's interface), no outside source; the checks against
queueing theory are in tests/test_simulate.py.
"""

from __future__ import annotations

import csv

import numpy as np
import pandas as pd
import pyogrio
import pytest

from coverkit import CAUTION
from coverkit.cli import main
from coverkit.layer_names import layer_name

from .conftest import DEMO, demo_study_head

STANDARDS = """
[[standard]]
name = "ALS 8 min"
turnout_s = 60
travel_s = 480
[[standard]]
name = "Rural 12 min"
turnout_s = 60
travel_s = 720
fractile = 0.8
[zones]
file = "{zones}"
id_field = "district"
[outputs]
folder = "cache"
"""


def _study(folder, incidents, extra=""):
    path = folder / f"study-{incidents.stem}.toml"
    path.write_text(
        demo_study_head("simulate test")
        + f'[[demand]]\nname = "calls"\npoints = "{incidents}"\nkind = "incidents"\n'
        + STANDARDS.format(zones=DEMO / "districts.geojson")
        + extra
    )
    return path


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    """A folder with the demo study (its network cached once in ``cache/``) and 600 of its incidents with a
    service-time column (minutes: 20 + call number mod 40) for a quicker run."""
    f = tmp_path_factory.mktemp("sim")
    rows = pd.read_csv(DEMO / "incidents.csv").iloc[:600].copy()
    rows["busy_min"] = 20 + np.arange(len(rows)) % 40
    rows.to_csv(f / "calls.csv", index=False)
    return f


@pytest.fixture(scope="module")
def first_run(folder):
    study = _study(folder, folder / "calls.csv")
    out = folder / "out"
    assert main(["simulate", str(study), "--replications", "4", "--processes", "2", "--out", str(out), "--quiet"]) == 0
    return out


def test_the_files_and_columns_of_the_interface(first_run, capsys):
    summary = pd.read_csv(first_run / "summary.csv", dtype={"replication": str})
    assert list(summary.columns[:6]) == ["replication", "calls", "waited_share", "mean_wait_s", "lost_share",
                                         "all_busy_share"]  # fmt: skip
    assert summary["replication"].tolist() == ["1", "2", "3", "4", "all"]
    assert {"covered_share_als_8_min", "fractile_s_als_8_min", "covered_share_rural_12_min"} <= set(summary.columns)
    # replay: every call, every replication (a call off the network, or where some base cannot reach, is counted)
    assert (summary["calls"] + summary["unserved_calls"] == 600).all() and (summary["calls"] > 590).all()
    with open(first_run / "units.csv", newline="") as fh:
        head = next(csv.reader(fh))
    assert head == ["replication", "unit_id", "base_id", "utilisation", "calls"]
    units = pd.read_csv(first_run / "units.csv", dtype={"replication": str})
    # every call is answered by exactly one unit or goes to mutual aid
    per_rep = units[units["replication"] != "all"].groupby("replication")["calls"].sum()
    reps = summary.iloc[:4]
    assert np.allclose(per_rep.sort_index().to_numpy() + reps["lost_share"] * reps["calls"], reps["calls"])
    layers = {n for n, _ in pyogrio.list_layers(first_run / "simulate.gpkg")}
    assert {layer_name("simulate_points"), layer_name("simulate_bases"), layer_name("simulate_groups")} <= layers
    groups = pyogrio.read_dataframe(first_run / "simulate.gpkg", layer=layer_name("simulate_groups"))
    assert set(groups["by"]) == {"priority", "hour", "zone"}
    assert (first_run / "simulate-report.html").read_text().count("not for live dispatch") >= 1
    assert (first_run / "maps" / "simulate_response.png").stat().st_size > 1000


def test_same_seed_same_numbers_for_any_number_of_processes(folder, first_run):
    out = folder / "one-process"
    study = _study(folder, folder / "calls.csv")
    assert main(["simulate", str(study), "--replications", "4", "--processes", "1", "--out", str(out), "--quiet"]) == 0
    a = (first_run / "summary.csv").read_text()
    assert a == (out / "summary.csv").read_text()
    assert (first_run / "units.csv").read_text() == (out / "units.csv").read_text()
    other = folder / "seed-2"
    assert main(["simulate", str(study), "--replications", "4", "--seed", "2", "--out", str(other), "--quiet"]) == 0
    b = pd.read_csv(other / "summary.csv")
    assert a != (other / "summary.csv").read_text()  # another seed draws other busy times
    a = pd.read_csv(first_run / "summary.csv")
    # the two seeds' 95 % intervals of the covered share overlap (both estimate the same figure)
    from coverkit.simulate.aggregate import interval

    _, lo_a, hi_a = interval(a["covered_share_als_8_min"].iloc[:4])
    _, lo_b, hi_b = interval(b["covered_share_als_8_min"].iloc[:4])
    assert lo_a <= hi_b and lo_b <= hi_a


def test_the_heap_loop_and_the_compiled_loop_agree_call_by_call(folder):
    """Two codings of one model on the demo calls with the busy-time column, a zero and a finite wait."""
    from coverkit.compare_run import study_inputs
    from coverkit.settings import SimulationSettings
    from coverkit.simulate.calls import replay_source
    from coverkit.simulate.heap_loop import run_calls_heap
    from coverkit.simulate.kernel import run_calls
    from coverkit.simulate.system import fleet_on_network

    inputs = study_inputs(_study(folder, folder / "calls.csv"))
    calls = inputs["demand"]["calls"]
    fleet = fleet_on_network(inputs["network"], inputs["bases"], calls, 500.0)
    src = replay_source(calls, "received_at", "priority", "busy_min")
    # a busier county: the same calls 12 times as close together, so that units are often all busy
    t = src.arrival_s / 12.0
    n = t.size
    service = src.service_s[src.point]
    for max_wait in (np.inf, 0.0, 300.0):
        args = (t, src.point, src.priority, service, np.full(n, 60.0), np.ones(n), fleet.unit_station,
                fleet.out_s, fleet.back_s, max_wait, len(src.priority_labels))  # fmt: skip
        a, b = run_calls(*args), run_calls_heap(*args)
        for x, y in zip(a, b, strict=True):
            np.testing.assert_allclose(x, y, rtol=0, atol=1e-9)
    assert (a[0] < 0).any() and SimulationSettings().replications > 1  # some calls did go to mutual aid


def _fails(argv, capsys, *words):
    assert main([*argv, "--quiet"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "Traceback" not in err
    for w in words:
        assert w in err
    return err


def test_bad_input_is_one_line_exit_2_and_nothing_written(folder, capsys):
    rows = pd.read_csv(folder / "calls.csv")
    rows.drop(columns=["received_at"]).to_csv(folder / "untimed.csv", index=False)
    out = folder / "bad"
    _fails(["simulate", str(_study(folder, folder / "untimed.csv")), "--out", str(out)], capsys, "received_at")
    assert not out.exists()
    bad = rows.copy()
    bad.loc[5, "busy_min"] = -3
    bad.to_csv(folder / "negative.csv", index=False)
    _fails(["simulate", str(_study(folder, folder / "negative.csv")), "--service-field", "busy_min", "--out",
            str(out)], capsys, "row 6", "busy_min")  # fmt: skip
    assert not out.exists()
    _fails(["simulate", str(_study(folder, folder / "calls.csv")), "--calls", "synthetic", "--calls-per-h", "3",
            "--out", str(out)], capsys, "--hours")  # fmt: skip
    assert not out.exists()
    scenario = folder / "no-units.toml"
    scenario.write_text('[scenario]\nname = "no units"\n' + "".join(
        f'[[base_change]]\nunits = {{ id = "S{i}", units = 0 }}\n' for i in range(1, 5)))  # fmt: skip
    _fails(["simulate", str(_study(folder, folder / "calls.csv")), "--scenario", str(scenario), "--out", str(out)],
           capsys, "no units")  # fmt: skip
    assert not out.exists()


def test_the_command_prints_the_cautions(folder, first_run, capsys):
    out = folder / "printed"
    study = _study(folder, folder / "calls.csv")
    assert main(["simulate", str(study), "--replications", "2", "--out", str(out), "--quiet"]) == 0
    text = capsys.readouterr().out
    assert CAUTION in text and "not for live dispatch" in text and "ALS 8 min" in text


def test_the_travel_spread_fitted_to_observed_trips(folder):
    """Observed trips made from the model's own times times a lognormal multiplier of sigma 0.2: the fitted
    coefficient of variation is the lognormal's, sqrt(exp(0.04) - 1) = 0.2020 (lognormal moments), within the
    sampling error of 400 trips (the sd of a sample sd is about sigma / sqrt(2 n) = 0.007)."""
    from coverkit.compare_run import study_inputs
    from coverkit.simulate.system import fleet_on_network
    from coverkit.simulate.travel_spread import travel_cv_from_observed

    inputs = study_inputs(_study(folder, folder / "calls.csv"))
    calls = inputs["demand"]["calls"].iloc[:400]
    fleet = fleet_on_network(inputs["network"], inputs["bases"], calls, 500.0)
    rng = np.random.default_rng(5)
    base = rng.integers(0, len(fleet.base_id), len(calls))
    modelled = fleet.out_s[base, np.arange(len(calls))]
    ok = np.isfinite(modelled) & (modelled > 0)
    ll = calls.to_crs("EPSG:4326").geometry.get_coordinates()
    noisy = modelled * rng.lognormal(0.0, 0.2, len(calls))
    observed = pd.DataFrame({"base_id": np.array(fleet.base_id)[base], "lon": ll["x"].to_numpy(),
                             "lat": ll["y"].to_numpy(), "observed_s": noisy})[ok]  # fmt: skip
    cv = travel_cv_from_observed(inputs["network"], inputs["bases"], observed.reset_index(drop=True), 500.0)
    assert abs(cv - np.sqrt(np.expm1(0.04))) < 0.03


def test_a_study_run_with_a_simulation_section_writes_it_and_reports_it(folder):
    """`coverkit run` on a study with [simulation]: its files in simulation/ and its section in the report."""
    # a 200 m area grid: the checks are on the simulation's files and the report's section, not the grid's areas
    extra = "isochrone_minutes = [8]\ngrid_cell_m = 200\n[simulation]\nreplications = 2\n"
    study = _study(folder, folder / "calls.csv", extra)
    out = folder / "cache"
    assert main(["run", str(study), "--out", str(out), "--quiet"]) == 0
    summary = pd.read_csv(out / "simulation" / "summary.csv", dtype={"replication": str})
    assert summary["replication"].tolist() == ["1", "2", "all"]
    page = (out / "report.html").read_text()
    assert "Simulated response system" in page and "beside the drive-time and hypercube figures" in page
