"""Inline polygons in scenarios (a GeoJSON geometry table in a request body or a scenario file).

Outside references: RFC 7946 (GeoJSON: a Polygon is a list of linear rings, the first the outer ring, each closed,
positions [lon, lat] in WGS 84 degrees); the demo county's flood zone file read by pyogrio, whose polygon an inline
copy must match edge for edge; TOML 1.0 (inline tables and nested arrays on one line) read back by the standard
library's tomllib; the shoelace formula for the area a repaired bow tie must keep.
"""

from __future__ import annotations

import json
import tomllib

import numpy as np
import pytest
import shapely

from coverkit.errors import StudyError
from coverkit.inline_polygon import inline_polygon
from coverkit.network.model import RoadNetwork
from coverkit.scenario import closure_cut, load_scenario, scenario_from_table, scenario_text, slowdown_share

from .conftest import DEMO, REPO

FLOOD = REPO / "examples" / "scenarios" / "flood-and-winter.toml"


def flood_geometry() -> dict:
    """The flood zone's geometry as the file holds it (RFC 7946 geometry object, degrees)."""
    data = json.loads((DEMO / "flood_zone.geojson").read_text())
    (feature,) = data["features"]
    return feature["geometry"]


def inline_flood_tables() -> dict:
    """The example flood-and-winter scenario with its polygon file written inline."""
    tables = tomllib.loads(FLOOD.read_text())
    tables["closure"][0]["polygon"] = flood_geometry()
    return tables


@pytest.fixture(scope="module")
def net(demo_net_path):
    return RoadNetwork.load(demo_net_path)


def test_inline_flood_zone_closes_the_file_polygons_edges(net):
    """An inline copy of the flood zone closes exactly the edges, and the stretches, the polygon file closes."""
    from_file = load_scenario(FLOOD)
    inline = scenario_from_table(inline_flood_tables(), where="request body")
    assert inline.closures[0].kind == "polygon" and inline.closures[0].polygon_crs == "EPSG:4326"
    ids_f, stretch_f, part_f = closure_cut(net, from_file.closures[0])
    ids_i, stretch_i, part_i = closure_cut(net, inline.closures[0])
    assert len(ids_f) > 0  # the flood zone covers the Ambrel Bridge (data/demo/README.md)
    np.testing.assert_array_equal(ids_i, ids_f)
    np.testing.assert_allclose(stretch_i, stretch_f, rtol=0, atol=1e-12)
    assert shapely.equals_exact(part_i, part_f, 1e-6).all()


def test_inline_slowdown_polygon_matches_file(net, tmp_path):
    """A slowdown's inline polygon slows the same edges by the same shares as the same polygon from a file."""
    geom = flood_geometry()
    inline = scenario_from_table(
        {"scenario": {"name": "s"}, "slowdown": [{"polygon": geom, "factor": 2.0}]}, where="request body"
    )
    path = tmp_path / "s.toml"
    path.write_text(f'[scenario]\nname = "s"\n[[slowdown]]\npolygon = "{DEMO / "flood_zone.geojson"}"\nfactor = 2.0\n')
    ids_i, share_i = slowdown_share(net, inline.slowdowns[0])
    ids_f, share_f = slowdown_share(net, load_scenario(path).slowdowns[0])
    np.testing.assert_array_equal(ids_i, ids_f)
    np.testing.assert_allclose(share_i, share_f, rtol=0, atol=1e-12)


def test_scenario_text_round_trips_inline_polygons(tmp_path):
    """scenario_text writes the inline table so tomllib reads back the same tables and load_scenario the same
    polygon (TOML 1.0 inline tables hold nested arrays)."""
    tables = inline_flood_tables()
    tables["slowdown"].append(
        {"polygon": {"type": "MultiPolygon", "coordinates": [[[[-35.03, 41.0], [-35.02, 41.0], [-35.02, 41.01]]]]},
         "factor": 1.25, "road_class": "residential"}
    )  # fmt: skip
    text = scenario_text(tables)
    assert tomllib.loads(text) == tables
    path = tmp_path / "inline.toml"
    path.write_text(text, encoding="utf-8")
    back = load_scenario(path)
    want = scenario_from_table(tables, where="body")
    assert back.closures[0].polygon.equals_exact(want.closures[0].polygon, 0.0)
    assert back.slowdowns[1].polygon.equals_exact(want.slowdowns[1].polygon, 0.0)
    assert back.slowdowns[1].road_classes == ("residential",)


def _square(*, close: bool = True) -> list:
    ring = [[-35.03, 41.0], [-35.02, 41.0], [-35.02, 41.01], [-35.03, 41.01]]
    return [*ring, ring[0]] if close else ring


def test_open_ring_is_closed_for_the_user():
    """RFC 7946 rings are closed (first position = last); an open one is closed rather than refused."""
    closed = inline_polygon({"type": "Polygon", "coordinates": [_square()]}, "closure[0].polygon", "body")
    opened = inline_polygon({"type": "Polygon", "coordinates": [_square(close=False)]}, "closure[0].polygon", "body")
    assert opened.equals_exact(closed, 0.0)
    # shoelace area of the 0.01 x 0.01 degree square
    assert opened.area == pytest.approx(1e-4, rel=1e-9)


def test_bow_tie_made_valid_keeps_both_triangles():
    """A self-crossing ring is repaired (shapely.make_valid) into its two triangles: shoelace area 2 x (0.5 x 0.01 x
    0.005) square degrees."""
    bow = [[-35.03, 41.0], [-35.02, 41.01], [-35.02, 41.0], [-35.03, 41.01]]
    geom = inline_polygon({"type": "Polygon", "coordinates": [bow]}, "closure[0].polygon", "body")
    assert geom.is_valid and geom.geom_type == "MultiPolygon" and len(geom.geoms) == 2
    assert geom.area == pytest.approx(2 * 0.5 * 0.01 * 0.005, rel=1e-9)


def test_hole_is_kept():
    hole = [[-35.027, 41.003], [-35.023, 41.003], [-35.023, 41.007], [-35.027, 41.007]]
    geom = inline_polygon({"type": "Polygon", "coordinates": [_square(), hole]}, "k", "body")
    assert geom.area == pytest.approx(1e-4 - 0.004 * 0.004, rel=1e-9)


@pytest.mark.parametrize(
    ("polygon", "words"),
    [
        ({"type": "Point", "coordinates": [0, 0]}, ["closure[0].polygon.type", "Polygon"]),
        ({"type": "Polygon"}, ["closure[0].polygon.coordinates", "rings"]),
        ({"type": "Polygon", "coordinates": [[[-35.0, 41.0], [-35.1, 41.0], [-35.0, 41.0]]]}, ["2 distinct", "3"]),
        ({"type": "Polygon", "coordinates": [[[500000.0, 4500000.0], [500100.0, 4500000.0], [500100, 4500100]]]},
         ["closure[0].polygon.coordinates[0][0]", "degrees"]),
        ({"type": "Polygon", "coordinates": [[[-35.0, 41.0], [-35.1, float("inf")], [-35.0, 41.1]]]}, ["finite"]),
        ({"type": "Polygon", "coordinates": [[[-35.0, 41.0], [-35.1, "x"], [-35.0, 41.1]]]}, ["[lon, lat]"]),
        ({"type": "Polygon", "coordinates": [[[-35.0, 41.0], [-35.1, 41.1], [-35.2, 41.2]]]}, ["no area"]),
        ({"type": "Polygon", "coordinates": [_square()], "crs": "EPSG:3857"}, ["closure[0].polygon.crs"]),
        ({"type": "MultiPolygon", "coordinates": []}, ["MultiPolygon"]),
        (["not", "a", "table"], ["a string or a table"]),
    ],
)  # fmt: skip
def test_bad_inline_polygon_is_one_line(polygon, words):
    body = {"scenario": {"name": "x"}, "closure": [{"polygon": polygon}]}
    with pytest.raises(StudyError) as info:
        scenario_from_table(body, where="request body")
    message = str(info.value)
    assert "\n" not in message and message.startswith("request body:"), message
    for word in words:
        assert word in message, message


def test_file_polygon_refused_in_a_body_with_the_fix():
    body = {"scenario": {"name": "x"}, "closure": [{"polygon": "/etc/passwd"}]}
    with pytest.raises(StudyError, match=r"closure\[0\]\.polygon.*refused.*inline"):
        scenario_from_table(body, where="request body")


def test_inline_polygon_in_a_scenario_file(tmp_path):
    """A hand-written TOML file may hold the polygon inline (a multi-line file: TOML 1.0 inline table on one line)."""
    path = tmp_path / "hand.toml"
    path.write_text(
        '[scenario]\nname = "hand"\n[[closure]]\n'
        'polygon = { type = "Polygon", coordinates = [[[-35.03, 41.0], [-35.02, 41.0], [-35.02, 41.01]]] }\n'
    )
    closure = load_scenario(path).closures[0]
    assert closure.polygon.area == pytest.approx(0.5 * 0.01 * 0.01, rel=1e-9)  # the right triangle's area
