"""A study's simulation: its ``[simulation]`` section (or the defaults) with a caller's overrides, on its inputs,
optionally beside a scenario (the same calls through the changed system).

Nothing is written until the whole simulation has run: bad input stops it with one line and no output.
"""

from __future__ import annotations

import dataclasses
import shutil
from pathlib import Path

import geopandas as gpd

from coverkit import settings
from coverkit.errors import CoverkitError, StudyError
from coverkit.simulate.run import SimulationRun, point_zones, simulate


def simulation_settings(study, **overrides) -> settings.SimulationSettings:
    """The study's ``[simulation]`` settings (defaults without one), with every override that is not None."""
    cfg = study.simulation or settings.SimulationSettings()
    given = {k: v for k, v in overrides.items() if v is not None}
    return dataclasses.replace(cfg, **given) if given else cfg


def spread_is_given(study, overrides: dict) -> bool:
    """Whether the travel spread was set (by the caller or the study's ``[simulation]``), not left to the data."""
    return overrides.get("travel_cv") is not None or "travel_cv" in study.raw.get("simulation", {})


def with_observed_spread(study, net, bases, cfg: settings.SimulationSettings) -> settings.SimulationSettings:
    """``cfg`` with the travel spread fitted to ``[calibration]``'s observed trips
    (:mod:`coverkit.simulate.travel_spread`)."""
    from coverkit.calibrate import read_observed
    from coverkit.simulate.travel_spread import travel_cv_from_observed

    observed = read_observed(str(study.calibration.observed), base_ids=bases["id"].astype(str).tolist())
    cv = travel_cv_from_observed(net, bases, observed, study.bases.snap_m)
    return dataclasses.replace(cfg, travel_cv=cv, travel_cv_source=f"fitted to {study.calibration.observed.name}")


def study_settings(study, net, bases, overrides: dict) -> settings.SimulationSettings:
    """The settings a study's simulation runs with: ``[simulation]``, the caller's overrides, and the travel spread
    from the study's ``[travel_spread]`` fit, else ``[calibration]``'s observed trips, when neither sets it."""
    cfg = simulation_settings(study, **overrides)
    if getattr(study, "spread", None) is not None and not spread_is_given(study, overrides):
        from coverkit.simulate.travel_spread import travel_cv_from_spread

        cv = travel_cv_from_spread(study.spread)
        return dataclasses.replace(cfg, travel_cv=cv, travel_cv_source=f"the spread fit {study.spread.source}")
    if study.calibration and not spread_is_given(study, overrides):
        cfg = with_observed_spread(study, net, bases, cfg)
    return cfg


def simulation_demand(study, kinds: dict[str, str], cfg: settings.SimulationSettings) -> str:
    """The demand layer whose calls are simulated: ``demand`` when set, else the first incidents layer, else the
    first layer."""
    if cfg.demand is not None:
        if cfg.demand not in kinds:
            raise StudyError(
                f"{study.path}: simulation.demand = '{cfg.demand}' is not a [[demand]] name; use one of "
                f"{', '.join(kinds)}."
            )
        return cfg.demand
    return next((n for n, k in kinds.items() if k == "incidents"), next(iter(kinds)))


def study_simulation(study, net, bases, demand, kinds, snaps, cfg, *, after=None, processes=None) -> SimulationRun:
    """The simulation of a loaded study (``demand``, ``kinds``, ``snaps`` as :func:`coverkit.study.load_inputs`
    gives them)."""
    name = simulation_demand(study, kinds, cfg)
    zones = None
    if study.zones:
        from coverkit.stages import read_zones

        z: gpd.GeoDataFrame = read_zones(study.zones.file, study.zones.id_field, layer=study.zones.layer)
        zones = point_zones(demand[name], z, study.zones.id_field)
    return simulate(
        net, bases, demand[name], study.standards, dataclasses.replace(cfg, demand=name), after=after, zones=zones,
        processes=processes, max_snap_m=snaps.get(name, settings.SNAP_M),
    )  # fmt: skip


def simulate_study(
    study_path: str | Path, out: str | Path, *, scenario_path: str | Path | None = None, processes=None, **overrides
) -> tuple[SimulationRun, dict[str, Path]]:
    """Simulate a study (and a scenario beside it) and write the files into ``out``; the run and the paths."""
    from coverkit.compare_run import study_inputs
    from coverkit.scenario import apply_scenario, load_scenario
    from coverkit.simulate.outputs import write_simulation
    from coverkit.study import load_study

    out = Path(out)
    study = load_study(study_path)
    cfg = simulation_settings(study, **overrides)
    scenario = load_scenario(scenario_path) if scenario_path else None
    created = not out.exists()
    try:
        inputs = study_inputs(study_path, cache_folder=out)
        net, bases = inputs["network"], inputs["bases"]
        cfg = study_settings(study, net, bases, overrides)
        after = None
        if scenario is not None:
            net2, bases2, _ = apply_scenario(net, bases, scenario)
            after = (net2, bases2)
        run = study_simulation(study, net, bases, inputs["demand"], inputs["kinds"], inputs["snaps"], cfg,
                               after=after, processes=processes)  # fmt: skip
    except CoverkitError:
        if created:  # the network cache is all a failed run may have left: nothing is written
            shutil.rmtree(out, ignore_errors=True)
        raise
    return run, write_simulation(run, out)
