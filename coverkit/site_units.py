"""Where the next unit of a type should go: at an existing base or a candidate site, judged by arrivals.

Coverage by the first unit of a type, by a force of people or by an assignment is not a plain covering model (a
point is covered by a set of units, not by one site), so the answer here is a greedy choice followed by
interchange (Teitz & Bart 1968, "Heuristic methods for estimating the generalized vertex median of a weighted
graph", Operations Research 16(5), the swap step), every trial evaluated exactly with
:mod:`coverkit.arrivals` on the travel engine's per-site times. With one unit to add every site is tried, so the
answer is the best one (no gap); with more, no bound is known and none is claimed.

Results are planning estimates, not for live dispatch or routing.
"""

from __future__ import annotations

from dataclasses import dataclass

import geopandas as gpd
import numpy as np
import pandas as pd

from coverkit.arrivals import arrivals, check_fleet, standard_time
from coverkit.coverage import Standard, travel_table
from coverkit.errors import PARAM, CoverkitError
from coverkit.network.model import RoadNetwork
from coverkit.progress import note
from coverkit.units import Fleet

#: Relative gain an interchange must bring to be taken (guards against swapping on float noise).
SWAP_TOLERANCE = 1e-12


@dataclass
class UnitPlan:
    """The chosen sites of the added units, in order, and the figures before and after."""

    chosen: gpd.GeoDataFrame  # step, site_id, site_kind, added_demand, covered, covered_share
    summary: dict


def _judged(standard: Standard, unit_type: str) -> Standard:
    """The standard the new unit is judged by: as given when it judges units, else the first unit of the type."""
    if standard.kind != "base":
        return standard
    return Standard(
        standard.name, standard.travel_s, standard.turnout_s, standard.fractile, standard.source, unit_type=unit_type
    )


def _with_units(fleet: Fleet, sites: list[int], unit_type: str, staffing: int) -> Fleet:
    """The fleet plus one unit of ``unit_type`` at each site index in ``sites`` (sites 0.. are the bases)."""
    n = len(sites)
    return Fleet(
        np.concatenate([fleet.unit_id, np.array([f"new-{i + 1}" for i in range(n)], dtype=object)]),
        np.concatenate([fleet.base, np.asarray(sites, dtype=np.int64)]),
        np.concatenate([fleet.type, np.array([unit_type] * n, dtype=object)]),
        np.concatenate([fleet.staffing, np.full(n, staffing, dtype=np.int64)]),
        fleet.hours + ((0, 24),) * n,
        fleet.source,
    )


def place_units(
    net: RoadNetwork,
    bases: gpd.GeoDataFrame,
    candidates: gpd.GeoDataFrame,
    demand: gpd.GeoDataFrame,
    standard: Standard,
    fleet: Fleet,
    unit_type: str,
    add: int = 1,
    *,
    staffing: int | None = None,
    max_snap_m: float | None = None,
    base_snap_m: float | None = None,
) -> UnitPlan:
    """Add ``add`` units of ``unit_type`` (each with ``staffing`` people; default the type's median crew, else 1)
    at bases or candidate sites so that the most demand weight meets ``standard`` (its own kind when it judges
    units, else the first unit of ``unit_type``): greedy, then interchange until no swap gains.
    """
    if not (isinstance(add, int) and add >= 1):
        raise CoverkitError(f"{PARAM} must be a whole number of units >= 1, got {add}.", param="add")
    judged = _judged(standard, unit_type)
    crew = fleet.staffing[fleet.type == unit_type]
    staffing = int(staffing or (np.median(crew) if len(crew) else 1))
    if staffing < 1:
        raise CoverkitError(f"{PARAM} must be 1 or more people, got {staffing}.", param="staffing")
    extended = _with_units(fleet, [0], unit_type, staffing)  # the new type counts as held for the checks
    check_fleet(extended, judged)
    sites = pd.concat(
        [
            bases[["id", "geometry"]].assign(site_kind="base"),
            candidates[["id", "geometry"]].assign(site_kind="candidate"),
        ],
        ignore_index=True,
    )
    sites = gpd.GeoDataFrame(sites, geometry="geometry", crs=bases.crs)
    options = {k: v for k, v in (("max_snap_m", max_snap_m), ("base_snap_m", base_snap_m)) if v is not None}
    table = travel_table(net, sites, demand, judged.travel_s, what="demand points", **options)
    w = demand["weight"].to_numpy(dtype=float) * table.point_snap.on_network

    def value(chosen: list[int]) -> float:
        f = _with_units(fleet, chosen, unit_type, staffing)
        t = standard_time(arrivals(table.times, f, judged.travel_s), f, judged)
        return float(w[t <= judged.travel_s].sum())

    note(f"siting: placing {add} {unit_type} unit(s) over {len(sites)} sites, greedy then interchange")
    before = value([])
    chosen: list[int] = []
    for _ in range(add):
        gains = [value([*chosen, s]) for s in range(len(sites))]
        chosen.append(int(np.argmax(gains)))
    best = value(chosen)
    improved = add > 1
    while improved:
        improved = False
        for i in range(len(chosen)):
            for s in range(len(sites)):
                trial = [*chosen[:i], s, *chosen[i + 1 :]]
                v = value(trial)
                if v > best + SWAP_TOLERANCE * max(best, 1.0):
                    chosen, best, improved = trial, v, True
    total = float(demand["weight"].sum())  # off-network demand counts as not covered, as in coverage
    return _plan(sites, chosen, value, before, best, judged, unit_type, staffing, total, add)


def _plan(sites, chosen, value, before, best, judged, unit_type, staffing, total, add) -> UnitPlan:
    """The chosen sites with what each adds in turn, and the summary."""
    rows, prev = [], before
    for k in range(len(chosen)):
        v = value(chosen[: k + 1])
        rows.append({"step": k + 1, "added_demand": v - prev, "covered": v, "covered_share": v / total})
        prev = v
    picked = sites.iloc[chosen].reset_index(drop=True)
    out = gpd.GeoDataFrame(
        pd.concat([picked[["id", "site_kind"]].rename(columns={"id": "site_id"}), pd.DataFrame(rows)], axis=1),
        geometry=picked.geometry.to_numpy(),
        crs=sites.crs,
    )
    summary = {
        "unit_type": unit_type,
        "staffing": staffing,
        "units_added": add,
        "standard": judged.describe(),
        "method": "greedy plus interchange, every trial evaluated exactly",
        "best_possible": "yes: every site tried" if add == 1 else "not known (no bound)",
        "covered_before": before,
        "covered_after": best,
        "covered_share_before": before / total if total else float("nan"),
        "covered_share_after": best / total if total else float("nan"),
    }
    return UnitPlan(
        out[["step", "site_id", "site_kind", "added_demand", "covered", "covered_share", "geometry"]], summary
    )


__all__ = ["UnitPlan", "place_units"]
