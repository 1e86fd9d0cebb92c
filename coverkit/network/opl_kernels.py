"""Compiled kernels (numba) of the OPL reader: one pass over the text's bytes for the lines, for the distinct tag
fields and for the way-node lists.

Why compiled: in numpy each of these steps makes several passes over hundreds of megabytes (a boolean mask and a
position array per separator character, one digit column per pass of the number parser), which cost most of the
read of a 6.6 M-node county and gigabytes of temporaries. Here each line, field or reference is one loop over its
own bytes, writing into arrays sized beforehand.

The numbers are parsed with the same integer operations as the numpy reference in :mod:`coverkit.network.osm_opl`
(:func:`~coverkit.network.osm_opl.parse_ints`, :func:`~coverkit.network.osm_opl.parse_fixed_e7`), so the values
are identical; the tests hold the kernels to that reference. Compiled on first use, cached on disk (``cache=True``).
"""

from __future__ import annotations

import numpy as np
from numba import njit

_NEWLINE, _SPACE, _COMMA, _DOT, _MINUS, _ZERO = 10, 32, 44, 46, 45, 48
_N, _X, _Y = 110, 120, 121
#: Status codes of :func:`way_nodes_kernel`.
OK, NO_LOCATION, TOO_MANY_DECIMALS, OUT_OF_RANGE = 0, 1, 2, 3
_INT32_MAX = 2**31 - 1


@njit(cache=True, nogil=True)
def _skip_to(buf, a, n, char):
    """First position at or after ``a`` of ``char`` or a newline (``n`` when neither comes)."""
    while a < n and buf[a] != char and buf[a] != _NEWLINE:
        a += 1
    return a


@njit(cache=True, nogil=True)
def _skip_line(buf, a, n):
    """The end of the line at ``a`` (its newline, or ``n``) and the count of ``n`` bytes on the way there: node
    references, when the field is a way's node list."""
    count = 0
    while a < n and buf[a] != _NEWLINE:
        count += buf[a] == _N
        a += 1
    return a, count


@njit(cache=True, nogil=True)
def line_fields_kernel(buf):
    """Start, end, first and second space of every non-empty line of ``buf``, and the count of ``n`` bytes after
    the second space (int64 each; for a way, its node references).

    A line ends at a newline or at the end of the text; a missing space is placed at the line's end."""
    n_lines = 1
    for i in range(len(buf)):
        n_lines += buf[i] == _NEWLINE
    start = np.empty(n_lines, np.int64)
    end = np.empty(n_lines, np.int64)
    sp1 = np.empty(n_lines, np.int64)
    sp2 = np.empty(n_lines, np.int64)
    n_refs = np.zeros(n_lines, np.int64)
    k = 0
    a = 0
    n = len(buf)
    while a < n:
        s1 = _skip_to(buf, a, n, _SPACE)
        s2 = _skip_to(buf, s1 + 1, n, _SPACE) if s1 < n and buf[s1] == _SPACE else s1
        b = s2
        refs = 0
        if s2 < n and buf[s2] == _SPACE:
            b, refs = _skip_line(buf, s2 + 1, n)
        if b > a:
            start[k] = a
            end[k] = b
            sp1[k] = s1
            sp2[k] = s2
            n_refs[k] = refs
            k += 1
        a = b + 1
    return start[:k], end[:k], sp1[:k], sp2[:k], n_refs[:k]


@njit(cache=True, nogil=True)
def _field_hash(buf, a, b):
    """FNV-1a (64 bit) of ``buf[a:b]``: a table key only; equal fields are confirmed byte by byte."""
    h = np.uint64(14695981039346656037)
    for i in range(a, b):
        h = (h ^ np.uint64(buf[i])) * np.uint64(1099511628211)
    return h


@njit(cache=True, nogil=True)
def _same_bytes(buf, a, b, c, d):
    if b - a != d - c:
        return False
    for i in range(b - a):
        if buf[a + i] != buf[c + i]:
            return False
    return True


@njit(cache=True, nogil=True)
def factorize_fields_kernel(buf, lo, hi):
    """Codes of the byte strings ``buf[lo[i]:hi[i]]``, numbered in order of first appearance, and the row of each
    code's first appearance (int64 each): what ``pandas.factorize(sort=False)`` gives for the fields as bytes."""
    n = len(lo)
    size = 16
    while size < 2 * n:
        size *= 2
    mask = size - 1
    slot_code = np.full(size, -1, np.int64)
    codes = np.empty(n, np.int64)
    first = np.empty(n, np.int64)
    n_codes = 0
    for i in range(n):
        j = np.int64(_field_hash(buf, lo[i], hi[i]) & np.uint64(mask))
        while True:
            c = slot_code[j]
            if c < 0:
                slot_code[j] = n_codes
                first[n_codes] = i
                codes[i] = n_codes
                n_codes += 1
                break
            r = first[c]
            if _same_bytes(buf, lo[r], hi[r], lo[i], hi[i]):
                codes[i] = c
                break
            j = (j + 1) & mask
    return codes, first[:n_codes]


@njit(cache=True, nogil=True)
def _parse_int(buf, a, b):
    """``parse_ints`` of one field: a leading ``-`` negates, every other byte is a digit column."""
    neg = b > a and buf[a] == _MINUS
    if neg:
        a += 1
    out = np.int64(0)
    for i in range(a, b):
        out = out * 10 + (np.int64(buf[i]) - _ZERO)
    return -out if neg else out


@njit(cache=True, nogil=True)
def ints_kernel(buf, lo, hi):
    """``parse_ints`` of the fields ``buf[lo[i]:hi[i]]`` (int64)."""
    out = np.empty(len(lo), np.int64)
    for i in range(len(lo)):
        out[i] = _parse_int(buf, lo[i], hi[i])
    return out


@njit(cache=True, nogil=True)
def _int_until(buf, i, b, stop):
    """``parse_ints`` of ``buf[i:j]``, where ``j`` is the first ``stop``, comma or ``b`` from ``i``; and ``j``."""
    neg = i < b and buf[i] == _MINUS
    if neg:
        i += 1
    out = np.int64(0)
    while i < b:
        c = buf[i]
        if c == stop or c == _COMMA:
            break
        out = out * 10 + (np.int64(c) - _ZERO)
        i += 1
    return (-out if neg else out), i


@njit(cache=True, nogil=True)
def _e7_until(buf, i, b, stop):
    """``parse_fixed_e7`` of ``buf[i:j]`` (``j`` as in :func:`_int_until`): the value before scaling, its count of
    decimals, and ``j``."""
    neg = i < b and buf[i] == _MINUS
    if neg:
        i += 1
    out = np.int64(0)
    places = 0
    after_dot = False
    while i < b:
        c = buf[i]
        if c == stop or c == _COMMA:
            break
        if c == _DOT:
            after_dot = True
        else:
            out = out * 10 + (np.int64(c) - _ZERO)
            places += after_dot
        i += 1
    return (-out if neg else out), places, i


@njit(cache=True, nogil=True)
def _scaled_e7(value, places):
    """``value`` with ``places`` decimals in units of 1e-7."""
    for _ in range(7 - places):
        value *= 10
    return value


@njit(cache=True, nogil=True)
def way_nodes_kernel(buf, lo, hi, total):
    """The located references of the way-node fields ``buf[lo[w]:hi[w]]`` (``n<ref>x<lon>y<lat>`` joined by ``,``),
    at most ``total`` (the count of ``n`` bytes in the fields, from :func:`line_fields_kernel`).

    Returns
    -------
    refs, lon_e7, lat_e7, count, status
        Node ids (int64), coordinates in 1e-7 degree (int32), located references per way (int64) and a status
        (:data:`OK`, or the first problem met). A reference written with an empty ``x`` or ``y`` has no location
        and is left out.
    """
    refs = np.empty(total, np.int64)
    lon = np.empty(total, np.int32)
    lat = np.empty(total, np.int32)
    count = np.zeros(len(lo), np.int64)
    k = 0
    for w in range(len(lo)):
        a = lo[w]
        b = hi[w]
        while a < b:
            if buf[a] != _N or k == total:
                return refs[:k], lon[:k], lat[:k], count, NO_LOCATION
            ref, x = _int_until(buf, a + 1, b, _X)
            if x >= b or buf[x] != _X:
                return refs[:k], lon[:k], lat[:k], count, NO_LOCATION
            lon_e7, lon_places, y = _e7_until(buf, x + 1, b, _Y)
            if y >= b or buf[y] != _Y:
                return refs[:k], lon[:k], lat[:k], count, NO_LOCATION
            lat_e7, lat_places, end = _e7_until(buf, y + 1, b, _COMMA)
            if y > x + 1 and end > y + 1:
                if lon_places > 7 or lat_places > 7:
                    return refs[:k], lon[:k], lat[:k], count, TOO_MANY_DECIMALS
                lon_e7 = _scaled_e7(lon_e7, lon_places)
                lat_e7 = _scaled_e7(lat_e7, lat_places)
                if abs(lon_e7) > _INT32_MAX or abs(lat_e7) > _INT32_MAX:
                    return refs[:k], lon[:k], lat[:k], count, OUT_OF_RANGE
                refs[k] = ref
                lon[k] = lon_e7
                lat[k] = lat_e7
                count[w] += 1
                k += 1
            a = end + 1
    return refs[:k], lon[:k], lat[:k], count, OK


@njit(cache=True, nogil=True)
def distinct_sorted_kernel(values, order, place):
    """From ``order`` (a stable argsort of ``values``): the distinct values ascending and the first position of
    each; ``place`` (shape of ``values``) is filled with the place of every value among them. This is
    ``np.unique(values, return_index=True, return_inverse=True)`` from a sort done beforehand."""
    n = len(values)
    distinct = np.empty(n, values.dtype)
    first = np.empty(n, np.int64)
    k = -1
    for i in range(n):
        j = order[i]
        v = values[j]
        if k < 0 or v != distinct[k]:
            k += 1
            distinct[k] = v
            first[k] = j
        place[j] = k
    return distinct[: k + 1].copy(), first[: k + 1].copy()
