"""The columnar copy of a saved network, the array snap index and the one-pass PBF reader.

References: the GeoPackage read through pyogrio (GDAL) is the reference for the copy; shapely's
``STRtree.query_nearest`` (GEOS) and the k-d tree search of :mod:`coverkit.travel.nearest` for the snap index;
pyosmium's own Python API (``FileProcessor`` with locations, a call per node reference) for the PBF reader.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import shapely

from coverkit.network import RoadNetwork, build_network
from coverkit.network.columnar import MANIFEST, copy_dir
from coverkit.network.model import grid_network
from coverkit.travel import snap_points
from coverkit.travel.grid_index import build_grid_index, grid_nearest, grid_nearest_numpy
from coverkit.travel.nearest import nearest_pieces, segment_index
from coverkit.travel.snap import road_pieces

DEMO = Path(__file__).resolve().parents[1] / "data" / "demo"
BENCH = Path(__file__).resolve().parents[1] / "benchmarks"


def _assert_same_network(a: RoadNetwork, b: RoadNetwork) -> None:
    """Tables, geometry, arrays (bit for bit) and the CSR graph of two networks are the same."""
    pd.testing.assert_frame_equal(a.nodes, b.nodes, check_exact=True)
    pd.testing.assert_frame_equal(a.edges, b.edges, check_exact=True)
    assert a.edges.geometry.geom_equals_exact(b.edges.geometry, tolerance=0).all()
    assert a.nodes.geometry.geom_equals_exact(b.nodes.geometry, tolerance=0).all()
    for name in ("u", "v", "travel_s", "length_m", "xy"):
        x, y = getattr(a, name), getattr(b, name)
        assert x.dtype == y.dtype and x.shape == y.shape
        assert x.tobytes() == y.tobytes(), name
    ca, cb = a.csr(), b.csr()
    for part in ("data", "indices", "indptr"):
        assert np.array_equal(getattr(ca, part), getattr(cb, part)), part
    assert a.crs == b.crs and a.profile == b.profile and a.info == b.info


@pytest.fixture(scope="module")
def demo_saved(tmp_path_factory) -> Path:
    net, _ = build_network(DEMO / "varrowby.osm.bz2", "emergency", boundary=DEMO / "boundary.geojson")
    return net.save(tmp_path_factory.mktemp("columnar") / "demo.gpkg")


def test_copy_equals_the_geopackage_load(demo_saved):
    """The network served by the copy equals the GeoPackage read by pyogrio: tables, geometry, arrays bit for bit."""
    assert (copy_dir(demo_saved) / MANIFEST).is_file()
    fast = RoadNetwork.load(demo_saved)
    assert fast._lazy()  # served by the copy: no table built yet
    slow = RoadNetwork.load(demo_saved, arrays=False)
    # arrays first (before the tables are built from the copy), then the tables
    assert fast.u.tobytes() == slow.u.tobytes() and fast.travel_s.tobytes() == slow.travel_s.tobytes()
    # the nodes' extent from the copy's coordinates, without the table: the GeoPackage table's total_bounds
    assert fast.node_bounds().tobytes() == slow.nodes.total_bounds.tobytes() and "nodes" not in fast.__dict__
    _assert_same_network(fast, slow)


def test_copy_serves_edge_geometry_of_a_subset(demo_saved):
    """Lines built for some edges from the flat coordinates equal those edges' GeoPackage geometry."""
    fast = RoadNetwork.load(demo_saved)
    slow = RoadNetwork.load(demo_saved, arrays=False)
    pick = np.array([5, 0, 17, slow.n_edges - 1])
    got = fast.edge_geometry(pick)
    assert fast._lazy()
    assert shapely.equals_exact(got, slow.edges.geometry.to_numpy()[pick], tolerance=0).all()


def test_times_changed_on_a_loaded_network_match(demo_saved):
    """``with_travel_s`` on a network served by the copy equals the same change on the GeoPackage load."""
    fast = RoadNetwork.load(demo_saved)
    slow = RoadNetwork.load(demo_saved, arrays=False)
    t = slow.travel_s.copy()
    t[::7] = np.inf
    a, b = fast.with_travel_s(t, "closed"), slow.with_travel_s(t, "closed")
    assert a._lazy() and np.array_equal(a.travel_s, b.travel_s)
    _assert_same_network(a, b)


def test_stale_copy_is_detected_and_rebuilt(tmp_path, capsys):
    """A GeoPackage written again (another network, without its copy) makes the old copy stale: the load reads the
    GeoPackage, says so on stderr, and writes a new copy that the next load uses."""
    from coverkit.progress import set_quiet

    path = tmp_path / "net.gpkg"
    grid_network(6, 5, 100.0, 40.0).save(path)
    other = grid_network(7, 4, 120.0, 30.0)
    other.save(path, arrays=False)
    set_quiet(False)
    loaded = RoadNetwork.load(path)
    assert "stale" in capsys.readouterr().err
    assert not loaded._lazy() and loaded.n_nodes == 28
    again = RoadNetwork.load(path)
    assert again._lazy()
    _assert_same_network(again, RoadNetwork.load(path, arrays=False))


def test_geopackage_edited_in_place_is_seen(tmp_path):
    """An edit made to the GeoPackage itself (as in a desktop GIS: the edges layer written again through GDAL with
    one edge's time changed) changes its stamp, so the load reads the edit instead of the copy's old value."""
    import pyogrio

    path = grid_network(5, 5, 100.0, 40.0).save(tmp_path / "net.gpkg")
    edges = pyogrio.read_dataframe(path, layer="edges")
    edges.loc[3, "travel_s"] = 999.0
    pyogrio.write_dataframe(edges, path, layer="edges", driver="GPKG")
    net = RoadNetwork.load(path)
    assert net.travel_s[3] == 999.0
    _assert_same_network(RoadNetwork.load(path), RoadNetwork.load(path, arrays=False))


@pytest.mark.parametrize("damage", ["manifest_garbage", "manifest_missing", "array_truncated", "array_missing"])
def test_damaged_copy_falls_back_cleanly(tmp_path, damage):
    """A corrupted or incomplete copy is never used: the load reads the GeoPackage and rewrites the copy."""
    net = grid_network(6, 6, 100.0, 40.0)
    path = net.save(tmp_path / "net.gpkg")
    folder = copy_dir(path)
    if damage == "manifest_garbage":
        (folder / MANIFEST).write_text("{not json", encoding="utf-8")
    elif damage == "manifest_missing":
        (folder / MANIFEST).unlink()
    elif damage == "array_truncated":
        f = folder / "edges.travel_s.npy"
        f.write_bytes(f.read_bytes()[:100])
    else:
        (folder / "edges.u.npy").unlink()
    loaded = RoadNetwork.load(path)
    _assert_same_network(loaded, RoadNetwork.load(path, arrays=False))
    manifest = json.loads((folder / MANIFEST).read_text(encoding="utf-8"))
    assert manifest["build_id"]  # rewritten whole
    assert RoadNetwork.load(path)._lazy()


def test_saving_the_same_network_twice_gives_the_same_build_id(tmp_path):
    """The build id is a content hash (deterministic outputs), and differs for a different network."""
    from coverkit.network.columnar import gpkg_build_id

    net = grid_network(4, 4, 100.0, 40.0)
    a = gpkg_build_id(net.save(tmp_path / "a.gpkg"), "build_info")
    b = gpkg_build_id(net.save(tmp_path / "b.gpkg"), "build_info")
    c = gpkg_build_id(grid_network(4, 4, 101.0, 40.0).save(tmp_path / "c.gpkg"), "build_info")
    assert a == b and a != c and len(a) == 32


# -- snap index ------------------------------------------------------------------------------------------------------
def _reference_nearest(net: RoadNetwork, xy: np.ndarray, limit_m: float):
    """Nearest piece by the k-d tree + STRtree search (the previous snap index) and GEOS distances."""
    pieces = road_pieces(net)
    geoms = net.edge_geometry(pieces.rep_edge)
    tree = shapely.STRtree(geoms)
    piece, dist = nearest_pieces(segment_index(geoms), xy, limit_m, tree, geoms)
    (pi, _ti), d = tree.query_nearest(shapely.points(xy), max_distance=limit_m, return_distance=True)
    geos_d = np.full(len(xy), np.inf)
    np.minimum.at(geos_d, pi, d)
    return piece, dist, geos_d


def _check_grid_against_references(net: RoadNetwork, xy: np.ndarray, limit_m: float) -> None:
    pieces = road_pieces(net)
    coords, owner = shapely.get_coordinates(net.edge_geometry(pieces.rep_edge), return_index=True)
    index = build_grid_index(coords, owner)
    piece, dist = grid_nearest(index, xy, limit_m)
    # the compiled kernel does the numpy ring search's arithmetic: the same answers to the last bit
    np_piece, np_dist = grid_nearest_numpy(index, xy, limit_m)
    np.testing.assert_array_equal(piece, np_piece)
    np.testing.assert_array_equal(dist, np_dist)
    ref_piece, ref_dist, geos_d = _reference_nearest(net, xy, limit_m)
    np.testing.assert_array_equal(piece, ref_piece)
    np.testing.assert_allclose(dist, ref_dist, rtol=0, atol=1e-9)
    np.testing.assert_allclose(dist, geos_d, rtol=0, atol=1e-7)


def _demo_points(net: RoadNetwork, n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    lo, hi = net.xy.min(axis=0), net.xy.max(axis=0)
    pts = rng.uniform(lo - 800, hi + 800, (n, 2))
    # and points on the network itself: exactly at nodes (ties between the pieces meeting there)
    return np.vstack([pts, net.xy[rng.choice(net.n_nodes, 300, replace=False)]])


def test_grid_snap_index_matches_strtree_on_the_demo_county(demo_saved):
    """Nearest pieces on the demo county: the grid index equals the k-d tree/STRtree search, distances equal
    GEOS's (shapely ``query_nearest``), for random points (some off-network) and points at junctions."""
    net = RoadNetwork.load(demo_saved, arrays=False)
    xy = _demo_points(net, 4000, 1)
    for limit in (25.0, 500.0):
        _check_grid_against_references(net, xy, limit)


def test_grid_snap_index_matches_strtree_on_the_90k_network():
    """The same on the 90,000-node synthetic network of the isochrone benchmark (curved, one-way, diagonal)."""
    sys.path.insert(0, str(BENCH))
    try:
        from bench_isochrones import synthetic_network
    finally:
        sys.path.remove(str(BENCH))
    net = synthetic_network()
    _check_grid_against_references(net, _demo_points(net, 20000, 2), 150.0)


def test_snaps_are_the_same_loaded_either_way(demo_saved):
    """``snap_points`` on the network served by the copy (index kept in the copy, loaded a second time) equals
    ``snap_points`` on the GeoPackage load: edges, fractions, entries, distances."""
    slow = RoadNetwork.load(demo_saved, arrays=False)
    xy = _demo_points(slow, 3000, 3)
    ref = snap_points(slow, xy, max_snap_m=300.0, off_network="mask", warn_islands=False)
    first = snap_points(RoadNetwork.load(demo_saved), xy, max_snap_m=300.0, off_network="mask", warn_islands=False)
    fast = RoadNetwork.load(demo_saved)
    assert any(p.name.startswith("snap1.grid_all") for p in copy_dir(demo_saved).iterdir())
    got = snap_points(fast, xy, max_snap_m=300.0, off_network="mask", warn_islands=False)
    assert fast._lazy()  # snapping built no table
    for s in (first, got):
        for name in ("on_network", "edge", "frac", "entry_point", "entry_edge", "entry_frac", "x", "y", "dist_m"):
            np.testing.assert_array_equal(getattr(s, name), getattr(ref, name), err_msg=name)


# -- PBF reader ------------------------------------------------------------------------------------------------------
def _reference_ways(path: Path):
    """Ways read through pyosmium's Python API, one call per node reference (the earlier reader's method)."""
    import osmium

    from coverkit.network.osm_ways import WAY_TAGS

    way_ids, refs, lengths, lon, lat, signals, tags = [], [], [], [], [], [], []
    fp = osmium.FileProcessor(str(path), osmium.osm.NODE | osmium.osm.WAY).with_locations()
    for obj in fp.with_filter(osmium.filter.KeyFilter("highway")):
        if obj.is_node():
            if obj.tags.get("highway") == "traffic_signals":
                signals.append(obj.id)
            continue
        count = 0
        for nd in obj.nodes:
            if nd.location.valid():
                refs.append(nd.ref)
                lon.append(nd.location.lon)
                lat.append(nd.location.lat)
                count += 1
        way_ids.append(obj.id)
        lengths.append(count)
        tags.append({k: obj.tags.get(k) for k in WAY_TAGS})
    return way_ids, refs, lengths, lon, lat, sorted(set(signals)), tags


def _check_reader(path: Path) -> None:
    from coverkit.network.osm_pbf import read_osm_pbf
    from coverkit.network.osm_ways import tags_frame

    ways = read_osm_pbf(path)
    way_ids, refs, lengths, lon, lat, signals, tags = _reference_ways(path)
    order = np.argsort(way_ids, kind="stable")
    assert np.array_equal(ways.way_id, np.asarray(way_ids)[order])
    assert np.array_equal(np.diff(ways.offsets), np.asarray(lengths)[order])
    expect_refs = np.concatenate([np.asarray(refs[sum(lengths[:i]) : sum(lengths[: i + 1])]) for i in order])
    assert np.array_equal(ways.refs, expect_refs)
    node_id, first = np.unique(np.asarray(refs), return_index=True)
    assert np.array_equal(ways.node_id, node_id)
    assert ways.lon.tobytes() == np.asarray(lon)[first].tobytes()
    assert ways.lat.tobytes() == np.asarray(lat)[first].tobytes()
    assert np.array_equal(ways.signal_ids, np.asarray(signals, dtype=np.int64))
    pd.testing.assert_frame_equal(ways.tags, tags_frame([tags[i] for i in order]))


def test_pbf_reader_equals_pyosmium_python_api_on_helsinki(helsinki_pbf):
    """On a real extract (names with non-ASCII letters, commas, all tag kinds) the one-pass reader gives the same
    ways, references, coordinates (bit for bit), tags and signals as pyosmium's Python API."""
    _check_reader(helsinki_pbf)


def test_pbf_reader_equals_pyosmium_python_api_on_a_generated_pbf(tmp_path):
    """The same on a small generated county (the benchmark's generator, 20 x 20 blocks), whose tags hold spaces,
    one-way and maxspeed values, and on a file whose ways are out of id order and miss some nodes."""
    import osmium
    from osmium.osm.mutable import Node, Way

    sys.path.insert(0, str(BENCH))
    try:
        from bench_scale_network import synthetic_county_pbf
    finally:
        sys.path.remove(str(BENCH))
    _check_reader(synthetic_county_pbf(20, cache=tmp_path))
    odd = tmp_path / "odd.osm.pbf"
    with osmium.SimpleWriter(str(odd)) as w:
        for i in range(1, 9):
            tags = {"highway": "traffic_signals"} if i == 4 else {}
            w.add_node(Node(id=i, location=(10 + i * 0.001, 50 - i * 0.0005), tags=tags))
        w.add_way(Way(id=20, nodes=[1, 2, 3, 99], tags={"highway": "primary", "name": 'Mill, Road = "A" 50%'}))
        w.add_way(Way(id=10, nodes=[3, 4, 5, 6], tags={"highway": "residential", "oneway": "-1", "name": "Äsvägen"}))
        w.add_way(Way(id=15, nodes=[6, 7, 8], tags={"highway": "service", "access": "private", "maxspeed": "20"}))
        w.add_way(Way(id=12, nodes=[98, 97], tags={"highway": "track"}))
    _check_reader(odd)


def test_pbf_build_gives_the_same_network_as_the_reference_reader(tmp_path, monkeypatch):
    """The whole build from the generated PBF equals the build from ways read through pyosmium's Python API."""
    from coverkit.network import osm_pbf
    from coverkit.network.osm_ways import OsmWays, tags_frame

    sys.path.insert(0, str(BENCH))
    try:
        from bench_scale_network import synthetic_county_pbf
    finally:
        sys.path.remove(str(BENCH))
    pbf = synthetic_county_pbf(15, cache=tmp_path)
    new, _ = build_network(pbf, "emergency")

    def reference(path):
        way_ids, refs, lengths, lon, lat, signals, tags = _reference_ways(Path(path))
        node_id, first = np.unique(np.asarray(refs), return_index=True)
        return OsmWays(
            way_id=np.asarray(way_ids),
            tags=tags_frame(tags),
            refs=np.asarray(refs, dtype=np.int64),
            offsets=np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64),
            node_id=node_id,
            lon=np.asarray(lon)[first],
            lat=np.asarray(lat)[first],
            signal_ids=np.asarray(signals, dtype=np.int64),
        )

    monkeypatch.setattr(osm_pbf, "read_osm_pbf", reference)
    old, _ = build_network(pbf, "emergency")
    old.info["source_sha256"] = new.info["source_sha256"]
    pd.testing.assert_frame_equal(new.edges, old.edges, check_exact=True)
    pd.testing.assert_frame_equal(new.nodes, old.nodes, check_exact=True)


def test_snap_index_saved_with_the_network_is_mapped_and_equal(tmp_path):
    """``save(indexes=(snap_index_arrays,))`` keeps the snap index in the copy; a load maps it (no table built) and
    snaps exactly as the in-memory network does."""
    from coverkit.travel.snap import STORE_PREFIX, snap_index_arrays

    net = grid_network(30, 20, 90.0, 40.0)
    path = net.save(tmp_path / "net.gpkg", indexes=(snap_index_arrays,))
    assert (copy_dir(path) / f"{STORE_PREFIX}.grid_all.cell_ptr.npy").is_file()
    rng = np.random.default_rng(5)
    xy = rng.uniform(net.xy.min(axis=0) - 200, net.xy.max(axis=0) + 200, (2000, 2))
    ref = snap_points(net, xy, max_snap_m=60.0, off_network="mask", warn_islands=False)
    fast = RoadNetwork.load(path)
    got = snap_points(fast, xy, max_snap_m=60.0, off_network="mask", warn_islands=False)
    assert fast._lazy()
    for name in ("on_network", "edge", "frac", "entry_point", "entry_edge", "entry_frac", "x", "y", "dist_m"):
        np.testing.assert_array_equal(getattr(got, name), getattr(ref, name), err_msg=name)


@pytest.mark.parametrize("how", ["no_fork", "child_fails"])
def test_save_without_a_working_child_still_writes_everything(tmp_path, monkeypatch, how):
    """Where processes cannot fork, or the forked GeoPackage writer fails, the save writes the GeoPackage itself:
    the same network comes back both ways."""
    from coverkit.network import model

    real_fork = model._fork
    if how == "no_fork":
        monkeypatch.setattr(model, "_fork", lambda job: None)
    else:

        def failing(job):
            def boom():
                raise RuntimeError("disk full (simulated)")

            return real_fork(boom)

        monkeypatch.setattr(model, "_fork", failing)
    net = grid_network(8, 6, 100.0, 40.0)
    path = net.save(tmp_path / "net.gpkg")
    _assert_same_network(RoadNetwork.load(path), RoadNetwork.load(path, arrays=False))
    pd.testing.assert_frame_equal(
        RoadNetwork.load(path, arrays=False).edges.drop(columns="geometry"),
        net.edges.drop(columns="geometry"),
        check_dtype=False,
    )


def test_a_loaded_network_pickles_and_maps_its_arrays_again(demo_saved):
    """A network served by the copy (with its snap index cached) survives pickling, as a cluster worker receives
    it: the same arrays and snaps come back."""
    import pickle

    net = RoadNetwork.load(demo_saved)
    xy = _demo_points(RoadNetwork.load(demo_saved, arrays=False), 500, 4)
    ref = snap_points(net, xy, max_snap_m=300.0, off_network="mask", warn_islands=False)
    back = pickle.loads(pickle.dumps(net))
    assert back._lazy() and back.travel_s.tobytes() == net.travel_s.tobytes()
    got = snap_points(back, xy, max_snap_m=300.0, off_network="mask", warn_islands=False)
    np.testing.assert_array_equal(got.entry_frac, ref.entry_frac)
    np.testing.assert_array_equal(got.edge, ref.edge)
