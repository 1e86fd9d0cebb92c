"""Parse osmium's OPL text of highway objects into flat arrays, with compiled one-pass kernels on the bytes
(:mod:`coverkit.network.opl_kernels`; no Python per reference). The numpy form of the way-node parse is kept as
:func:`way_nodes_numpy`, the reference the tests hold the kernel to.

The format (osmium's OPL, "object per line", written with ``add_metadata=false,locations_on_ways=true``):

- node ``n<id> T<tags> x<lon> y<lat>``; way ``w<id> T<tags> N<ref>x<lon>y<lat>,<ref>x<lon>y<lat>,...``;
- tags ``key=value`` joined by ``,``; characters that would break a field (space, comma, equals, percent and
  non-printable ones) are written as ``%<hex code point>%``;
- a way node with no known location is written with empty ``x`` and ``y``.

Coordinates are decimal degrees with up to seven decimals (libosmium's fixed 1e-7 grid); they are parsed as integers
on that grid and divided by 1e7, which is how libosmium itself turns a location into degrees, so the values are the
same doubles the Python API would give.

Besides the ways, the reader hands :func:`~coverkit.network.osm_ways.ways_to_roads` what its own work gives for
free: each reference's place among the sorted node ids (from the sort that makes them) and the distinct tag sets
with each way's one, so the splitter neither searches ten million references nor works every way's tags.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from coverkit.network.opl_kernels import (
    NO_LOCATION,
    OK,
    distinct_sorted_kernel,
    factorize_fields_kernel,
    ints_kernel,
    line_fields_kernel,
    way_nodes_kernel,
)
from coverkit.network.osm_restrictions import GATE_BARRIERS, restrictions_frame
from coverkit.network.osm_ways import WAY_TAGS, OsmWays, gates_frame, tags_frame
from coverkit.network.profile import ACCESS_KEYS

_SPACE, _NEWLINE, _COMMA = ord(" "), ord("\n"), ord(",")
_ESCAPE = re.compile(r"%([0-9a-fA-F]+)%")
#: libosmium's coordinate precision: locations are integers in units of 1e-7 degree.
COORDINATE_PRECISION = 10_000_000


def parse_highway_opl(text: bytes) -> OsmWays:
    """Ways (sorted by id), their located node references and the traffic-signal node ids from OPL ``text``."""
    buf = np.frombuffer(text, dtype=np.uint8)
    line_start, line_end, sp1, sp2, n_refs = line_fields_kernel(buf)
    kind = buf[line_start]
    ways = kind == ord("w")
    w_codes, w_table = _tag_table(text, buf, sp1[ways] + 2, sp2[ways], WAY_TAGS)
    # ways kept for other keys (a fence's barrier) are not roads
    road = w_table["highway"].notna().to_numpy()[w_codes]
    w_codes = w_codes[road]
    tags = w_table.iloc[w_codes].reset_index(drop=True) if len(w_codes) else w_table.iloc[:0]
    w_start, w_sp1 = line_start[ways][road], sp1[ways][road]
    way_id = ints_kernel(buf, w_start + 1, w_sp1)
    refs, lon_e7, lat_e7, count = way_nodes(buf, sp2[ways][road] + 2, line_end[ways][road], n_refs[ways][road])

    nodes = kind == ord("n")
    n_codes, n_table = _tag_table(text, buf, sp1[nodes] + 2, sp2[nodes], ("highway", "barrier", *ACCESS_KEYS))
    n_ids = ints_kernel(buf, line_start[nodes] + 1, sp1[nodes])
    signal = (n_table["highway"].to_numpy(dtype=object) == "traffic_signals")[n_codes]
    signal_ids = np.unique(n_ids[signal])
    gate = n_table["barrier"].isin(sorted(GATE_BARRIERS)).to_numpy()[n_codes]
    gate_tags = n_table.iloc[n_codes[gate]].to_dict("records")
    gates = gates_frame(n_ids[gate].tolist(), gate_tags)
    restrictions = restrictions_frame(_relations(text, line_start[kind == ord("r")], line_end[kind == ord("r")]))

    order = np.argsort(way_id, kind="stable")
    if not np.all(order == np.arange(len(order))):
        # PBF files are sorted by id by convention; reorder if one is not, to keep the output deterministic
        offsets = np.concatenate([[0], np.cumsum(count)]).astype(np.int64)
        take = _ranges(offsets[:-1][order], count[order])
        refs, lon_e7, lat_e7 = refs[take], lon_e7[take], lat_e7[take]
        count, way_id = count[order], way_id[order]
        tags = tags.iloc[order].reset_index(drop=True)
        w_codes = w_codes[order]
    offsets = np.concatenate([[0], np.cumsum(count)]).astype(np.int64)
    node_id, first, ref_node = _unique_nodes(refs)
    return OsmWays(
        way_id=way_id,
        tags=tags,
        refs=refs,
        offsets=offsets,
        node_id=node_id,
        lon=lon_e7[first] / COORDINATE_PRECISION,
        lat=lat_e7[first] / COORDINATE_PRECISION,
        signal_ids=signal_ids,
        restrictions=restrictions,
        gates=gates,
        ref_node=ref_node,
        tag_sets=w_table,
        way_tag_set=w_codes,
    )


def _unique_nodes(refs: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Sorted distinct ``refs``, the first position of each and the place of every reference among them.

    The first two are ``np.unique(refs, return_index=True)`` (the same stable sort); the third, its inverse, comes
    from the same sort instead of a later search.
    """
    order = np.argsort(refs, kind="stable")
    ref_node = np.empty(len(refs), dtype=np.int32 if len(refs) < np.iinfo(np.int32).max else np.int64)
    node_id, first = distinct_sorted_kernel(refs, order, ref_node)
    return node_id, first, ref_node


def way_nodes(
    buf: np.ndarray, lo: np.ndarray, hi: np.ndarray, n_refs: np.ndarray | None = None
) -> tuple[np.ndarray, ...]:
    """Located references of the ``N`` fields ``buf[lo:hi]``: ids, lon and lat (1e-7 degree, int32), count per way.

    The compiled one-pass form of :func:`way_nodes_numpy` (same values). References without a location are left
    out (as the earlier reader did), so counts are of located ones. ``n_refs``: the references written in each
    field (its ``n`` bytes, as :func:`~coverkit.network.opl_kernels.line_fields_kernel` counts them), which sizes
    the output; without it, the ``n`` bytes of the whole text.

    Examples
    --------
    Node 5 at (-1.5, 0.25) and node 6 without a location (worked by hand):

    >>> buf = np.frombuffer(b"w1 T Nn5x-1.5y0.25,n6xy", dtype=np.uint8)
    >>> refs, lon_e7, lat_e7, count = way_nodes(buf, np.array([6]), np.array([23]))
    >>> refs.tolist(), lon_e7.tolist(), lat_e7.tolist(), count.tolist()
    ([5], [-15000000], [2500000], [1])
    """
    total = int(n_refs.sum()) if n_refs is not None else int(np.count_nonzero(buf == ord("n")))
    refs, lon_e7, lat_e7, count, status = way_nodes_kernel(buf, lo.astype(np.int64), hi.astype(np.int64), total)
    if status == NO_LOCATION:
        raise ValueError("OPL way node list without locations; write it with locations_on_ways=true")
    if status != OK:
        raise ValueError("OPL way node coordinate with more than seven decimals or beyond 214.7 degrees")
    return refs, lon_e7, lat_e7, count


def _relations(text: bytes, lo: np.ndarray, hi: np.ndarray) -> list[dict]:
    """Relation lines ``r<id> T<tags> M<type><ref>@<role>,...`` as dicts (relations are few: a Python pass each)."""
    kinds = {"n": "node", "w": "way", "r": "relation"}
    out = []
    for a, b in zip(lo.tolist(), hi.tolist(), strict=True):
        fields = text[a:b].decode("utf-8").split(" ")
        tags = _decode_tags(fields[1][1:].encode()) if len(fields) > 1 else {}
        members = []
        for m in fields[2][1:].split(",") if len(fields) > 2 and len(fields[2]) > 1 else []:
            ref, _, role = m[1:].partition("@")
            members.append({"type": kinds.get(m[:1], ""), "ref": int(ref), "role": _unescape(role)})
        out.append({"id": int(fields[0][1:]), "tags": tags, "members": members})
    return out


def _ranges(start: np.ndarray, count: np.ndarray) -> np.ndarray:
    """Concatenated ``arange(start[i], start[i] + count[i])``."""
    total = int(count.sum())
    return np.repeat(start - np.cumsum(count) + count, count) + np.arange(total)


def way_nodes_numpy(buf: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> tuple[np.ndarray, ...]:
    """Located references of the ``N`` fields ``buf[lo:hi]``: ids, lon and lat (1e-7 degree), count per way.

    The numpy reference of :func:`way_nodes` (the tests hold the kernel to it): a mask and a position array per
    separator character, one digit column per pass of the number parsers.
    """
    n_pos, x_pos, y_pos = (_inside(np.flatnonzero(buf == ord(c)), lo, hi) for c in "nxy")
    if not (len(n_pos) == len(x_pos) == len(y_pos)):
        raise ValueError("OPL way node list without locations; write it with locations_on_ways=true")
    way_of = np.searchsorted(lo, n_pos, side="right") - 1
    # a reference ends at the comma before the next one, or at the end of its way's field
    end = hi[way_of].copy()
    same = way_of[1:] == way_of[:-1]
    end[:-1][same] = n_pos[1:][same] - 1
    ref = parse_ints(buf, n_pos + 1, x_pos)
    located = (y_pos > x_pos + 1) & (end > y_pos + 1)
    lon = parse_fixed_e7(buf, x_pos + 1, y_pos)
    lat = parse_fixed_e7(buf, y_pos + 1, end)
    count = np.bincount(way_of[located], minlength=len(lo)).astype(np.int64)
    return ref[located], lon[located], lat[located], count


def _inside(pos: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """The positions ``pos`` lying in one of the sorted, disjoint ranges ``[lo, hi)``."""
    k = np.searchsorted(lo, pos, side="right") - 1
    return pos[(k >= 0) & (pos < hi[np.maximum(k, 0)])]


def parse_ints(buf: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Signed decimal integers written in ``buf[lo:hi]`` (int64), one Horner step per digit column."""
    lo = np.asarray(lo, dtype=np.int64)
    hi = np.asarray(hi, dtype=np.int64)
    neg = (hi > lo) & (buf[np.minimum(lo, len(buf) - 1)] == ord("-")) if len(buf) else np.zeros(len(lo), bool)
    lo = lo + neg
    width = hi - lo
    out = np.zeros(len(lo), dtype=np.int64)
    for j in range(int(width.max(initial=0))):
        more = width > j
        digit = buf[np.where(more, lo + j, 0)].astype(np.int64) - ord("0")
        out = np.where(more, out * 10 + digit, out)
    return np.where(neg, -out, out)


def parse_fixed_e7(buf: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Decimals with at most seven places in ``buf[lo:hi]`` as integers in units of 1e-7 (int64); 0 where empty."""
    lo = np.asarray(lo, dtype=np.int64)
    hi = np.asarray(hi, dtype=np.int64)
    neg = (hi > lo) & (buf[np.minimum(lo, len(buf) - 1)] == ord("-"))
    lo = lo + neg
    width = hi - lo
    out = np.zeros(len(lo), dtype=np.int64)
    places = np.zeros(len(lo), dtype=np.int64)
    after_dot = np.zeros(len(lo), dtype=bool)
    for j in range(int(width.max(initial=0))):
        more = width > j
        char = buf[np.where(more, lo + j, 0)]
        dot = more & (char == ord("."))
        digit = more & ~dot
        out = np.where(digit, out * 10 + (char.astype(np.int64) - ord("0")), out)
        places += digit & after_dot
        after_dot |= dot
    out = out * 10 ** (7 - places)
    return np.where(neg, -out, out)


def tags_frame_from_fields(text: bytes, lo: np.ndarray, hi: np.ndarray, keys: tuple[str, ...]) -> pd.DataFrame:
    """The tags ``keys`` of each ``T`` field ``text[lo:hi]`` (None where absent)."""
    codes, table = _tag_table(text, np.frombuffer(text, dtype=np.uint8), lo, hi, keys)
    return table.iloc[codes].reset_index(drop=True) if len(codes) else table.iloc[:0]


def _tag_table(
    text: bytes, buf: np.ndarray, lo: np.ndarray, hi: np.ndarray, keys: tuple[str, ...]
) -> tuple[np.ndarray, pd.DataFrame]:
    """The distinct ``T`` fields ``text[lo:hi]`` as a table of the tags ``keys`` (object columns, None where absent)
    and the row of each field in it (numbered in order of first appearance).

    Ways share few distinct tag sets (a street's pieces repeat its tags), so each distinct field is decoded once.
    """
    codes, first = factorize_fields_kernel(buf, np.asarray(lo, dtype=np.int64), np.asarray(hi, dtype=np.int64))
    rows = [_decode_tags(text[lo[i] : hi[i]]) for i in first.tolist()]
    table = tags_frame(rows) if keys == WAY_TAGS else pd.DataFrame({k: [r.get(k) for r in rows] for k in keys})
    return codes, table.astype(object)


def _decode_tags(field: bytes) -> dict[str, str]:
    """``k=v,k=v`` with OPL escapes (``%<hex>%``) decoded."""
    out: dict[str, str] = {}
    if not field:
        return out
    for pair in field.decode("utf-8").split(","):
        key, _, value = pair.partition("=")
        out[_unescape(key)] = _unescape(value)
    return out


def _unescape(text: str) -> str:
    return _ESCAPE.sub(lambda m: chr(int(m.group(1), 16)), text) if "%" in text else text
