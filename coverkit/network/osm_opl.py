"""Parse osmium's OPL text of highway objects into flat arrays, with numpy on the bytes (no Python per reference).

The format (osmium's OPL, "object per line", written with ``add_metadata=false,locations_on_ways=true``):

- node ``n<id> T<tags> x<lon> y<lat>``; way ``w<id> T<tags> N<ref>x<lon>y<lat>,<ref>x<lon>y<lat>,...``;
- tags ``key=value`` joined by ``,``; characters that would break a field (space, comma, equals, percent and
  non-printable ones) are written as ``%<hex code point>%``;
- a way node with no known location is written with empty ``x`` and ``y``.

Coordinates are decimal degrees with up to seven decimals (libosmium's fixed 1e-7 grid); they are parsed as integers
on that grid and divided by 1e7, which is how libosmium itself turns a location into degrees, so the values are the
same doubles the Python API would give.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

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
    line_end = np.flatnonzero(buf == _NEWLINE)
    if len(buf) and buf[-1] != _NEWLINE:
        line_end = np.append(line_end, len(buf))
    line_start = np.concatenate([[0], line_end[:-1] + 1])
    nonempty = line_end > line_start
    line_start, line_end = line_start[nonempty], line_end[nonempty]
    spaces = np.flatnonzero(buf == _SPACE)
    # the first two field separators of each line: after the id, after the tags
    first_sp = np.searchsorted(spaces, line_start)
    kind = buf[line_start]
    ways = kind == ord("w")
    nodes = kind == ord("n")

    w_start, w_end = line_start[ways], line_end[ways]
    w_sp1 = spaces[first_sp[ways]]
    w_sp2 = spaces[first_sp[ways] + 1]
    tags = tags_frame_from_fields(text, w_sp1 + 2, w_sp2, WAY_TAGS)
    # ways kept for other keys (a fence's barrier) are not roads
    road = tags["highway"].notna().to_numpy()
    w_start, w_end, w_sp1, w_sp2 = w_start[road], w_end[road], w_sp1[road], w_sp2[road]
    tags = tags[road].reset_index(drop=True)
    way_id = parse_ints(buf, w_start + 1, w_sp1)
    refs, lon_e7, lat_e7, count = _way_nodes(buf, w_sp2 + 2, w_end)

    n_start = line_start[nodes]
    n_sp1 = spaces[first_sp[nodes]]
    n_sp2 = spaces[first_sp[nodes] + 1]
    node_tags = tags_frame_from_fields(text, n_sp1 + 2, n_sp2, ("highway", "barrier", *ACCESS_KEYS))
    n_ids = parse_ints(buf, n_start + 1, n_sp1)
    signal = node_tags["highway"].to_numpy(dtype=object) == "traffic_signals"
    signal_ids = np.unique(n_ids[signal])
    gate = node_tags["barrier"].isin(sorted(GATE_BARRIERS)).to_numpy()
    gates = gates_frame(n_ids[gate].tolist(), node_tags[gate].to_dict("records"))
    restrictions = restrictions_frame(_relations(text, line_start[kind == ord("r")], line_end[kind == ord("r")]))

    offsets = np.concatenate([[0], np.cumsum(count)]).astype(np.int64)
    order = np.argsort(way_id, kind="stable")
    if not np.all(order == np.arange(len(order))):
        # PBF files are sorted by id by convention; reorder if one is not, to keep the output deterministic
        take = _ranges(offsets[:-1][order], count[order])
        refs, lon_e7, lat_e7 = refs[take], lon_e7[take], lat_e7[take]
        count, way_id = count[order], way_id[order]
        tags = tags.iloc[order].reset_index(drop=True)
        offsets = np.concatenate([[0], np.cumsum(count)]).astype(np.int64)
    node_id, first = np.unique(refs, return_index=True)
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
    )


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


def _way_nodes(buf: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> tuple[np.ndarray, ...]:
    """Located references of the ``N`` fields ``buf[lo:hi]``: ids, lon and lat (1e-7 degree), count per way.

    References without a location are left out (as the earlier reader did), so counts are of located ones.
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
    """The tags ``keys`` of each ``T`` field ``text[lo:hi]`` (None where absent).

    Ways share few distinct tag sets (a street's pieces repeat its tags), so each distinct field is decoded once.
    """
    fields = [text[a:b] for a, b in zip(lo.tolist(), hi.tolist(), strict=True)]
    codes, uniques = pd.factorize(pd.Series(fields, dtype=object), sort=False)
    rows = [_decode_tags(field) for field in uniques]
    table = tags_frame(rows) if keys == WAY_TAGS else pd.DataFrame({k: [r.get(k) for r in rows] for k in keys})
    table = table.astype(object)
    return table.iloc[codes].reset_index(drop=True) if len(codes) else table.iloc[:0]


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
