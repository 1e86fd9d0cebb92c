"""`coverkit compare` end to end on the demo county: outputs, the difference map, and one-line errors.

Correctness of the comparison itself (closure against an independent recomputation with the edges removed, the
incremental what-if against a full recompute) is checked in tests/test_scenario.py; here the command's contract:
lost minus gained demand equals the change in covered demand, files exist, the caution is printed.
"""

from __future__ import annotations

import pandas as pd
import pytest

from coverkit.cli import main

from .conftest import DEMO, REPO, demo_study_head

STUDY = (
    demo_study_head("compare test")
    + f"""
[[demand]]
name = "residents"
raster = "{DEMO / "population.tif"}"
[[demand]]
name = "calls"
points = "{DEMO / "incidents.csv"}"
[[standard]]
name = "ALS 8 min"
turnout_s = 60
travel_s = 480
"""
)


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    path = tmp_path_factory.mktemp("s") / "study.toml"
    path.write_text(STUDY)
    return path


def test_compare_station_change(study, tmp_path, capsys):
    scen = REPO / "examples" / "scenarios" / "station-s3-closed.toml"
    out = tmp_path / "cmp"
    assert main(["compare", str(study), str(scen), "--out", str(out), "--quiet"]) == 0
    text = capsys.readouterr().out
    assert "base S3: removed" in text and "Planning estimates only" in text
    for name in ("compare.gpkg", "comparison.csv", "compare_report.html"):
        assert (out / name).is_file(), name
    assert list((out / "maps").glob("difference_*.png"))
    table = pd.read_csv(out / "comparison.csv")
    row = table.iloc[0]
    change = row["covered_after"] - row["covered_before"]
    assert change == pytest.approx(row["gained_weight"] - row["lost_weight"], abs=1e-6)
    html = (out / "compare_report.html").read_text()
    assert "What changes" in html and "Planning estimates only" in html
    # issue 10 item 17: a per-base table for every demand layer, not only the first
    for layer in ("residents", "calls"):
        assert f"Per base - {layer}:" in html, layer


def test_compare_unknown_base_is_one_line(study, tmp_path, capsys):
    scen = tmp_path / "bad.toml"
    scen.write_text('[scenario]\nname = "x"\n[[base_change]]\nremove = "S42"\n')
    code = main(["compare", str(study), str(scen), "--out", str(tmp_path / "o"), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2 and "S42" in err and len(err.strip().splitlines()) == 1
