"""NENA NG9-1-1 road centerlines: the ``ng911`` field preset builds the same network as a hand-written map.

Field names and values: NENA Standard for NG9-1-1 GIS Data Model (NENA-STA-006), Road Centerline layer —
``RoadClass``, ``SpeedLimit`` (mph), ``OneWay`` (``B``, ``FT``, ``TF``); written from memory of the standard, not
checked against its text. The explicit map below is written out by hand from those names, not from the preset.
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from shapely.geometry import LineString

from coverkit.cli import main
from coverkit.errors import FieldError
from coverkit.network import build_network
from coverkit.network.centerlines import parse_fields
from coverkit.network.profile import KPH_PER_MPH

X0, Y0 = 500000.0, 5500000.0

#: Hand-made roads: (RoadClass, SpeedLimit, OneWay, from, to) on a 400 m grid (UTM 33N metres).
ROADS = [
    ("Primary", 65, "FT", (0, 0), (1, 0)),
    ("Primary", 65, "TF", (0, 1), (1, 1)),
    ("Ramp", 35, "FT", (1, 0), (1, 1)),
    ("Secondary", 45, "B", (0, 0), (0, 1)),
    ("Local", 25, "B", (0, 1), (0, 2)),
    ("Local", 25, "B", (0, 2), (1, 2)),
    ("Alley", 10, "B", (1, 2), (1, 1)),
    ("Service Drive", 30, "B", (1, 1), (2, 1)),
    ("Walkway", 0, "B", (2, 1), (2, 2)),
]

#: The same meaning written as an explicit map (NENA names from memory; class choices ours, as in the README).
EXPLICIT = (
    "class=RCLASS,speed=SPD,speed_unit=mph,oneway=OW,oneway_forward=FT,oneway_backward=TF,"
    "class_map=Primary:motorway;Secondary:primary;Local:residential;Ramp:motorway_link;"
    "Service Drive:unclassified;Alley:service;Walkway:path"
)


def _xy(cell):
    return (X0 + 400 * cell[0], Y0 + 400 * cell[1])


def _layer(path, names):
    cls, spd, ow = names
    rows = [
        {
            cls: c,
            spd: s,
            ow: o,
            "geometry": LineString([(X0 + 400 * a[0], Y0 + 400 * a[1]), (X0 + 400 * b[0], Y0 + 400 * b[1])]),
        }
        for c, s, o, a, b in ROADS
    ]
    gpd.GeoDataFrame(rows, geometry="geometry", crs="EPSG:32633").to_file(path)
    return path


def _edge_table(net):
    cols = ["u", "v", "road_class", "length_m", "posted_kph", "speed_kph", "travel_s", "source_id"]
    return net.edges[cols].sort_values(["source_id", "u", "v"]).reset_index(drop=True)


def test_ng911_preset_equals_the_explicit_map(tmp_path):
    std = _layer(tmp_path / "ng911.gpkg", ("RoadClass", "SpeedLimit", "OneWay"))
    own = _layer(tmp_path / "own.gpkg", ("RCLASS", "SPD", "OW"))
    net_std, _ = build_network(std, "emergency", fields=parse_fields("ng911"))
    net_own, _ = build_network(own, "emergency", fields=parse_fields(EXPLICIT))
    a, b = _edge_table(net_std), _edge_table(net_own)
    pd.testing.assert_frame_equal(a, b)
    # and the meaning is the one the standard gives: FT along the digitised line, TF against it, B both ways
    assert set(a["road_class"]) == {"motorway", "motorway_link", "primary", "residential", "service", "unclassified"}
    first = a[a["source_id"] == 0]
    assert len(first) == 1 and np.allclose(net_std.xy[first["u"].iloc[0]], (X0, Y0))
    second = a[a["source_id"] == 1]
    assert len(second) == 1 and np.allclose(net_std.xy[second["u"].iloc[0]], (X0 + 400, Y0 + 400))
    assert (a["source_id"] == 3).sum() == 2 and 8 not in set(a["source_id"])  # walkway left out
    # SpeedLimit is mph (US posted speeds); the exact mile is 1.609344 km (NIST SP 811)
    np.testing.assert_allclose(a.loc[a["source_id"] == 3, "posted_kph"], 45 * KPH_PER_MPH)


def test_ng911_field_names_in_upper_case_shapefile_style(tmp_path):
    """A Shapefile export often upper-cases field names; the preset still finds them."""
    std = _layer(tmp_path / "ng911.gpkg", ("RoadClass", "SpeedLimit", "OneWay"))
    upper = _layer(tmp_path / "upper.gpkg", ("ROADCLASS", "SPEEDLIMIT", "ONEWAY"))
    a, _ = build_network(std, "emergency", fields=parse_fields("ng911"))
    b, _ = build_network(upper, "emergency", fields=parse_fields("ng911"))
    pd.testing.assert_frame_equal(_edge_table(a), _edge_table(b))


def test_ng911_cli_bad_oneway_value_one_line_exit_2(tmp_path, capsys):
    path = tmp_path / "bad.gpkg"
    _layer(path, ("RoadClass", "SpeedLimit", "OneWay"))
    gdf = gpd.read_file(path)
    gdf.loc[0, "OneWay"] = "XX"
    gdf.to_file(path)
    out = tmp_path / "net.gpkg"
    assert main(["network", str(path), "--fields", "ng911", "--out", str(out), "--quiet"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "'xx'" in err and "OneWay" in err
    assert not out.exists()
    with pytest.raises(FieldError, match="not key=FIELD"):
        parse_fields("ng911,RoadClass")


def test_readme_table_is_the_printed_one():
    """The README's NG9-1-1 table is the one the module prints (one home for the NENA names)."""
    from pathlib import Path

    from coverkit.network.ng911 import readme_table

    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    assert "\n".join("  " + line for line in readme_table().splitlines()) in readme


def test_a_study_may_name_the_preset(tmp_path):
    """`[roads] fields = "ng911"` is the same mapping as the CLI's --fields ng911; a bad text is one line."""
    from coverkit.errors import StudyError
    from coverkit.study import load_study
    from tests.conftest import DEMO

    roads = _layer(tmp_path / "ng911.gpkg", ("RoadClass", "SpeedLimit", "OneWay"))

    def study(fields: str):
        path = tmp_path / "study.toml"
        path.write_text(
            f'[study]\nname = "n"\n[roads]\nsource = "{roads}"\nfields = "{fields}"\n'
            f'[bases]\nfile = "{DEMO / "stations.csv"}"\n'
            f'[[demand]]\nname = "calls"\npoints = "{DEMO / "incidents.csv"}"\n'
            '[[standard]]\nname = "8 min"\ntravel_s = 480\n'
        )
        return path

    assert load_study(study("ng911")).roads.fields == parse_fields("ng911")
    with pytest.raises(StudyError, match=r"roads\.fields") as err:
        load_study(study("ng911,speed"))
    assert len(str(err.value).splitlines()) == 1
