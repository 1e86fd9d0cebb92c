"""A study compared before and after a scenario, and the what-if base state of a study file.

Study-level orchestration on top of :mod:`coverkit.scenario` (scenario files, applying them, comparing coverage)
and :mod:`coverkit.study` (study files, their inputs and network cache): :func:`compare_study` runs a study's
coverage before and after a scenario and writes the layers and a table; :func:`whatif_from_study` builds a
:class:`coverkit.whatif.WhatIf` from a study file.
"""

from __future__ import annotations

import shutil
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import geopandas as gpd
import pandas as pd

from coverkit import CAUTION
from coverkit.atomic import write_csv_atomic, write_gpkg_layers
from coverkit.compare_units import plain_twin, unit_results
from coverkit.demand_sources import row_word, unit_word
from coverkit.errors import CoverkitError
from coverkit.layer_names import layer_name, output_file
from coverkit.network.model import RoadNetwork
from coverkit.progress import Steps
from coverkit.scenario import (
    ChangeLog,
    Scenario,
    changed_areas,
    compare_results,
    load_scenario,
)
from coverkit.study import (
    Study,
    cached_network,
    load_fleet,
    load_inputs,
    load_study,
    refuse_unit_standards,
    reusable_network,
)
from coverkit.study_errors import study_keys
from coverkit.whatif import WhatIf


def _study_network(study: Study, cache_folder: str | Path | None) -> RoadNetwork:
    """The study's network: its own output folder's cache when valid (read only), else built and cached."""
    own = study.folder / study.outputs.folder
    net = reusable_network(own / "network.gpkg", study.network_cache_key())
    if net is not None:
        return net
    net, _, _ = cached_network(study, Path(cache_folder) if cache_folder else own)
    return net


@study_keys
def study_inputs(
    study_path: str | Path, cache_folder: str | Path | None = None, *, with_units: bool = False
) -> dict[str, Any]:
    """The inputs of a study, loaded as :func:`coverkit.study.run_study` does: network (cached), bases, demand.

    The network is reused from the study's own output folder when a valid cache is there (read only), otherwise
    built and cached in ``cache_folder`` (default: the study's output folder). Bases and demand come from
    :func:`coverkit.study.load_inputs`, the loader :func:`coverkit.study.run_study` uses.

    Without ``with_units`` a study with standards by unit type or force is refused (the what-if and the web page
    do not evaluate them); with it the study's units come too.

    Returns
    -------
    dict
        ``study``, ``network``, ``bases``, ``demand`` (``{name: GeoDataFrame}``), ``kinds`` (``{name: kind}``),
        ``snaps`` (``{name: snap limit m}``), ``horizon_s``, and with ``with_units`` ``fleet`` (None without units).
    """
    study = load_study(study_path)
    if not with_units:
        refuse_unit_standards(study, "a what-if or simulation")
    net = _study_network(study, cache_folder)
    bases, demand, kinds, snaps = load_inputs(study, net)
    extra = {"fleet": load_fleet(study, bases)} if with_units else {}
    return {
        **extra,
        "study": study,
        "network": net,
        "bases": bases,
        "demand": demand,
        "kinds": kinds,
        "snaps": snaps,
        "horizon_s": study.horizon_s,
    }


@study_keys
def whatif_from_study(study_path: str | Path, cache_folder: str | Path | None = None) -> WhatIf:
    """The what-if base state of a study file: its network (cached), bases, demand layers and standards."""
    inputs = study_inputs(study_path, cache_folder)
    s = inputs["study"]
    return WhatIf(
        inputs["network"],
        inputs["bases"],
        inputs["demand"],
        s.standards,
        horizon_s=inputs["horizon_s"],
        direction=s.direction,
        demand_snap_m=inputs["snaps"],
        base_snap_m=s.bases.snap_m,
    )


#: The columns of ``comparison.csv`` (and of the web API's comparison rows), in order.
COMPARISON_COLUMNS = (
    "scenario",
    "standard",
    "demand",
    "kind",
    "demand_total",
    "covered_before",
    "covered_after",
    "covered_share_before",
    "covered_share_after",
    "fractile",
    "fractile_response_s_before",
    "fractile_response_s_after",
    "lost_weight",
    "lost_points",
    "gained_weight",
    "gained_points",
)


def comparison_rows(scenario_name: str, comparisons: dict, kinds: dict[str, str]) -> list[dict[str, Any]]:
    """One row per standard x demand layer: the columns of ``comparison.csv`` (:data:`COMPARISON_COLUMNS`).

    Parameters
    ----------
    scenario_name
        The scenario's name (first column).
    comparisons
        ``{(standard name, demand name): Comparison}`` from :func:`coverkit.scenario.compare_results`.
    kinds
        ``{demand name: "residents" | "incidents"}``.

    Covered figures are demand weights (people or calls), shares 0..1, fractile responses in seconds (inf when the
    fractile is not reached).
    """
    rows = []
    for (std, dem), comp in comparisons.items():
        b, a = comp.before, comp.after
        values = (
            scenario_name, std, dem, kinds[dem], b["demand_total"], b["covered"], a["covered"], b["covered_share"],
            a["covered_share"], b["fractile"], b["fractile_response_s"], a["fractile_response_s"], comp.lost_weight,
            comp.lost_points, comp.gained_weight, comp.gained_points,
        )  # fmt: skip
        rows.append(dict(zip(COMPARISON_COLUMNS, values, strict=True)))
    return rows


def comparison_table(scenario_name: str, comparisons: dict, kinds: dict[str, str]) -> pd.DataFrame:
    """:func:`comparison_rows` as the DataFrame written to ``comparison.csv``."""
    return pd.DataFrame(comparison_rows(scenario_name, comparisons, kinds), columns=list(COMPARISON_COLUMNS))


@dataclass(frozen=True)
class CompareRun:
    """The outcome of :func:`compare_study`.

    Attributes
    ----------
    study, scenario
        The study and the scenario compared.
    network_before, network_after, bases_before, bases_after
        Inputs before and after.
    changes
        The :class:`coverkit.scenario.ChangeLog`.
    comparisons
        ``{(standard name, demand name): Comparison}``.
    areas
        ``{standard name: ChangedAreas}`` for the residents demand layer (the first layer if none is residents).
    before, after
        ``{(standard name, demand name): CoverageResult}``.
    summary
        DataFrame, one row per standard x demand: covered share and fractile response before/after, lost and
        gained demand.
    outputs
        Paths written: ``layers`` (GeoPackage) and ``table`` (CSV).
    """

    study: Study
    scenario: Scenario
    network_before: RoadNetwork
    network_after: RoadNetwork
    bases_before: gpd.GeoDataFrame
    bases_after: gpd.GeoDataFrame
    changes: ChangeLog
    comparisons: dict
    areas: dict
    before: dict
    after: dict
    summary: pd.DataFrame
    outputs: dict[str, Path]

    def layers(self) -> dict[str, Any]:
        """Every layer of the comparison, named by :mod:`coverkit.layer_names`."""
        log = self.changes
        changes = [f"change_{i}" for i in range(len(log.lines()))]
        about = pd.DataFrame(
            {
                "key": ["study", "scenario", "description", "caution", *changes],
                "value": [self.study.name, self.scenario.name, self.scenario.description, CAUTION, *log.lines()],
            }
        )
        layers: dict[str, Any] = {
            layer_name("bases_before"): self.bases_before,
            layer_name("bases_after"): self.bases_after,
            layer_name("closed_roads"): log.closed,
            layer_name("slowed_roads"): log.slowed,
            layer_name("comparison"): self.summary,
            layer_name("about"): about,
        }
        for (std, dem), comp in self.comparisons.items():
            layers[layer_name("change_points", dem, std)] = comp.points
            layers[layer_name("change_by_base", dem, std)] = comp.bases
        for std, ca in self.areas.items():
            layers[layer_name("changed_areas", standard=std)] = ca.polygons
            layers[layer_name("gaps_before", standard=std)] = ca.before.gaps
            layers[layer_name("gaps_after", standard=std)] = ca.after.gaps
        return layers

    def lines(self) -> list[str]:
        """Headline lines: the changes, then each standard x demand before/after."""
        out = [f"{self.scenario.name} vs {self.study.name}", *self.changes.lines()]
        kinds = {d.name: d.kind for d in self.study.demand}
        words = {d.name: row_word(d.source_kind) for d in self.study.demand}
        for (_std, dem), comp in self.comparisons.items():
            unit = unit_word(kinds.get(dem))
            out.extend(f"[{dem}] {line}" for line in comp.lines(unit, words.get(dem, "points")))
        return [*out, CAUTION]


@study_keys
def compare_study(
    study_path: str | Path,
    scenario_path: str | Path,
    out_folder: str | Path,
    cell_m: float | None = None,
    reach_m: float | None = None,
    *,
    at: str | None = None,
) -> CompareRun:
    """Run a study's coverage before and after a scenario, compare, and write layers and a table.

    ``at`` (a time of day ``HH:MM`` or an hour band's name) times the study's network for that moment first
    (:func:`coverkit.network.hour_bands.network_at`).

    Writes ``compare.gpkg`` (layers ``bases_before``, ``bases_after``, ``closed_roads``, ``slowed_roads``,
    ``comparison``, ``about`` and per standard ``change_points_<demand>_<standard>``,
    ``change_by_base_<demand>_<standard>``, ``changed_areas_<standard>``, ``gaps_before_<standard>``,
    ``gaps_after_<standard>``; names from :mod:`coverkit.layer_names`) and ``comparison.csv`` into ``out_folder``,
    atomically. The report is not written here.
    """
    out = Path(out_folder)
    steps = Steps(5, "compare")
    steps.step("study inputs")
    # both files are checked before the output folder exists; a run that stops on bad input removes a folder it
    # created (holding at most the network cache), so a rejected scenario leaves nothing behind
    load_study(study_path)
    scenario = load_scenario(scenario_path)
    if at and ":" in at:
        from coverkit.network.hour_bands import parse_at

        parse_at(at)
    created = not out.exists()
    out.mkdir(parents=True, exist_ok=True)
    try:
        return _compare(study_path, scenario, out, cell_m, reach_m, steps, at)
    except CoverkitError:
        if created:
            shutil.rmtree(out, ignore_errors=True)
        raise


def _compare(
    study_path: str | Path,
    scenario: Scenario,
    out: Path,
    cell_m: float | None,
    reach_m: float | None,
    steps: Steps,
    at: str | None = None,
) -> CompareRun:
    inputs = study_inputs(study_path, cache_folder=out, with_units=True)
    study, net, bases, demand = inputs["study"], inputs["network"], inputs["bases"], inputs["demand"]
    if at:
        from coverkit.network.hour_bands import network_at

        net = network_at(net, at)
    kinds, horizon_s = inputs["kinds"], inputs["horizon_s"]  # the horizon of every standard, units ones too
    steps.step("coverage before")
    base_snap_m = study.bases.snap_m
    plain = [s for s in study.standards if s.kind == "base"]
    typed = [s for s in study.standards if s.kind != "base"]
    # the incremental what-if snaps each demand layer once and searches again only from the bases the scenario can
    # touch; it equals a full recomputation (tests/test_scenario.py). Standards judging units are evaluated on its
    # tables (coverkit.compare_units); a study of those only gives it a plain twin to search for.
    searched = plain or [plain_twin(typed[0])]
    whatif = WhatIf(net, bases, demand, searched, horizon_s, study.direction, inputs["snaps"], base_snap_m)
    steps.step("coverage after the scenario")
    outcome = whatif.run(scenario)
    net2, bases2, log = outcome.network, outcome.bases, outcome.changes
    unit_before, unit_after = {}, {}
    if typed:
        unit_before, unit_after, notes = unit_results(whatif, outcome, typed, inputs["fleet"])
        log.notes.extend(notes)
    keys = [(s.name, name) for name in demand for s in study.standards]
    before = {k: unit_before[k] if k in unit_before else whatif.results[k] for k in keys}
    after = {k: unit_after[k] if k in unit_after else outcome.results[k] for k in keys}
    comparisons = {k: compare_results(before[k], after[k]) for k in before}
    if all(c.unchanged for c in comparisons.values()) and not len(log.base_changes):
        log.notes.append("coverage unchanged: no travel time to any demand point changed")
    steps.step("changed areas")
    residents = next((n for n, k in kinds.items() if k == "residents"), next(iter(demand)))
    incidents = next((n for n, k in kinds.items() if k == "incidents"), None)
    opts = study.outputs
    cell = float(cell_m or opts.grid_cell_m)
    reach = float(reach_m or opts.area_reach_m)
    areas = {}
    gb = ga = None
    for s in study.standards:
        ca = changed_areas(
            net, net2, before[(s.name, residents)], after[(s.name, residents)],
            incidents=demand[incidents] if incidents else None, cell_m=cell, reach_m=reach, grid_before=gb,
            grid_after=ga,
            calls_before=before[(s.name, incidents)] if incidents else None,
            calls_after=after[(s.name, incidents)] if incidents else None,
        )  # fmt: skip
        gb, ga = ca.before.grid, ca.after.grid
        areas[s.name] = ca
    summary = comparison_table(scenario.name, comparisons, kinds)
    steps.step("writing layers and table")
    run = CompareRun(
        study, scenario, net, net2, bases, bases2, log, comparisons, areas, before, after, summary, {}
    )  # fmt: skip
    layers = run.layers()
    outputs = {
        "layers": write_gpkg_layers(output_file(out, "compare_layers"), layers),
        "table": write_csv_atomic(output_file(out, "compare_csv"), summary),
    }
    run.outputs.update(outputs)
    return run


__all__ = [
    "COMPARISON_COLUMNS",
    "CompareRun",
    "compare_study",
    "comparison_rows",
    "comparison_table",
    "study_inputs",
    "whatif_from_study",
]
