"""Snapping points to roads, and reading point files.

Checks use plane geometry worked by hand (exact) on small synthetic networks from ``coverkit.network.model``.
"""

from __future__ import annotations

import numpy as np
import pytest
import shapely

from coverkit.errors import CoverkitError, FieldError, InputFileError, OffNetworkError
from coverkit.network.model import grid_network, network_from_arrays
from coverkit.travel.points import read_points
from coverkit.travel.snap import island_mask, snap_points

X0, Y0 = 500000.0, 5000000.0


def test_two_way_street_gives_both_directions_with_offsets():
    """Geometry, exact: a point 30 m off a 100 m street at 40 m along it."""
    net = grid_network(2, 1, 100.0, 36.0)
    s = snap_points(net, np.array([[X0 + 40.0, Y0 + 30.0]]))
    assert s.on_network[0]
    assert np.isclose(s.dist_m[0], 30.0)
    assert sorted(s.entry_edge.tolist()) == [0, 1]
    fr = dict(zip(s.entry_edge.tolist(), s.entry_frac.tolist(), strict=True))
    assert np.isclose(fr[0], 0.4) and np.isclose(fr[1], 0.6)  # the twin runs the other way
    assert s.edge[0] == 0 and np.isclose(s.offset_m[0], 40.0)
    assert np.isclose(s.x[0], X0 + 40.0) and np.isclose(s.y[0], Y0)


def test_points_in_blocks_and_without_positions_snap_the_same(monkeypatch):
    """Blocks of points give what one pass gives, and ``positions=False`` only leaves x, y out (geometry of the
    worked case above: the point 30 m off the street at 40 m along it lies at (40, 0) on it)."""
    import coverkit.travel.snap as snap_module

    net = grid_network(4, 3, 100.0, 36.0)
    rng = np.random.default_rng(3)
    xy = np.column_stack([X0 + rng.uniform(-20, 320, 60), Y0 + rng.uniform(-20, 220, 60)])
    xy[0] = [X0 + 40.0, Y0 + 30.0]
    whole = snap_points(net, xy, off_network="mask")
    monkeypatch.setattr(snap_module, "ENTRY_BLOCK", 7)
    blocks = snap_points(net, xy, off_network="mask")
    bare = snap_points(net, xy, off_network="mask", positions=False)
    for name in ("edge", "frac", "dist_m", "entry_point", "entry_edge", "entry_frac", "x", "y"):
        np.testing.assert_array_equal(getattr(blocks, name), getattr(whole, name))
    for name in ("edge", "frac", "offset_m", "entry_point", "entry_edge", "entry_frac"):
        np.testing.assert_array_equal(getattr(bare, name), getattr(whole, name))
    assert np.isnan(bare.x).all() and np.isnan(bare.y).all()
    assert np.isclose(whole.x[0], X0 + 40.0) and np.isclose(whole.y[0], Y0)


def test_one_way_street_has_one_entry():
    """Geometry, exact: a one-way edge carries a single direction."""
    net = network_from_arrays(np.array([[X0, Y0], [X0 + 100.0, Y0]]), [0], [1], 36.0, oneway=True)
    s = snap_points(net, np.array([[X0 + 70.0, Y0 - 5.0]]))
    assert s.entry_edge.tolist() == [0] and np.isclose(s.entry_frac[0], 0.7)


def test_snap_limit_and_off_network_error_lists_ids():
    """Geometry, exact: 600 and 800 m off the road are beyond the 500 m default; 300 m is within."""
    net = grid_network(3, 3, 100.0, 36.0)  # top row at Y0 + 200
    pts = np.array([[X0 + 100.0, Y0 + 800.0], [X0 + 100.0, Y0 + 1000.0], [X0 + 100.0, Y0 + 500.0]])
    with pytest.raises(OffNetworkError) as err:
        snap_points(net, pts, ids=["north", "far", "ok"], what="bases")
    msg = str(err.value)
    assert "north" in msg and "far" in msg and "ok (" not in msg and "\n" not in msg
    assert "500 m" in msg and "2 bases" in msg
    masked = snap_points(net, pts, ids=["north", "far", "ok"], off_network="mask")
    assert masked.on_network.tolist() == [False, False, True]
    assert np.allclose(masked.dist_m, [600.0, 800.0, 300.0])
    # a larger limit takes them in; a smaller one drops the third
    assert snap_points(net, pts, max_snap_m=900.0).on_network.all()
    assert not snap_points(net, pts, max_snap_m=100.0, off_network="mask").on_network.any()


def test_island_base_warns(capsys):
    """A base on a road piece cut off from the main network gets a warning naming it."""
    main = grid_network(4, 4, 100.0, 36.0)
    xy = np.vstack([main.xy, [[X0 + 5000.0, Y0], [X0 + 5100.0, Y0]]])
    u = np.concatenate([main.u, [16, 17]])
    v = np.concatenate([main.v, [17, 16]])
    net = network_from_arrays(xy, u, v, 36.0)
    s = snap_points(net, np.array([[X0 + 50.0, Y0], [X0 + 5050.0, Y0 + 10.0]]), ids=["A", "B"], what="bases")
    assert island_mask(net, s).tolist() == [False, True]
    err = capsys.readouterr().err
    assert "warning:" in err and "B (2 nodes)" in err and "A (" not in err


def test_read_points_csv_projects_and_keeps_columns(tmp_path):
    """Source: pyproj (EPSG:4326 -> EPSG:32633) as the independent reference for the projection."""
    from pyproj import Transformer

    f = tmp_path / "bases.csv"
    f.write_text("id,lon,lat,name,units\nS1,15.0,45.0,Central,2\nS2,15.01,45.02,North,\n")
    gdf = read_points(f, "EPSG:32633", what="bases")
    assert gdf["id"].tolist() == ["S1", "S2"] and gdf["units"].tolist() == [2, 1]
    x, y = Transformer.from_crs(4326, 32633, always_xy=True).transform(15.01, 45.02)
    assert np.isclose(gdf.geometry.x[1], x) and np.isclose(gdf.geometry.y[1], y)


@pytest.mark.parametrize(
    ("text", "cls", "needle"),
    [
        ("id,lon\nA,1\n", FieldError, "no column 'lat'"),
        ("id,lon,lat\nA,15,45\nB,x,45\n", FieldError, "line 3 has lon 'x'"),
        ("id,lon,lat\nA,15,95\n", FieldError, "line 2 has lat 95"),
        ("id,lon,lat\nA,15,45\nA,15.1,45\n", FieldError, "'A' appears more than once"),
        ("", InputFileError, "is empty"),
    ],
)
def test_read_points_bad_input_one_line(tmp_path, text, cls, needle):
    """Bad input raises a one-line CoverkitError naming the file and row (project rule)."""
    f = tmp_path / "b.csv"
    f.write_text(text)
    with pytest.raises(cls) as err:
        read_points(f, "EPSG:32633", what="bases")
    assert needle in str(err.value) and str(f) in str(err.value) and "\n" not in str(err.value)


def test_read_points_layer_with_id_field(tmp_path):
    """A GeoPackage point layer with a custom id field; a missing field is a one-line error."""
    import geopandas as gpd
    from shapely import Point

    f = tmp_path / "pts.gpkg"
    gpd.GeoDataFrame({"code": ["a", "b"]}, geometry=[Point(15, 45), Point(15.1, 45.1)], crs=4326).to_file(f)
    gdf = read_points(f, "EPSG:32633", id_field="code")
    assert gdf["id"].tolist() == ["a", "b"] and gdf.crs.to_epsg() == 32633
    with pytest.raises(CoverkitError, match="no field 'station'"):
        read_points(f, "EPSG:32633", id_field="station")
    with pytest.raises(InputFileError, match="not found"):
        read_points(tmp_path / "none.csv", "EPSG:32633")


def test_vectorised_nearest_piece_equals_shapely_strtree():
    """The k-d tree nearest search equals shapely's STRtree.query_nearest (GEOS) on random curved lines, including
    points in dense clusters of lines where the fallback path is needed."""
    from coverkit.travel.nearest import nearest_pieces, segment_index

    rng = np.random.default_rng(3)
    starts = rng.uniform(0, 5000, (400, 2))
    mids = starts + rng.normal(0, 150, (400, 2))
    ends = mids + rng.normal(0, 150, (400, 2))
    lines = shapely.linestrings(np.stack([starts, mids, ends], axis=1))
    dense = shapely.linestrings(
        np.stack(
            [
                np.full((60, 2), 2500.0),
                np.full((60, 2), 2500.0) + rng.normal(0, 3, (60, 2)),
                np.full((60, 2), 2510.0) + rng.normal(0, 3, (60, 2)),
            ],
            axis=1,
        )
    )
    geoms = np.concatenate([lines, dense])
    tree = shapely.STRtree(geoms)
    xy = np.vstack([rng.uniform(-300, 5300, (3000, 2)), 2505 + rng.normal(0, 4, (200, 2))])
    piece, dist = nearest_pieces(segment_index(geoms), xy, 250.0, tree, geoms)
    (pi, _ti), d = tree.query_nearest(shapely.points(xy), max_distance=250.0, return_distance=True)
    ref_d = np.full(len(xy), np.inf)
    np.minimum.at(ref_d, pi, d)
    np.testing.assert_allclose(dist, ref_d, atol=1e-7)
    hit = np.isfinite(ref_d)
    assert (piece[~hit] == -1).all()
    # the chosen piece is at the minimum distance
    np.testing.assert_allclose(shapely.distance(geoms[piece[hit]], shapely.points(xy[hit])), ref_d[hit], atol=1e-7)
