"""Due areas partition the study area; gap figures count only uncovered demand.

Outside references: shapely (GEOS) for the geometry of the partition (areas, pairwise intersections, symmetric
difference with the boundary, points in polygons), and on a uniform grid of two-way streets the closed form of its
shortest paths: between points on the grid lines the network distance is the Manhattan (L1) distance (a textbook
property of grid graphs, common practice, no source), so the first- and second-due bases of a place away from ties
are its L1-nearest and second-nearest bases.
"""

from __future__ import annotations

import itertools
import sqlite3

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
import shapely

from coverkit.cli import main
from coverkit.coverage import NOT_REACHED, Standard, area_layers, evaluate_coverage
from coverkit.demand import load_demand
from coverkit.layer_names import layer_name
from coverkit.network import build_network
from coverkit.network.build import read_boundary
from coverkit.network.model import grid_network
from coverkit.travel import read_points

from .conftest import DEMO


def _check_partition(layer: gpd.GeoDataFrame, boundary, cell_m: float) -> None:
    """The rows of ``layer`` tile ``boundary``: areas add up within perimeter x cell (the issue's tolerance; the
    construction is in fact exact up to rounding), no two rows overlap, and their union is the boundary."""
    geoms = layer.geometry.to_numpy()
    tol_km2 = boundary.length * cell_m / 1e6
    assert layer.area.sum() / 1e6 == pytest.approx(boundary.area / 1e6, abs=tol_km2)
    assert layer.area.sum() == pytest.approx(boundary.area, rel=1e-6)
    for a, b in itertools.combinations(range(len(geoms)), 2):
        assert shapely.intersection(geoms[a], geoms[b]).area < 1.0  # m2, rounding only
    union = shapely.union_all(geoms)
    assert shapely.symmetric_difference(union, boundary).area < 1e-6 * boundary.area
    assert layer["area_km2"].to_numpy() == pytest.approx(layer.area.to_numpy() / 1e6)


def _check_orders_differ(due: list[gpd.GeoDataFrame]) -> None:
    """No base is first- and second-due (or second- and third-due ...) at the same place."""
    for one, two in itertools.combinations(due, 2):
        for base in set(one["base_id"].dropna()) & set(two["base_id"].dropna()):
            a = one.loc[one["base_id"] == base].union_all()
            b = two.loc[two["base_id"] == base].union_all()
            assert shapely.intersection(a, b).area < 1.0, base


# -- the demo county ------------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    net, _ = build_network(DEMO / "varrowby.osm.bz2", "emergency", boundary=DEMO / "boundary.geojson")
    path = tmp_path_factory.mktemp("net") / "net.gpkg"
    net.save(path)
    bases = read_points(DEMO / "stations.csv", net.crs, what="bases")
    boundary = read_boundary(DEMO / "boundary.geojson").to_crs(net.crs).union_all()
    std = Standard("ALS 8 min", 480.0, 60.0, 0.9)
    people = evaluate_coverage(net, bases, load_demand(DEMO / "population.tif", net), std)
    calls = evaluate_coverage(net, bases, load_demand(DEMO / "incidents.csv", net), std)
    areas = area_layers(net, people, incidents=calls, area=boundary)
    return {"net": net, "path": path, "boundary": boundary, "people": people, "calls": calls, "areas": areas}


def test_demo_due_areas_tile_the_county(demo):
    """Before the fix the first-due areas covered 674.4 of the 780.6 km2 county, 27.3 km2 of them outside it."""
    areas, boundary = demo["areas"], demo["boundary"]
    assert len(areas.due) == 3
    for layer in areas.due:
        _check_partition(layer, boundary, areas.grid.cell_m)
        assert set(layer["status"]) <= {"reached", NOT_REACHED}
        assert layer["base_id"].isna().tolist() == (layer["status"] == NOT_REACHED).tolist()
    assert set(areas.first_due["base_id"]) == {"S1", "S2", "S3", "S4"}
    _check_orders_differ(areas.due)


def test_demo_first_due_areas_agree_with_the_first_due_base_of_the_people_in_them(demo):
    """Residents (raster cells) lying in a first-due area mostly have that base first due (cells and points differ
    only along borders)."""
    people, areas = demo["people"], demo["areas"]
    d = people.demand[people.demand["first_base"] != ""]
    joined = gpd.sjoin(d[["weight", "first_base", "geometry"]], areas.first_due[["base_id", "geometry"]])
    joined = joined[~joined.index.duplicated()]
    agree = joined.loc[joined["first_base"] == joined["base_id"], "weight"].sum()
    assert agree / joined["weight"].sum() > 0.97


def test_demo_gaps_count_only_uncovered_people_and_calls(demo):
    """Before the fix the ALS 8 min gaps held 790 calls, 88 of them covered, while 762 calls were uncovered."""
    people, calls, areas = demo["people"], demo["calls"], demo["areas"]
    gaps = areas.gaps
    assert "population" not in gaps.columns and "incidents" not in gaps.columns
    assert areas.gap_counts() == ["uncovered_people", "uncovered_calls"]
    assert gaps["uncovered_people"].sum() == pytest.approx(people.summary()["uncovered"], rel=1e-9)
    assert gaps["uncovered_calls"].sum() == pytest.approx(calls.summary()["uncovered"], rel=1e-9)
    assert areas.uncovered_outside == {"uncovered_people": 0.0, "uncovered_calls": 0.0}
    # independently, with shapely: the uncovered calls lying in each gap polygon (8-connected gaps never touch)
    d = calls.demand
    pts = d.geometry.to_numpy()
    unc = ~d["covered"].to_numpy(dtype=bool)
    w = d["weight"].to_numpy(dtype=float)
    tree = shapely.STRtree(pts)
    for gap in gaps.itertuples(index=False):
        hit = tree.query(gap.geometry, predicate="intersects")
        assert gap.uncovered_calls == pytest.approx(w[hit][unc[hit]].sum())
    assert (areas.incident_gap_id[unc] > 0).all() and (areas.incident_gap_id[~unc] == 0).all()
    assert (areas.demand_gap_id[~people.demand["covered"].to_numpy()] > 0).all()


def test_cover_command_writes_due_layers_tiling_the_boundary_and_gaps_of_uncovered_calls(demo, tmp_path):
    out = tmp_path / "calls.gpkg"
    args = ["cover", str(demo["path"]), "--bases", str(DEMO / "stations.csv"), "--demand", str(DEMO / "incidents.csv")]
    assert main([*args, "--minutes", "8", "--boundary", str(DEMO / "boundary.geojson"), "--out", str(out), "-q"]) == 0
    layers = {name for name, _ in pyogrio.list_layers(out)}
    due = [layer_name(kind, standard="8 min") for kind in ("first_due", "second_due", "third_due")]
    assert {*due, layer_name("gaps", standard="8 min")} <= layers
    for name in due:
        _check_partition(gpd.read_file(out, layer=name), demo["boundary"], 100.0)
    gaps = gpd.read_file(out, layer=layer_name("gaps", standard="8 min"))
    demand_layer = layer_name("demand", "incidents", "8 min")
    demand = gpd.read_file(out, layer=demand_layer)
    assert "population" not in gaps.columns and "uncovered_people" not in gaps.columns
    assert gaps["uncovered_calls"].sum() == pytest.approx(demand.loc[~demand["covered"], "weight"].sum())
    with sqlite3.connect(out) as db:
        unassigned = db.execute(f"SELECT COUNT(*) FROM {demand_layer} WHERE covered = 0 AND gap_id = 0").fetchone()
    assert unassigned == (0,)


def test_cover_command_raster_gaps_hold_uncovered_people(demo, tmp_path):
    out = tmp_path / "people.gpkg"
    args = ["cover", str(demo["path"]), "--bases", str(DEMO / "stations.csv"), "--demand", str(DEMO / "population.tif")]
    assert main([*args, "--minutes", "8", "--out", str(out), "-q"]) == 0
    gaps = gpd.read_file(out, layer=layer_name("gaps", standard="8 min"))
    demand = pd.DataFrame(gpd.read_file(out, layer=layer_name("demand", "population", "8 min")))
    assert [c for c in gaps.columns if c.startswith("uncovered_")] == ["uncovered_people"]
    assert gaps["uncovered_people"].sum() == pytest.approx(demand.loc[~demand["covered"], "weight"].sum())
    # without a boundary the due areas tile the network's extent
    nodes = demo["net"].nodes.total_bounds
    _check_partition(gpd.read_file(out, layer=layer_name("first_due", standard="8 min")), shapely.box(*nodes), 100.0)


# -- a larger synthetic county ---------------------------------------------------------------------------------------
SPACING_M = 250.0


@pytest.fixture(scope="module")
def synthetic():
    """An 81 x 61 grid of two-way streets (20 x 15 km, 10 m/s), five bases on junctions, and a boundary reaching
    2 km past the roads on two sides (land off every road) with a lake cut out of it."""
    x0, y0 = 500000.0, 5000000.0
    net = grid_network(81, 61, SPACING_M, 36.0, x0=x0, y0=y0)
    rng = np.random.default_rng(5)
    nodes = rng.choice(81 * 61, size=5, replace=False)
    bases = gpd.GeoDataFrame(
        {"id": [f"B{i}" for i in range(5)]}, geometry=shapely.points(net.xy[np.sort(nodes)]), crs=net.crs
    )
    outline = shapely.Polygon(
        [(x0 - 2000, y0 + 3000), (x0 + 9000, y0 - 2000), (x0 + 20000, y0 + 1000), (x0 + 19000, y0 + 15000),
         (x0 + 6000, y0 + 14000), (x0 + 1000, y0 + 16500)],
        holes=[shapely.Point(x0 + 12000, y0 + 8000).buffer(1200).exterior.coords],
    )  # fmt: skip
    n = 4000
    xy = rng.uniform([x0, y0], [x0 + 20000, y0 + 15000], size=(n, 2))
    demand = gpd.GeoDataFrame(
        {"id": [str(i) for i in range(n)], "weight": rng.uniform(0, 5, n), "source": "points"},
        geometry=shapely.points(xy),
        crs=net.crs,
    )
    # a short horizon leaves the far corners unreached by a second and third base
    res = evaluate_coverage(net, bases, demand, Standard("s", 300.0), horizon_s=900.0)
    areas = area_layers(net, res, cell_m=150.0, area=outline)
    return {"net": net, "bases": bases, "outline": outline, "res": res, "areas": areas}


def test_synthetic_due_areas_partition_the_boundary_with_unreached_rows(synthetic):
    areas, outline = synthetic["areas"], synthetic["outline"]
    for layer in areas.due:
        _check_partition(layer, outline, areas.grid.cell_m)
    _check_orders_differ(areas.due)
    third = areas.third_due
    unreached = third[third["status"] == NOT_REACHED]
    assert len(unreached) == 1 and unreached["base_id"].isna().all() and unreached.area.iloc[0] > 1e6
    # the lake is in no row, the land off every road is
    assert shapely.union_all(areas.first_due.geometry.to_numpy()).intersection(
        shapely.Point(500000 + 12000, 5000000 + 8000).buffer(1000)
    ).area == pytest.approx(0.0, abs=1.0)
    off_road = shapely.box(500000 - 1500, 5000000 + 2500, 500000 - 500, 5000000 + 3000).intersection(outline)
    assert off_road.area > 0
    assert shapely.union_all(areas.first_due.geometry.to_numpy()).contains(off_road.buffer(-1))


def test_synthetic_first_and_second_due_are_the_manhattan_nearest_bases(synthetic):
    """Away from ties (L1 distances differing by more than 3 blocks), places on the road grid are first (second)
    due to their L1-nearest (second-nearest) base, as long as that base reaches them within the horizon."""
    areas, bases = synthetic["areas"], synthetic["bases"]
    rng = np.random.default_rng(8)
    xy = rng.uniform([500000.0 + 500, 5000000.0 + 500], [500000.0 + 19500, 5000000.0 + 14500], size=(3000, 2))
    bxy = shapely.get_coordinates(bases.geometry.to_numpy())
    l1 = np.abs(xy[:, None, :] - bxy[None, :, :]).sum(axis=2)
    order = np.argsort(l1, axis=1)
    d = np.take_along_axis(l1, order, axis=1)
    ids = bases["id"].to_numpy()
    pts = gpd.GeoDataFrame(geometry=shapely.points(xy), crs=bases.crs)
    for k, layer in enumerate(areas.due[:2]):
        clear = (d[:, k + 1] - d[:, k] > 3 * SPACING_M) & (d[:, k] < 8000.0)
        if k:
            clear &= d[:, k] - d[:, k - 1] > 3 * SPACING_M
        inside = shapely.contains_xy(synthetic["outline"], xy[:, 0], xy[:, 1])
        pick = np.flatnonzero(clear & inside)
        assert len(pick) > 300
        j = gpd.sjoin(pts.iloc[pick], layer[["base_id", "geometry"]], predicate="within")
        j = j[~j.index.duplicated()]
        assert len(j) >= 0.99 * len(pick)
        expected = ids[order[j.index.to_numpy(), k]]
        assert (j["base_id"].to_numpy() == expected).mean() > 0.99


def test_synthetic_gaps_add_up_to_the_uncovered_calls(synthetic):
    res, areas = synthetic["res"], synthetic["areas"]
    assert areas.gap_counts() == ["uncovered_calls"]
    uncovered = res.summary()["uncovered"]
    assert uncovered > 0
    assert areas.gaps["uncovered_calls"].sum() == pytest.approx(uncovered, rel=1e-9)
    assert areas.uncovered_outside == {"uncovered_calls": 0.0}
