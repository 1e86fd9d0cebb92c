"""Speed profiles: maxspeed parsing, emergency factors, caps, signal delay and one-way policy."""

from __future__ import annotations

import math

import numpy as np
import pytest

from coverkit.errors import ProfileError
from coverkit.network import build_network, load_profile, parse_maxspeed_kph, shipped_profiles

# Real-world maxspeed tag values as they occur in OpenStreetMap (OSM wiki, key:maxspeed). Expected km/h: plain
# numbers are km/h; "mph" uses the exact mile (1609.344 m); lists take the lowest value (our conservative rule);
# implicit country codes, "none", "walk", "signals" fall back to the class default (NaN here).
MAXSPEED_TABLE = [
    ("50", 50.0),
    ("30 mph", 30 * 1.609344),
    ("30mph", 30 * 1.609344),
    ("60 km/h", 60.0),
    ("60 kmh", 60.0),
    ("5 knots", 5 * 1.852),
    ("50;70", 50.0),
    ("70;50", 50.0),
    ("50 | 30", 30.0),
    ("none", math.nan),
    ("signals", math.nan),
    ("walk", math.nan),
    ("variable", math.nan),
    ("DE:urban", math.nan),
    ("RU:rural", math.nan),
    ("FI:living_street", math.nan),
    ("", math.nan),
    (None, math.nan),
    ("0", math.nan),
    ("-10", math.nan),
    ("fast", math.nan),
    (80, 80.0),
    ("12,5", 12.5),
]


@pytest.mark.parametrize(("text", "expected"), MAXSPEED_TABLE)
def test_maxspeed_parsing(text, expected):
    got = parse_maxspeed_kph(text)
    if math.isnan(expected):
        assert math.isnan(got)
    else:
        assert got == pytest.approx(expected, rel=1e-12)


def test_shipped_profiles_load():
    assert {"normal", "emergency", "winter"} <= set(shipped_profiles())
    for name in shipped_profiles():
        prof = load_profile(name)
        assert prof.speeds, name
        for rule in prof.speeds.values():
            assert rule.default_kph > 0 and rule.factor > 0


def test_travel_time_is_length_over_speed_with_factor_and_cap(helsinki_pbf):
    """travel_s = length_m / (speed_kph / 3.6) + delay_s, speed = min(posted-or-default * factor, cap) as the
    profile file writes it."""
    net, _ = build_network(helsinki_pbf, "emergency")
    prof = net.profile
    e = net.edges
    np.testing.assert_allclose(e["travel_s"], e["length_m"] / (e["speed_kph"] / 3.6) + e["delay_s"], rtol=1e-12)
    for cls, rule in prof.speeds.items():
        sel = e["road_class"] == cls
        if not sel.any():
            continue
        posted = e.loc[sel, "posted_kph"].to_numpy()
        base = np.where(np.isfinite(posted), posted, rule.default_kph)
        np.testing.assert_allclose(e.loc[sel, "speed_kph"], np.minimum(base * rule.factor, rule.cap_kph))
    # signal delay applies exactly on edges ending at signal nodes
    signal_end = net.nodes["signal"].to_numpy()[net.v]
    assert signal_end.any()
    np.testing.assert_array_equal(e["delay_s"].to_numpy(), np.where(signal_end, prof.signal_delay_s, 0.0))


def test_emergency_is_not_slower_than_normal(helsinki_pbf):
    normal, _ = build_network(helsinki_pbf, "normal")
    emerg, _ = build_network(helsinki_pbf, "emergency")
    assert emerg.travel_s.sum() < normal.travel_s.sum()


def test_against_oneway_policy_adds_penalised_reverse_edges(helsinki_pbf, tmp_path):
    text = load_profile("emergency").to_toml().replace('oneway = "obey"', 'oneway = "against"')
    path = tmp_path / "against.toml"
    path.write_text(text)
    obey, _ = build_network(helsinki_pbf, "emergency")
    against, _ = build_network(helsinki_pbf, path)
    ag = against.edges[against.edges["against_oneway"]]
    assert len(ag) > 0
    assert set(ag["road_class"]) <= set(against.profile.against_oneway_classes)
    factor = against.profile.against_oneway_factor
    np.testing.assert_allclose(ag["travel_s"], ag["length_m"] / (ag["speed_kph"] / 3.6) * factor + ag["delay_s"])
    assert against.n_edges > obey.n_edges


@pytest.mark.parametrize(
    ("body", "needle"),
    [
        ('name = "x"\nspeedz = 1\n[speeds.residential]\ndefault_kph = 30\n', "speedz"),
        ('name = "x"\n[speeds.residential]\ndefault_kph = 30\nfactr = 1.1\n', "factr"),
        ('name = "x"\n[speeds.residential]\nfactor = 1.1\n', "default_kph"),
        ('name = "x"\n[speeds.residential]\ndefault_kph = -5\n', "default_kph"),
        ('name = "x"\noneway = "sometimes"\n[speeds.residential]\ndefault_kph = 30\n', "oneway"),
        ('name = "x"\n', "speeds"),
        ("name = \n", "TOML"),
    ],
)
def test_bad_profile_keys_are_named(tmp_path, body, needle):
    path = tmp_path / "p.toml"
    path.write_text(body)
    with pytest.raises(ProfileError) as info:
        load_profile(path)
    assert needle in str(info.value)
    assert "\n" not in str(info.value)


def test_unknown_profile_name():
    with pytest.raises(ProfileError, match="emergency"):
        load_profile("turbo")
