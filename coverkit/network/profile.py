"""Speed profiles: per road class speeds, emergency factors, caps, signal delay and one-way policy.

A profile is a TOML file. Shipped profiles live in ``coverkit/network/profiles/``; a user file with the same keys is
accepted anywhere a profile name is. Every key is checked: an unknown key or a bad value raises
:class:`~coverkit.errors.ProfileError` naming the file and the key.
"""

from __future__ import annotations

import math
import re
import tomllib
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path

import numpy as np
import pandas as pd

from coverkit.errors import ProfileError
from coverkit.network.turn_rules import TurnRules, turn_rules_from_dict, turn_rules_toml

KPH_PER_MPH = 1.609344  # exact: 1 mile = 1609.344 m
KPH_PER_KNOT = 1.852  # exact: 1 nautical mile = 1852 m

ONEWAY_POLICIES = ("obey", "against")
#: What an ``oneway=reversible`` way is for the profile: closed (its direction changes by hour), or two-way.
REVERSIBLE_POLICIES = ("closed", "two_way")
#: Access keys read when a profile names none: the way's ``motor_vehicle`` tag, else its ``access`` tag.
DEFAULT_ACCESS_KEYS = ("motor_vehicle", "access")
#: Access keys a profile may list, most specific first (OSM wiki, key:access: the transport-mode hierarchy).
ACCESS_KEYS = ("emergency", "motorcar", "motor_vehicle", "vehicle", "access")
_TOP_KEYS = {
    "name",
    "description",
    "signal_delay_s",
    "oneway",
    "against_oneway_factor",
    "against_oneway_classes",
    "private_access",
    "reversible",
    "access_keys",
    "speeds",
    "hour_bands",
    "turns",
}
_CLASS_KEYS = {"default_kph", "factor", "cap_kph"}


@dataclass(frozen=True)
class ClassSpeed:
    """Speed rule for one road class.

    Attributes
    ----------
    default_kph
        Speed used when the data give none (km/h).
    factor
        Multiplier on the posted or default speed (emergency driving above 1, slow conditions below 1).
    cap_kph
        Upper limit on the resulting speed (km/h).
    """

    default_kph: float
    factor: float = 1.0
    cap_kph: float = math.inf

    def effective_kph(self, posted_kph: np.ndarray) -> np.ndarray:
        """Speed used for travel: ``min((posted or default) * factor, cap)``, in km/h."""
        posted = np.where(np.isfinite(posted_kph) & (posted_kph > 0), posted_kph, self.default_kph)
        return np.minimum(posted * self.factor, self.cap_kph)


@dataclass(frozen=True)
class Profile:
    """A speed profile.

    Attributes
    ----------
    name
        Short name (shipped profiles: ``normal``, ``emergency``, ``winter``).
    speeds
        Road class (OSM ``highway`` value) to :class:`ClassSpeed`. Classes not listed are not drivable.
    signal_delay_s
        Seconds added to every edge that ends at a traffic-signal node.
    oneway
        ``"obey"`` or ``"against"`` (emergency travel against one-way streets is allowed, at a penalty).
    against_oneway_factor
        Travel-time multiplier for travel against a one-way street when ``oneway = "against"``.
    against_oneway_classes
        Road classes where travel against the one-way direction is allowed (never motorways by default).
    private_access
        Whether ways tagged ``access=private/no`` are usable (emergency access).
    reversible
        ``"closed"`` or ``"two_way"``: how ``oneway=reversible`` ways are driven (see :data:`REVERSIBLE_POLICIES`).
    access_keys
        OSM access keys read for ways and gates, most specific first; the first one tagged decides.
    turns
        Turn restrictions and turn costs (:class:`~coverkit.network.turn_rules.TurnRules`).
    source_text
        The TOML text the profile was read from, kept so a saved network records it exactly.
    """

    name: str
    speeds: dict[str, ClassSpeed]
    signal_delay_s: float = 0.0
    oneway: str = "obey"
    against_oneway_factor: float = 1.0
    against_oneway_classes: tuple[str, ...] = ()
    private_access: bool = False
    description: str = ""
    reversible: str = "two_way"
    access_keys: tuple[str, ...] = DEFAULT_ACCESS_KEYS
    turns: TurnRules = field(default_factory=lambda: TurnRules())
    source_text: str = field(default="", repr=False, compare=False)
    hour_bands: tuple = ()  # HourBand tables (coverkit.network.hour_bands): speed factors by time of day

    @property
    def road_classes(self) -> list[str]:
        """Drivable road classes, sorted."""
        return sorted(self.speeds)

    def effective_kph(self, road_class: np.ndarray, posted_kph: np.ndarray) -> np.ndarray:
        """Vectorised speed per edge (km/h) from class and posted speed (NaN where none)."""
        road_class = np.asarray(road_class, dtype=object)
        posted_kph = np.asarray(posted_kph, dtype=float)
        out = np.full(posted_kph.shape, np.nan)
        for cls, rule in self.speeds.items():
            sel = road_class == cls
            if sel.any():
                out[sel] = rule.effective_kph(posted_kph[sel])
        return out

    def to_toml(self) -> str:
        """The profile as TOML text (the text it was read from, when it was read from a file)."""
        if self.source_text:
            return self.source_text
        return profile_to_toml(self)


def profile_to_toml(profile: Profile, header: str = "") -> str:
    """Serialise a profile to TOML with the keys :func:`load_profile` reads."""
    lines = [header.rstrip()] if header else []
    lines += [
        f'name = "{profile.name}"',
        f'description = "{profile.description}"',
        f"signal_delay_s = {profile.signal_delay_s!r}",
        f'oneway = "{profile.oneway}"',
        f"against_oneway_factor = {profile.against_oneway_factor!r}",
        "against_oneway_classes = [" + ", ".join(f'"{c}"' for c in profile.against_oneway_classes) + "]",
        f"private_access = {'true' if profile.private_access else 'false'}",
        f'reversible = "{profile.reversible}"',
        "access_keys = [" + ", ".join(f'"{k}"' for k in profile.access_keys) + "]",
        "",
        *turn_rules_toml(profile.turns),
    ]
    for cls in profile.road_classes:
        rule = profile.speeds[cls]
        lines.append(f"[speeds.{cls}]")
        lines.append(f"default_kph = {rule.default_kph!r}")
        lines.append(f"factor = {rule.factor!r}")
        if math.isfinite(rule.cap_kph):
            lines.append(f"cap_kph = {rule.cap_kph!r}")
        lines.append("")
    if profile.hour_bands:
        from coverkit.network.hour_bands import hour_bands_toml

        lines.append(hour_bands_toml(profile.hour_bands))
    return "\n".join(lines)


def shipped_profiles() -> list[str]:
    """Names of the profiles shipped with coverkit."""
    folder = resources.files("coverkit.network") / "profiles"
    return sorted(p.name[:-5] for p in folder.iterdir() if p.name.endswith(".toml"))


def load_profile(name_or_path: str | Path) -> Profile:
    """Load a shipped profile by name, or a profile TOML file by path.

    Raises
    ------
    ProfileError
        Unknown name, unreadable file, unknown key or bad value (the message names the key).
    """
    text, where = _profile_text(name_or_path)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ProfileError(f"{where}: not valid TOML ({exc}); fix the syntax.") from None
    return profile_from_dict(data, where=where, source_text=text)


def _profile_text(name_or_path: str | Path) -> tuple[str, str]:
    candidate = Path(name_or_path)
    if candidate.suffix == ".toml" or candidate.exists():
        if not candidate.is_file():
            raise ProfileError(
                f"profile file {candidate} not found; give a shipped profile name "
                f"({', '.join(shipped_profiles())}) or an existing .toml file."
            )
        return candidate.read_text(encoding="utf-8"), str(candidate)
    names = shipped_profiles()
    if str(name_or_path) not in names:
        raise ProfileError(
            f"unknown profile '{name_or_path}'; use one of {', '.join(names)} or a path to a profile .toml file."
        )
    res = resources.files("coverkit.network") / "profiles" / f"{name_or_path}.toml"
    return res.read_text(encoding="utf-8"), f"profile '{name_or_path}'"


def _number(value: object, key: str, where: str, minimum: float = 0.0, strict: bool = False) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ProfileError(f"{where}: key '{key}' must be a number, got {value!r}.")
    value = float(value)
    if not math.isfinite(value) or value < minimum or (strict and value == minimum):
        bound = ">" if strict else ">="
        raise ProfileError(f"{where}: key '{key}' must be a finite number {bound} {minimum:g}, got {value:g}.")
    return value


def profile_from_dict(data: dict, where: str = "profile", source_text: str = "") -> Profile:
    """Validate a parsed profile table and build a :class:`Profile`."""
    unknown = sorted(set(data) - _TOP_KEYS)
    if unknown:
        raise ProfileError(f"{where}: unknown key '{unknown[0]}'; allowed keys are {', '.join(sorted(_TOP_KEYS))}.")
    speeds_raw = data.get("speeds")
    if not isinstance(speeds_raw, dict) or not speeds_raw:
        raise ProfileError(f"{where}: needs a [speeds.<road class>] table for at least one road class.")
    speeds: dict[str, ClassSpeed] = {}
    for cls, rule in speeds_raw.items():
        key = f"speeds.{cls}"
        if not isinstance(rule, dict):
            raise ProfileError(f"{where}: '{key}' must be a table with default_kph, factor, cap_kph.")
        bad = sorted(set(rule) - _CLASS_KEYS)
        if bad:
            raise ProfileError(f"{where}: unknown key '{key}.{bad[0]}'; allowed: default_kph, factor, cap_kph.")
        if "default_kph" not in rule:
            raise ProfileError(f"{where}: '{key}' is missing default_kph (km/h used when the data give no speed).")
        speeds[cls] = ClassSpeed(
            default_kph=_number(rule["default_kph"], f"{key}.default_kph", where, 0.0, strict=True),
            factor=_number(rule.get("factor", 1.0), f"{key}.factor", where, 0.0, strict=True),
            cap_kph=_number(rule.get("cap_kph", math.inf), f"{key}.cap_kph", where, 0.0, strict=True)
            if "cap_kph" in rule
            else math.inf,
        )
    oneway = data.get("oneway", "obey")
    if oneway not in ONEWAY_POLICIES:
        raise ProfileError(f"{where}: key 'oneway' must be one of {', '.join(ONEWAY_POLICIES)}, got {oneway!r}.")
    against_classes = data.get("against_oneway_classes", [])
    if not isinstance(against_classes, list) or not all(isinstance(c, str) for c in against_classes):
        raise ProfileError(f"{where}: key 'against_oneway_classes' must be a list of road class names.")
    stray = sorted(set(against_classes) - set(speeds))
    if stray:
        raise ProfileError(
            f"{where}: 'against_oneway_classes' names '{stray[0]}', which has no [speeds.{stray[0]}] table."
        )
    private = data.get("private_access", False)
    if not isinstance(private, bool):
        raise ProfileError(f"{where}: key 'private_access' must be true or false.")
    reversible = data.get("reversible", "two_way")
    if reversible not in REVERSIBLE_POLICIES:
        raise ProfileError(
            f"{where}: key 'reversible' must be one of {', '.join(REVERSIBLE_POLICIES)}, got {reversible!r}."
        )
    access_keys = data.get("access_keys", list(DEFAULT_ACCESS_KEYS))
    if (
        not isinstance(access_keys, list)
        or not access_keys
        or not all(isinstance(k, str) and k in ACCESS_KEYS for k in access_keys)
    ):
        raise ProfileError(
            f"{where}: key 'access_keys' must be a non-empty list of {', '.join(ACCESS_KEYS)}, got {access_keys!r}."
        )
    name = data.get("name", Path(where).stem)
    if not isinstance(name, str) or not name:
        raise ProfileError(f"{where}: key 'name' must be a non-empty string.")
    hour_bands = ()
    if "hour_bands" in data:
        from coverkit.network.hour_bands import hour_bands_from_dict

        hour_bands = hour_bands_from_dict(data["hour_bands"], list(speeds), where)
    return Profile(
        name=name,
        speeds=speeds,
        signal_delay_s=_number(data.get("signal_delay_s", 0.0), "signal_delay_s", where),
        oneway=oneway,
        against_oneway_factor=_number(data.get("against_oneway_factor", 1.0), "against_oneway_factor", where, 1.0),
        against_oneway_classes=tuple(sorted(against_classes)),
        private_access=private,
        description=str(data.get("description", "")),
        reversible=reversible,
        access_keys=tuple(access_keys),
        turns=turn_rules_from_dict(data.get("turns", {}), where),
        source_text=source_text,
        hour_bands=hour_bands,
    )


_NUMBER_UNIT = re.compile(r"^(\d+(?:[.,]\d+)?)\s*(mph|km/h|kmh|kph|kmph|knots|kn)?$")


def parse_maxspeed_kph(value: object) -> float:
    """Parse an OSM ``maxspeed`` value to km/h; NaN when the class default should apply.

    Handles plain numbers (km/h, the OSM default unit), ``mph`` and ``knots`` suffixes, lists separated by ``;``
    or ``|`` (the lowest value is taken, as the conservative reading for planning), and returns NaN for ``none``,
    ``walk``, ``signals``, ``variable`` and country implicit codes such as ``DE:urban``, so that the profile's
    class default applies. Units follow the OSM wiki key ``maxspeed`` (common practice).

    Parameters
    ----------
    value
        Raw tag value (string, number or None).

    Returns
    -------
    float
        Speed in km/h, or NaN.
    """
    if value is None:
        return math.nan
    if isinstance(value, int | float) and not isinstance(value, bool):
        v = float(value)
        return v if math.isfinite(v) and 0 < v <= 300 else math.nan
    text = str(value).strip().lower()
    if not text:
        return math.nan
    parts = re.split(r"[;|]", text)
    if len(parts) > 1:
        parsed = [parse_maxspeed_kph(p) for p in parts]
        valid = [p for p in parsed if math.isfinite(p)]
        return min(valid) if valid else math.nan
    match = _NUMBER_UNIT.match(text)
    if not match:
        return math.nan
    number = float(match.group(1).replace(",", "."))
    unit = match.group(2) or "km/h"
    kph = number * KPH_PER_MPH if unit == "mph" else number * KPH_PER_KNOT if unit in ("knots", "kn") else number
    return kph if 0 < kph <= 300 else math.nan


def parse_maxspeed_array(values: np.ndarray) -> np.ndarray:
    """Parse many ``maxspeed`` values; distinct strings are parsed once (tag values repeat heavily)."""
    # a hash factorisation, not a sort of millions of strings; missing values take the last slot (NaN)
    codes, uniq = pd.factorize(pd.Series(np.asarray(values, dtype=object), dtype=object), use_na_sentinel=True)
    parsed = np.array([parse_maxspeed_kph(str(u)) for u in uniq] + [math.nan], dtype=float)
    return parsed[codes]
