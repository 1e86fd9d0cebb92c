"""Busy units by type: each type's fleet on the calls that need it, with the same hypercube models.

A call needs the unit types named in its ``needs`` field (``engine+medic-als``), or every type when the demand has
no such field. Each type is a separate dispatch system (its units at their bases, closest available first): the
hypercube model of :func:`coverkit.availability.availability` runs on the calls needing that type, at their share of
the call rate, and on the bases holding units of that type, as many units at each as the units table puts there.
A call needing two types occupies one unit of each (the types' systems do not interact in this model).

Results are planning estimates, not for live dispatch or routing.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd

from coverkit.availability import AvailabilityOptions, AvailabilityRun, availability
from coverkit.coverage import Standard
from coverkit.errors import FieldError
from coverkit.network.model import RoadNetwork
from coverkit.units import Fleet

#: The demand field naming the unit types a call needs, joined by ``+``.
NEEDS_FIELD = "needs"


def needs_mask(demand: pd.DataFrame, unit_type: str, types: tuple[str, ...], needs_field: str = NEEDS_FIELD):
    """Per call whether it needs ``unit_type``: its ``needs`` field names it (``engine+medic-als``); every call
    needs every type when the field is absent.

    >>> d = pd.DataFrame({"needs": ["engine+medic-als", "medic-als", None]})
    >>> needs_mask(d, "engine", ("engine", "medic-als")).tolist()
    [True, False, False]

    Raises
    ------
    FieldError
        A call names a type no unit has.
    """
    if needs_field not in demand.columns:
        return np.ones(len(demand), dtype=bool)
    parts = demand[needs_field].fillna("").astype(str).str.split("+")
    named = parts.explode().str.strip()
    unknown = sorted(set(named[named != ""]) - set(types))
    if unknown:
        raise FieldError(
            f"demand field '{needs_field}' names unit type '{unknown[0]}', which no unit has; its types are "
            f"{', '.join(types)} (join several with +)."
        )
    return parts.apply(lambda p: unit_type in [s.strip() for s in p]).to_numpy(dtype=bool)


@dataclass
class TypeAvailability:
    """Each type's hypercube run: ``runs`` by type, the per-unit and per-type tables."""

    runs: dict[str, AvailabilityRun] = field(default_factory=dict)
    units: pd.DataFrame = field(default_factory=pd.DataFrame)
    summary: pd.DataFrame = field(default_factory=pd.DataFrame)


def availability_by_type(
    net: RoadNetwork,
    bases: gpd.GeoDataFrame,
    demand: gpd.GeoDataFrame,
    standard: Standard,
    fleet: Fleet,
    mean_service_min: float,
    *,
    needs_field: str = NEEDS_FIELD,
    **options: Any,
) -> TypeAvailability:
    """The hypercube model per unit type on the calls needing it (see the module notes).

    ``options`` are those of :func:`coverkit.availability.availability` (:class:`~coverkit.availability.
    AvailabilityOptions`). The total call rate is ``calls_per_h`` or the incidents'
    (:func:`coverkit.availability.call_rate_per_h`); a type gets the share of it that its calls carry by weight.
    """
    opts = AvailabilityOptions.of("availability_by_type", options)
    rate = opts.rate_per_h(demand)
    w_all = float(demand["weight"].sum())
    out = TypeAvailability()
    units, rows = [], []
    for unit_type in fleet.types:
        need = needs_mask(demand, unit_type, fleet.types, needs_field)
        if not need.any():
            continue
        count = np.bincount(fleet.base[fleet.type == unit_type], minlength=len(bases))
        held = count > 0
        sub_bases = bases[held].assign(units=count[held]).reset_index(drop=True)
        calls = demand[need].reset_index(drop=True)
        share = float(calls["weight"].sum()) / w_all
        type_options = dataclasses.asdict(opts) | {"calls_per_h": rate * share}
        run = availability(net, sub_bases, calls, standard, mean_service_min, **type_options)
        out.runs[unit_type] = run
        # the hypercube's units go station by station, in the table's order within a station
        mine = np.flatnonzero(fleet.type == unit_type)
        ids = fleet.unit_id[mine[np.argsort(fleet.base[mine], kind="stable")]]
        units.append(run.units.assign(type=unit_type, unit_id=ids))
        rows.append({"type": unit_type, "calls_share": share, **run.summary})
    out.units = pd.concat(units, ignore_index=True) if units else pd.DataFrame()
    out.summary = pd.DataFrame(rows)
    return out


__all__ = ["NEEDS_FIELD", "TypeAvailability", "availability_by_type", "needs_mask"]
