"""The compiled OPL and way-splitting kernels against their references: the numpy reader they replace, pandas'
factorize, numpy's unique, Python's ``decimal`` for the coordinates, and a plain-Python way splitter.

The OPL lines follow osmium's OPL format (docs.osmcode.org/opl-file-format: ``n<ref>x<lon>y<lat>`` node lists,
``%<hex>%`` escapes, an empty ``x``/``y`` for a node without a location).
"""

from __future__ import annotations

import sys
from decimal import Decimal
from itertools import pairwise
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from coverkit.network import opl_kernels
from coverkit.network.osm_opl import parse_highway_opl, way_nodes, way_nodes_numpy
from coverkit.network.osm_ways import OsmWays, drivable_mask, ways_to_roads
from coverkit.network.profile import load_profile

BENCH = Path(__file__).resolve().parents[1] / "benchmarks"

#: Hand-made OPL: escapes, nodes without locations (empty x and y), negative and whole-degree coordinates, a
#: seven-decimal coordinate, a one-node way, ways out of id order, a non-road way, a lone loop, a gate and a signal.
HAND_OPL = (
    "n5 Thighway=traffic_signals x-0.000001 y-33.5\n"
    "n7 Tbarrier=gate,access=no x-1.25 y2\n"
    "w30 Thighway=residential,name=A%20%b%2c%c%3d%d%25%e%e4%%1f600% "
    "Nn1x-0.0000001y-0.1234567,n2xy,n3x179.9999999y-89.9999999,n1x-0.0000001y-0.1234567\n"
    "w10 Thighway=primary,oneway=yes,maxspeed=50%20%mph Nn3x179.9999999y-89.9999999,n5x-0.000001y-33.5,"
    "n5x-0.000001y-33.5,n7x-1.25y2,n9x0y0\n"
    "w20 Tbarrier=fence Nn8x1y1,n9x0y0\n"
    "w25 Thighway=service,access=private Nn9x0y0,n11xy,n12x-0.5y0.5,n13x-12y-7\n"
    "w27 Thighway=track Nn13x-12y-7\n"
    "w28 Thighway=unclassified,junction=roundabout Nn13x-12y-7,n16x-12.0000001y-7.0000001,n12x-0.5y0.5,n13x-12y-7\n"
    "w29 Thighway=residential Nn20x1y1,n21x1.1y1,n22x1.1y1.1,n20x1y1\n"
    "\n"
    "r40 Ttype=restriction,restriction=no_left_turn Mw10@from,n5@via,w25@to\n"
)


def _node_fields(text: bytes) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    buf = np.frombuffer(text, dtype=np.uint8)
    start, end, _sp1, sp2, n_refs = opl_kernels.line_fields_kernel(buf)
    ways = buf[start] == ord("w")
    return buf, sp2[ways] + 2, end[ways], n_refs[ways]


def test_compiled_way_nodes_equal_the_numpy_reference_and_decimal():
    text = HAND_OPL.encode()
    buf, lo, hi, n_refs = _node_fields(text)
    got = way_nodes(buf, lo, hi, n_refs)
    ref = way_nodes_numpy(buf, lo, hi)
    for a, b in zip(got, ref, strict=True):
        np.testing.assert_array_equal(a.astype(np.int64), b)
    # the located references, counted by hand (n2 and n11 have no location)
    assert got[3].tolist() == [3, 5, 2, 3, 1, 4, 4]
    # each coordinate is its decimal text times 1e7, exactly (Python's decimal module as the reference)
    pairs = [p for line in HAND_OPL.splitlines() if line.startswith("w") for p in line.split(" N")[1].split(",")]
    located = [p for p in pairs if not p.endswith("xy")]
    lon = [int(Decimal(p.split("x")[1].split("y")[0]) * 10**7) for p in located]
    lat = [int(Decimal(p.split("y")[1]) * 10**7) for p in located]
    assert got[1].tolist() == lon and got[2].tolist() == lat
    assert got[0].tolist() == [int(p[1:].split("x")[0]) for p in located]


def test_way_nodes_without_locations_fail_in_both():
    text = b"w1 Thighway=residential Nn1,n2\n"
    buf, lo, hi, n_refs = _node_fields(text)
    for parse in (lambda: way_nodes(buf, lo, hi, n_refs), lambda: way_nodes_numpy(buf, lo, hi)):
        with pytest.raises(ValueError, match="locations_on_ways"):
            parse()


def test_line_fields_equal_a_split_of_the_text():
    text = HAND_OPL.encode() + b"n99 T x1 y2"  # the last line without a newline
    start, end, sp1, sp2, n_refs = opl_kernels.line_fields_kernel(np.frombuffer(text, dtype=np.uint8))
    lines = [line for line in text.split(b"\n") if line]
    assert [text[a:b] for a, b in zip(start, end, strict=True)] == lines
    assert [text[a:b] for a, b in zip(start, sp1, strict=True)] == [line.split(b" ")[0] for line in lines]
    assert [text[a + 1 : b] for a, b in zip(sp1, sp2, strict=True)] == [line.split(b" ")[1] for line in lines]
    assert n_refs.tolist() == [line.split(b" ")[2].count(b"n") for line in lines]


def test_field_codes_equal_pandas_factorize():
    rng = np.random.default_rng(3)
    words = [b"", b"highway=residential", b"highway=primary,name=A%20%b", b"highway=residentia", b"x"]
    fields = [words[i] for i in rng.integers(0, len(words), 500)]
    text = b" ".join(fields)
    lo = np.cumsum([0] + [len(f) + 1 for f in fields[:-1]])
    hi = lo + np.array([len(f) for f in fields])
    codes, first = opl_kernels.factorize_fields_kernel(np.frombuffer(text, dtype=np.uint8), lo, hi)
    expect_codes, uniques = pd.factorize(pd.Series(fields, dtype=object), sort=False)
    np.testing.assert_array_equal(codes, expect_codes)
    assert [fields[i] for i in first] == list(uniques)


def test_distinct_sorted_equals_numpy_unique():
    refs = np.random.default_rng(5).integers(-50, 10**12, 3000)
    refs = np.concatenate([refs, refs[::7], refs[:40]])
    order = np.argsort(refs, kind="stable")
    place = np.empty(len(refs), dtype=np.int32)
    distinct, first = opl_kernels.distinct_sorted_kernel(refs, order, place)
    expect, expect_first, expect_place = np.unique(refs, return_index=True, return_inverse=True)
    np.testing.assert_array_equal(distinct, expect)
    np.testing.assert_array_equal(first, expect_first)
    np.testing.assert_array_equal(place, expect_place)


def test_hand_opl_tags_signals_gates_and_restrictions():
    """Escapes decoded by hand from the OPL rules: %20% space, %2c% comma, %3d% equals, %25% percent, %e4% ä and
    %1f600% the grinning-face emoji (U+1F600)."""
    ways = parse_highway_opl(HAND_OPL.encode())
    assert ways.way_id.tolist() == [10, 25, 27, 28, 29, 30]  # sorted; the fence (no highway) left out
    assert ways.tags.loc[5, "name"] == "A b,c=d%e\u00e4\U0001f600"
    assert ways.tags.loc[0, "maxspeed"] == "50 mph"
    assert ways.signal_ids.tolist() == [5]
    assert ways.gates["node_id"].tolist() == [7] and ways.gates.loc[0, "access"] == "no"
    assert ways.restrictions["relation_id"].tolist() == [40]
    np.testing.assert_array_equal(ways.node_id[ways.ref_node], ways.refs)


def _split_reference(ways: OsmWays, keep: np.ndarray) -> list[tuple[int, int, int, int]]:
    """Segments (way id, first node, last node, vertices) by the splitting rules, one way at a time in Python."""
    known = set(ways.node_id.tolist())
    lists = {}
    for w in np.flatnonzero(keep):
        nodes = []
        for ref in ways.refs[ways.offsets[w] : ways.offsets[w + 1]].tolist():
            if ref in known and (not nodes or nodes[-1] != ref):
                nodes.append(ref)
        if len(nodes) >= 2:
            lists[w] = nodes
    uses: dict[int, int] = {}
    for nodes in lists.values():
        for ref in nodes:
            uses[ref] = uses.get(ref, 0) + 1
    signals = set(ways.signal_ids.tolist())
    out = []
    for w, nodes in lists.items():
        cut = [i for i, r in enumerate(nodes) if i in (0, len(nodes) - 1) or uses[r] > 1 or r in signals]
        for a, b in pairwise(cut):
            parts = [(a, (a + b) // 2), ((a + b) // 2, b)] if nodes[a] == nodes[b] and b - a >= 2 else [(a, b)]
            out += [(int(ways.way_id[w]), nodes[s], nodes[e], e - s + 1) for s, e in parts if nodes[s] != nodes[e]]
    return out


def test_way_splitting_equals_a_plain_python_splitter_on_a_generated_county(tmp_path):
    """On a generated county (the benchmark's generator: junctions, shape nodes, signals) and on the hand-made text
    (a lone loop, a roundabout, a repeated node, nodes without locations, a one-node way), the segments equal the
    rules applied one way at a time; the same with the reader's hints (node places, tag sets) dropped. Neither
    has a gate closed to the profile, so the reference leaves gates out."""
    sys.path.insert(0, str(BENCH))
    try:
        from bench_scale_network import synthetic_county_pbf
    finally:
        sys.path.remove(str(BENCH))
    from coverkit.network.osm_pbf import read_osm_pbf

    profile = load_profile("emergency")
    for ways in (read_osm_pbf(synthetic_county_pbf(12, cache=tmp_path)), parse_highway_opl(HAND_OPL.encode())):
        raw = ways_to_roads(ways, profile, "test")
        seg = raw.segments
        n_vert = [len(g.coords) for g in raw.line_objects()]
        got = list(zip(seg["source_id"], seg["u_key"], seg["v_key"], n_vert, strict=True))
        road, closed = drivable_mask(ways.tags, profile)
        assert raw.stats["gates_closed"] == 0
        assert got == _split_reference(ways, road & ~closed)
        plain = OsmWays(**{**vars(ways), "ref_node": None, "tag_sets": None, "way_tag_set": None})
        again = ways_to_roads(plain, profile, "test")
        pd.testing.assert_frame_equal(again.segments, seg, check_exact=True)
        pd.testing.assert_frame_equal(again.nodes, raw.nodes, check_exact=True)
        assert again.stats == raw.stats
