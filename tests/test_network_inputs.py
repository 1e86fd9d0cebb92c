"""Bad road inputs give one clear CoverkitError line and write nothing; centerline layers build a topology."""

from __future__ import annotations

import json

import geopandas as gpd
import numpy as np
import pytest
import shapely
from shapely.geometry import LineString

from coverkit.cli import main
from coverkit.errors import CoverkitError, FieldError, InputFileError, NetworkError
from coverkit.network import build_network
from coverkit.network.profile import KPH_PER_MPH

OSM_HEAD = '<?xml version="1.0" encoding="UTF-8"?>\n<osm version="0.6" generator="coverkit-tests">\n'


def _osm(tmp_path, body: str, name: str = "x.osm"):
    path = tmp_path / name
    path.write_text(OSM_HEAD + body + "</osm>\n")
    return path


def _nodes(n: int, lon0: float = 10.0, lat0: float = 50.0) -> str:
    return "".join(
        f'<node id="{i + 1}" version="1" lat="{lat0 + 0.001 * (i // 3)}" lon="{lon0 + 0.001 * (i % 3)}"/>\n'
        for i in range(n)
    )


def _way(wid: int, refs, **tags) -> str:
    nds = "".join(f'<nd ref="{r}"/>' for r in refs)
    tg = "".join(f'<tag k="{k}" v="{v}"/>' for k, v in tags.items())
    return f'<way id="{wid}" version="1">{nds}{tg}</way>\n'


def _run_cli(args) -> int:
    return main([*args, "--quiet"])


def test_empty_file(tmp_path, capsys):
    path = tmp_path / "empty.osm"
    path.write_text("")
    out = tmp_path / "net.gpkg"
    assert _run_cli(["network", str(path), "--out", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "empty" in err[0]
    assert not out.exists()


@pytest.mark.parametrize("name", ["notes.osm", "notes.osm.pbf"])
def test_file_that_is_not_osm(tmp_path, capsys, name):
    path = tmp_path / name
    path.write_text("station list\nA,1,2\n")
    out = tmp_path / "net.gpkg"
    assert _run_cli(["network", str(path), "--out", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and str(path) in err[0]
    assert not out.exists() and not list(tmp_path.glob("*.gpkg*"))


def test_region_with_no_drivable_road(tmp_path):
    body = _nodes(6) + _way(1, [1, 2, 3], highway="footway") + _way(2, [4, 5, 6], highway="cycleway")
    with pytest.raises(NetworkError, match="no drivable road"):
        build_network(_osm(tmp_path, body), "emergency")


def test_private_road_is_closed_unless_profile_allows_emergency_access(tmp_path):
    body = (
        _nodes(9)
        + _way(1, [1, 2, 3], highway="residential")
        + _way(2, [3, 6, 9], highway="service", access="private")
        + _way(3, [9, 8, 7, 4, 1], highway="residential")
    )
    path = _osm(tmp_path, body)
    normal, rep_n = build_network(path, "normal")
    emerg, rep_e = build_network(path, "emergency")
    assert rep_n.read["ways_closed_access"] == 1 and rep_e.read["ways_closed_access"] == 0
    assert 2 not in set(normal.edges["source_id"]) and 2 in set(emerg.edges["source_id"])


def test_boundary_that_does_not_overlap(tmp_path):
    body = _nodes(6) + _way(1, [1, 2, 3, 6, 5, 4, 1], highway="residential")
    far = {
        "type": "FeatureCollection",
        "features": [
            {
                "type": "Feature",
                "properties": {},
                "geometry": {
                    "type": "Polygon",
                    "coordinates": [[[40, 10], [40.1, 10], [40.1, 10.1], [40, 10.1], [40, 10]]],
                },
            }
        ],
    }
    bpath = tmp_path / "far.geojson"
    bpath.write_text(json.dumps(far))
    with pytest.raises(NetworkError, match="does not overlap"):
        build_network(_osm(tmp_path, body), "emergency", boundary=bpath)


def test_boundary_clip_keeps_buffered_roads(tmp_path):
    """Roads within the buffer of the boundary stay; those beyond are counted as outside."""
    body = (
        _nodes(3)
        + '<node id="10" version="1" lat="50.0" lon="10.2"/><node id="11" version="1" lat="50.001" lon="10.2"/>\n'
        + _way(1, [1, 2, 3, 1], highway="residential")
        + _way(2, [10, 11, 10], highway="residential")
    )
    box = {
        "type": "Polygon",
        "coordinates": [[[9.999, 49.999], [10.003, 49.999], [10.003, 50.002], [9.999, 50.002], [9.999, 49.999]]],
    }
    bpath = tmp_path / "b.geojson"
    bpath.write_text(json.dumps(box))
    net, rep = build_network(_osm(tmp_path, body), "emergency", boundary=bpath, buffer_m=500)
    assert rep.outside_boundary == 2
    assert set(net.edges["source_id"]) == {1}


def test_disconnected_piece_is_dropped_and_reported(tmp_path):
    body = (
        _nodes(6)
        + '<node id="20" version="1" lat="50.01" lon="10.0"/><node id="21" version="1" lat="50.011" lon="10.0"/>\n'
        + _way(1, [1, 2, 3, 6, 5, 4, 1], highway="residential")
        + _way(2, [20, 21], highway="residential")
    )
    net, rep = build_network(_osm(tmp_path, body), "emergency")
    assert rep.pieces_dropped == 1 and rep.edges_dropped == 2
    geod_len = 0.001 * 6371008.8 * np.pi / 180  # ~111 m of latitude on a sphere; ellipsoid within 1 %
    assert rep.km_dropped * 1000 == pytest.approx(geod_len, rel=0.01)
    assert 2 not in set(net.edges["source_id"])


def _centerlines(tmp_path, rows, crs="EPSG:32633"):
    gdf = gpd.GeoDataFrame(rows, geometry=[r.pop("geometry") for r in rows], crs=crs)
    path = tmp_path / "roads.gpkg"
    gdf.to_file(path)
    return path


def _square_rows(gap: float = 0.0):
    x0, y0 = 500000.0, 5500000.0
    pts = [(x0, y0), (x0 + 500, y0), (x0 + 500, y0 + 500), (x0, y0 + 500)]
    rows = []
    for i in range(4):
        a, b = pts[i], pts[(i + 1) % 4]
        if i == 3:
            b = (b[0] + gap, b[1])
        rows.append({"RCLASS": "Local", "SPD_MPH": 25, "OW": "B", "geometry": LineString([a, b])})
    return rows


def test_centerline_layer_topology_speed_and_units(tmp_path):
    """Shared endpoints make junctions; mph speeds convert with the exact mile (1.609344 km)."""
    path = _centerlines(tmp_path, _square_rows())
    net, _rep = build_network(path, "normal", fields={"class": "RCLASS", "speed": "SPD_MPH", "oneway": "OW"})
    assert net.n_nodes == 4 and net.n_edges == 8
    assert set(net.edges["road_class"]) == {"residential"}
    np.testing.assert_allclose(net.edges["posted_kph"], 25 * KPH_PER_MPH)
    np.testing.assert_allclose(net.length_m.sum(), 8 * 500, rtol=1e-3)  # UTM scale factor ~0.9996


def test_centerline_near_miss_endpoints_are_counted(tmp_path):
    """An endpoint 3 m short of the next line's end is a near miss (beyond the 0.5 m tolerance)."""
    path = _centerlines(tmp_path, _square_rows(gap=3.0))
    _net, rep = build_network(path, "normal", fields={"class": "RCLASS"})
    assert rep.read["near_miss_endpoints"] == 2  # both dangling ends of the gap


def test_centerline_one_way_values(tmp_path):
    """FT runs with the digitised direction, TF against it (common practice in centerline layers)."""
    for value, start in (("FT", (500000.0, 5500000.0)), ("TF", (500500.0, 5500000.0))):
        rows = _square_rows()
        rows[0]["OW"] = value
        rows[1]["OW"] = value
        folder = tmp_path / value
        folder.mkdir()
        net, _ = build_network(_centerlines(folder, rows), "normal", fields={"class": "RCLASS", "oneway": "OW"})
        assert net.n_edges == 6
        first = net.edges[net.edges["source_id"] == 0]
        assert len(first) == 1
        np.testing.assert_allclose(net.xy[first["u"].iloc[0]], start, atol=1e-6)
    bad = _square_rows()
    bad[0]["OW"] = "sideways"
    path2 = _centerlines(tmp_path / "b", bad) if (tmp_path / "b").mkdir() is None else None
    with pytest.raises(FieldError, match="sideways"):
        build_network(path2, "normal", fields={"class": "RCLASS", "oneway": "OW"})


def test_centerline_missing_mapped_field(tmp_path, capsys):
    path = _centerlines(tmp_path, _square_rows())
    out = tmp_path / "net.gpkg"
    code = _run_cli(["network", str(path), "--fields", "class=ROADCLASS", "--out", str(out)])
    assert code == 2
    err = capsys.readouterr().err.strip()
    assert "ROADCLASS" in err and "RCLASS" in err and len(err.splitlines()) == 1
    assert not out.exists()


def test_centerline_needs_fields(tmp_path):
    path = _centerlines(tmp_path, _square_rows())
    # the library names its parameter, not a command-line flag (the CLI words it --fields)
    with pytest.raises(InputFileError, match="needs fields, its field mapping") as err:
        build_network(path, "normal")
    assert err.value.param == "fields" and "--" not in str(err.value)


def test_unknown_profile_key_via_cli(tmp_path, capsys):
    body = _nodes(6) + _way(1, [1, 2, 3, 6, 5, 4, 1], highway="residential")
    prof = tmp_path / "p.toml"
    prof.write_text('name = "p"\nsignal_dly = 3\n[speeds.residential]\ndefault_kph = 30\n')
    out = tmp_path / "net.gpkg"
    assert _run_cli(["network", str(_osm(tmp_path, body)), "--profile", str(prof), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "signal_dly" in err and not out.exists()


def test_every_error_is_one_line():
    assert "\n" not in str(CoverkitError("a\nb  c"))


def test_existing_output_survives_a_failed_run(tmp_path):
    out = tmp_path / "net.gpkg"
    out.write_bytes(b"previous result")
    path = tmp_path / "e.osm"
    path.write_text("")
    assert _run_cli(["network", str(path), "--out", str(out)]) == 2
    assert out.read_bytes() == b"previous result"


def test_network_cli_summary(tmp_path, capsys):
    body = _nodes(9) + _way(1, [1, 2, 3, 6, 9, 8, 7, 4, 1], highway="residential", maxspeed="30 mph")
    body += '<node id="99" version="1" lat="50.0" lon="10.0005"><tag k="highway" v="traffic_signals"/></node>\n'
    out = tmp_path / "net.gpkg"
    assert _run_cli(["network", str(_osm(tmp_path, body)), "--out", str(out)]) == 0
    text = capsys.readouterr().out
    for needle in (
        "nodes",
        "directed edges",
        "residential",
        "dropped",
        "UTM zone 32N",
        "profile  emergency",
        "Planning estimates",
    ):
        assert needle in text
    assert out.exists()
    assert shapely.is_valid(gpd.read_file(out, layer="edges").geometry).all()
