"""Errors name the library parameter; each front end words it (the CLI's flag, the study file's key).

Common practice with no outside source: a library error reads the same from Python, the command line and a study
file, so the library names its own parameter (``crs``, ``calls_per_h``), the CLI shows the flag the user typed
(``--crs``) and the study run the key the user wrote (``roads.crs``). The built-in bases follow rasterio's error
classes (``RasterioIOError`` is an ``OSError``): ``except ValueError`` / ``except OSError`` code catches ours.
"""

from __future__ import annotations

import subprocess
import sys

import geopandas as gpd
import pytest
import shapely

from coverkit.availability import call_rate_per_h
from coverkit.cli import main
from coverkit.errors import (
    CoverkitError,
    FieldError,
    InputFileError,
    ModelError,
    NetworkError,
    OffNetworkError,
    ProfileError,
    StudyError,
)
from coverkit.network import build_network
from coverkit.network.crs import parse_crs
from coverkit.study import run_study
from tests.conftest import DEMO, demo_study_head
from tests.test_network_inputs import _nodes, _osm, _way


def _square(tmp_path):
    """Four residential streets round a block (about 200 m a side, central Germany)."""
    return _osm(tmp_path, _nodes(9) + _way(1, [1, 2, 3, 6, 9, 8, 7, 4, 1], highway="residential"))


def test_error_classes_derive_from_the_matching_builtins():
    assert issubclass(InputFileError, OSError)
    for cls in (FieldError, ProfileError, NetworkError, OffNetworkError, StudyError, ModelError):
        assert issubclass(cls, ValueError) and issubclass(cls, CoverkitError)
    with pytest.raises(OSError, match="not found"):  # what ``except OSError`` code sees
        build_network("/nonexistent/roads.osm", "normal")


def test_library_error_names_the_parameter_not_a_flag():
    with pytest.raises(CoverkitError) as err:
        parse_crs("EPSG:4326")
    assert err.value.param == "crs" and "--" not in str(err.value)
    assert str(err.value).startswith("crs: WGS 84 is not projected")
    calls = gpd.GeoDataFrame({"weight": [1.0, 1.0]}, geometry=[shapely.Point(0, 0)] * 2, crs="EPSG:32632")
    with pytest.raises(FieldError) as err:
        call_rate_per_h(calls, "received_at")
    assert err.value.param == "calls_per_h" and "--" not in str(err.value)
    assert "give calls_per_h, the call rate" in str(err.value)


def test_cli_words_the_parameter_as_its_flag(tmp_path, capsys):
    out = tmp_path / "net.gpkg"
    code = main(["network", str(_square(tmp_path)), "--crs", "EPSG:4326", "--out", str(out), "--quiet"])
    err = capsys.readouterr().err.strip()
    assert code == 2 and len(err.splitlines()) == 1
    assert err.startswith("coverkit network: error: --crs: WGS 84 is not projected")
    assert not out.exists()


def _crs_study(tmp_path):
    """A study on the small square of streets whose ``roads.crs`` is not projected."""
    head = demo_study_head("crs check").replace(str(DEMO / "varrowby.osm.bz2"), str(_square(tmp_path)))
    study = tmp_path / "study.toml"
    study.write_text(
        head.replace("[bases]\n", 'crs = "EPSG:4326"\n[bases]\n', 1)
        + f'[[demand]]\nname = "residents"\nraster = "{DEMO / "population.tif"}"\n'
        + '[[standard]]\nname = "8 min"\ntravel_s = 480\n'
    )
    return study


def test_study_words_the_parameter_as_its_key(tmp_path):
    study = _crs_study(tmp_path)
    with pytest.raises(CoverkitError) as err:
        run_study(study, tmp_path / "out")
    msg = str(err.value)
    assert msg.startswith(f"{study}: roads.crs: WGS 84 is not projected") and "--" not in msg


def test_cli_run_prints_the_study_key(tmp_path):
    """Through ``coverkit run`` the study key, not a flag, reaches the user (exit status 2)."""
    proc = subprocess.run(
        [sys.executable, "-m", "coverkit", "run", str(_crs_study(tmp_path)), "--out", str(tmp_path / "o"), "-q"],
        capture_output=True,
        text=True,
    )
    assert proc.returncode == 2
    assert "roads.crs: WGS 84 is not projected" in proc.stderr and "--crs" not in proc.stderr


def test_report_does_not_import_the_study_runner():
    """No import circle: the report writer stands on its own (the study runner imports it, not the reverse)."""
    for module in ("coverkit.report", "coverkit.report.study_report", "coverkit.report.compare_report"):
        code = f"import sys, {module}; print('coverkit.study' in sys.modules, 'coverkit.cli' in sys.modules)"
        proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
        assert proc.stdout.split() == ["False", "False"], module


def test_cli_words_a_renamed_parameter(demo_net_path, tmp_path, capsys):
    """``mean_service_min`` is set by ``--service-min``: the flag's name differs, the CLI still shows the flag."""
    out = tmp_path / "a.gpkg"
    args = ["availability", str(demo_net_path), "--bases", str(DEMO / "stations.csv"), "--demand"]
    args += [str(DEMO / "incidents.csv"), "--minutes", "8", "--service-min", "0", "--out", str(out), "-q"]
    assert main(args) == 2
    err = capsys.readouterr().err.strip()
    assert (
        err == "coverkit availability: error: --service-min, the mean service time, must be positive minutes, got 0.0."
    )
    assert not out.exists()


def test_cli_words_a_parameter_by_its_option_name(demo_net_path, tmp_path, capsys):
    """``reach_m`` is set by ``--reach-m`` (the option of the same name); zero passes argparse, the library stops it."""
    out = tmp_path / "iso.gpkg"
    args = ["isochrones", str(demo_net_path), "--bases", str(DEMO / "stations.csv"), "--reach-m", "0"]
    assert main([*args, "--out", str(out), "-q"]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("coverkit isochrones: error: --reach-m, the reach distance, must be a positive number")
    assert not out.exists()
