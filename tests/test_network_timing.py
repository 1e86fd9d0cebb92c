"""Edge timing has one home (coverkit.network.timing): the build and a retiming give the same times.

Outside check: the travel time of an edge is its length over its speed, ``t = d / v`` with ``v`` in m/s =
km/h / 3.6 (definition of speed), times the against-one-way factor, plus the signal delay; the speeds come
from the profile file read here with tomllib, not through coverkit.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

import numpy as np
import pytest

from coverkit.calibrate import retime_network
from coverkit.network import build_network, load_profile
from coverkit.network.model import RoadNetwork
from coverkit.network.timing import edge_times
from tests.conftest import DEMO

PROFILES = Path(__file__).resolve().parents[1] / "coverkit" / "network" / "profiles"


def test_worked_edge_times_from_the_winter_profile():
    """Worked arithmetic on winter.toml's own numbers: a 1,000 m primary edge with no posted speed, then with
    a posted 100 km/h (capped), then ending at a signal, then against a one-way street."""
    raw = tomllib.loads((PROFILES / "winter.toml").read_text())
    rule = raw["speeds"]["primary"]
    cap = rule.get("cap_kph", np.inf)
    v_default = min(rule["default_kph"] * rule["factor"], cap)
    v_posted = min(100.0 * rule["factor"], cap)
    delay, against = raw["signal_delay_s"], raw["against_oneway_factor"]
    got = edge_times(
        load_profile("winter"),
        road_class=np.array(["primary"] * 4, dtype=object),
        posted_kph=np.array([np.nan, 100.0, np.nan, np.nan]),
        length_m=np.full(4, 1000.0),
        against_oneway=np.array([False, False, False, True]),
        signal_at_end=np.array([False, False, True, False]),
    )
    expect = [
        1000.0 / (v_default / 3.6),
        1000.0 / (v_posted / 3.6),
        1000.0 / (v_default / 3.6) + delay,
        1000.0 / (v_default / 3.6) * against,
    ]
    np.testing.assert_allclose(got.travel_s, expect, rtol=1e-12)
    np.testing.assert_allclose(got.speed_kph, [v_default, v_posted, v_default, v_default], rtol=1e-12)
    np.testing.assert_array_equal(got.delay_s, [0.0, 0.0, delay, 0.0])
    # the same figure by hand for the shipped winter numbers: an edge at 1,000 m takes 1000 / (v / 3.6) s
    assert got.travel_s[0] == pytest.approx(3600.0 / v_default)


@pytest.fixture(scope="module")
def winter_build():
    net, _ = build_network(DEMO / "varrowby.osm.bz2", "winter", boundary=DEMO / "boundary.geojson")
    return net


def test_retime_to_winter_matches_a_winter_build(demo_net_path, winter_build):
    """The demo network built with the emergency profile and retimed to winter has the winter build's times,
    bit for bit (both profiles obey one-way streets and use private ways, so the edge sets agree)."""
    emergency = RoadNetwork.load(demo_net_path)
    retimed = retime_network(emergency, load_profile("winter"))
    assert len(retimed.edges) == len(winter_build.edges)
    np.testing.assert_array_equal(retimed.travel_s, winter_build.travel_s)
    np.testing.assert_array_equal(retimed.edges["speed_kph"], winter_build.edges["speed_kph"])
    # and the winter build agrees with a hand computation from the profile file over every edge
    raw = tomllib.loads((PROFILES / "winter.toml").read_text())
    e = winter_build.edges
    posted = e["posted_kph"].to_numpy(dtype=float)
    cls = e["road_class"].astype(str).to_numpy()
    default = np.array([raw["speeds"][c]["default_kph"] for c in cls])
    factor = np.array([raw["speeds"][c]["factor"] for c in cls])
    cap = np.array([raw["speeds"][c].get("cap_kph", np.inf) for c in cls])
    speed = np.minimum(np.where(np.isfinite(posted) & (posted > 0), posted, default) * factor, cap)
    signal = winter_build.nodes["signal"].to_numpy(dtype=bool)[winter_build.v]
    hand = e["length_m"].to_numpy() / (speed / 3.6) + np.where(signal, raw["signal_delay_s"], 0.0)
    assert signal.any()  # the demo has signals, so the delay term is exercised
    np.testing.assert_allclose(winter_build.travel_s, hand, rtol=1e-12)
