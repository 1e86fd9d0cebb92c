"""`coverkit run` and the single commands are one pipeline: the same inputs give the same layer names and figures.

The check is internal consistency, which a reviewer assumes without asking: a study file with one standard and one
demand layer, and `coverkit cover` / `coverkit site` given the same files and options, must agree layer by layer and
figure by figure. Nothing here is compared with an outside value; the figures themselves are checked against outside
references elsewhere (tests/test_references.py, tests/test_study_cli.py).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyogrio
import pytest

from coverkit.cli import main
from coverkit.layer_names import demand_name_of, layer_name, single_standard_name
from coverkit.study import run_study

from .conftest import DEMO, demo_study_head

MINUTES = 8.0
TURNOUT_S = 60.0
STANDARD = single_standard_name(MINUTES)
DEMAND = demand_name_of(DEMO / "population.tif")


@pytest.fixture(scope="module")
def agreed(tmp_path_factory):
    """One study run and the matching `cover` and `site` commands, on the network the study built."""
    folder = tmp_path_factory.mktemp("agree")
    study = folder / "study.toml"
    study.write_text(
        demo_study_head("agree")
        + f"""[[demand]]
name = "{DEMAND}"
raster = "{DEMO / "population.tif"}"
[[standard]]
name = "{STANDARD}"
travel_s = {MINUTES * 60}
turnout_s = {TURNOUT_S}
fractile = 0.9
[siting]
candidates = "{DEMO / "candidates.csv"}"
add = 2
model = "mclp"
[outputs]
maps = false
report = false
"""
    )
    run = run_study(study, folder / "run")
    net = run.outputs["network"]
    common = [str(net), "--bases", str(DEMO / "stations.csv"), "--demand", str(DEMO / "population.tif")]
    common += ["--minutes", f"{MINUTES:g}", "--turnout-s", f"{TURNOUT_S:g}", "--quiet"]
    cover = folder / "cover.gpkg"
    assert main(["cover", *common, "--boundary", str(DEMO / "boundary.geojson"), "--out", str(cover)]) == 0
    site = folder / "site.gpkg"
    assert main(["site", *common, "--candidates", str(DEMO / "candidates.csv"), "--add", "2", "--out", str(site)]) == 0
    return run.outputs["layers"], cover, site


def _layers(path) -> set[str]:
    return {name for name, _ in pyogrio.list_layers(path)}


def test_cover_writes_the_layers_run_writes_under_the_same_names(agreed):
    run_gpkg, cover, _ = agreed
    cover_layers = _layers(cover)
    expected = {layer_name(k, DEMAND, STANDARD) for k in ("demand", "by_base")}
    expected |= {layer_name(k, standard=STANDARD) for k in ("first_due", "gaps", "single_cover")}
    assert expected <= cover_layers
    assert cover_layers - {layer_name("summary")} <= _layers(run_gpkg)


@pytest.mark.parametrize("kind", ["demand", "by_base"])
def test_cover_and_run_give_the_same_figures(agreed, kind):
    run_gpkg, cover, _ = agreed
    name = layer_name(kind, DEMAND, STANDARD)
    a = pyogrio.read_dataframe(run_gpkg, layer=name, read_geometry=False)
    b = pyogrio.read_dataframe(cover, layer=name, read_geometry=False)
    assert list(a.columns) == list(b.columns)
    pd.testing.assert_frame_equal(a, b, check_dtype=False)


def test_cover_and_run_find_the_same_gaps_and_due_areas(agreed):
    run_gpkg, cover, _ = agreed
    for kind in ("gaps", "first_due"):
        name = layer_name(kind, standard=STANDARD)
        a = pyogrio.read_dataframe(run_gpkg, layer=name)
        b = pyogrio.read_dataframe(cover, layer=name)
        assert len(a) == len(b), kind
        assert np.allclose(a.geometry.area.sum(), b.geometry.area.sum(), rtol=1e-9), kind
        numeric = a.select_dtypes("number").columns
        pd.testing.assert_frame_equal(a[numeric], b[numeric], check_dtype=False)


def test_summary_rows_agree(agreed):
    run_gpkg, cover, _ = agreed
    a = pyogrio.read_dataframe(run_gpkg, layer=layer_name("summary"), read_geometry=False)
    b = pyogrio.read_dataframe(cover, layer=layer_name("summary"), read_geometry=False)
    assert list(a.columns) == list(b.columns)
    for col in ("covered", "covered_share", "fractile_response_s", "demand_total", "covered_twice_or_more"):
        assert a[col].iloc[0] == pytest.approx(b[col].iloc[0], rel=1e-12), col


def test_site_and_run_choose_the_same_sites(agreed):
    run_gpkg, _, site = agreed
    for kind in ("site_chosen", "site_curve"):
        a = pyogrio.read_dataframe(run_gpkg, layer=layer_name(kind), read_geometry=False)
        b = pyogrio.read_dataframe(site, layer=layer_name(kind), read_geometry=False)
        assert list(a.columns) == list(b.columns), kind
        timing = [c for c in a.columns if c.startswith("solve")]  # wall-clock time differs from run to run
        pd.testing.assert_frame_equal(a.drop(columns=timing), b.drop(columns=timing), check_dtype=False)


def test_the_study_runner_leaves_the_report_to_its_caller():
    """`coverkit.study` imports no report module: the report is written from the run's result by whoever calls it
    (the layering rule of the design card)."""
    import subprocess
    import sys

    code = "import sys, coverkit.study; print(any(m.startswith('coverkit.report') for m in sys.modules))"
    printed = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert printed.strip() == "False"
