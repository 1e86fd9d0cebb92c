"""A built network held as flat arrays, and the GeoPackage written from them in Arrow batches.

References: pyogrio's ``write_dataframe`` (GDAL's feature-by-feature path) for the layers written in batches; the
GeoPackage read back by pyogrio for the network held in memory; shapely's ``reverse`` and ``to_ragged_array`` for
the flat line arrays.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pyogrio
import pytest
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st

from coverkit import gpkg_batches
from coverkit.gpkg_batches import frame_rows, write_layer
from coverkit.network import RoadNetwork, build_network
from coverkit.network.build import take_lines
from coverkit.network.columnar import copy_dir
from coverkit.network.model import EDGE_COLUMNS, NODE_COLUMNS
from tests.test_network_columnar import DEMO, _assert_same_network


@pytest.fixture(scope="module")
def helsinki_built(helsinki_pbf):
    """The Helsinki extract (turn restrictions, one-way streets, signals) built, as a new network is."""
    return build_network(helsinki_pbf, "normal")[0]


def test_built_network_is_arrays_and_equals_its_saved_geopackage(helsinki_built, tmp_path):
    """A new network is served from flat arrays (no table built), and equals the GeoPackage it saves, read back
    by pyogrio."""
    assert helsinki_built._lazy() and "nodes" not in helsinki_built.__dict__
    path = helsinki_built.save(tmp_path / "h.gpkg")
    assert helsinki_built._lazy()  # saving did not build the tables either
    _assert_same_network(helsinki_built, RoadNetwork.load(path, arrays=False))


def test_saving_from_arrays_or_from_tables_writes_the_same_files(helsinki_pbf, tmp_path):
    """The array path and the table path (pyogrio on the GeoDataFrames) give the same GeoPackage layers, the same
    build id and the same columnar copy."""
    arrays_net = build_network(helsinki_pbf, "normal")[0]
    tables_net = build_network(helsinki_pbf, "normal")[0]
    _ = tables_net.nodes, tables_net.edges  # built tables: the save takes its table path
    a = arrays_net.save(tmp_path / "a.gpkg")
    b = tables_net.save(tmp_path / "b.gpkg")
    assert [n for n, _ in pyogrio.list_layers(a)] == [n for n, _ in pyogrio.list_layers(b)]
    for layer, _ in pyogrio.list_layers(a):
        pd.testing.assert_frame_equal(
            pyogrio.read_dataframe(a, layer=layer, fid_as_index=True),
            pyogrio.read_dataframe(b, layer=layer, fid_as_index=True),
            check_exact=True,
        )
    ma, mb = (json.loads((copy_dir(p) / "manifest.json").read_text()) for p in (a, b))
    assert ma["build_id"] == mb["build_id"] and ma["arrays"] == mb["arrays"]
    for name in ma["arrays"]:
        x, y = (np.load(copy_dir(p) / f"{name}.npy") for p in (a, b))
        assert x.tobytes() == y.tobytes(), name


def test_batched_layer_equals_pyogrio_write_dataframe(tmp_path, monkeypatch):
    """Layers written in many small Arrow batches read back equal to pyogrio's own write, with the same schema."""
    net, _ = build_network(DEMO / "varrowby.osm.bz2", "emergency")
    monkeypatch.setattr(gpkg_batches, "BATCH_ROWS", 97)  # many batches, the last one short
    for layer, frame in (
        ("nodes", net.nodes[[*NODE_COLUMNS, "geometry"]]),
        ("edges", net.edges[[*EDGE_COLUMNS, "geometry"]]),
    ):
        ours, ref = tmp_path / f"ours_{layer}.gpkg", tmp_path / f"ref_{layer}.gpkg"
        write_layer(frame_rows(frame), ours, layer=layer)
        pyogrio.write_dataframe(frame, ref, layer=layer, driver="GPKG")
        got = pyogrio.read_dataframe(ours, fid_as_index=True)
        want = pyogrio.read_dataframe(ref, fid_as_index=True)
        pd.testing.assert_frame_equal(got, want, check_exact=True)
        info_got, info_want = pyogrio.read_info(ours), pyogrio.read_info(ref)
        for key in ("fields", "dtypes", "geometry_type", "crs", "features", "fid_column", "geometry_name"):
            assert str(info_got[key]) == str(info_want[key]), key


@settings(max_examples=60, deadline=None)
@given(
    counts=st.lists(st.integers(2, 6), min_size=1, max_size=12),
    data=st.data(),
)
def test_take_lines_equals_shapely(counts, data):
    """Taking lines from flat arrays, some drawn backwards, gives the vertices shapely's ``reverse`` gives."""
    rng = np.random.default_rng(len(counts) * 7 + sum(counts))
    lines = np.array([shapely.linestrings(rng.normal(size=(c, 2))) for c in counts], dtype=object)
    index = np.asarray(data.draw(st.lists(st.integers(0, len(lines) - 1), max_size=20)), dtype=np.int64)
    reverse = np.asarray(data.draw(st.lists(st.booleans(), min_size=len(index), max_size=len(index))), dtype=bool)
    _, coords, (offsets,) = shapely.to_ragged_array(lines)
    got_coords, got_offsets = take_lines(coords, np.asarray(offsets, dtype=np.int64), index, reverse)
    want = lines[index].copy()
    want[reverse] = shapely.reverse(want[reverse])
    if len(want):
        _, want_coords, (want_offsets,) = shapely.to_ragged_array(want)
    else:
        want_coords, want_offsets = np.empty((0, 2)), np.zeros(1, dtype=np.int64)
    assert np.array_equal(got_offsets, want_offsets)
    assert np.array_equal(got_coords, want_coords)


@settings(max_examples=40, deadline=None)
@given(
    n=st.integers(0, 300),
    lines=st.integers(1, 40),
    max_len_m=st.floats(0.5, 200.0),
    seed=st.integers(0, 2**16),
)
def test_compiled_cut_equals_numpy_cut(n, lines, max_len_m, seed):
    """The compiled sub-segment cut of the snap index gives the numpy cut's arrays bit for bit; the numpy cut's
    pieces lie on the GEOS line they came from (shapely ``distance`` within 1e-9 m)."""
    from coverkit.travel.nearest import cut_segments, cut_segments_compiled

    rng = np.random.default_rng(seed)
    coords = rng.normal(scale=300.0, size=(n, 2))
    owner = np.sort(rng.integers(0, lines, n))
    want = cut_segments(coords, owner, max_len_m)
    got = cut_segments_compiled(coords, owner, max_len_m)
    for g, w in zip(got, want, strict=True):
        assert g.dtype == w.dtype and np.array_equal(g, w)
    a, b, line = want
    if len(a):
        assert np.all(np.hypot(*(b - a).T) <= max_len_m * (1 + 1e-9))
        k = int(line[0])
        geom = shapely.linestrings(coords[owner == k])
        mids = shapely.points((a[line == k] + b[line == k]) / 2)
        assert np.all(shapely.distance(geom, mids) < 1e-9 * max(1.0, float(np.abs(coords).max())))
