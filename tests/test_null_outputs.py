"""Places not reached and bases not found are written as NULL, never as ``inf`` or an empty string.

The reference is the file formats themselves, read back by independent readers: SQLite's own ``IS NULL`` on the
GeoPackage tables (a GeoPackage is an SQLite database, OGC 12-128r18, 2021) and Python's ``csv`` module, where a
missing value is an empty field (RFC 4180 has no other way to write one; common practice, no source).
"""

from __future__ import annotations

import csv
import sqlite3

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
import shapely

from coverkit.atomic import null_missing, write_csv_atomic, write_gpkg_layers
from coverkit.cli import main
from coverkit.layer_names import layer_name
from coverkit.network import RoadNetwork

from .conftest import DEMO


def _table(crs="EPSG:32633"):
    return gpd.GeoDataFrame(
        {
            "id": ["a", "b", "c"],
            "travel_s": [120.0, np.inf, np.nan],
            "first_base": ["S1", "", None],
            "depth": [1, 0, 0],
            "covered": [True, False, False],
        },
        geometry=shapely.points([[0, 0], [1, 1], [2, 2]]),
        crs=crs,
    )


def test_gpkg_writer_stores_null_for_inf_and_empty_ids(tmp_path):
    path = write_gpkg_layers(
        tmp_path / "t.gpkg", {"demand": _table(), "attributes": pd.DataFrame(_table()).drop(columns="geometry")}
    )
    with sqlite3.connect(path) as db:
        for layer in ("demand", "attributes"):
            rows = db.execute(
                f"SELECT id, travel_s IS NULL, first_base IS NULL, depth, covered FROM {layer} ORDER BY id"
            ).fetchall()
            assert rows == [("a", 0, 0, 1, 1), ("b", 1, 1, 0, 0), ("c", 1, 1, 0, 0)]
            # nothing infinite nor an empty string survives anywhere in the table
            assert db.execute(f"SELECT COUNT(*) FROM {layer} WHERE travel_s > 1e308 OR first_base = ''").fetchone() == (
                0,
            )
    back = pyogrio.read_dataframe(path, layer="demand")
    assert back["first_base"].isna().tolist() == [False, True, True]
    assert back["travel_s"].isna().tolist() == [False, True, True]


def test_csv_writer_leaves_missing_fields_empty(tmp_path):
    path = write_csv_atomic(tmp_path / "t.csv", pd.DataFrame(_table()).drop(columns="geometry"))
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["travel_s"] for r in rows] == ["120.0", "", ""]
    assert [r["first_base"] for r in rows] == ["S1", "", ""]
    assert "inf" not in path.read_text(encoding="utf-8").lower()


def test_null_missing_keeps_the_input_unchanged():
    t = _table()
    null_missing(t)
    assert np.isinf(t["travel_s"].iloc[1]) and t["first_base"].iloc[1] == ""


@pytest.fixture(scope="module")
def demo_net_and_path(demo_net_path):
    return RoadNetwork.load(demo_net_path), demo_net_path


def test_cover_writes_unreached_demand_as_null(demo_net_and_path, tmp_path):
    """A call 2 km beyond the corner of the road network (off every road, so never reached) has NULL times and
    NULL first- and second-due bases in the written GeoPackage; a reached call keeps its values."""
    net, path = demo_net_and_path
    x0, y0, _, _ = net.nodes.total_bounds
    corner = gpd.GeoSeries(shapely.points([[x0 - 2000.0, y0 - 2000.0]]), crs=net.crs).to_crs("EPSG:4326")
    far_lon, far_lat = shapely.get_coordinates(corner.to_numpy())[0]
    pts = pd.DataFrame({"id": ["near", "far"], "lon": [-35.077, far_lon], "lat": [41.048, far_lat]})
    src = tmp_path / "calls.csv"
    pts.to_csv(src, index=False)
    out = tmp_path / "c.gpkg"
    args = ["cover", str(path), "--bases", str(DEMO / "stations.csv"), "--demand", str(src)]
    assert main([*args, "--minutes", "8", "--out", str(out), "--quiet"]) == 0
    demand, summary = layer_name("demand", "calls", "8 min"), layer_name("summary")
    with sqlite3.connect(out) as db:
        far = db.execute(
            "SELECT travel_s IS NULL, response_s IS NULL, second_travel_s IS NULL, first_base IS NULL, "
            f"second_base IS NULL FROM {demand} WHERE id = 'far'"
        ).fetchone()
        near = db.execute(f"SELECT travel_s, first_base FROM {demand} WHERE id = 'near'").fetchone()
        fractile = db.execute(f"SELECT fractile_response_s IS NULL FROM {summary}").fetchone()
    assert far == (1, 1, 1, 1, 1)
    assert np.isfinite(near[0]) and near[1]
    # half the calls are never reached, so the 90th percentile response is not reached either
    assert fractile == (1,)


def test_big_layers_in_arrow_batches_read_back_as_the_feature_path(tmp_path, monkeypatch):
    """A layer big enough for the Arrow batch path (here the threshold is lowered to 40 rows) reads back equal to
    pyogrio's feature-by-feature write of the same nulled table, with the same field types; SQLite's ``IS NULL``
    counts the same NULLs (OGC 12-128r18)."""
    from coverkit import gpkg_batches

    monkeypatch.setattr(gpkg_batches, "BATCH_ROWS", 40)
    rng = np.random.default_rng(5)
    n = 157
    time_s = rng.uniform(0, 900, n)
    time_s[rng.random(n) < 0.2] = np.inf
    time_s[rng.random(n) < 0.1] = np.nan
    base = np.array(["S1", "S2", "", None], dtype=object)[rng.integers(0, 4, n)]
    frame = gpd.GeoDataFrame(
        {
            "point_id": np.arange(n, dtype=np.int64),
            "travel_s": time_s,
            "first_due": base,
            "covered": rng.random(n) < 0.5,
            "weight": rng.integers(0, 9, n).astype(np.int32),
        },
        geometry=shapely.points(rng.uniform(0, 5000, (n, 2))),
        crs="EPSG:32633",
    )
    ours = write_gpkg_layers(tmp_path / "ours.gpkg", {"points": frame, "small": frame.iloc[:5]})
    ref = tmp_path / "ref.gpkg"
    pyogrio.write_dataframe(null_missing(frame), ref, layer="points", driver="GPKG")
    got = pyogrio.read_dataframe(ours, layer="points", fid_as_index=True)
    want = pyogrio.read_dataframe(ref, layer="points", fid_as_index=True)
    pd.testing.assert_frame_equal(got, want, check_exact=True)
    assert str(pyogrio.read_info(ours, layer="points")["dtypes"]) == str(pyogrio.read_info(ref)["dtypes"])
    with sqlite3.connect(ours) as con:
        nulls = con.execute("SELECT SUM(travel_s IS NULL), SUM(first_due IS NULL) FROM points").fetchone()
    assert nulls == (int((~np.isfinite(time_s)).sum()), int(sum(b in ("", None) for b in base)))
    assert len(pyogrio.read_dataframe(ours, layer="small")) == 5
