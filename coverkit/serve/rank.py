"""``POST /api/rank``: each study candidate added alone, as a one-unit station, to the current state.

The current state is the base state with the request's changes in place (:meth:`coverkit.whatif.WhatIf.run`). One
bounded search from every candidate at once on the changed network gives the candidates' times to the demand
points (the arithmetic :class:`coverkit.whatif.WhatIf` uses for an added base, so a candidate's answer equals a
what-if adding it); a point becomes covered when a candidate reaches it within the standard and no station did.
Coverage does not depend on unit counts, so one unit or more at a candidate add the same.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import geopandas as gpd
import numpy as np
import scipy.sparse as sp

from coverkit import CAUTION
from coverkit.demand_sources import unit_word
from coverkit.errors import StudyError
from coverkit.scenario import Scenario
from coverkit.travel import node_times, snap_points
from coverkit.whatif import times_from_nodes


@dataclass(frozen=True)
class CurrentState:
    """The base state with a scenario's changes in place: network, bases, coverage results, snapped bases."""

    network: Any
    bases: gpd.GeoDataFrame
    results: dict
    outcome: Any = None  # the WhatIfOutcome, None for the base state itself


def current_state(state: Any, scenario: Scenario) -> CurrentState:
    """``scenario`` applied to ``state`` (a scenario changing nothing is the base state, searched for nothing)."""
    w = state.whatif
    if not (scenario.closures or scenario.slowdowns or scenario.base_changes):
        return CurrentState(w.net, w.bases, w.results)
    out = w.run(scenario)
    return CurrentState(out.network, out.bases, out.results, out)


def study_candidates(state: Any) -> gpd.GeoDataFrame | None:
    """The study's candidate sites (``[siting] candidates``, in the network CRS), or None without a candidates file."""
    siting = state.study.siting
    if siting is None or not siting.candidates:
        return None
    from coverkit.travel import read_points

    return read_points(siting.candidates, state.whatif.net.crs, what="candidates")


def candidate_times(state: Any, net: Any, candidates: gpd.GeoDataFrame, demand: str) -> tuple[np.ndarray, Any]:
    """Travel times (s, sparse (n_candidates, n_points), within the what-if horizon) from every candidate to the
    points of ``demand`` on ``net``, and the candidates' on-network flags (an off-network candidate has no row)."""
    w = state.whatif
    snap = snap_points(
        net, candidates, max_snap_m=w.base_snap_m, off_network="mask", what="candidates", warn_islands=False
    )
    on = np.asarray(snap.on_network, dtype=bool)
    rows = np.flatnonzero(on)
    pts = w.point_snap[demand]
    times = sp.csr_matrix((len(candidates), len(w.demand[demand])))
    if len(rows):
        sub = snap.subset(rows)
        node_t = node_times(net, sub, w.horizon_s, w.direction)
        r, c, t = times_from_nodes(
            net, node_t, sub, np.arange(len(rows)), pts, np.arange(len(w.demand[demand])), w.horizon_s, w.direction
        )
        times = sp.csr_matrix((t, (rows[r], c)), shape=(len(candidates), len(w.demand[demand])))
    return on, times


def rank_answer(
    state: Any, candidates: gpd.GeoDataFrame | None, scenario: Scenario, standard: str, demand: str
) -> dict[str, Any]:
    """The JSON answer of ``/api/rank``: ``covered_now`` and, per candidate, the demand it newly covers.

    Parameters
    ----------
    state
        The :class:`coverkit.serve.state.BaseState`.
    candidates
        The study's candidate sites (:func:`study_candidates`), or None.
    scenario
        The changes in place (none: the base state).
    standard, demand
        The standard and the demand layer ranked on (names checked by the caller).

    Raises
    ------
    StudyError
        The study has no candidates; an unknown demand layer; a scenario the network or bases refuse.
    """
    if candidates is None or not len(candidates):
        raise StudyError("this study has no candidate sites; give [siting] candidates = FILE in the study to rank.")
    cur = current_state(state, scenario)
    std = next(s for s in state.study.standards if s.name == standard)
    res = cur.results[(standard, demand)].demand
    w = res["weight"].to_numpy(dtype=float)
    covered = res["covered"].to_numpy(dtype=bool)
    covered_now, total = float(w[covered].sum()), float(w.sum())
    on, times = candidate_times(state, cur.network, candidates, demand)
    reach = times.tocoo()
    new = (reach.data <= std.travel_s) & ~covered[reach.col]
    adds = np.bincount(reach.row[new], weights=w[reach.col[new]], minlength=len(candidates))
    ids = candidates["id"].astype(str).to_numpy()
    order = np.lexsort((ids, -adds))
    lonlat = candidates.to_crs("EPSG:4326").geometry
    names = candidates["name"].astype(str).to_numpy() if "name" in candidates else ids
    rows = []
    for rank, i in enumerate(order, start=1):
        rows.append(
            {
                "rank": rank, "id": ids[i], "name": names[i], "lon": round(float(lonlat.iloc[i].x), 6),
                "lat": round(float(lonlat.iloc[i].y), 6), "adds": float(adds[i]),
                "adds_share": float(adds[i] / total) if total else None, "covered_after": covered_now + float(adds[i]),
                "on_network": bool(on[i]),
            }
        )  # fmt: skip
    kind = state.kinds[demand]
    return {
        "scenario": scenario.name,
        "standard": standard,
        "demand": demand,
        "unit": unit_word(kind),
        "covered_now": covered_now,
        "demand_total": total,
        "candidates": rows,
        "caution": CAUTION,
    }


__all__ = ["CurrentState", "candidate_times", "current_state", "rank_answer", "study_candidates"]
