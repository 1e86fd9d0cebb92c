"""``simulate``: the calls of a study through its fleet (and a scenario's), replicated, with 95 % intervals.

The figures are planning estimates from a model of the response system (the model is stated in
:mod:`coverkit.simulate.kernel` and in :data:`MODEL_NOTES`), not for live dispatch; validate them locally against
the response record. Local standards and medical direction decide what is acceptable.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import geopandas as gpd
import numpy as np
import pandas as pd

from coverkit import settings
from coverkit.errors import PARAM, FieldError
from coverkit.network.model import RoadNetwork
from coverkit.progress import note
from coverkit.simulate import aggregate
from coverkit.simulate.calls import (
    CallSource,
    priority_codes,
    rate_source,
    replay_source,
    service_seconds,
    weekly_source,
)
from coverkit.simulate.replicate import SimInputs, run_replications
from coverkit.simulate.system import Fleet, cover_rules, fleet_on_network
from coverkit.simulate.variates import check_spread

#: The model in words, for the report and the command's output (one home).
MODEL_NOTES = (
    "Dispatch: the free unit with the shortest network travel time (from the engine's base-to-point table).",
    "A unit is busy from dispatch until it clears the call (turnout + travel + service), then drives back to its "
    "base and may be sent again on the way.",
    "A unit sent while returning is timed as its remaining return plus its base's time to the new call: an upper "
    "bound on the time from where it is (exact at the base).",
    "Calls that find every unit busy wait first come first served within priority, or go to mutual aid after the "
    "stated wait (at once with a zero queue); those are counted, not timed.",
    "Cover rules, when given (EMPTY:FROM:MINUTES): a station without a free unit for that long gets the free unit "
    "of the named station with the least way home left; it answers from there until a unit of that station is "
    "free at home again. Moves are counted.",
)


@dataclass
class SimulationRun:
    """A simulation's tables (per replication and across them) and, with a scenario, its difference."""

    cfg: settings.SimulationSettings
    source: CallSource
    summary: pd.DataFrame
    intervals: pd.DataFrame
    units: pd.DataFrame
    groups: pd.DataFrame
    dispatch: pd.DataFrame
    points: gpd.GeoDataFrame
    bases: gpd.GeoDataFrame
    trace: np.ndarray
    standards: tuple
    hist: np.ndarray  # (replications, bins) calls per response-time bin (metrics.HIST_EDGES_S)
    after: SimulationRun | None = None
    difference: pd.DataFrame | None = None
    notes: tuple[str, ...] = field(default=MODEL_NOTES)


def call_source(demand: gpd.GeoDataFrame, cfg: settings.SimulationSettings) -> CallSource:
    """The calls ``cfg`` asks for: replayed incidents, or synthetic calls at a rate or at the record's weekly rate."""
    mode = cfg.calls or ("replay" if cfg.time_field in demand.columns and cfg.calls_per_h is None else "synthetic")
    if mode not in settings.SIM_CALLS:
        raise FieldError(f"{PARAM} must be 'replay' or 'synthetic', got '{mode}'.", param="calls")
    if mode == "synthetic" and cfg.calls_per_h:
        if cfg.hours is None:
            raise FieldError(
                f"synthetic calls at a given rate need {PARAM}, the simulated span in hours.", param="hours"
            )
        prio, labels = priority_codes(demand, cfg.priority_field)
        service = service_seconds(demand, cfg.service_field)
        return rate_source(demand["weight"].to_numpy(float), cfg.calls_per_h, cfg.hours, prio, labels, service)
    replay = replay_source(demand, cfg.time_field, cfg.priority_field, cfg.service_field)
    return replay if mode == "replay" else weekly_source(replay, cfg.hours)


def _check(cfg: settings.SimulationSettings) -> None:
    for name, what in (("service_cv", "service-time"), ("turnout_cv", "turnout"), ("travel_cv", "travel-time")):
        check_spread(getattr(cfg, name), name, what)
    if cfg.service_dist not in settings.SIM_SERVICE_DISTS:
        raise FieldError(
            f"{PARAM} must be 'lognormal' or 'exponential', got '{cfg.service_dist}'.", param="service_dist"
        )
    if cfg.queue not in settings.QUEUES:
        raise FieldError(f"{PARAM} must be 'infinite' or 'zero', got '{cfg.queue}'.", param="queue")
    if not (cfg.replications >= 1):
        raise FieldError(f"{PARAM} must be >= 1, got {cfg.replications}.", param="replications")
    if cfg.mutual_aid_after_s is not None and not (cfg.mutual_aid_after_s >= 0):
        raise FieldError(f"{PARAM} must be >= 0 s, got {cfg.mutual_aid_after_s}.", param="mutual_aid_after_s")


def point_zones(demand: gpd.GeoDataFrame, zones: gpd.GeoDataFrame | None, id_field: str | None):
    """Zone code of each demand point (-1 outside every zone) and the zone labels, or None without zones."""
    if zones is None or id_field is None:
        return None
    z = zones[[id_field, "geometry"]].to_crs(demand.crs).reset_index(drop=True)
    hit = gpd.sjoin(demand[["geometry"]].reset_index(drop=True), z, how="left", predicate="within")
    hit = hit[~hit.index.duplicated(keep="first")]
    labels = tuple(str(v) for v in z[id_field])
    codes = hit["index_right"].fillna(-1).astype(np.int64).to_numpy()
    return codes, labels


def _points_layer(demand: gpd.GeoDataFrame, fleet: Fleet, reps, standards) -> gpd.GeoDataFrame:
    """Per demand point: calls per replication, share meeting each standard, first-due base (simulated)."""
    calls = sum(r.point_calls for r in reps).astype(float)
    out = demand[["id", "geometry"]].copy()
    out["calls"] = calls / len(reps)
    with np.errstate(invalid="ignore", divide="ignore"):
        for j, std in enumerate(standards):
            from coverkit.layer_names import slug

            out[f"covered_share_{slug(std.name)}"] = sum(r.point_covered[j] for r in reps) / calls
    out["first_due_base"] = np.array(fleet.base_id)[fleet.first_due] if len(out) else []
    out.loc[~fleet.served, "first_due_base"] = ""
    return out


def _bases_layer(bases: gpd.GeoDataFrame, units: pd.DataFrame) -> gpd.GeoDataFrame:
    """Per base: its units' mean utilisation and calls per replication."""
    mean = units[units["replication"] == "all"].groupby("base_id", sort=False)
    per = pd.DataFrame({"units": mean.size(), "utilisation": mean["utilisation"].mean(), "calls": mean["calls"].sum()})
    out = bases[["id", "geometry"]].rename(columns={"id": "base_id"}).copy()
    out["base_id"] = out["base_id"].astype(str)
    return out.merge(per, left_on="base_id", right_index=True, how="left")


def _tables(reps, demand, bases, fleet, inputs, cfg) -> SimulationRun:
    summary = aggregate.summary_table(reps)
    units = aggregate.units_table(reps)
    return SimulationRun(
        cfg, inputs.source, summary, aggregate.interval_table(summary), units, aggregate.groups_table(reps),
        aggregate.dispatch_table(reps, fleet.base_id), _points_layer(demand, fleet, reps, inputs.standards),
        _bases_layer(bases, units), reps[0].trace, inputs.standards, np.stack([r.hist for r in reps]),
    )  # fmt: skip


def simulate(
    net: RoadNetwork,
    bases: gpd.GeoDataFrame,
    demand: gpd.GeoDataFrame,
    standards,
    cfg: settings.SimulationSettings,
    *,
    after: tuple[RoadNetwork, gpd.GeoDataFrame] | None = None,
    zones: tuple[np.ndarray, tuple[str, ...]] | None = None,
    max_snap_m: float = settings.SNAP_M,
    processes: int | None = None,
) -> SimulationRun:
    """Simulate the calls of ``demand`` through the units at ``bases`` (``units`` column, default 1 each).

    Parameters
    ----------
    standards
        Response standards (:class:`coverkit.coverage.Standard`): each call's wait + turnout + travel is held to
        each one's turnout + travel; turnout defaults to the first standard's.
    cfg
        The simulation's settings (:class:`coverkit.settings.SimulationSettings`).
    after
        A changed system (network and bases, e.g. a scenario applied): run on the same calls and draws, and its
        difference reported with a paired 95 % interval.
    zones
        Zone code per demand point and the zone labels (:func:`point_zones`), for compliance per zone.
    processes
        Worker processes for the replications (default: the CPUs available); the figures do not depend on it.
    """
    _check(cfg)
    standards = tuple(standards)
    source = call_source(demand, cfg)
    turnout = float(standards[0].turnout_s if cfg.turnout_s is None else cfg.turnout_s)
    fleets = [fleet_on_network(net, bases, demand, max_snap_m)]
    if after is not None:
        fleets.append(fleet_on_network(after[0], after[1], demand, max_snap_m))
    for fleet in fleets:  # the cover rules name bases of every system (checked before any replication runs)
        cover_rules(cfg.cover, fleet.base_id)
    inputs = SimInputs(source, tuple(fleets), cfg, standards, turnout, zones)
    note(f"simulate: {cfg.replications} replications of {source.mode} calls through {len(fleets[0].unit_id)} units")
    results = run_replications(inputs, int(cfg.replications), processes)
    run = _tables([r[0] for r in results], demand, bases, fleets[0], inputs, cfg)
    if after is not None:
        run.after = _tables([r[1] for r in results], demand, after[1], fleets[1], inputs, cfg)
        run.difference = aggregate.difference_table(run.summary, run.after.summary)
    return run
