"""The one-command demo, the study file, the cover command and their bad-input messages.

The county is invented (data/demo); what is checked here are the rules: an NFPA 1710 standard (60 s turnout,
240 s travel, 90 %; NFPA 1710 as quoted in the trade) evaluated and reported as such, totals that must add up,
outputs that must exist with the agreed layer and column names, and one-line errors with exit status 2.
"""

from __future__ import annotations

import contextlib
import io
import re
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
import rasterio
import shapely

from coverkit.cli import main
from coverkit.demand import demand_from_polygons, load_demand, raster_total
from coverkit.errors import FieldError, InputFileError, StudyError
from coverkit.network import RoadNetwork
from coverkit.study import load_study

from .conftest import DEMO, REPO


@pytest.fixture(scope="module")
def demo_net(demo_net_path):
    """The demo county's network (built once for the session, tests/conftest.py) and its GeoPackage."""
    return RoadNetwork.load(demo_net_path), demo_net_path


@pytest.fixture(scope="module")
def demo_run(demo_command):
    """The output folder of ``coverkit demo`` (run once for the session, tests/conftest.py)."""
    return demo_command[0]


def _printed(demo_command) -> str:
    return demo_command[1]


def test_demo_totals_match_the_input_files(demo_run, demo_command):
    """The demo's demand totals are the inputs' own: residents = the population raster's sum (rasterio, nodata
    masked), calls = the incident rows (pandas); the printed headline repeats summary.csv's figures."""
    summary = pd.read_csv(demo_run / "summary.csv")
    with rasterio.open(DEMO / "population.tif") as src:
        pop = src.read(1, masked=True)
    n_calls = len(pd.read_csv(DEMO / "incidents.csv"))
    res = summary[summary["demand"] == "residents"]
    calls = summary[summary["demand"] == "calls"]
    assert np.allclose(res["demand_total"], float(pop.sum()), rtol=1e-6)
    assert (calls["demand_total"] == n_calls).all()
    text = _printed(demo_command)
    for row in summary.itertuples():
        unit = "people" if row.demand == "residents" else "calls"
        line = f"covered {100 * row.covered_share:5.1f} % ({row.covered:,.0f} of {row.demand_total:,.0f} {unit})"
        assert line in text, line


def test_demo_busy_units_follow_the_call_rate_of_the_incident_file(demo_run, demo_command):
    """Units' workloads sum to the offered load: calls per hour from the incident timestamps (first to last, counted
    here with pandas) x 45 min service (Erlang 1917; Little's law); the printed rate is the same figure."""
    src = pd.read_csv(DEMO / "incidents.csv", parse_dates=["received_at"])
    rate = len(src) / ((src["received_at"].max() - src["received_at"].min()).total_seconds() / 3600.0)
    units = gpd.read_file(demo_run / "coverage.gpkg", layer="availability_units")
    assert units["workload"].sum() == pytest.approx(rate * 45 / 60, rel=1e-6)
    assert f"busy units ({rate:.2f} calls/h, 45 min each)" in _printed(demo_command)


def test_demo_reached_residents_lie_inside_the_any_base_polygon(demo_run):
    """Every resident point reached within 8 min (with 15 s to spare) whose snap distance is under 100 m lies in
    the 8-min any-base drive-time polygon (its definition: reached road plus the 150 m reach; shapely)."""
    polys = gpd.read_file(demo_run / "coverage.gpkg", layer="reach_any_base")
    any8 = polys[(polys["base_id"] == "(any base)") & (polys["band_min"] == 8)].geometry.iloc[0]
    dem = gpd.read_file(demo_run / "coverage.gpkg", layer="demand_residents_als_8_min")
    sel = (dem["travel_s"] <= 480 - 15) & (dem["snap_m"] < 100)
    assert sel.sum() > 1000
    inside = shapely.contains_xy(any8, dem.geometry.x[sel].to_numpy(), dem.geometry.y[sel].to_numpy())
    assert inside.all(), f"{(~inside).sum()} reached points outside the polygon"


def test_demo_printed_calibration_errors_are_the_table_s(demo_run, demo_command):
    """The printed calibration line gives the before/after mean absolute errors of the calibration table."""
    e = gpd.read_file(demo_run / "coverage.gpkg", layer="calibration_errors")
    before = e[(e["stage"] == "before") & (e["band"] == "all")]["mae_s"].iloc[0]
    after = e[(e["stage"] == "after") & (e["band"] == "all")]["mae_s"].iloc[0]
    assert after < before
    assert f"mean absolute error {before:.0f} s -> {after:.0f} s" in _printed(demo_command)


def test_demo_writes_report_layers_and_maps(demo_run):
    out = demo_run
    for name in ("report.html", "coverage.gpkg", "summary.csv", "travel_minutes.tif", "network.gpkg"):
        assert (out / name).is_file(), name
    assert len(list((out / "maps").glob("*.png"))) >= 4
    html = (out / "report.html").read_text()
    assert "Planning estimates only" in html and "NFPA 1710" in html
    assert "Where a new station would help" in html and "Busy units" in html
    # the inlined map code names URLs as text (an SVG namespace, Leaflet's home page); tests/test_report_web_map.py
    # checks with an HTML parser that nothing is fetched
    outside = re.sub(r"<script\b.*?</script>", "", html, flags=re.S | re.I)
    assert "http://" not in outside and "https://" not in outside
    layers = {name for name, _ in pyogrio.list_layers(out / "coverage.gpkg")}
    assert {"bases", "reach_by_base", "gaps_first_due_4_min", "first_due_als_8_min", "summary"} <= layers
    assert {"site_chosen", "site_curve", "site_ranking", "availability_units"} <= layers


def test_demo_maps_share_one_extent_and_show_the_boundary(demo_run):
    """Issue 10 item 16: every map of the study draws the study boundary at the same place on the page (one
    extent for all maps): on three rows across the map frame, the first and last boundary-coloured pixels sit in
    the same columns on the surface, depth, gaps and first-due maps."""
    import matplotlib.image as mpimg

    from coverkit.report import maps

    paths = sorted(p for p in (demo_run / "maps").glob("*.png") if p.stem not in ("site_curve", "calibration"))
    assert len(paths) >= 10
    ink = np.array(maps.matplotlib.colors.to_rgb(maps.BOUNDARY_COLOR))
    px_w = round(maps.FIGSIZE_IN[0] * maps.DPI)
    left, right = round(maps._MAP_BOX[0] * px_w) + 3, round((maps._MAP_BOX[0] + maps._MAP_BOX[2]) * px_w) - 3
    found = {}
    for path in paths:
        img = mpimg.imread(path)[..., :3]
        edges = []
        for row in (300, 500, 700):
            dark = np.flatnonzero(np.abs(img[row, left:right] - ink).max(axis=1) < 0.06)
            assert dark.size, f"{path.name}: no boundary on row {row}"
            edges.append((int(dark[0]), int(dark[-1])))
        found[path.name] = edges
    assert len(set(map(tuple, found.values()))) == 1, found


def test_demo_report_tables_read_in_words(demo_run):
    """Issue 10 item 17: headings in words (no raw column names), raster demand counted in cells, one thousands
    separator (a comma) in every number of 1,000 or more, and '1 call' rather than '1 calls'."""
    import re

    html = (demo_run / "report.html").read_text()
    headings = re.findall(r"<th[^>]*>([^<]*)</th>", html)
    assert headings and not [h for h in headings if "_" in h]
    assert "25,441 cells" in html and "25,441 points" not in html
    numbers = re.findall(r'<td class="num">([^<]*)</td>', html)
    assert numbers and not [n for n in numbers if re.fullmatch(r"-?\d{4,}(\.\d+)?", n)]
    assert not re.search(r"\b1 (calls|bases|units|points|cells)\b", html)
    # workloads of a few per cent read as per cent with a decimal, never as 0.0
    assert "workload (% of time busy)" in html


def test_nfpa_1710_standard_is_evaluated_and_reported(demo_run):
    """60 s turnout + 240 s travel for 90 % (NFPA 1710): response = travel + 60 s, covered = travel <= 240 s."""
    out = demo_run
    summary = pd.read_csv(out / "summary.csv")
    row = summary[(summary["standard"] == "First due 4 min") & (summary["demand"] == "residents")].iloc[0]
    assert "NFPA 1710" in row["standard_text"] and "60 s turnout + 240 s travel, 90 %" in row["standard_text"]
    demand = gpd.read_file(out / "coverage.gpkg", layer="demand_residents_first_due_4_min")
    np.testing.assert_allclose(demand["response_s"], demand["travel_s"] + 60.0)
    assert (demand["covered"] == (demand["travel_s"] <= 240.0)).all()
    w = demand["weight"].to_numpy()
    assert row["covered"] == pytest.approx(w[demand["covered"].to_numpy()].sum())
    # the fractile response is the 90 % point of the weighted response times
    order = np.argsort(demand["response_s"].to_numpy(), kind="stable")
    cum = np.cumsum(w[order]) / w.sum()
    assert row["fractile_response_s"] == pytest.approx(
        demand["response_s"].to_numpy()[order][np.searchsorted(cum, 0.9 - 1e-12)]
    )
    assert bool(row["meets_standard"]) == (row["fractile_response_s"] <= 300.0)


def test_raster_demand_total_equals_raster_sum(demo_net):
    """Demand total equals the raster's sum with nodata excluded (rasterio masked read)."""
    net, _ = demo_net
    d = load_demand(DEMO / "population.tif", net)
    with rasterio.open(DEMO / "population.tif") as src:
        arr = src.read(1, masked=True)
    assert d["weight"].sum() == pytest.approx(float(arr.sum()), rel=1e-9)
    assert raster_total(DEMO / "population.tif") == pytest.approx(float(arr.sum()), rel=1e-9)


def test_polygon_demand_total_equals_field_sum(demo_net):
    net, _ = demo_net
    blocks = gpd.read_file(DEMO / "blocks.gpkg")
    d = demand_from_polygons(DEMO / "blocks.gpkg", net, "residents")
    assert d["weight"].sum() == pytest.approx(blocks["residents"].sum(), rel=1e-12)
    # each block's population is kept exactly
    per_zone = d.groupby("zone")["weight"].sum()
    blocks_pop = blocks["residents"].to_numpy()
    assert per_zone.reindex([str(i) for i in range(1, len(blocks) + 1)]).fillna(0).to_numpy() == pytest.approx(
        np.where(blocks_pop > 0, blocks_pop, 0)
    )


def _cover_argv(net_path, demand, out, *extra: str) -> list[str]:
    """``coverkit cover`` on the demo stations at 8 min, quiet, with ``extra`` options."""
    return [
        "cover", str(net_path), "--bases", str(DEMO / "stations.csv"), "--demand", str(demand),
        "--minutes", "8", "--out", str(out), "--quiet", *extra,
    ]  # fmt: skip


def _cover_calls(net_path, out) -> str:
    """``coverkit cover`` on the priority 1-2 incidents at 8 min with 60 s turnout; what it printed."""
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        code = main(
            _cover_argv(net_path, DEMO / "incidents.csv", out, "--where", "priority in (1, 2)", "--turnout-s", "60")
        )
    assert code == 0
    return printed.getvalue()


@pytest.fixture(scope="module")
def calls_cover(demo_net, tmp_path_factory):
    """One ``coverkit cover`` of the priority 1-2 calls (shared by the output contract and the determinism check)."""
    out = tmp_path_factory.mktemp("cover") / "calls.gpkg"
    return out, _cover_calls(demo_net[1], out)


def test_cover_command_output_contract(calls_cover):
    out, text = calls_cover
    assert "covered" in text and "Planning estimates only" in text
    demand = gpd.read_file(out, layer="demand_incidents_8_min")
    for col in ("id", "weight", "travel_s", "response_s", "first_base", "second_base", "depth", "covered"):
        assert col in demand.columns
    src = pd.read_csv(DEMO / "incidents.csv")
    assert len(demand) == int(src["priority"].isin([1, 2]).sum())
    assert set(demand["id"].astype(str)) == set(src.loc[src["priority"].isin([1, 2]), "id"].astype(str))
    gaps = gpd.read_file(out, layer="gaps_8_min")
    uncovered = demand.loc[~demand["covered"], "weight"].sum()
    assert gaps["uncovered_calls"].sum() == pytest.approx(uncovered)


def test_cover_accepts_id_lon_lat_weight_points(demo_net, tmp_path):
    _, net_path = demo_net
    pts = pd.DataFrame({"id": ["a", "b"], "lon": [-35.077, -34.93], "lat": [41.048, 40.97], "weight": [2.5, 4]})
    path = tmp_path / "pts.csv"
    pts.to_csv(path, index=False)
    out = tmp_path / "c.gpkg"
    assert (
        main(
            [
                "cover",
                str(net_path),
                "--bases",
                str(DEMO / "stations.csv"),
                "--demand",
                str(path),
                "--minutes",
                "8",
                "--out",
                str(out),
                "--quiet",
            ]
        )
        == 0
    )
    demand = gpd.read_file(out, layer="demand_pts_8_min")
    assert list(demand["id"]) == ["a", "b"] and list(demand["weight"]) == [2.5, 4.0]
    assert demand["covered"].all()


@pytest.mark.parametrize(
    ("make", "needle"),
    [
        ("raster_no_crs", "no CRS"),
        ("polygons_no_field", "population field"),
        ("swapped", "swapped"),
        ("empty_filter", "no demand point left"),
    ],
)
def test_cover_bad_input(demo_net, tmp_path, capsys, make, needle):
    _, net_path = demo_net
    extra = []
    if make == "raster_no_crs":
        path = tmp_path / "pop.tif"
        with rasterio.open(DEMO / "population.tif") as src:
            profile = src.profile
            data = src.read(1)
        profile.pop("crs")
        with rasterio.open(path, "w", **profile) as dst:
            dst.write(data, 1)
    elif make == "polygons_no_field":
        path = DEMO / "blocks.gpkg"
        extra = ["--population-field", "people"]
    elif make == "swapped":
        src = pd.read_csv(DEMO / "incidents.csv").head(200)
        src = src.rename(columns={"lon": "lat", "lat": "lon"})
        path = tmp_path / "swapped.csv"
        src.to_csv(path, index=False)
    else:
        path = DEMO / "incidents.csv"
        extra = ["--where", "priority > 7"]
    out = tmp_path / "x.gpkg"
    code = main(_cover_argv(net_path, path, out, *extra))
    err = capsys.readouterr().err.strip()
    assert code == 2, err
    assert needle in err and len(err.splitlines()) == 1
    assert not out.exists()


def _study(tmp_path, text: str):
    path = tmp_path / "s.toml"
    path.write_text(text)
    return path


BASE_STUDY = f"""
[study]
name = "t"
[roads]
source = "{DEMO / "varrowby.osm.bz2"}"
[bases]
file = "{DEMO / "stations.csv"}"
[[demand]]
name = "residents"
raster = "{DEMO / "population.tif"}"
[[standard]]
name = "8"
travel_s = 480
"""


@pytest.mark.parametrize(
    ("edit", "needle"),
    [
        (lambda s: s.replace('name = "t"', 'name = "t"\ncolour = "red"'), "study.colour"),
        (lambda s: s.replace("travel_s = 480", 'travel_s = "eight"'), "standard.travel_s"),
        (lambda s: s.replace("stations.csv", "nowhere.csv"), "bases.file"),
        (lambda s: s + "\n[extras]\na = 1\n", "[extras]"),
        (lambda s: s.replace("travel_s = 480", "travel_s = 480\nfractile = 9"), "fractile"),
        (lambda s: s.replace('raster = "', 'points = "x.csv"\nraster = "'), "exactly one"),
        (lambda s: s.replace('[[standard]]\nname = "8"\ntravel_s = 480', ""), "[standard]"),
        (lambda s: s + "\n[bases\n", "TOML"),
        (
            lambda s: s + f'\n[siting]\ncandidates = "{DEMO / "candidates.csv"}"\nadd = 1\nstandard = "nine"\n',
            "siting.standard",
        ),
        (lambda s: s + f'\n[siting]\ncandidates = "{DEMO / "candidates.csv"}"\n', "needs add"),
        (lambda s: s + '\n[siting]\ngenerate = "tertiary"\nadd = 1\nmodel = "best"\n', "siting.model"),
        (lambda s: s + '\n[availability]\nqueue = "zero"\n', "service_min"),
        (lambda s: s + '\n[availability]\nservice_min = 45\ndemand = "calls"\n', "availability.demand"),
    ],
)
def test_study_file_errors_name_the_key(tmp_path, edit, needle):
    with pytest.raises(StudyError) as info:
        load_study(_study(tmp_path, edit(BASE_STUDY)))
    assert needle in str(info.value) and "\n" not in str(info.value)


#: Outputs of the `coverkit run` checks: no maps or report, one isochrone band, a 200 m area grid (the checks are on
#: point figures and the network cache, which the grid's cell size does not enter).
RUN_OUTPUTS = "\n[outputs]\nmaps = false\nreport = false\nisochrone_minutes = [4]\ngrid_cell_m = 200\n"


@pytest.fixture(scope="module")
def base_run(tmp_path_factory):
    """``coverkit run`` of the base study once: (study file, output folder); tests that run again work on a copy."""
    folder = tmp_path_factory.mktemp("base-run")
    study = _study(folder, BASE_STUDY + RUN_OUTPUTS)
    out = folder / "res"
    assert main(["run", str(study), "--out", str(out), "--quiet"]) == 0
    return study, out


def test_run_reuses_the_cached_network(base_run, tmp_path, capsys):
    import shutil

    # the first run is the shared one; copy2 keeps the cached network's modification time
    study = Path(shutil.copy2(base_run[0], tmp_path / "s.toml"))
    out = Path(shutil.copytree(base_run[1], tmp_path / "res"))
    first = (out / "network.gpkg").stat().st_mtime_ns
    assert first == (base_run[1] / "network.gpkg").stat().st_mtime_ns
    assert main(["run", str(study), "--out", str(out)]) == 0
    assert "reusing" in capsys.readouterr().err
    assert (out / "network.gpkg").stat().st_mtime_ns == first
    # a changed profile invalidates the cache
    study.write_text(study.read_text().replace("[bases]", 'profile = "normal"\n[bases]'))
    assert main(["run", str(study), "--out", str(out), "--quiet"]) == 0
    assert RoadNetwork.load(out / "network.gpkg").profile.name == "normal"


def test_example_study_matches_the_demo_template():
    from coverkit.demo import demo_study_toml

    assert (REPO / "examples" / "demo-study.toml").read_text() == demo_study_toml()


def test_missing_network_file(tmp_path, capsys):
    code = main(
        [
            "cover",
            str(tmp_path / "none.gpkg"),
            "--bases",
            "x.csv",
            "--demand",
            "y.csv",
            "--minutes",
            "8",
            "--out",
            str(tmp_path / "o.gpkg"),
        ]
    )
    assert code == 2 and "coverkit network" in capsys.readouterr().err


def test_demand_errors_are_field_errors(demo_net):
    net, _ = demo_net
    with pytest.raises(InputFileError):
        load_demand(DEMO / "missing.tif", net)
    with pytest.raises(FieldError, match="polygons"):
        load_demand(DEMO / "blocks.gpkg", net)


def test_same_inputs_give_the_same_outputs(demo_net, calls_cover, tmp_path):
    """Determinism: two runs of `cover` give identical layers (values, order and geometry)."""
    again = tmp_path / "again.gpkg"
    _cover_calls(demo_net[1], again)
    outs = [calls_cover[0], again]
    for layer in ("demand_incidents_8_min", "gaps_8_min", "first_due_8_min", "by_base_incidents_8_min"):
        a = gpd.read_file(outs[0], layer=layer)
        b = gpd.read_file(outs[1], layer=layer)
        pd.testing.assert_frame_equal(
            pd.DataFrame(a.drop(columns="geometry", errors="ignore")),
            pd.DataFrame(b.drop(columns="geometry", errors="ignore")),
        )
        if "geometry" in a.columns:
            assert a.geometry.geom_equals_exact(b.geometry, tolerance=0).all()


def test_isochrones_command_writes_nested_polygons_and_surface(demo_net, tmp_path, capsys):
    """The isochrones command: polygons per base and band nested (shapely covers), the any-base layer, a GeoTIFF
    in the network CRS with nodata beyond the largest band, and the printed table."""
    import shapely

    _, net_path = demo_net
    out, tif = tmp_path / "reach.gpkg", tmp_path / "minutes.tif"
    code = main(
        [
            "isochrones",
            str(net_path),
            "--bases",
            str(DEMO / "stations.csv"),
            "--minutes",
            "4,8,12",
            "--out",
            str(out),
            "--surface",
            str(tif),
            "--quiet",
        ]
    )
    assert code == 0
    text = capsys.readouterr().out
    assert "area km2" in text and "S1" in text and "Planning estimates only" in text
    layers = {name for name, _ in pyogrio.list_layers(out)}
    assert {"reach_by_base", "reach_any_base"} <= layers
    reach = gpd.read_file(out, layer="reach_by_base")
    for base, grp in reach.groupby("base_id"):
        grp = grp.sort_values("band_min")
        geoms = grp.geometry.to_numpy()
        assert list(grp["band_min"]) == [4.0, 8.0, 12.0], base
        assert all(shapely.covers(geoms[i + 1].buffer(1e-6), geoms[i]) for i in range(2)), base
    with rasterio.open(tif) as src:
        arr = src.read(1)
        assert src.nodata == -1 and src.crs is not None
        valid = arr[arr != src.nodata]
        assert valid.min() >= 0 and valid.max() <= 12.0 + 1e-6


def test_bad_zone_field_stops_before_any_output(tmp_path):
    """A zones id_field missing from the layer is caught when the study is read, so nothing is written."""
    text = BASE_STUDY + f'\n[zones]\nfile = "{DEMO / "districts.geojson"}"\nid_field = "zone"\n'
    study = _study(tmp_path, text)
    out = tmp_path / "never"
    assert main(["run", str(study), "--out", str(out), "--quiet"]) == 2
    assert not out.exists()


def test_swapped_base_coordinates_get_a_hint(demo_net, tmp_path, capsys):
    _, net_path = demo_net
    bases = pd.read_csv(DEMO / "stations.csv").rename(columns={"lon": "lat", "lat": "lon"})
    path = tmp_path / "swapped.csv"
    bases.to_csv(path, index=False)
    code = main(
        [
            "cover",
            str(net_path),
            "--bases",
            str(path),
            "--demand",
            str(DEMO / "population.tif"),
            "--minutes",
            "8",
            "--out",
            str(tmp_path / "x.gpkg"),
            "--quiet",
        ]
    )
    err = capsys.readouterr().err.strip()
    assert code == 2 and "swapped" in err and len(err.splitlines()) == 1


def test_run_figures_match_the_inputs_and_the_cover_command(base_run, tmp_path):
    """``coverkit run``: the residents total is the population raster's sum (rasterio), and the covered weight,
    covered share and fractile response equal what ``coverkit cover`` reports on the run's own network for the
    same bases, demand and standard (design card: every entry point calls the same stages and gives the same
    figures)."""
    out = base_run[1]
    row = pd.read_csv(out / "summary.csv").iloc[0]
    with rasterio.open(DEMO / "population.tif") as src:
        assert row["demand_total"] == pytest.approx(float(src.read(1, masked=True).sum()), rel=1e-6)
    cov = tmp_path / "cover.gpkg"
    args = ["cover", str(out / "network.gpkg"), "--bases", str(DEMO / "stations.csv")]
    assert main([*args, "--demand", str(DEMO / "population.tif"), "--minutes", "8", "--out", str(cov), "-q"]) == 0
    other = gpd.read_file(cov, layer="summary").iloc[0]
    for key in ("demand_total", "covered", "covered_share", "fractile_response_s"):
        assert row[key] == pytest.approx(other[key], rel=1e-9), key
    assert 0.5 < row["covered_share"] < 1.0


def test_demo_first_due_areas_partition_the_county(demo_run):
    """First-due areas partition the study area (design invariant): they do not overlap, lie inside the county
    boundary, and their areas add up to the boundary's area within a 50 m cell along its perimeter (shapely;
    the county polygon projected with pyproj via geopandas)."""
    fd = gpd.read_file(demo_run / "coverage.gpkg", layer="first_due_als_8_min")
    county = gpd.read_file(DEMO / "boundary.geojson").to_crs(fd.crs).geometry.union_all()
    geoms = fd.geometry.to_numpy()
    union = shapely.union_all(geoms)
    assert sum(g.area for g in geoms) == pytest.approx(union.area, rel=1e-6)
    assert shapely.difference(union, county.buffer(50.0)).area < 1e-6 * county.area
    assert abs(union.area - county.area) <= 50.0 * county.length
