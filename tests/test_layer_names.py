"""One naming scheme for every output (issue 10 item 15): the single commands and the study run name the same
layers the same way, from one function, and the README's table lists exactly that scheme.

The checks are of the project's own contract (no outside source): names from :mod:`coverkit.layer_names`, the
README table printed from it, and `cover` and `run` on the same inputs (the demo county) giving the same names and
the same covered figures.
"""

from __future__ import annotations

import re

import geopandas as gpd
import pyogrio
import pytest

from coverkit import layer_names
from coverkit.cli import main

from .conftest import DEMO, REPO, demo_study_head


def _patterns() -> list[re.Pattern]:
    table = (REPO / "README.md").read_text()
    rows = re.findall(r"^\| `([^`]+)` \| layer \|", table, flags=re.M)
    assert rows, "README has no table of layer names"
    return [re.compile(re.escape(r).replace("<demand>", "[a-z0-9_]+").replace("<standard>", "[a-z0-9_]+") + "$")
            for r in rows]  # fmt: skip


def test_readme_table_is_the_scheme():
    """The README's table is the one printed from the module (documented once, in one place)."""
    assert layer_names.markdown_table() in (REPO / "README.md").read_text()


def test_names_follow_the_scheme():
    assert layer_names.layer_name("demand", "Residents", "ALS 8 min") == "demand_residents_als_8_min"
    assert layer_names.layer_name("by_base", "calls", "8 min") == "by_base_calls_8_min"
    for kind in ("first_due", "second_due", "third_due", "gaps"):
        assert layer_names.layer_name(kind, standard="Rural 12 min") == f"{kind}_rural_12_min"
    assert layer_names.table_file("out", "site_curve").name == "site_curve.csv"
    assert layer_names.map_file("out", "gaps", "ALS 8 min").as_posix() == "out/maps/gaps_als_8_min.png"
    with pytest.raises(ValueError, match="standard"):
        layer_names.layer_name("gaps")


def test_cover_and_run_write_the_same_names_for_the_same_inputs(tmp_path):
    """`cover` with 8 min + 60 s turnout on population.tif and a study with demand 'population' and standard
    '8 min' (the names `cover` gives them) write the same layer names and the same covered figures."""
    net_path = tmp_path / "net.gpkg"
    assert main(["network", str(DEMO / "varrowby.osm.bz2"), "--boundary", str(DEMO / "boundary.geojson"),
                 "--out", str(net_path), "--quiet"]) == 0  # fmt: skip
    cover_out = tmp_path / "cover.gpkg"
    assert main(["cover", str(net_path), "--bases", str(DEMO / "stations.csv"), "--demand",
                 str(DEMO / "population.tif"), "--minutes", "8", "--turnout-s", "60", "--out", str(cover_out),
                 "--quiet"]) == 0  # fmt: skip
    study = tmp_path / "study.toml"
    study.write_text(
        demo_study_head("names")
        + f"""[[demand]]
name = "{layer_names.demand_name_of(DEMO / "population.tif")}"
raster = "{DEMO / "population.tif"}"
[[standard]]
name = "{layer_names.single_standard_name(8)}"
turnout_s = 60
travel_s = 480
[outputs]
isochrone_minutes = [8]
maps = false
report = false
"""
    )
    run_out = tmp_path / "run"
    assert main(["run", str(study), "--out", str(run_out), "--quiet"]) == 0
    cover_layers = {n for n, _ in pyogrio.list_layers(cover_out)}
    run_layers = {n for n, _ in pyogrio.list_layers(run_out / "coverage.gpkg")}
    expected = {
        layer_names.layer_name("demand", "population", "8 min"),
        layer_names.layer_name("by_base", "population", "8 min"),
        layer_names.layer_name("gaps", standard="8 min"),
        layer_names.layer_name("first_due", standard="8 min"),
        "bases",
        "summary",
    }
    assert expected <= cover_layers and cover_layers <= run_layers
    patterns = _patterns()
    for name in cover_layers | run_layers:
        assert any(p.match(name) for p in patterns), f"{name} is not in the README table"
    a = gpd.read_file(cover_out, layer="summary").iloc[0]
    b = gpd.read_file(run_out / "coverage.gpkg", layer="summary").iloc[0]
    assert (a["standard"], a["demand"]) == (b["standard"], b["demand"])
    assert a["covered"] == pytest.approx(b["covered"], rel=1e-9)
    assert a["fractile_response_s"] == pytest.approx(b["fractile_response_s"], rel=1e-9)
