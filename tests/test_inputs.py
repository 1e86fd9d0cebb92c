"""The inputs real users bring: attribute filters, CSV dialects and coordinate names, rows without a position.

Sources of the checks:

- Filters: SQLite (Python's standard-library ``sqlite3``, an independent SQL engine) runs the same WHERE clause on
  the same rows; the rows it keeps are the reference. NULL handling is SQL's three-valued logic (ISO/IEC 9075) as
  SQLite implements it; ``LIKE`` is case-insensitive for ASCII in SQLite and here.
- CSV dialects: pandas reading the same file with the delimiter named explicitly is the reference.
- Rejected rows: ground truth by construction (the test writes the bad rows and knows their lines); placing 0,0
  and blank positions among the rows a CAD export cannot geocode is common practice, no single source.
"""

from __future__ import annotations

import sqlite3
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from coverkit.cli import main
from coverkit.demand import demand_from_points
from coverkit.errors import FieldError
from coverkit.travel.points import read_points
from coverkit.where import filter_mask

from .conftest import DEMO, demo_study_head

CRS = "EPSG:32625"  # the demo county's UTM zone


def _one_line(exc) -> str:
    text = str(exc.value)
    assert "\n" not in text
    return text


# -- filters against SQLite ---------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def incident_rows():
    """Seeded rows with numbers, text, blanks (NULL) and quotes, as a DataFrame and as a SQLite table."""
    rng = np.random.default_rng(10_11)
    n = 400
    priority = rng.integers(1, 5, n).astype(float)
    priority[rng.random(n) < 0.1] = np.nan
    kinds = np.array(["Fire", "EMS", "ems", "rescue", "O'Brien call", "hazmat_2"], dtype=object)
    kind = kinds[rng.integers(0, len(kinds), n)]
    kind[rng.random(n) < 0.1] = None
    delay = np.round(rng.uniform(0, 300, n), 1)
    station = np.array([f"S{k}" for k in rng.integers(1, 12, n)], dtype=object)
    df = pd.DataFrame({"priority": priority, "kind": kind, "delay_s": delay, "station": station})
    db = sqlite3.connect(":memory:")
    db.execute("CREATE TABLE t (rid INTEGER, priority INTEGER, kind TEXT, delay_s REAL, station TEXT)")
    db.executemany(
        "INSERT INTO t VALUES (?, ?, ?, ?, ?)",
        [
            (i, None if np.isnan(p) else int(p), k, float(d), s)
            for i, (p, k, d, s) in enumerate(zip(priority, kind, delay, station, strict=True))
        ],
    )
    yield df, db
    db.close()


SQL_FILTERS = [
    "priority = 1",
    "priority <> 1",
    "priority != 2",
    "priority == 3",
    "priority < 3",
    "priority <= 2 AND delay_s > 120.5",
    "priority >= 3 OR kind = 'EMS'",
    "NOT priority = 1",
    "NOT (priority = 1 OR kind = 'Fire')",
    "priority IN (1, 2)",
    "priority NOT IN (1, 4)",
    "kind IN ('Fire', 'rescue')",
    "kind LIKE 'e%'",
    "kind LIKE '%call'",
    "kind NOT LIKE 'hazmat__'",
    "kind LIKE 'hazmat_2'",
    "kind = 'O''Brien call'",
    "kind IS NULL",
    "kind IS NOT NULL AND priority IS NULL",
    "priority BETWEEN 2 AND 3",
    "delay_s NOT BETWEEN 10 AND 250.5",
    "(priority = 1 OR priority = 2) AND (kind <> 'EMS' OR delay_s < 60)",
    "priority = 1 and kind = 'Fire' or not delay_s >= 200",
    "station > 'S5'",
    "delay_s < -1",
    "priority = '2'",
    "Priority = 1",
]


@pytest.mark.parametrize("where", SQL_FILTERS)
def test_filter_keeps_the_rows_sqlite_keeps(incident_rows, where):
    """SQLite (standard library) runs the same WHERE on the same rows; the kept rows must be the same."""
    df, db = incident_rows
    expected = sorted(r for (r,) in db.execute(f"SELECT rid FROM t WHERE {where}"))
    got = np.flatnonzero(filter_mask(df, where, source="incidents.csv")).tolist()
    assert got == expected


def test_filter_on_a_csv_reads_blanks_as_null(tmp_path, incident_rows):
    """Through the point reader: a CSV with blank cells; SQLite on the same rows (blanks as NULL) is the reference."""
    df, db = incident_rows
    lon = -35.0 + np.arange(len(df)) * 1e-4
    csv = pd.DataFrame({"id": np.arange(len(df)), "lon": lon, "lat": 41.0, **df})
    csv["priority"] = csv["priority"].map(lambda p: "" if np.isnan(p) else str(int(p)))
    path = tmp_path / "calls.csv"
    csv.to_csv(path, index=False)
    where = "priority IN (1, 3) AND kind IS NOT NULL"
    pts = demand_from_points(path, CRS, where=where)
    expected = sorted(r for (r,) in db.execute(f"SELECT rid FROM t WHERE {where}"))
    assert sorted(pts["id"].astype(int)) == expected


@pytest.mark.parametrize(
    ("where", "needle"),
    [
        ("priority = = 1", "character 12"),
        ("priority = 1 AND", "character 17"),
        ("kind = 'Fire", "character 8"),
        ("priority IN (1, 2", "character 18"),
        ("priority = NULL", "IS NULL"),
        ("priority; DROP TABLE t", "character 9"),
        ("__import__('os').system('true')", "character 17"),
        ("priority = 1 && kind = 'EMS'", "write AND"),
    ],
)
def test_filter_syntax_error_is_one_line_with_the_position(incident_rows, where, needle):
    df, _ = incident_rows
    with pytest.raises(FieldError) as exc:
        filter_mask(df, where)
    text = _one_line(exc)
    assert needle in text and "syntax error" in text and "e.g." in text
    assert text.startswith(f'filter "{where}": syntax error at character ')


def test_double_quoted_fields_and_a_hint_for_double_quoted_text(tmp_path):
    df = pd.DataFrame({"call type": ["EMS", "Fire", "EMS"], "kind": ["a", "b", "c"]})
    assert filter_mask(df, "\"call type\" = 'EMS'").tolist() == [True, False, True]
    with pytest.raises(FieldError) as exc:
        filter_mask(df, 'kind = "EMS"')
    assert "no field 'EMS'" in _one_line(exc) and "single quotes" in _one_line(exc)


def test_filter_unknown_field_names_it_and_the_fields_there_are(incident_rows):
    df, _ = incident_rows
    with pytest.raises(FieldError) as exc:
        filter_mask(df, "prio = 1", source="calls.csv")
    text = _one_line(exc)
    assert "'prio'" in text and "calls.csv" in text
    for field in df.columns:
        assert field in text


def test_a_filter_on_raster_demand_is_refused(demo_net_path):
    from coverkit.demand import load_demand
    from coverkit.network import RoadNetwork

    with pytest.raises(FieldError) as exc:
        load_demand(DEMO / "population.tif", RoadNetwork.load(demo_net_path), where="priority = 1")
    assert "point demand only" in _one_line(exc)


# -- CSV dialects and coordinate names ----------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("sep", "lon", "lat"),
    [(";", "Longitude", "LATITUDE"), ("\t", "x", "y"), (",", "LONG", "Lat"), (";", "lng", "latitude")],
)
def test_delimiter_and_coordinate_names_are_found(tmp_path, sep, lon, lat):
    """pandas reading the file with the delimiter named explicitly is the reference."""
    src = pd.read_csv(DEMO / "incidents.csv", dtype=str).head(300).rename(columns={"lon": lon, "lat": lat})
    path = tmp_path / "calls.csv"
    src.to_csv(path, sep=sep, index=False)
    ref = pd.read_csv(path, sep=sep, dtype=str)
    pts = read_points(path, "EPSG:4326", what="demand points")
    assert pts["id"].tolist() == ref["id"].tolist()
    np.testing.assert_allclose(pts.geometry.x, ref[lon].astype(float))
    np.testing.assert_allclose(pts.geometry.y, ref[lat].astype(float))
    assert pts["priority"].tolist() == ref["priority"].tolist()
    sep_name = {";": "semicolon", "\t": "tab", ",": "comma"}[sep]
    assert pts.attrs["read"] == f"calls.csv: 300 rows, {sep_name}-separated, lon from '{lon}', lat from '{lat}'"


def test_decimal_commas_and_windows_1252_text(tmp_path):
    """A semicolon export with decimal commas and a Windows-1252 name; pandas with ``decimal=","`` and
    ``encoding="cp1252"`` is the reference."""
    path = tmp_path / "cad.csv"
    path.write_bytes("id;lon;lat;name\n1;-35,0512;41,0023;Caf\xe9 Rue\n2;-34,98;40,9;Quai\n".encode("cp1252"))
    ref = pd.read_csv(path, sep=";", decimal=",", encoding="cp1252")
    pts = read_points(path, "EPSG:4326", what="demand points", max_rejected_share=0.0)
    np.testing.assert_allclose(pts.geometry.x, ref["lon"])
    np.testing.assert_allclose(pts.geometry.y, ref["lat"])
    assert pts["name"].tolist() == ref["name"].tolist()


def test_missing_coordinates_name_the_accepted_names(tmp_path):
    path = tmp_path / "calls.csv"
    pd.DataFrame({"id": [1], "east": [1.0], "north": [2.0]}).to_csv(path, sep=";", index=False)
    with pytest.raises(FieldError) as exc:
        read_points(path, "EPSG:4326", what="demand points")
    text = _one_line(exc)
    assert "east, north" in text and "semicolon" in text and "longitude" in text and "latitude" in text


# -- rows without a usable position -------------------------------------------------------------------------------


def _calls_with_bad_rows(tmp_path: Path, n: int, bad: dict[int, tuple[str, str]], name: str = "calls.csv") -> Path:
    """``n`` good rows near the demo county; ``bad`` maps a row number (0-based) to its (lon, lat) text."""
    rng = np.random.default_rng(n)
    df = pd.DataFrame(
        {
            "id": np.arange(1, n + 1),
            "lon": np.round(rng.uniform(-35.1, -34.9, n), 6).astype(str),
            "lat": np.round(rng.uniform(40.9, 41.05, n), 6).astype(str),
            "priority": rng.integers(1, 4, n),
        }
    )
    for row, (lon, lat) in bad.items():
        df.loc[row, ["lon", "lat"]] = [lon, lat]
    path = tmp_path / name
    df.to_csv(path, index=False)
    return path


BAD_ROWS = {
    3: ("", ""),
    10: ("0", "0"),
    11: ("-35.0", ""),
    400: ("abc", "41.0"),
    20_000: ("-35.0", "95.0"),
    49_000: ("-36.5", "41.0"),  # about 100 km west of the county
}
BAD_REASONS = {
    3: "blank position",
    10: "at 0,0",
    11: "blank position",
    400: "lon not a number",
    20_000: "lat outside -90..90",
    49_000: "outside the study area",
}


def test_a_few_bad_rows_are_set_aside_and_listed(tmp_path):
    """Ground truth by construction: 6 bad rows in 50,000; the rest is read, the 6 are listed with line and why."""
    path = _calls_with_bad_rows(tmp_path, 50_000, BAD_ROWS)
    area = (300_000.0, 4_500_000.0, 350_000.0, 4_560_000.0)  # UTM 25N box around the demo county
    pts = demand_from_points(path, CRS, area_bounds=area)
    assert len(pts) == 50_000 - len(BAD_ROWS)
    rejected = pts.attrs["rejected"].table
    assert rejected["line"].tolist() == [r + 2 for r in sorted(BAD_ROWS)]  # header is line 1
    assert rejected["id"].astype(int).tolist() == [r + 1 for r in sorted(BAD_ROWS)]
    assert rejected["reason"].tolist() == [BAD_REASONS[r] for r in sorted(BAD_ROWS)]
    assert not set(pts["id"].astype(int)) & {r + 1 for r in BAD_ROWS}
    assert pts.attrs["rejected"].rows_read == 50_000


def test_too_many_bad_rows_stop_with_counts_lines_and_the_fix(tmp_path):
    bad = {r: ("", "") for r in range(5, 60)}  # 55 of 2,000 = 2.75 % > 1 %
    path = _calls_with_bad_rows(tmp_path, 2_000, bad)
    with pytest.raises(FieldError) as exc:
        demand_from_points(path, CRS)
    text = _one_line(exc)
    assert "55 of 2,000 rows rejected" in text and "55 blank position" in text
    assert "at lines 7, 8, 9, 10, 11 ..." in text and "1 % allowed" in text and "max_rejected_share" in text
    pts = demand_from_points(path, CRS, max_rejected_share=0.03)
    assert len(pts) == 2_000 - 55


def test_bases_stay_strict(tmp_path):
    path = tmp_path / "stations.csv"
    pd.DataFrame({"id": ["A", "B"], "lon": ["-35.0", ""], "lat": ["41.0", "41.0"]}).to_csv(path, index=False)
    with pytest.raises(FieldError) as exc:
        read_points(path, CRS, what="bases")
    assert "line 3" in _one_line(exc)
    pd.DataFrame({"id": ["A", "B"], "lon": ["-35.0", "0"], "lat": ["41.0", "0"]}).to_csv(path, index=False)
    with pytest.raises(FieldError) as exc:
        read_points(path, CRS, what="bases")
    assert "line 3 is at 0,0" in _one_line(exc)


def test_cli_cover_reports_and_writes_the_rejected_rows(demo_net_path, tmp_path, capsys):
    """Through the command a new user runs: the rejected rows in the summary and in the ``rejected_<demand>`` layer."""
    import pyogrio

    net_path = demo_net_path
    src = pd.read_csv(DEMO / "incidents.csv", dtype=str)
    src.loc[[4, 9], "lon"] = ["", "0"]
    src.loc[9, "lat"] = "0"
    src = src.rename(columns={"lon": "Longitude", "lat": "Latitude"})
    path = tmp_path / "cad.csv"
    src.to_csv(path, sep=";", index=False)
    out = tmp_path / "c.gpkg"
    args = ["cover", str(net_path), "--bases", str(DEMO / "stations.csv"), "--demand", str(path), "--minutes", "8"]
    code = main([*args, "--where", "priority = 1", "--out", str(out), "--quiet"])
    text = capsys.readouterr().out
    assert code == 0
    assert f"2 of {len(src):,} rows" in text and "1 at 0,0, 1 blank position" in text and "at lines 6, 11" in text
    rejected = pyogrio.read_dataframe(out, layer="rejected_cad")
    assert rejected["line"].tolist() == [6, 11]
    demand = pyogrio.read_dataframe(out, layer="demand_cad_8_min")
    keep = src.drop(index=[4, 9])
    assert sorted(demand["id"].astype(int)) == sorted(keep.loc[keep["priority"] == "1", "id"].astype(int))
    code = main([*args, "--out", str(tmp_path / "d.gpkg"), "--max-rejected", "0.0001", "--quiet"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and "rows rejected" in err[0]
    assert not (tmp_path / "d.gpkg").exists()


# -- centerline class codes ---------------------------------------------------------------------------------------


def _coded_centerlines(tmp_path: Path, codes: list[str]) -> Path:
    """A ladder of 200 m centerline pieces in UTM 33N, piece ``i`` coded ``codes[i]``; counts known by construction."""
    import geopandas as gpd
    from shapely.geometry import LineString

    x0, y0 = 500_000.0, 5_500_000.0
    geoms = [LineString([(x0 + 200 * i, y0), (x0 + 200 * (i + 1), y0)]) for i in range(len(codes))]
    path = tmp_path / "county_roads.gpkg"
    gpd.GeoDataFrame({"RDCLASS": codes}, geometry=geoms, crs="EPSG:32633").to_file(path)
    return path


def test_centerlines_mostly_of_unknown_codes_stop_with_the_values_and_the_fix(tmp_path, capsys):
    """A county layer coded LOC/COL/ART: 30 LOC, 12 COL, 5 ART, 1 residential (known) -> stop, exit 2."""
    codes = ["LOC"] * 30 + ["COL"] * 12 + ["ART"] * 5 + ["residential"]
    path = _coded_centerlines(tmp_path, codes)
    out = tmp_path / "net.gpkg"
    code = main(["network", str(path), "--fields", "class=RDCLASS", "--out", str(out), "--quiet"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1, err
    assert "47 of 48 features" in err[0] and "'LOC' (30), 'COL' (12), 'ART' (5)" in err[0]
    assert "class_map=LOC:<class>;COL:<class>;ART:<class>" in err[0] and "residential" in err[0]
    assert not out.exists()


def test_a_partial_class_map_still_stops_when_most_values_are_unknown(tmp_path):
    codes = ["LOC"] * 10 + ["COL"] * 20 + ["Local"]
    path = _coded_centerlines(tmp_path, codes)
    from coverkit.network import build_network

    with pytest.raises(FieldError) as exc:
        build_network(path, "emergency", fields={"class": "RDCLASS", "class_map": "LOC:residential"})
    assert "'COL' (20)" in _one_line(exc)


def test_a_few_unknown_codes_build_and_are_listed_in_the_summary(tmp_path):
    from coverkit.network import build_network

    codes = ["LOC"] * 40 + ["XX"] * 3 + ["YY"]
    path = _coded_centerlines(tmp_path, codes)
    net, rep = build_network(path, "emergency", fields={"class": "RDCLASS", "class_map": "LOC:residential"})
    assert rep.read["features_unknown_class"] == 4
    assert rep.read["class_values_unmapped"] == ["XX (3)", "YY (1)"]
    assert "XX (3), YY (1)" in rep.summary_text()
    assert net.length_m.sum() == pytest.approx(2 * 40 * 200, rel=1e-3)  # both directions; UTM scale ~0.9996


# -- calibration log and summary ----------------------------------------------------------------------------------


def test_calibration_log_names_the_round_kept_and_agrees_with_the_summary(demo_net_path, tmp_path, capsys):
    """The demo's observed times do not settle (routes change every round): the round kept must be the one with the
    lowest logged fit cost, and the error after (recomputed here from the observation table) must be the error
    logged for that round and printed in the summary."""
    import re

    from coverkit.progress import set_quiet

    set_quiet(False)
    out = tmp_path / "cal.toml"
    code = main(
        ["calibrate", str(demo_net_path), "--observed", str(DEMO / "observed_times.csv"), "--bases",
         str(DEMO / "stations.csv"), "--out", str(out)]
    )  # fmt: skip
    captured = capsys.readouterr()
    assert code == 0
    logged = [
        (int(m[1]), float(m[2]), float(m[3]))
        for m in re.finditer(r"round (\d+): fit cost ([\d.]+), mean absolute error ([\d.]+) s", captured.err)
    ]
    assert len(logged) >= 2
    stable = "(routes unchanged)" in captured.err
    kept = logged[-1] if stable else min(logged, key=lambda r: (r[1], r[0]))
    assert f"kept round {kept[0]}," in captured.err
    assert f"round {kept[0]} kept" in captured.out and f"mean absolute error {kept[2]:.1f} s" in captured.out

    from coverkit.calibrate import calibrate_files

    result = calibrate_files(demo_net_path, DEMO / "observed_times.csv", DEMO / "stations.csv")
    obs = result.observations
    mae_after = float(np.mean(np.abs(obs["after_s"] - obs["observed_s"])))
    assert mae_after == pytest.approx(kept[2], abs=0.05)
    assert result.error("after") == pytest.approx(mae_after)
    after_line = next(line for line in captured.out.splitlines() if line.startswith("all "))
    assert float(after_line.split()[3]) == pytest.approx(kept[2], abs=0.05)


# -- progress in a log file ---------------------------------------------------------------------------------------


def test_progress_counts_are_whole_lines_when_stderr_is_not_a_terminal(capsys):
    """Common practice for log files: no carriage returns, one complete line per count."""
    from coverkit.progress import counted, set_quiet

    set_quiet(False)
    assert list(counted(range(10), 10, "drive-time polygons", every=3)) == list(range(10))
    err = capsys.readouterr().err
    assert "\r" not in err
    assert err.splitlines() == [f"drive-time polygons {i}/10" for i in (3, 6, 9, 10)]
    assert err.endswith("\n")


def test_progress_rewrites_one_line_on_a_terminal(monkeypatch, capsys):
    import sys

    from coverkit.progress import counted, set_quiet

    set_quiet(False)
    monkeypatch.setattr(sys.stderr, "isatty", lambda: True, raising=False)
    list(counted(range(4), 4, "curve", every=2))
    assert capsys.readouterr().err == "\rcurve 2/4\rcurve 4/4\n"


# -- availability time window, option errors ----------------------------------------------------------------------


def test_availability_time_window_keeps_the_calls_pandas_keeps(demo_net_path, tmp_path):
    """Reference: pandas selecting the incidents with start <= received_at < end, run through the same command;
    the call rate is counted over the window (calls / window hours), not over the kept calls' own span."""
    import pyogrio

    src = pd.read_csv(DEMO / "incidents.csv")
    stamps = pd.to_datetime(src["received_at"])
    keep = src[(stamps >= "2026-03-01") & (stamps < "2026-06-01")]
    assert 0 < len(keep) < len(src)
    pre = tmp_path / "spring.csv"
    keep.to_csv(pre, index=False)
    common = ["availability", str(demo_net_path), "--bases", str(DEMO / "stations.csv"), "--minutes", "8",
              "--service-min", "45", "--quiet"]  # fmt: skip
    win, ref = tmp_path / "win.gpkg", tmp_path / "ref.gpkg"
    assert main([*common, "--demand", str(DEMO / "incidents.csv"), "--start", "2026-03-01", "--end", "2026-06-01",
                 "--out", str(win)]) == 0  # fmt: skip
    assert main([*common, "--demand", str(pre), "--out", str(ref)]) == 0
    a = pyogrio.read_dataframe(win, layer="availability_summary")
    b = pyogrio.read_dataframe(ref, layer="availability_summary")
    # the same calls are kept ...
    ids = [set(pyogrio.read_dataframe(f, layer="availability_demand")["id"].astype(str)) for f in (win, ref)]
    assert ids[0] == ids[1] == set(keep["id"].astype(str))
    # ... and the rate counts them over the window asked for (1 March to 1 June: 92 days, calendar arithmetic),
    # while a file already cut to the window can only be counted from its first to its last call
    assert a["calls_per_h"].iloc[0] == pytest.approx(len(keep) / (92 * 24))
    span_h = (stamps[keep.index].max() - stamps[keep.index].min()).total_seconds() / 3600
    assert b["calls_per_h"].iloc[0] == pytest.approx(len(keep) / span_h)


COVER_ARGS = ["n.gpkg", "--bases", "b.csv", "--demand", "d.csv", "--minutes", "8", "--out", "o.gpkg"]


@pytest.mark.parametrize(
    "args",
    [
        ["availability", *COVER_ARGS, "--service-min", "45"],
        ["cover", *COVER_ARGS],
        ["network", "roads.osm", "--out", "n.gpkg"],
        ["calibrate", "n.gpkg", "--observed", "o.csv", "--bases", "b.csv", "--out", "p.toml"],
    ],
)
def test_an_unknown_option_names_its_subcommand(args, capsys):
    with pytest.raises(SystemExit) as exc:
        main([*args, "--bogus-option", "3"])
    err = capsys.readouterr().err.strip().splitlines()
    assert exc.value.code == 2 and len(err) == 1
    assert err[0].startswith(f"coverkit {args[0]}: error: unrecognized arguments: --bogus-option 3")
    assert f"coverkit {args[0]} --help" in err[0]


# -- compare: rejected inputs leave nothing behind ----------------------------------------------------------------

COMPARE_STUDY = (
    demo_study_head("compare inputs test")
    + f"""
[[demand]]
name = "calls"
points = "{DEMO / "incidents.csv"}"
kind = "incidents"
WHERE_LINE
[[standard]]
name = "ALS 8 min"
turnout_s = 60
travel_s = 480
"""
)


@pytest.mark.parametrize(
    ("where", "scenario", "needle"),
    [
        ("", '[scenario]\nname = "x"\n', "changes nothing"),
        ("", '[scenario]\nname = "x"\n[[base_change]]\nremove = "S99"\n', "S99"),
        ('where = "priorty = 1"', '[scenario]\nname = "x"\n[[base_change]]\nremove = "S3"\n', "'priorty'"),
        ('where = "priority = = 1"', '[scenario]\nname = "x"\n[[base_change]]\nremove = "S3"\n', "character 12"),
    ],
)
def test_compare_rejected_input_exits_2_and_leaves_no_folder(tmp_path, capsys, where, scenario, needle):
    study = tmp_path / "study.toml"
    study.write_text(COMPARE_STUDY.replace("WHERE_LINE", where))
    scen = tmp_path / "scenario.toml"
    scen.write_text(scenario)
    out = tmp_path / "results" / "cmp"
    code = main(["compare", str(study), str(scen), "--out", str(out), "--quiet"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and needle in err[0], err
    assert not out.exists()


def test_compare_keeps_a_folder_that_was_there(tmp_path, capsys):
    study = tmp_path / "study.toml"
    study.write_text(COMPARE_STUDY.replace("WHERE_LINE", ""))
    scen = tmp_path / "scenario.toml"
    scen.write_text('[scenario]\nname = "x"\n[[base_change]]\nremove = "S99"\n')
    out = tmp_path / "mine"
    out.mkdir()
    (out / "notes.txt").write_text("keep me")
    assert main(["compare", str(study), str(scen), "--out", str(out), "--quiet"]) == 2
    assert (out / "notes.txt").read_text() == "keep me"


def test_observed_times_with_tabs_xy_and_a_blank_position(tmp_path):
    """Observed-times files are read like demand: tab-separated, X/Y columns, one row without a position left out
    (ground truth by construction: the other rows equal the demo file's)."""
    from coverkit.calibrate import read_observed

    src = pd.read_csv(DEMO / "observed_times.csv", dtype=str)
    src.loc[3, "lon"] = ""
    path = tmp_path / "obs.txt"
    src.rename(columns={"lon": "X", "lat": "Y"}).to_csv(path, sep="\t", index=False)
    obs = read_observed(path)
    assert len(obs) == len(src) - 1 and 5 not in set(obs["line"])
    ref = src.drop(index=3)
    np.testing.assert_allclose(obs["lon"], ref["lon"].astype(float))
    np.testing.assert_allclose(obs["observed_s"], ref["observed_s"].astype(float))
    assert obs.attrs["rejected"].rows_read == len(src)
    assert obs.attrs["rejected"].table.to_dict("records") == [
        {"line": 5, "id": src.loc[3, "base_id"], "reason": "blank position"}
    ]


def test_a_class_map_to_a_misspelt_class_is_refused(tmp_path):
    from coverkit.network import build_network

    path = _coded_centerlines(tmp_path, ["LOC"] * 5)
    with pytest.raises(FieldError) as exc:
        build_network(path, "emergency", fields={"class": "RDCLASS", "class_map": "LOC:residentail"})
    text = _one_line(exc)
    assert "'residentail' is not a class of profile 'emergency'" in text and "residential" in text


def test_study_demand_takes_its_own_rejected_share(demo_net_path, tmp_path):
    from coverkit.network import RoadNetwork
    from coverkit.study import load_inputs, load_study

    src = pd.read_csv(DEMO / "incidents.csv", dtype=str)
    src.loc[[4, 9], "lon"] = ""
    calls = tmp_path / "calls.csv"
    src.to_csv(calls, index=False)
    text = COMPARE_STUDY.replace(str(DEMO / "incidents.csv"), str(calls))
    study = tmp_path / "study.toml"
    study.write_text(text.replace("WHERE_LINE", "max_rejected_share = 0.0001"))
    net = RoadNetwork.load(demo_net_path)
    with pytest.raises(FieldError) as exc:
        load_inputs(load_study(study), net)
    assert "2 of 6,042 rows rejected" in _one_line(exc) and "0.01 % allowed" in _one_line(exc)
    study.write_text(text.replace("WHERE_LINE", ""))
    _, demand, _, _ = load_inputs(load_study(study), net)
    assert len(demand["calls"]) == len(src) - 2
    assert demand["calls"].attrs["rejected"].table["line"].tolist() == [6, 11]
