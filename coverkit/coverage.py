"""Coverage against a response standard: who is reached, how many times, by which base, and where the gaps are.

A response standard is a turnout time plus a travel time, met for a fractile of the demand (for example 60 s
turnout + 480 s travel for 90 % of calls; NFPA 1710 quotes such objectives). Travel is outbound, base to demand,
unless ``direction="in"`` is asked for. Everything here is computed from the travel engine in
:mod:`coverkit.travel`; this module adds the bookkeeping and the area layers (first-due areas, gaps) built on a grid
of road-near cells that are themselves snapped and timed like demand points.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import geopandas as gpd
import numpy as np
import pandas as pd
import rasterio.features
import scipy.sparse as sp
import shapely
from affine import Affine

from coverkit import settings
from coverkit.arrivals import check_fleet, unit_columns
from coverkit.demand_sources import POPULATION_SOURCES
from coverkit.errors import CoverkitError, FieldError
from coverkit.memory import check_memory
from coverkit.network.model import RoadNetwork
from coverkit.progress import note
from coverkit.travel import NO_ACCESS_CLASSES, count_within, nearest_sources, point_times, snap_points
from coverkit.travel.reach import NodeReach, nearest_k_nodes, nearest_k_points
from coverkit.unit_reach import fill_beyond
from coverkit.units import Fleet

#: Default search horizon beyond the standard, so response times past the standard are still measured (s).
DEFAULT_HORIZON_S = 3600.0
#: How many due orders are drawn as areas: first-, second- and third-due.
DUE_ORDERS = 3
#: How many nearest bases a demand point reports: first- and second-due.
POINT_ORDERS = 2
#: Default snap limit for demand points (m); farther points are off-network and counted, not moved.
DEFAULT_DEMAND_SNAP_M = settings.SNAP_M
#: Cell size of the area grid behind first-due areas and gap polygons (m).
DEFAULT_CELL_M = settings.AREA_CELL_M
#: Grid cells farther than this from a road carry no area (m): nobody is reached off the road network's reach.
DEFAULT_REACH_M = settings.AREA_REACH_M
#: Grid cells up to this far from a road are assigned a first-due base (m); farther cells are left unassigned.
DEFAULT_ASSIGN_M = 3000.0
#: Peak bytes per cell while the area grid is built and snapped (cell centres, their points and the snap's
#: candidate arrays; measured on the demo county, rounded up).
GRID_CELL_BYTES = 600


@dataclass(frozen=True)
class Standard:
    """A response standard: turnout + travel time, to be met for a fractile of the demand.

    Attributes
    ----------
    name
        Label, e.g. ``"ALS travel"``.
    travel_s
        Travel time objective (s).
    turnout_s
        Turnout time (s) added to every travel time (crew from alarm to rolling).
    fractile
        Share of demand (by weight) that should be reached within ``turnout_s + travel_s`` (0..1).
    source
        Where the standard comes from (e.g. ``"NFPA 1710"``), shown in reports.
    unit_type, nth
        Judge the ``nth`` arriving unit of this type (``"engine"``, 1: the first engine) instead of the first base
        (needs a units table, :mod:`coverkit.units`).
    personnel
        Judge the time at which the staffing of the arriving units, nearest first, adds up to this many people.
    assignment
        Judge the time at which a whole assignment has arrived: ``(("engine", 2), ("ladder", 1))``, each unit counted
        once (the latest of the required arrivals). At most one of ``unit_type``, ``personnel``, ``assignment``.
    """

    name: str
    travel_s: float
    turnout_s: float = settings.TURNOUT_S
    fractile: float = settings.FRACTILE
    source: str = ""
    unit_type: str | None = None
    nth: int = 1
    personnel: int | None = None
    assignment: tuple[tuple[str, int], ...] = ()

    @property
    def kind(self) -> str:
        """What the standard judges: ``"base"`` (the first base), ``"unit_type"``, ``"personnel"`` or
        ``"assignment"``."""
        if self.unit_type is not None:
            return "unit_type"
        if self.personnel is not None:
            return "personnel"
        return "assignment" if self.assignment else "base"

    def _check_units(self) -> None:
        given = [k for k, v in (("unit_type", self.unit_type), ("personnel", self.personnel)) if v is not None]
        given += ["assignment"] if self.assignment else []
        if len(given) > 1:
            raise CoverkitError(
                f"standard '{self.name}' gives both {given[0]} and {given[1]}; a standard judges one of unit_type, "
                "personnel or assignment: split it into two standards."
            )
        if self.nth != 1 and self.unit_type is None:
            raise CoverkitError(f"standard '{self.name}': nth goes with unit_type (the nth unit of that type).")
        if not (isinstance(self.nth, int | np.integer) and self.nth >= 1):
            raise CoverkitError(f"standard '{self.name}': nth must be a whole number >= 1, got {self.nth}.")
        if self.personnel is not None and not (self.personnel == int(self.personnel) and self.personnel > 0):
            raise CoverkitError(f"standard '{self.name}': personnel must be a whole number > 0, got {self.personnel}.")
        for unit_type, count in self.assignment:
            if not (count == int(count) and count > 0):
                raise CoverkitError(
                    f"standard '{self.name}': assignment {unit_type} = {count}; give a whole number of units > 0."
                )

    def __post_init__(self) -> None:
        self._check_units()
        if not (self.travel_s > 0):
            raise CoverkitError(f"standard '{self.name}': travel time must be > 0 s, got {self.travel_s}.")
        if self.turnout_s < 0:
            raise CoverkitError(f"standard '{self.name}': turnout must be >= 0 s, got {self.turnout_s}.")
        if not (0 < self.fractile <= 1):
            raise CoverkitError(f"standard '{self.name}': fractile must be in (0, 1], e.g. 0.9; got {self.fractile}.")

    @property
    def response_s(self) -> float:
        """Turnout plus travel (s)."""
        return self.turnout_s + self.travel_s

    def describe(self, with_source: bool = True) -> str:
        """One line for maps and reports (the source in brackets unless ``with_source`` is false)."""
        parts = (
            f"{self.turnout_s:g} s turnout + {self.travel_s:g} s travel"
            if self.turnout_s
            else f"{self.travel_s:g} s travel"
        )
        src = f" ({self.source})" if self.source and with_source else ""
        return f"{self.name}: {self.judged()}{parts}, {self.fractile * 100:g} % of demand{src}"

    def unreached_text(self) -> str:
        """Words for a time not known: "not reached" within the search horizon (for a standard judging units too:
        their arrivals are filled up to the horizon, :mod:`coverkit.unit_reach`)."""
        return "not reached"

    def judged(self) -> str:
        """What arrives, in words, with a trailing ``" in "`` (empty for a plain standard).

        >>> Standard("x", 240, unit_type="engine", nth=2).judged(), Standard("y", 480, personnel=15).judged()
        ('second engine in ', '15 people on scene in ')
        """
        if self.kind == "unit_type":
            nth = {1: "first", 2: "second", 3: "third"}.get(self.nth, f"{self.nth}th")
            return f"{nth} {self.unit_type} in "
        if self.kind == "personnel":
            return f"{self.personnel:g} people on scene in "
        if self.kind == "assignment":
            return "assignment " + " + ".join(f"{n} {t}" for t, n in self.assignment) + " in "
        return ""


def weighted_fractile(values: np.ndarray, weights: np.ndarray | None, q: float) -> float:
    """Weighted fractile by the inverted empirical CDF: the smallest value ``v`` whose cumulative weight share
    (values <= v) reaches ``q``.

    With equal weights this is numpy's ``percentile(..., method="inverted_cdf")`` (Hyndman & Fan 1996, "Sample
    quantiles in statistical packages", The American Statistician 50(4), definition 1). Unreached demand
    (``inf``) counts as slower than any time, so a fractile that falls on it is ``inf``.

    Parameters
    ----------
    values
        Response times (s), ``inf`` where not reached.
    weights
        Non-negative weights (same shape), or None for equal weights.
    q
        Fractile in (0, 1].
    """
    values = np.asarray(values, dtype=float)
    w = np.ones_like(values) if weights is None else np.asarray(weights, dtype=float)
    keep = w > 0
    values, w = values[keep], w[keep]
    if len(values) == 0:
        return float("nan")
    order = np.argsort(values, kind="stable")
    cum = np.cumsum(w[order])
    total = cum[-1]
    # a small relative tolerance so that shares like 0.9 of 10 equal weights hit exactly the 9th value
    idx = int(np.searchsorted(cum, q * total * (1 - 1e-12), side="left"))
    return float(values[order][min(idx, len(values) - 1)])


@dataclass
class CoverageResult:
    """Per demand point results and the inputs behind them.

    Attributes
    ----------
    demand
        GeoDataFrame, one row per demand point in input order: the input's ``id`` and ``weight``, ``travel_s``
        (to the first-due base; inf when none within the horizon), ``response_s`` (turnout + travel),
        ``first_base``, ``second_base`` (base ids, "" when none), ``second_travel_s``, ``depth`` (bases within
        the travel standard), ``covered``, ``on_network``, ``snap_m`` and the input's other columns. Files get
        NULL for both inf and "" (:func:`coverkit.atomic.null_missing`).
    bases
        The bases used (GeoDataFrame with ``id``).
    standard
        The standard evaluated.
    times
        Sparse (n_bases, n_demand) travel times within the travel standard (s): the reached pairs behind depth
        and the per base figures. First- and second-due times beyond the standard, up to the horizon, are in
        ``demand``.
    """

    demand: gpd.GeoDataFrame
    bases: gpd.GeoDataFrame
    standard: Standard
    times: sp.csr_matrix
    horizon_s: float
    direction: str = "out"
    extra: dict = field(default_factory=dict)

    def summary(self) -> dict:
        """Headline figures: demand covered (weight and share), fractile response, off-network demand."""
        d = self.demand
        w = d["weight"].to_numpy(dtype=float)
        total = float(w.sum())
        on = d["on_network"].to_numpy(dtype=bool)
        depth = d["depth"].to_numpy()
        covered = float(w[d["covered"].to_numpy(dtype=bool)].sum())
        off = float(w[~on].sum())
        frac_resp = weighted_fractile(d["response_s"].to_numpy(), w, self.standard.fractile)
        return {
            "standard": self.standard.name,
            "standard_text": self.standard.describe(),
            "demand_points": len(d),
            "demand_total": total,
            "covered": covered,
            "covered_share": covered / total if total else float("nan"),
            "uncovered": total - covered,
            "covered_once": float(w[depth == 1].sum()),
            "covered_twice_or_more": float(w[depth >= 2].sum()),
            "fractile": self.standard.fractile,
            "fractile_response_s": frac_resp,
            "meets_standard": bool(frac_resp <= self.standard.response_s),
            "off_network": off,
            "off_network_points": int((~on).sum()),
            **self._expected_cover(w, total),
        }

    def _expected_cover(self, w: np.ndarray, total: float) -> dict:
        """Expected covered demand from the travel-time spread (``p_in_standard``, :mod:`coverkit.spread`), if any."""
        if "p_in_standard" not in self.demand.columns:
            return {}
        expected = float(np.sum(w * self.demand["p_in_standard"].to_numpy(dtype=float)))
        return {"expected_covered": expected, "expected_covered_share": expected / total if total else float("nan")}


@dataclass
class TravelTable:
    """Travel times from bases to points within a horizon, reusable across standards.

    Attributes
    ----------
    base_snap, point_snap
        Snapped bases and points.
    times
        Sparse (n_bases, n_points) travel times (s) within :attr:`stored_s`.
    within_s
        ``None``: ``times`` holds every pair within the horizon. A number (s): ``times`` holds the pairs within it
        only (the reached area of each base, which is what depth and the per base figures need), and the nearest
        bases up to the horizon come from one multi-source search per order (:mod:`coverkit.travel.reach`).
    nearest
        With ``within_s``: per point the :data:`POINT_ORDERS` nearest bases and their times up to the horizon, as
        :func:`coverkit.travel.nearest_sources` gives them.
    node_reach
        With ``within_s``: the :data:`DUE_ORDERS` nearest bases of every node up to the horizon (reused for the
        area grid).
    """

    base_snap: object
    point_snap: object
    times: sp.csr_matrix
    horizon_s: float
    direction: str
    within_s: float | None = None
    nearest: tuple[np.ndarray, np.ndarray] | None = None
    node_reach: NodeReach | None = None

    @property
    def stored_s(self) -> float:
        """The bound of the stored per-base times (s): ``within_s``, else the horizon."""
        return self.horizon_s if self.within_s is None else float(self.within_s)

    def nearest_bases(self, k: int) -> tuple[np.ndarray, np.ndarray]:
        """The ``k`` nearest bases of every point and their times up to the horizon: (source, time_s), each of
        shape (n_points, k), as :func:`coverkit.travel.nearest_sources` of the full table gives them."""
        if self.nearest is None:
            return nearest_sources(self.times, k=k)
        src, t = self.nearest
        if src.shape[1] < k:
            raise ValueError(f"the table holds {src.shape[1]} nearest bases per point; {k} are asked for")
        return src[:, :k], t[:, :k]


def demand_exclude_classes(points: object) -> tuple[str, ...]:
    """Road classes demand points must not snap onto.

    Population (raster cells, polygon shares) lives beside the roads it is reached from, never on a carriageway, so
    it skips :data:`~coverkit.travel.NO_ACCESS_CLASSES`; incident points keep every class (crashes happen on
    motorways).
    """
    area = isinstance(points, gpd.GeoDataFrame) and "source" in points.columns and len(points) > 0
    return NO_ACCESS_CLASSES if area and points["source"].iloc[0] in POPULATION_SOURCES else ()


def travel_table(
    net: RoadNetwork,
    bases: gpd.GeoDataFrame,
    points: gpd.GeoDataFrame | np.ndarray,
    horizon_s: float,
    max_snap_m: float = DEFAULT_DEMAND_SNAP_M,
    base_snap_m: float = DEFAULT_DEMAND_SNAP_M,
    direction: str = "out",
    what: str = "demand points",
    *,
    within_s: float | None = None,
    orders: int = POINT_ORDERS,
    node_reach: NodeReach | None = None,
) -> TravelTable:
    """Snap bases (off-network is an error) and points (off-network is counted) and time every pair in range.

    Parameters
    ----------
    within_s
        Store per-base times within this bound only (s, e.g. the longest travel standard) and take the ``orders``
        nearest bases up to ``horizon_s`` from multi-source searches: memory and time then grow with the pairs
        each base reaches within the bound, not with bases x points. Default: every pair within the horizon.
    orders
        With ``within_s``: how many nearest bases per point to keep (2: first and second due).
    node_reach
        With ``within_s``: the nodes' nearest bases for these bases at this horizon when already searched.
    """
    if len(bases) == 0:
        raise CoverkitError("no bases given; add at least one base (id, lon, lat).")
    note(f"coverage: snapping {len(bases)} bases and {len(points):,} {what}")
    base_snap = snap_points(net, bases, max_snap_m=base_snap_m, off_network="raise", what="bases")
    point_snap = snap_points(
        net,
        points,
        max_snap_m=max_snap_m,
        off_network="mask",
        what=what,
        warn_islands=False,
        exclude_classes=demand_exclude_classes(points),
    )
    if within_s is None or within_s >= horizon_s:
        note(f"coverage: searching from {len(bases)} bases (horizon {horizon_s:g} s)")
        times = point_times(net, base_snap, point_snap, horizon_s, direction=direction)
        return TravelTable(base_snap, point_snap, times, float(horizon_s), direction)
    return bounded_table(net, base_snap, point_snap, horizon_s, within_s, direction, orders, node_reach)


def bounded_table(
    net: RoadNetwork,
    base_snap: object,
    point_snap: object,
    horizon_s: float,
    within_s: float,
    direction: str,
    orders: int,
    node_reach: NodeReach | None = None,
) -> TravelTable:
    """A :class:`TravelTable` storing per-base times within ``within_s`` and the ``orders`` nearest bases of every
    point up to ``horizon_s`` (from :func:`coverkit.travel.reach.nearest_k_nodes`, :data:`DUE_ORDERS` per node,
    unless ``node_reach`` is given)."""
    if node_reach is None:
        note(f"coverage: nearest bases of every node ({DUE_ORDERS} multi-source searches, horizon {horizon_s:g} s)")
        node_reach = nearest_k_nodes(net, base_snap, horizon_s, direction, k=max(DUE_ORDERS, orders))
    nearest = nearest_k_points(net, base_snap, point_snap, node_reach, k=orders)
    note(f"coverage: searching from {len(base_snap)} bases within {within_s:g} s")
    times = point_times(net, base_snap, point_snap, within_s, direction=direction)
    return TravelTable(base_snap, point_snap, times, float(horizon_s), direction, float(within_s), nearest, node_reach)


def times_within(times: sp.csr_matrix, within_s: float) -> sp.csr_matrix:
    """The stored entries of a sparse time table that are <= ``within_s`` (stored zeros kept, order kept)."""
    times = sp.csr_matrix(times)
    keep = times.data <= within_s
    if keep.all():
        return times
    row = np.repeat(np.arange(times.shape[0]), np.diff(times.indptr))[keep]
    indptr = np.concatenate([[0], np.cumsum(np.bincount(row, minlength=times.shape[0]))])
    return sp.csr_matrix((times.data[keep], times.indices[keep], indptr), shape=times.shape)


def default_horizon_s(standard: Standard) -> float:
    """Search horizon: the larger of 3 x the travel standard and :data:`DEFAULT_HORIZON_S`."""
    return float(max(DEFAULT_HORIZON_S, 3 * standard.travel_s))


def evaluate_coverage(
    net: RoadNetwork,
    bases: gpd.GeoDataFrame,
    demand: gpd.GeoDataFrame,
    standard: Standard,
    horizon_s: float | None = None,
    max_snap_m: float = DEFAULT_DEMAND_SNAP_M,
    base_snap_m: float = DEFAULT_DEMAND_SNAP_M,
    direction: str = "out",
    table: TravelTable | None = None,
    *,
    nearest: tuple[np.ndarray, np.ndarray] | None = None,
    fleet: Fleet | None = None,
) -> CoverageResult:
    """Travel from every base to every demand point; first- and second-due base, depth and coverage.

    Parameters
    ----------
    net
        Road network.
    bases
        Bases (GeoDataFrame with ``id``, in the network CRS). A base off the network is an error.
    demand
        Demand points (GeoDataFrame with ``id``, ``weight``, in the network CRS).
    standard
        The response standard.
    horizon_s
        Search bound (s): travel times beyond it are "not reached". Default: the larger of the standard's travel
        time x 3 and :data:`DEFAULT_HORIZON_S`.
    max_snap_m, base_snap_m
        Snap limits for demand points (off-network ones are counted) and bases (off-network ones are an error).
    direction
        ``"out"`` (base to demand, the default) or ``"in"`` (demand to base).
    table
        Travel times already computed by :func:`travel_table` for these bases and demand points (other standards
        of the same study reuse them); horizon and direction then come from the table. Default: a table storing
        per-base times within the standard only, the first and second due up to the horizon from multi-source
        searches (:func:`bounded_table`).
    nearest
        ``nearest_sources(table.times, k=2)`` when the caller already has it (several standards on one table).
    fleet
        The units at the bases (:mod:`coverkit.units`). With it the demand gets the first arrival per type
        (``first_<type>_s``) and the people on scene in time (``personnel_in_time``), and a standard by type or
        force sets ``travel_s``, ``response_s`` and ``covered`` to what it judges (:mod:`coverkit.arrivals`; times
        past the standard up to the horizon from :mod:`coverkit.unit_reach`, ``inf`` beyond). Without it nothing
        changes.
    """
    check_fleet(fleet, standard)
    if table is None:
        horizon_s = float(horizon_s or default_horizon_s(standard))
        table = travel_table(
            net, bases, demand, horizon_s, max_snap_m, base_snap_m, direction, within_s=standard.travel_s
        )
    elif standard.travel_s > table.stored_s:
        bound = "search horizon" if table.within_s is None else "stored travel times' bound"
        raise CoverkitError(
            f"standard '{standard.name}' ({standard.travel_s:g} s) exceeds the {bound} {table.stored_s:g} s; "
            "raise the horizon (or the bound)."
        )
    horizon_s, direction = table.horizon_s, table.direction
    base_snap, dem_snap = table.base_snap, table.point_snap
    times = times_within(table.times, standard.travel_s)
    src, t = table.nearest_bases(POINT_ORDERS) if nearest is None else nearest
    depth = count_within(times, standard.travel_s)
    base_ids = bases["id"].astype(str).to_numpy()
    first = np.where(src[:, 0] >= 0, base_ids[np.maximum(src[:, 0], 0)], "")
    second = np.where(src[:, 1] >= 0, base_ids[np.maximum(src[:, 1], 0)], "")
    out = demand.copy()
    travel = t[:, 0]
    cols = {
        "travel_s": travel,
        "response_s": travel + standard.turnout_s,
        "first_base": first.astype(object),
        "second_base": second.astype(object),
        "second_travel_s": t[:, 1],
        "depth": depth.astype(np.int64),
        "covered": travel <= standard.travel_s,
        "on_network": dem_snap.on_network,
        "snap_m": dem_snap.dist_m,
    }
    if fleet is not None:
        cols = _with_units(cols, times, fleet, standard, net, table)
    for name, values in cols.items():
        out[name] = values
    lead = ["id", "weight", *cols]
    out = out[[*lead, *[c for c in out.columns if c not in lead]]]
    extra = {"base_snap": base_snap, "demand_snap": dem_snap, "table": table}
    if fleet is not None:
        extra["fleet"] = fleet
    return CoverageResult(out, bases, standard, times, horizon_s, direction, extra)


def _with_units(
    cols: dict, times: sp.csr_matrix, fleet: Fleet, standard: Standard, net: RoadNetwork, table: TravelTable
) -> dict:
    """The demand columns with the fleet's: per-type first arrivals and people in time after ``depth``; a standard
    by type or force judging ``travel_s``, ``response_s`` and ``covered`` (the other columns keep the bases). The
    arrival times past the standard are filled up to the horizon (:mod:`coverkit.unit_reach`)."""
    unit_cols, judged = unit_columns(times, fleet, standard)
    unit_cols, judged = fill_beyond(net, table, fleet, standard, unit_cols, judged)
    cols = dict(cols)
    if judged is not None:
        cols["travel_s"] = judged
        cols["response_s"] = judged + standard.turnout_s
        cols["covered"] = judged <= standard.travel_s
    lead = {k: v for k, v in cols.items() if k not in ("on_network", "snap_m")}
    return {**lead, **unit_cols, "on_network": cols["on_network"], "snap_m": cols["snap_m"]}


def compliance_by(result: CoverageResult, field_name: str) -> pd.DataFrame:
    """Compliance per value of a demand field (e.g. ``priority``, ``zone``): weight, covered share, fractile."""
    d = result.demand
    if field_name not in d.columns:
        raise FieldError(f"demand has no field '{field_name}' to group by; fields: {', '.join(d.columns[:15])}.")
    rows = []
    q = result.standard.fractile
    for key, grp in d.groupby(field_name, sort=True):
        w = grp["weight"].to_numpy(dtype=float)
        total = float(w.sum())
        cov = float(w[grp["covered"].to_numpy()].sum())
        rows.append(
            {
                field_name: key,
                "points": len(grp),
                "demand": total,
                "covered": cov,
                "covered_share": cov / total if total else float("nan"),
                "fractile_response_s": weighted_fractile(grp["response_s"].to_numpy(), w, q),
            }
        )
    table = pd.DataFrame(rows)
    table["meets_standard"] = table["fractile_response_s"] <= result.standard.response_s
    return table


def compliance_by_zone(result: CoverageResult, zones: gpd.GeoDataFrame, id_field: str) -> pd.DataFrame:
    """Compliance per zone polygon (census block, town, district): each demand point counts in the zone it lies in.

    Points outside every zone are reported under the zone id ``"(outside zones)"``.
    """
    if id_field not in zones.columns:
        raise FieldError(f"zones layer has no field '{id_field}'; fields: {', '.join(map(str, zones.columns))}.")
    zones = zones.to_crs(result.demand.crs)
    tree = shapely.STRtree(zones.geometry.to_numpy())
    pts = result.demand.geometry.to_numpy()
    pi, zi = tree.query(pts, predicate="within")
    zone_of = np.full(len(pts), "(outside zones)", dtype=object)
    order = np.lexsort((zi, pi))  # first zone by index when zones overlap: deterministic
    pi, zi = pi[order], zi[order]
    first = np.r_[True, pi[1:] != pi[:-1]] if len(pi) else np.zeros(0, bool)
    zone_of[pi[first]] = zones[id_field].astype(str).to_numpy()[zi[first]]
    tmp = CoverageResult(
        result.demand.assign(_zone=zone_of),
        result.bases,
        result.standard,
        result.times,
        result.horizon_s,
        result.direction,
    )
    return compliance_by(tmp, "_zone").rename(columns={"_zone": id_field})


def per_base(result: CoverageResult) -> pd.DataFrame:
    """Per base: first-due demand (weight and share), covered first-due demand, demand it reaches in standard."""
    d = result.demand
    w = d["weight"].to_numpy(dtype=float)
    total = float(w.sum())
    within = result.times.tocoo()
    ok = within.data <= result.standard.travel_s
    reach_w = np.bincount(within.row[ok], weights=w[within.col[ok]], minlength=len(result.bases))
    ids = result.bases["id"].astype(str).to_numpy()
    # the points of each base in input order (a stable sort by base): every sum below adds the same values in the
    # same order as a boolean mask per base would, so the figures are identical to the last bit
    names = pd.unique(ids)
    code = pd.Index(names).get_indexer(d["first_base"].to_numpy(dtype=object))
    order = np.argsort(code, kind="stable")
    bounds = np.searchsorted(code[order], np.arange(len(names) + 1), side="left")
    covered, sole = d["covered"].to_numpy(dtype=bool), d["depth"].to_numpy() == 1
    where = dict(zip(names, range(len(names)), strict=True))
    rows = []
    for i, base in enumerate(ids):
        j = where[base]
        mine = order[bounds[j] : bounds[j + 1]]
        wm = w[mine]
        rows.append(
            {
                "base_id": base,
                "first_due_demand": float(wm.sum()),
                "first_due_share": float(wm.sum() / total) if total else float("nan"),
                "first_due_covered": float(wm[covered[mine]].sum()),
                "reaches_in_standard": float(reach_w[i]),
                "sole_cover": float(wm[sole[mine]].sum()),
            }
        )
    return pd.DataFrame(rows)


#: Gap columns counting uncovered demand are named ``uncovered_<what they count>`` (people, calls, demand).
GAP_COUNT_PREFIX = "uncovered_"
#: Status of a due-area row whose places no base reaches (in k-th place) within the search horizon.
NOT_REACHED = "not reached"


def demand_unit(demand: gpd.GeoDataFrame) -> str:
    """What a demand layer's weights count: ``"people"`` (raster, polygons), ``"calls"`` (points) or ``"demand"``."""
    if "source" in demand.columns and len(demand):
        return {"raster": "people", "polygons": "people", "points": "calls"}.get(
            str(demand["source"].iloc[0]), "demand"
        )
    return "demand"


@dataclass
class AreaLayers:
    """Polygons built on the area grid: first-, second- and third-due areas, gaps and single-coverage areas.

    ``due[k]`` (k = 0, 1, 2) partitions the study area by the base that reaches each place in (k+1)-th place, one
    row per base (``base_id``, ``status`` ``"reached"``) plus one row ``base_id`` None, ``status`` ``"not reached"``
    for the places no base reaches in that place within the horizon. ``depth_grid`` holds the coverage depth per
    cell (-1 where no road is within reach). ``gaps`` counts only uncovered demand, one ``uncovered_<unit>``
    column per demand layer counted; ``demand_gap_id`` (``incident_gap_id``) gives, per point of the coverage
    result (of the incidents), the gap it falls in (0 when covered). ``uncovered_outside`` is, per count column,
    the uncovered demand lying outside every gap (outside the grid; normally 0).
    """

    first_due: gpd.GeoDataFrame
    gaps: gpd.GeoDataFrame
    single: gpd.GeoDataFrame
    depth_grid: np.ndarray
    transform: Affine
    demand_gap_id: np.ndarray
    grid: AreaGrid
    due: list[gpd.GeoDataFrame] = field(default_factory=list)
    incident_gap_id: np.ndarray | None = None
    uncovered_outside: dict[str, float] = field(default_factory=dict)

    @property
    def second_due(self) -> gpd.GeoDataFrame:
        """Second-due areas (same partition of the study area as :attr:`first_due`)."""
        return self.due[1]

    @property
    def third_due(self) -> gpd.GeoDataFrame:
        """Third-due areas (same partition of the study area as :attr:`first_due`)."""
        return self.due[2]

    def gap_counts(self) -> list[str]:
        """The ``uncovered_*`` columns of :attr:`gaps`, in order (the first is the coverage result's own)."""
        return gap_count_columns(self.gaps)


def gap_count_columns(gaps: pd.DataFrame) -> list[str]:
    """The columns of a gaps table counting uncovered demand (``uncovered_people``, ``uncovered_calls`` ...)."""
    return [c for c in gaps.columns if str(c).startswith(GAP_COUNT_PREFIX)]


@dataclass
class AreaGrid:
    """The cells of the study extent, their road-timed subset and its travel table (reusable across standards)."""

    nrow: int
    ncol: int
    cell_m: float
    transform: Affine
    on: np.ndarray  # flat indices of cells assigned to the road network (within ``assign_m`` of a road)
    near: np.ndarray  # per entry of ``on``: within ``reach_m`` of a road (counts for depth, gaps, single cover)
    table: TravelTable
    area: object = None  # the study area (shapely polygon, network CRS) the due areas partition
    fill: np.ndarray | None = None  # per cell (flat): position in ``on`` of the timed cell standing for it, -1 none


def area_grid(
    net: RoadNetwork,
    result: CoverageResult,
    cell_m: float = DEFAULT_CELL_M,
    reach_m: float = DEFAULT_REACH_M,
    assign_m: float = DEFAULT_ASSIGN_M,
    *,
    area: object = None,
    points: tuple[gpd.GeoDataFrame, ...] = (),
) -> AreaGrid:
    """Cells of ``cell_m`` over the study extent, those near a road timed from the bases through their nearest road.

    Cells within ``reach_m`` of a road count for coverage depth, gaps and single coverage; cells within
    ``assign_m`` of a road are snapped and timed; every other cell stands in for by its nearest timed cell (exact
    Euclidean distance transform), so that the due areas tile the whole study area, off-road land included.

    Parameters
    ----------
    area
        The study area (a shapely polygon in the network CRS, e.g. the jurisdiction's boundary), which the due
        areas partition. Default: the rectangle of the network's nodes.
    points
        Further point layers (e.g. incidents) the grid must hold, besides ``result.demand``. Points farther than
        ``assign_m`` beyond the network's rectangle do not widen it (they are off the network anyway).
    """
    from scipy.ndimage import distance_transform_edt

    nx0, ny0, nx1, ny1 = net.node_bounds()
    if area is None:
        area = shapely.box(nx0, ny0, nx1, ny1)
    boxes = [np.array([nx0, ny0, nx1, ny1]), np.asarray(area.bounds, dtype=float)]
    reach_box = shapely.box(nx0, ny0, nx1, ny1).buffer(assign_m, join_style="mitre")
    for frame in (result.demand, *points):
        xy = shapely.get_coordinates(frame.geometry.to_numpy())
        xy = xy[shapely.contains_xy(reach_box, xy[:, 0], xy[:, 1])]
        if len(xy):
            boxes.append(np.concatenate([xy.min(axis=0), xy.max(axis=0)]))
    x0, y0 = np.min([b[:2] for b in boxes], axis=0)
    x1, y1 = np.max([b[2:] for b in boxes], axis=0)
    ncol = int(np.ceil((x1 - x0) / cell_m)) + 1
    nrow = int(np.ceil((y1 - y0) / cell_m)) + 1
    check_memory(
        f"the area grid of {nrow:,} x {ncol:,} cells of {cell_m:g} m",
        nrow * ncol * GRID_CELL_BYTES,
        "a coarser grid cell, a smaller study area, or a cluster",
    )
    transform = Affine(cell_m, 0, x0 - cell_m / 2, 0, -cell_m, y1 + cell_m / 2)
    rr, cc = np.mgrid[0:nrow, 0:ncol]
    cx = transform.c + (cc.ravel() + 0.5) * cell_m
    cy = transform.f - (rr.ravel() + 0.5) * cell_m
    cells = shapely.points(np.column_stack([cx, cy]))
    snap = snap_points(
        net,
        cells,
        max_snap_m=max(assign_m, reach_m),
        off_network="mask",
        what="grid cells",
        warn_islands=False,
        measure_far=False,
        positions=False,  # cells are only timed
    )
    del cells, rr, cc, cx, cy  # millions of points: freed before the cells are timed
    on = np.flatnonzero(snap.on_network)
    near = snap.dist_m[on] <= reach_m
    note(
        f"coverage: timing {len(on):,} grid cells of {cell_m:g} m ({int(near.sum()):,} within {reach_m:g} m of a road)"
    )
    fill = np.full(nrow * ncol, -1, dtype=np.int64)
    if len(on):
        position = np.full(nrow * ncol, -1, dtype=np.int64)
        position[on] = np.arange(len(on))
        off = np.ones(nrow * ncol, dtype=bool)
        off[on] = False
        ri, ci = distance_transform_edt(off.reshape(nrow, ncol), return_distances=False, return_indices=True)
        fill = position[(ri * ncol + ci).ravel()]
    sub = snap.subset(on)
    base_snap = result.extra["base_snap"]
    made = result.extra.get("table")
    if made is not None and made.within_s is not None:
        # the cells like the demand: per-base times within the demand table's bound, the due orders from the nodes
        table = bounded_table(
            net, base_snap, sub, result.horizon_s, made.within_s, result.direction, DUE_ORDERS, made.node_reach
        )
    else:
        times = point_times(net, base_snap, sub, result.horizon_s, direction=result.direction)
        table = TravelTable(base_snap, sub, times, result.horizon_s, result.direction)
    return AreaGrid(nrow, ncol, cell_m, transform, on, near, table, area, fill)


def _due_areas(grid: AreaGrid, source: np.ndarray, base_ids: np.ndarray, crs: object) -> gpd.GeoDataFrame:
    """The study area split by ``source`` (base index per timed cell, -1 not reached): one row per base, then the
    row of places not reached. Every cell takes the value of the timed cell standing for it; the cell squares are
    clipped to the study area, so the rows tile it exactly."""
    nrow, ncol = grid.nrow, grid.ncol
    per_cell = np.full(nrow * ncol, -1, dtype=np.int64)
    if len(source):
        per_cell = np.where(grid.fill >= 0, source[np.maximum(grid.fill, 0)], -1)
    polys = grid_polygons(per_cell.reshape(nrow, ncol), grid.transform, crs, valid=np.ones((nrow, ncol), dtype=bool))
    polys = polys.dissolve("value", as_index=False)
    polys["geometry"] = shapely.intersection(polys.geometry.to_numpy(), grid.area)
    polys = polys[~polys.geometry.is_empty]
    value = polys["value"].to_numpy(dtype=int)
    reached = value >= 0
    out = gpd.GeoDataFrame(
        {
            "base_id": np.where(reached, base_ids[np.maximum(value, 0)], None).astype(object),
            "status": np.where(reached, "reached", NOT_REACHED).astype(object),
        },
        geometry=polys.geometry.to_numpy(),
        crs=crs,
    )
    out["area_km2"] = out.area / 1e6
    # bases in input order, the places not reached last
    order = np.lexsort((value, ~reached))
    return out.iloc[order].reset_index(drop=True)


def first_due_by_type(grid: AreaGrid, result: CoverageResult) -> gpd.GeoDataFrame | None:
    """Per unit type of the result's fleet, the study area split by the base whose unit of that type arrives first
    within the standard's travel time (places farther from every such unit are the row "not reached"), as
    :attr:`AreaLayers.first_due` splits it by the first base; column ``type``. None without a fleet."""
    from coverkit.arrivals import arrivals

    fleet, std = result.extra.get("fleet"), result.standard
    if fleet is None:
        return None
    arr = arrivals(times_within(grid.table.times, std.travel_s), fleet, std.travel_s)
    base_ids = result.bases["id"].astype(str).to_numpy()
    frames = []
    for unit_type in fleet.types:
        mine = fleet.type[arr.unit] == unit_type
        pt, unit = arr.point[mine], arr.unit[mine]
        first = np.r_[True, pt[1:] != pt[:-1]] if len(pt) else np.zeros(0, dtype=bool)
        source = np.full(len(grid.on), -1, dtype=np.int64)
        source[pt[first]] = fleet.base[unit[first]]
        frames.append(_due_areas(grid, source, base_ids, result.demand.crs).assign(type=unit_type))
    out = pd.concat(frames, ignore_index=True)
    return gpd.GeoDataFrame(out[["type", *[c for c in out.columns if c != "type"]]], crs=result.demand.crs)


def area_layers(
    net: RoadNetwork,
    result: CoverageResult,
    incidents: CoverageResult | gpd.GeoDataFrame | None = None,
    cell_m: float = DEFAULT_CELL_M,
    reach_m: float = DEFAULT_REACH_M,
    grid: AreaGrid | None = None,
    *,
    area: object = None,
) -> AreaLayers:
    """Due areas, gaps (contiguous uncovered areas) and areas covered only once, as polygons.

    The extent is divided into ``cell_m`` cells; cells whose centre lies within ``reach_m`` of a road are snapped
    and timed like demand points (same engine, same standard). Cells holding an uncovered demand point (of
    ``result`` or of ``incidents``) are uncovered too, so that every uncovered point falls inside exactly one gap
    and the gap figures add up to the uncovered demand; covered points are never counted. Gaps are labelled by
    8-connectivity and sorted by the uncovered demand of ``result``, then area.

    Parameters
    ----------
    incidents
        A second demand layer counted in the gaps (e.g. calls beside residents): its :class:`CoverageResult`
        under the same standard, or that result's ``demand`` frame (it must carry ``covered``).
    area
        The study area the due areas partition (shapely polygon in the network CRS); used when the grid is built
        here. Default: the rectangle of the network's nodes.
    """
    crs = result.demand.crs
    counted = [result.demand]
    if incidents is not None:
        frame = incidents.demand if isinstance(incidents, CoverageResult) else incidents
        if "covered" not in frame.columns:
            raise ValueError("incidents for the gaps need their coverage: pass their CoverageResult")
        if frame is not result.demand:
            counted.append(frame.to_crs(crs) if frame.crs != crs else frame)
    if grid is None:
        grid = area_grid(net, result, cell_m, reach_m, area=area, points=tuple(counted[1:]))
    nrow, ncol, transform, on = grid.nrow, grid.ncol, grid.transform, grid.on
    times = grid.table.times
    cell_m = grid.cell_m
    if result.standard.travel_s > grid.table.stored_s:
        raise ValueError("the area grid's stored times end before this standard: build the grid for it")
    src, t = grid.table.nearest_bases(DUE_ORDERS)
    depth_on = count_within(times, result.standard.travel_s)
    near = grid.near
    depth_grid = np.full(nrow * ncol, -1, dtype=np.int32)  # -1: no road within reach
    depth_grid[on[near]] = depth_on[near]
    uncovered = np.zeros(nrow * ncol, dtype=bool)
    uncovered[on[near]] = _cell_times(grid, result, t[:, 0])[near] > result.standard.travel_s

    # the cell of every uncovered point (-1 outside the grid); a cell holding covered demand only stays out
    point_cells, point_unc = [], []
    for frame in counted:
        xy = shapely.get_coordinates(frame.geometry.to_numpy())
        col = np.floor((xy[:, 0] - transform.c) / cell_m).astype(np.int64)
        row = np.floor((transform.f - xy[:, 1]) / cell_m).astype(np.int64)
        inside = (col >= 0) & (col < ncol) & (row >= 0) & (row < nrow)
        cell = np.where(inside, row * ncol + col, -1)
        unc = ~frame["covered"].to_numpy(dtype=bool)
        uncovered[cell[unc & inside]] = True
        point_cells.append(cell)
        point_unc.append(unc)
    base_ids = result.bases["id"].astype(str).to_numpy()
    due = [_due_areas(grid, src[:, k], base_ids, crs) for k in range(DUE_ORDERS)]

    labels_grid = label_regions(uncovered.reshape(nrow, ncol)).ravel()
    n_lab = int(labels_grid.max())
    names, sums, gap_of_points, outside = [], [], [], {}
    for frame, cell, unc in zip(counted, point_cells, point_unc, strict=True):
        name = f"{GAP_COUNT_PREFIX}{demand_unit(frame)}"
        while name in names:  # two layers counting the same thing keep apart
            name += "_2"
        lab = np.where(unc & (cell >= 0), labels_grid[np.maximum(cell, 0)], 0)
        w = frame["weight"].to_numpy(dtype=float)
        sums.append(np.bincount(lab[unc], weights=w[unc], minlength=n_lab + 1))
        outside[name] = float(w[unc & (lab == 0)].sum())
        names.append(name)
        gap_of_points.append(lab)
    gaps = grid_polygons(labels_grid.reshape(nrow, ncol), transform, crs, valid=labels_grid.reshape(nrow, ncol) > 0)
    label_to_gap = np.zeros(n_lab + 1, dtype=np.int64)
    if len(gaps):
        gaps = gaps.dissolve("value", as_index=False)
        lab = gaps["value"].to_numpy(dtype=int)
        for name, total in zip(names, sums, strict=True):
            gaps[name] = total[lab]
        gaps["area_km2"] = gaps.area / 1e6
        gaps = gaps.sort_values([names[0], "area_km2", "value"], ascending=[False, False, True]).reset_index(drop=True)
        gaps.insert(0, "gap_id", np.arange(1, len(gaps) + 1))
        label_to_gap[gaps["value"].to_numpy(dtype=int)] = gaps["gap_id"].to_numpy()
        gaps = gaps.drop(columns="value")
        gaps = gaps[["gap_id", *names, "area_km2", "geometry"]]
    else:
        empty = {"gap_id": [], **{name: [] for name in names}, "area_km2": []}
        gaps = gpd.GeoDataFrame(empty, geometry=[], crs=crs)

    single_mask = (depth_grid == 1).reshape(nrow, ncol)
    single = grid_polygons(single_mask.astype(np.int32), transform, crs, valid=single_mask)
    single = single.dissolve(as_index=False)[["geometry"]] if len(single) else single
    if len(single):
        single["area_km2"] = single.area / 1e6
    return AreaLayers(
        due[0],
        gaps,
        single,
        depth_grid.reshape(nrow, ncol),
        transform,
        label_to_gap[gap_of_points[0]],
        grid,
        due=due,
        incident_gap_id=label_to_gap[gap_of_points[1]] if len(counted) > 1 else None,
        uncovered_outside=outside,
    )


def _cell_times(grid: AreaGrid, result: CoverageResult, first_s: np.ndarray) -> np.ndarray:
    """Per timed cell the travel time the standard judges: the first base's, or for a standard by type or force the
    fleet's (:mod:`coverkit.arrivals`), so that gaps follow that standard."""
    fleet, std = result.extra.get("fleet"), result.standard
    if fleet is None or std.kind == "base":
        return first_s
    return unit_columns(times_within(grid.table.times, std.travel_s), fleet, std)[1]


def label_regions(mask: np.ndarray) -> np.ndarray:
    """Label the 8-connected regions of a boolean grid: 1, 2, ... per region, 0 outside (int32, same shape)."""
    from scipy.ndimage import label

    labels, _ = label(mask, structure=np.ones((3, 3), dtype=int))
    return labels.astype(np.int32)


def grid_polygons(grid: np.ndarray, transform: Affine, crs: object, valid: np.ndarray) -> gpd.GeoDataFrame:
    """Polygons of the 8-connected cells of equal value in ``grid`` where ``valid``: column ``value``, in ``crs``."""
    shapes = list(rasterio.features.shapes(grid.astype(np.int32), mask=valid, transform=transform, connectivity=8))
    geoms = [shapely.geometry.shape(g) for g, _ in shapes]
    values = [int(v) for _, v in shapes]
    return gpd.GeoDataFrame({"value": values}, geometry=geoms, crs=crs)
