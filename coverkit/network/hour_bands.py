"""Time of day: speed factors per road class for named hour bands, and the network retimed for a moment.

A profile may carry an ``[hour_bands.<name>]`` table per band::

    [hour_bands.am_peak]
    days = "weekday"        # weekday (Monday to Friday), weekend, or all
    start_h = 7             # first hour in the band (0..23)
    end_h = 9               # first hour after it (1..24; below start_h the band runs past midnight)
    factors = { primary = 0.8, secondary = 0.85 }   # speed factor per road class, 1 for classes not listed

Within a band an edge's running time is divided by its class's factor (its speed multiplied by it), after the
profile's cap: congestion slows a road below its cap; signal delays stay. Outside every band the profile's own
times hold. :func:`network_at` gives that network for one moment (a day and a time of day, or a band's name); the
commands and a study's ``[[period]]`` list all call it, so they see the same times. Weekday numbering follows
ISO 8601 (Monday = 1 ... Sunday = 7).
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from coverkit.errors import PARAM, FieldError, ProfileError

if TYPE_CHECKING:
    from coverkit.network.model import RoadNetwork
    from coverkit.network.profile import Profile

DAY_SETS = ("weekday", "weekend", "all")
#: ISO 8601 weekday numbers (Monday = 1) and their three-letter English names.
DAY_NAMES = ("mon", "tue", "wed", "thu", "fri", "sat", "sun")
_BAND_KEYS = {"days", "start_h", "end_h", "factors"}
_AT = re.compile(r"^(?:(?P<day>[a-z]{3})[a-z]*\s+)?(?P<h>\d{1,2}):(?P<m>\d{2})$")


@dataclass(frozen=True)
class HourBand:
    """A named band of hours with a speed factor per road class.

    Attributes
    ----------
    name
        The band's name (the ``[hour_bands.<name>]`` key).
    days
        ``weekday`` (ISO days 1-5), ``weekend`` (6-7) or ``all``.
    start_h, end_h
        First hour in the band and first hour after it (``end_h < start_h``: it runs past midnight).
    factors
        Speed factor per road class (> 0); classes not listed keep factor 1.
    """

    name: str
    days: str
    start_h: int
    end_h: int
    factors: Mapping[str, float]

    def holds(self, iso_day: np.ndarray, hour: np.ndarray) -> np.ndarray:
        """Whether each (ISO weekday or 0 for "unknown", whole hour 0..23) falls in the band; an unknown day
        counts as any day.

        >>> b = HourBand("am", "weekday", 7, 9, {})
        >>> b.holds(np.array([1, 6, 0, 1]), np.array([7, 7, 8, 9])).tolist()
        [True, False, True, False]
        """
        iso_day, hour = np.asarray(iso_day), np.asarray(hour)
        if self.start_h < self.end_h:
            in_hours = (hour >= self.start_h) & (hour < self.end_h)
        else:
            in_hours = (hour >= self.start_h) | (hour < self.end_h)
        day_ok = {"weekday": (iso_day >= 1) & (iso_day <= 5), "weekend": iso_day >= 6}.get(self.days)
        return in_hours & (True if day_ok is None else (day_ok | (iso_day == 0)))

    def label(self) -> str:
        """``am_peak (weekday 07-09 h)``."""
        return f"{self.name} ({self.days} {self.start_h:02d}-{self.end_h:02d} h)"


def _whole(value: object, key: str, where: str, lo: int, hi: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or not lo <= value <= hi:
        raise ProfileError(f"{where}: key '{key}' must be a whole hour {lo}..{hi}, got {value!r}.")
    return int(value)


def hour_bands_from_dict(data: object, classes: Sequence[str], where: str) -> tuple[HourBand, ...]:
    """The ``[hour_bands]`` tables of a profile, checked (keys, hours, days, classes, factors, no overlap).

    Raises
    ------
    ProfileError
        One line naming the file and the key.
    """
    if not isinstance(data, dict):
        raise ProfileError(f"{where}: 'hour_bands' must hold [hour_bands.<name>] tables.")
    bands = []
    for name, t in sorted(data.items()):
        key = f"hour_bands.{name}"
        if not isinstance(t, dict):
            raise ProfileError(f"{where}: '{key}' must be a table with days, start_h, end_h, factors.")
        bad = sorted(set(t) - _BAND_KEYS)
        if bad:
            raise ProfileError(f"{where}: unknown key '{key}.{bad[0]}'; allowed: {', '.join(sorted(_BAND_KEYS))}.")
        days = t.get("days", "all")
        if days not in DAY_SETS:
            raise ProfileError(f"{where}: key '{key}.days' must be one of {', '.join(DAY_SETS)}, got {days!r}.")
        start, end = (
            _whole(t.get("start_h"), f"{key}.start_h", where, 0, 23),
            _whole(t.get("end_h"), f"{key}.end_h", where, 1, 24),
        )
        if start == end:
            raise ProfileError(f"{where}: '{key}' starts and ends at hour {start}; give an end_h after start_h.")
        factors = t.get("factors", {})
        if not isinstance(factors, dict):
            raise ProfileError(f"{where}: '{key}.factors' must be a table of road class = speed factor.")
        for cls, f in factors.items():
            if cls not in classes:
                raise ProfileError(f"{where}: '{key}.factors' names '{cls}', which has no [speeds.{cls}] table.")
            if isinstance(f, bool) or not isinstance(f, int | float) or not 0 < f <= 10:
                raise ProfileError(f"{where}: '{key}.factors.{cls}' must be a number in (0, 10], got {f!r}.")
        bands.append(HourBand(str(name), days, start, end, {c: float(f) for c, f in sorted(factors.items())}))
    _check_overlap(bands, where)
    return tuple(bands)


def _check_overlap(bands: list[HourBand], where: str) -> None:
    days, hours = np.repeat(np.arange(1, 8), 24), np.tile(np.arange(24), 7)
    held = np.zeros(len(days), dtype=int)
    for b in bands:
        held += b.holds(days, hours)
    if np.any(held > 1):
        i = int(np.argmax(held > 1))
        names = [b.name for b in bands if b.holds(days[i : i + 1], hours[i : i + 1])[0]]
        raise ProfileError(
            f"{where}: hour bands {' and '.join(names)} overlap ({DAY_NAMES[days[i] - 1]} {hours[i]:02d} h); "
            "an hour may belong to one band only."
        )


def hour_bands_toml(bands: Sequence[HourBand]) -> str:
    """The ``[hour_bands.<name>]`` tables as TOML (read back by :func:`hour_bands_from_dict`)."""
    lines = []
    for b in bands:
        factors = ", ".join(f"{c} = {f!r}" for c, f in sorted(b.factors.items()))
        lines += [f"[hour_bands.{b.name}]", f'days = "{b.days}"', f"start_h = {b.start_h}", f"end_h = {b.end_h}"]
        lines += [f"factors = {{ {factors} }}", ""]
    return "\n".join(lines)


@dataclass(frozen=True)
class Moment:
    """A time of day (minutes after midnight) on an ISO weekday (0: not given, taken as a weekday)."""

    text: str
    iso_day: int
    minute: int

    @property
    def hour(self) -> int:
        """The whole hour 0..23."""
        return self.minute // 60


def parse_at(text: str, *, param: str = "at") -> Moment:
    """A moment from ``HH:MM`` or ``DAY HH:MM`` (DAY: mon..sun, any case, or the full English name).

    >>> parse_at("07:45"), parse_at("Sat 18:00").iso_day
    (Moment(text='07:45', iso_day=0, minute=465), 6)

    Raises
    ------
    FieldError
        Not such a time (names the parameter, ``param``).
    """
    m = _AT.match(str(text).strip().lower())
    day = m and (m.group("day") or "")
    if not m or (day and day not in DAY_NAMES) or int(m.group("h")) > 23 or int(m.group("m")) > 59:
        raise FieldError(
            f"{PARAM} '{text}' is not a time of day; write HH:MM (00:00..23:59), optionally after a day, "
            "e.g. 08:15 or 'sat 08:15'.",
            param=param,
        )
    iso_day = DAY_NAMES.index(day) + 1 if day else 0
    return Moment(str(text).strip(), iso_day, int(m.group("h")) * 60 + int(m.group("m")))


def band_at(profile: Profile, when: Moment | str, *, param: str = "at") -> HourBand | None:
    """The profile's band holding ``when`` (a :class:`Moment`, or a band's name), or None outside every band.

    Raises
    ------
    FieldError
        ``when`` names no band of the profile, or the profile has no hour bands (names ``param``).
    """
    bands = getattr(profile, "hour_bands", ())
    if not bands:
        raise FieldError(
            f"{PARAM} needs hour bands, but profile '{profile.name}' has none; add [hour_bands.<name>] tables to the "
            "profile (or fit them with calibrate) and rebuild the network.",
            param=param,
        )
    if isinstance(when, str):
        named = {b.name: b for b in bands}
        if when in named:
            return named[when]
        if ":" in when:
            return band_at(profile, parse_at(when, param=param), param=param)
        try:
            when = parse_at(when, param=param)
        except FieldError:
            raise FieldError(
                f"{PARAM} '{when}' is neither HH:MM nor an hour band of profile '{profile.name}' ({', '.join(named)}).",
                param=param,
            ) from None
    day, hour = np.array([when.iso_day]), np.array([when.hour])
    return next((b for b in bands if b.holds(day, hour)[0]), None)


def network_at(net: RoadNetwork, when: Moment | str, *, param: str = "at") -> RoadNetwork:
    """The network with every edge's running time scaled by its class's factor in the band holding ``when``.

    ``travel_s = (travel_s - delay_s) / factor + delay_s`` (:func:`coverkit.network.timing.scaled_running_s`);
    closed edges stay closed. Outside every band the network is returned as it is.
    """
    from coverkit.network.timing import scaled_running_s

    band = band_at(net.profile, when, param=param)
    if band is None or not band.factors:
        return net
    road_class = np.asarray(net.edge_values("road_class"), dtype=object).astype(str)
    factor = np.ones(len(road_class))
    for cls, f in band.factors.items():
        factor[road_class == cls] = f
    travel = scaled_running_s(net.travel_s, np.asarray(net.edge_values("delay_s"), dtype=float), factor)
    return net.with_travel_s(travel, f"timed for hour band {band.label()}")


def iso_weekdays(values: Sequence[object]) -> tuple[np.ndarray, int | None]:
    """ISO 8601 weekday numbers (Monday = 1 ... Sunday = 7; 0 where empty) from numbers 1..7 or English names
    (``mon``, ``Monday``, any case); the position of the first value that is neither, or None.

    >>> days, bad = iso_weekdays(["Mon", "7", "", "saturday", "8"])
    >>> days.tolist(), bad
    ([1, 7, 0, 6, 0], 4)
    """
    out = np.zeros(len(values), dtype=np.int64)
    first_bad = None
    for i, v in enumerate(values):
        text = "" if v is None else str(v).strip().lower()
        if text in ("", "nan", "<na>", "none"):
            continue
        if text.isdigit() and 1 <= int(text) <= 7:
            out[i] = int(text)
        elif text[:3] in DAY_NAMES and (len(text) == 3 or text.startswith(_FULL_DAY[text[:3]])):
            out[i] = DAY_NAMES.index(text[:3]) + 1
        elif first_bad is None:
            first_bad = i
    return out, first_bad


_FULL_DAY = dict(
    zip(DAY_NAMES, ("monday", "tuesday", "wednesday", "thursday", "friday", "saturday", "sunday"), strict=True)
)


def parse_band_spec(text: str, *, param: str = "hour_bands") -> tuple[HourBand, ...]:
    """Bands without factors from ``am=7-9,pm=16-18@weekday`` (hours: first in, first after; days after ``@``:
    weekday, weekend or all, the default).

    >>> [b.label() for b in parse_band_spec("am=7-9@weekday,night=22-6")]
    ['am (weekday 07-09 h)', 'night (all 22-06 h)']
    """
    bands = []
    for part in filter(None, (p.strip() for p in str(text).split(","))):
        m = re.match(r"^([A-Za-z_][\w]*)=(\d{1,2})-(\d{1,2})(?:@(\w+))?$", part)
        days = (m.group(4) or "all").lower() if m else ""
        if not m or days not in DAY_SETS or int(m.group(2)) > 23 or not 1 <= int(m.group(3)) <= 24:
            raise FieldError(
                f"{PARAM} '{part}' is not NAME=START-END[@weekday|weekend|all] in whole hours, e.g. am=7-9@weekday.",
                param=param,
            )
        if int(m.group(2)) == int(m.group(3)):
            raise FieldError(f"{PARAM} '{part}': the band starts and ends at the same hour.", param=param)
        bands.append(HourBand(m.group(1), days, int(m.group(2)), int(m.group(3)), {}))
    if not bands:
        raise FieldError(f"{PARAM} is empty; name at least one band, e.g. am=7-9@weekday.", param=param)
    try:
        _check_overlap(bands, "hour bands")
    except ProfileError as exc:
        raise FieldError(f"{PARAM}: {str(exc).removeprefix('hour bands: ')}", param=param) from None
    return tuple(bands)
