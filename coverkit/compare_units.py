"""Standards by unit type or force compared before and after a scenario, on the what-if's travel tables.

Why a module of its own: the incremental what-if (:class:`coverkit.whatif.WhatIf`) keeps, per demand layer, every
base's times up to the horizon before and after a scenario, and evaluates the plain standards on them. A standard
judging units needs the same times plus the units at the bases (:mod:`coverkit.arrivals`): here each such standard is
evaluated on the what-if's tables with the study's fleet before, and after with the fleet on the bases that remain
(:meth:`coverkit.units.Fleet.at_bases`: a removed base takes its units with it, a moved one keeps them, an added one
holds none). No search runs here; the tables are the what-if's.
"""

from __future__ import annotations

from coverkit.coverage import CoverageResult, Standard, evaluate_coverage
from coverkit.units import Fleet
from coverkit.whatif import WhatIf, WhatIfOutcome


def plain_twin(standard: Standard) -> Standard:
    """A standard judging the first base with ``standard``'s times: what the what-if searches for when a study has
    no plain standard (its results are not reported)."""
    return Standard(f"{standard.name} (bases)", standard.travel_s, standard.turnout_s, standard.fractile)


def unit_results(
    whatif: WhatIf, outcome: WhatIfOutcome, standards: list[Standard], fleet: Fleet
) -> tuple[dict[tuple[str, str], CoverageResult], dict[tuple[str, str], CoverageResult], list[str]]:
    """``standards`` (by unit type or force) on every demand layer before and after ``outcome``.

    Returns
    -------
    before, after
        ``{(standard name, demand name): CoverageResult}``.
    notes
        Lines for the change log: the units that left with a removed base, the bases added without units.
    """
    ids_before = whatif.bases["id"].astype(str).tolist()
    ids_after = outcome.bases["id"].astype(str).tolist()
    fleet_after = fleet.at_bases(ids_before, ids_after)
    before, after = {}, {}
    for name, dem in whatif.demand.items():
        table_after = next(r for (_s, d), r in outcome.results.items() if d == name).extra["table"]
        for s in standards:
            before[(s.name, name)] = evaluate_coverage(
                whatif.net, whatif.bases, dem, s, table=whatif.tables[name], fleet=fleet
            )
            after[(s.name, name)] = evaluate_coverage(
                outcome.network, outcome.bases, dem, s, table=table_after, fleet=fleet_after
            )
    return before, after, _notes(fleet, fleet_after, ids_before, ids_after)


def _notes(fleet: Fleet, fleet_after: Fleet, ids_before: list[str], ids_after: list[str]) -> list[str]:
    """What the change of bases did to the units, in words."""
    gone = sorted(set(fleet.unit_id.tolist()) - set(fleet_after.unit_id.tolist()))
    added = [b for b in ids_after if b not in ids_before]
    out = []
    if gone:
        out.append(f"units leaving with their removed bases: {', '.join(gone)}")
    if fleet_after.gone_types:
        out.append(f"no unit left of type {', '.join(fleet_after.gone_types)}: their arrivals never come")
    if added:
        out.append(f"added bases {', '.join(added)} hold no units of the units table (add rows there to count them)")
    return out


__all__ = ["plain_twin", "unit_results"]
