"""A profile's ``[turns]`` table: whether OSM turn restrictions are obeyed and what each kind of turn costs.

Turns are told apart by the change of heading at the junction (the last piece of the edge driven in against the first
piece of the edge driven out): within ``straight_deg`` either way it is straight on, beyond ``uturn_deg`` (or back
onto the same road piece) a U-turn, otherwise a left or a right turn by its sign. The costs are seconds added to the
trip at the junction, on top of the edges' own times (signal delays stay on the edges).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from coverkit.errors import ProfileError

RESTRICTION_POLICIES = ("obey", "ignore")
_KEYS = ("restrictions", "straight_s", "right_s", "left_s", "uturn_s", "straight_deg", "uturn_deg")


@dataclass(frozen=True)
class TurnRules:
    """Turn restrictions and turn costs of a profile (all times in seconds, angles in degrees).

    The defaults (restrictions ignored, every cost 0) leave times as on a network without turns; a profile turns
    them on in its ``[turns]`` table.

    Examples
    --------
    >>> TurnRules().active, TurnRules(left_s=8.0).has_costs
    (False, True)
    """

    restrictions: str = "ignore"
    straight_s: float = 0.0
    right_s: float = 0.0
    left_s: float = 0.0
    uturn_s: float = 0.0
    straight_deg: float = 30.0
    uturn_deg: float = 150.0

    @property
    def has_costs(self) -> bool:
        """Whether any turn costs time."""
        return any(c > 0 for c in (self.straight_s, self.right_s, self.left_s, self.uturn_s))

    @property
    def obeys(self) -> bool:
        """Whether OSM turn restrictions are obeyed."""
        return self.restrictions == "obey"

    @property
    def active(self) -> bool:
        """Whether searches may need the turn-aware graph (restrictions obeyed or any cost set)."""
        return self.obeys or self.has_costs


def turn_rules_from_dict(data: object, where: str) -> TurnRules:
    """Check a parsed ``[turns]`` table and build :class:`TurnRules`.

    Raises
    ------
    ProfileError
        Not a table, an unknown key, a bad policy, a negative or non-finite cost, or angles out of order.
    """
    if not isinstance(data, dict):
        raise ProfileError(f"{where}: 'turns' must be a table ([turns]) with keys {', '.join(_KEYS)}.")
    unknown = sorted(set(data) - set(_KEYS))
    if unknown:
        raise ProfileError(f"{where}: unknown key 'turns.{unknown[0]}'; allowed keys are {', '.join(_KEYS)}.")
    policy = data.get("restrictions", "ignore")
    if policy not in RESTRICTION_POLICIES:
        raise ProfileError(
            f"{where}: key 'turns.restrictions' must be one of {', '.join(RESTRICTION_POLICIES)}, got {policy!r}."
        )
    values = {}
    for key in _KEYS[1:]:
        value = data.get(key, getattr(TurnRules, key))
        if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value) or value < 0:
            raise ProfileError(f"{where}: key 'turns.{key}' must be a finite number >= 0, got {value!r}.")
        values[key] = float(value)
    if not values["straight_deg"] < values["uturn_deg"] <= 180.0:
        raise ProfileError(
            f"{where}: keys 'turns.straight_deg' ({values['straight_deg']:g}) and 'turns.uturn_deg' "
            f"({values['uturn_deg']:g}) must satisfy straight_deg < uturn_deg <= 180."
        )
    return TurnRules(restrictions=policy, **values)


def turn_rules_toml(rules: TurnRules) -> list[str]:
    """The ``[turns]`` table as TOML lines (for :func:`coverkit.network.profile.profile_to_toml`)."""
    lines = ["[turns]", f'restrictions = "{rules.restrictions}"']
    lines += [f"{key} = {getattr(rules, key)!r}" for key in _KEYS[1:]]
    return [*lines, ""]
