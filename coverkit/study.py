"""Study files: one TOML file names the inputs, the standards and the outputs of a whole run.

:func:`load_study` reads and validates the file (unknown key, wrong type, missing file: one line naming the key);
:func:`run_study` executes it. Paths in the file are relative to the file. The network build is cached in the
output folder and reused while the road inputs, the profile and the coverkit version are unchanged.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field
from functools import partial
from pathlib import Path
from typing import TYPE_CHECKING, Any

from coverkit import __version__, demand_sources, settings, siting_models
from coverkit.coverage import CoverageResult, Standard, default_horizon_s, evaluate_coverage
from coverkit.errors import CoverkitError, StudyError
from coverkit.layer_names import layer_name, map_file, output_file, table_file
from coverkit.settings import (
    AvailabilitySettings,
    BasesSettings,
    CalibrationSettings,
    ComputeSettings,
    DemandSettings,
    OutputsSettings,
    RoadsSettings,
    SitingSettings,
    ZonesSettings,
)
from coverkit.stages import (
    AvailabilityStage,
    CalibrationStage,
    CoverageStage,
    SitingStage,
    UnitSitingStage,
    availability_stage,
    check_zones,
    coverage_stage,
    read_zones,
    siting_problem,
    siting_stage,
)
from coverkit.study_errors import study_keys
from coverkit.tomlcheck import Schema, check_sections, check_table, read_toml
from coverkit.where import parse_filter

if TYPE_CHECKING:
    import geopandas as gpd
    import pandas as pd
    import shapely

    from coverkit.availability import AvailabilityRun
    from coverkit.calibrate import CalibrationResult
    from coverkit.network.model import RoadNetwork
    from coverkit.site_plan import SitePlan
    from coverkit.spread import SpreadFit
    from coverkit.units import Fleet

# -- schema -----------------------------------------------------------------------------------------------------------
# key -> (type(s), required). Types are Python types accepted after TOML parsing.
_NUM = (int, float)
SCHEMA: dict[str, Schema] = {
    "study": {"name": (str, True), "direction": (str, False), "description": (str, False)},
    "roads": {
        "source": (str, True),
        "boundary": (str, False),
        "buffer_m": (_NUM, False),
        "profile": (str, False),
        "crs": (str, False),
        "fields": ((dict, str), False),  # a table, or a field mapping text such as "ng911"
        "layer": (str, False),
    },
    "bases": {"file": (str, True), "id_field": (str, False), "snap_m": (_NUM, False), "layer": (str, False)},
    "demand": {
        "name": (str, True),
        **{source: (str, False) for source in demand_sources.NAMES},
        "population_field": (str, False),
        "id_field": (str, False),
        "where": (str, False),
        "weight_field": (str, False),
        "time_field": (str, False),
        "start": (str, False),
        "end": (str, False),
        "kind": (str, False),
        "snap_m": (_NUM, False),
        "max_rejected_share": (_NUM, False),
    },
    "standard": {
        "name": (str, False),
        "preset": (str, False),
        "engine_type": (str, False),
        "als_type": (str, False),
        "density_window_m": (_NUM, False),
        "travel_s": (_NUM, False),
        "turnout_s": (_NUM, False),
        "fractile": (_NUM, False),
        "source": (str, False),
        "unit_type": (str, False),
        "nth": (int, False),
        "personnel": (int, False),
        "assignment": (dict, False),
    },
    "units": {"file": (str, True), "layer": (str, False), "hour": (_NUM, False)},
    "zones": {"file": (str, True), "id_field": (str, True), "layer": (str, False)},
    "siting": {
        "candidates": (str, False),
        "generate": (str, False),
        "spacing_m": (_NUM, False),
        "model": (str, False),
        "add": (int, False),
        "target": (_NUM, False),
        "busy_fraction": (_NUM, False),
        "relocate": (bool, False),
        "method": (str, False),
        "time_limit_s": (_NUM, False),
        "curve": (int, False),
        "standard": (str, False),
        "demand": (str, False),
        "unit_type": (str, False),
        "staffing": (int, False),
    },
    "availability": {
        "service_min": (_NUM, True),
        "calls_per_h": (_NUM, False),
        "queue": (str, False),
        "method": (str, False),
        "time_field": (str, False),
        "standard": (str, False),
        "demand": (str, False),
    },
    "calibration": {"observed": (str, True), "hours": (list, False)},
    "travel_spread": {"file": (str, True)},
    "period": {"name": (str, True), "at": (str, True)},
    "simulation": {
        **{k: (str, False) for k in ("calls", "service_dist", "service_field", "queue", "time_field", "demand")},
        **{k: (_NUM, False) for k in ("hours", "calls_per_h", "service_min", "service_cv", "turnout_s")},
        **{k: (_NUM, False) for k in ("turnout_cv", "travel_cv", "mutual_aid_after_s")},
        **{k: (int, False) for k in ("replications", "seed")},
        "priority_field": (str, False),
        "cover": (list, False),
    },
    "compute": {"scheduler": (str, False), "workers": (int, False)},
    "outputs": {
        "folder": (str, False),
        "isochrone_minutes": (list, False),
        "surface_cell_m": (_NUM, False),
        "grid_cell_m": (_NUM, False),
        "reach_m": (_NUM, False),
        "horizon_s": (_NUM, False),
        "maps": (bool, False),
        "report": (bool, False),
    },
}
LIST_SECTIONS = {"demand", "standard", "period"}
REQUIRED_SECTIONS = ("study", "roads", "bases", "demand", "standard")
DEMAND_KINDS = settings.DEMAND_KINDS

#: One ``[[demand]]`` entry (the name older code uses).
DemandSpec = DemandSettings


@dataclass
class Study:
    """A validated study file."""

    path: Path
    name: str
    direction: str
    roads: RoadsSettings
    bases: BasesSettings
    demand: list[DemandSettings]
    standards: list[Standard]
    zones: ZonesSettings | None
    outputs: OutputsSettings
    raw: dict[str, Any]
    siting: SitingSettings | None = None
    availability: AvailabilitySettings | None = None
    calibration: CalibrationSettings | None = None
    compute: ComputeSettings | None = None
    simulation: settings.SimulationSettings | None = None
    spread: SpreadFit | None = None
    periods: list[tuple[str, str]] = field(default_factory=list)  # [[period]]: (name, at), in file order
    units: settings.UnitsSettings | None = None

    def standard_named(self, name: str | None, key: str) -> Standard:
        """The standard called ``name`` (the first when None); a StudyError names ``key`` otherwise."""
        if name is None:
            return self.standards[0]
        for std in self.standards:
            if std.name == name:
                return std
        raise StudyError(
            f"{self.path}: {key} = '{name}' is not a [[standard]] name; use one of "
            f"{', '.join(s.name for s in self.standards)}."
        )

    def demand_named(self, name: str | None, key: str, kind: str) -> str:
        """The demand layer called ``name`` (the first of ``kind`` when None)."""
        names = [d.name for d in self.demand]
        if name is None:
            return next((d.name for d in self.demand if d.kind == kind), names[0])
        if name not in names:
            raise StudyError(f"{self.path}: {key} = '{name}' is not a [[demand]] name; use one of {', '.join(names)}.")
        return name

    @property
    def folder(self) -> Path:
        return self.path.parent

    @property
    def horizon_s(self) -> float:
        """Search bound (s): ``outputs.horizon_s``, else the default for the longest standard."""
        return float(self.outputs.horizon_s or max(default_horizon_s(s) for s in self.standards))

    def network_cache_key(self) -> str:
        """Digest of everything the network build depends on."""
        from coverkit.network.build import file_digest
        from coverkit.network.profile import load_profile

        h = hashlib.sha256()
        h.update(__version__.encode())
        for path in (self.roads.source, self.roads.boundary):
            if path:
                h.update(file_digest(path).encode())
        h.update(load_profile(self.roads.profile).to_toml().encode())
        # the other [roads] keys as the file gives them (defaults left out, so the digest is the file's own)
        rest = {k: v for k, v in self.raw["roads"].items() if k not in ("source", "boundary", "profile")}
        h.update(json.dumps(rest, sort_keys=True, default=str).encode())
        return h.hexdigest()


def _file(folder: Path, value: str, key: str, where: str) -> Path:
    path = (folder / value).resolve()
    if not path.exists():
        raise StudyError(f"{where}: file for '{key}' not found: {path}; fix the path (relative to the study file).")
    return path


def _check_zone_field(zones: dict[str, Any], where: str) -> None:
    """The zones layer must be readable and hold ``zones.id_field`` (checked before any work is done, by the same
    check ``cover --zones`` gets: :func:`coverkit.stages.check_zones`)."""
    try:
        check_zones(zones["file"], zones["id_field"], layer=zones.get("layer"))
    except CoverkitError as exc:
        raise StudyError(f"{where}: [zones] {exc}") from None


def load_study(path: str | Path) -> Study:
    """Read and validate a study TOML file.

    Raises
    ------
    StudyError
        Syntax error, unknown section or key, wrong type, missing required key or file (one line naming it).
    """
    path, raw = read_toml(path, "study", "give a .toml study file (see examples/).")
    where = str(path)
    _check_layout(raw, where)
    folder = path.parent
    roads, bases = _roads_and_bases(raw, folder, where)
    demand = _demand_settings(raw, folder, where)
    standards = _standards(raw, where)
    zones = None
    if "zones" in raw:
        zones = dict(raw["zones"])
        zones["file"] = str(_file(folder, zones["file"], "zones.file", where))
        _check_zone_field(zones, where)
    minutes = raw.get("outputs", {}).get("isochrone_minutes", list(settings.ISOCHRONE_MINUTES))
    if not all(isinstance(m, int | float) and not isinstance(m, bool) and m > 0 for m in minutes) or not minutes:
        raise StudyError(f"{where}: outputs.isochrone_minutes must be a list of positive numbers, e.g. [4, 8, 12].")
    siting_cfg = _siting_table(raw, folder, where) if "siting" in raw else None
    availability_cfg = _availability_table(raw, where) if "availability" in raw else None
    calibration_cfg = _calibration_table(raw, folder, where) if "calibration" in raw else None
    direction = raw["study"].get("direction", settings.DIRECTION)
    if direction not in settings.DIRECTIONS:
        raise StudyError(f"{where}: study.direction must be 'out' (base to demand) or 'in', got '{direction}'.")
    study = Study(
        path,
        raw["study"]["name"],
        direction,
        RoadsSettings.from_table(roads),
        BasesSettings.from_table(bases),
        demand,
        standards,
        ZonesSettings.from_table(zones) if zones else None,
        OutputsSettings.from_table(raw.get("outputs", {})),
        raw,
        SitingSettings.from_table(siting_cfg) if siting_cfg else None,
        AvailabilitySettings.from_table(availability_cfg) if availability_cfg else None,
        CalibrationSettings.from_table(calibration_cfg) if calibration_cfg else None,
        _compute_settings(raw, where),
    )
    study.simulation = settings.SimulationSettings.from_table(raw["simulation"]) if "simulation" in raw else None
    study.periods = _periods(raw, study, where)
    if "travel_spread" in raw:
        from coverkit.spread import read_spread

        study.spread = read_spread(_file(folder, raw["travel_spread"]["file"], "travel_spread.file", where))
    if "units" in raw:
        units = dict(raw["units"], file=str(_file(folder, raw["units"]["file"], "units.file", where)))
        study.units = settings.UnitsSettings.from_table(units)
    _check_unit_standards(study, where)
    if study.siting:
        study.standard_named(study.siting.standard, "siting.standard")
        study.demand_named(study.siting.demand, "siting.demand", "residents")
    if study.availability:
        study.standard_named(study.availability.standard, "availability.standard")
        study.demand_named(study.availability.demand, "availability.demand", "incidents")
    return study


def _periods(raw: dict[str, Any], study: Study, where: str) -> list[tuple[str, str]]:
    """The [[period]] list: unique names, each ``at`` a time of day or an hour band of the study's profile."""
    from coverkit.network.hour_bands import band_at
    from coverkit.network.profile import load_profile

    periods = [(str(p["name"]), str(p["at"])) for p in raw.get("period", [])]
    if not periods:
        return []
    names = [n for n, _ in periods]
    if len(set(names)) < len(names):
        raise StudyError(f"{where}: [[period]] names must differ; '{names[0]}' is used twice or more.")
    profile = load_profile(study.roads.profile)
    for name, at in periods:
        try:
            band_at(profile, at, param="at")
        except CoverkitError as exc:
            raise StudyError(f"{where}: [[period]] '{name}': {exc.worded('period.at')}") from None
    return periods


def _compute_settings(raw: dict[str, Any], where: str) -> ComputeSettings | None:
    """``[compute]`` (None without it); ``workers`` must be at least 1."""
    if "compute" not in raw:
        return None
    cfg = ComputeSettings.from_table(raw["compute"])
    if cfg.workers is not None and cfg.workers < 1:
        raise StudyError(f"{where}: compute.workers must be >= 1 (local worker processes), got {cfg.workers}.")
    return cfg


def _check_layout(raw: dict[str, Any], where: str) -> None:
    """Known sections only, the required ones present, and every table's keys and types as :data:`SCHEMA` says."""
    check_sections(raw, SCHEMA, where)
    for section in REQUIRED_SECTIONS:
        if section not in raw:
            raise StudyError(
                f"{where}: missing section [{section}]"
                + (f" (write [[{section}]])" if section in LIST_SECTIONS else "")
                + "."
            )
    for section, table in raw.items():
        if section in LIST_SECTIONS:
            if not isinstance(table, list) or not table:
                raise StudyError(f"{where}: [[{section}]] must be one or more tables (write [[{section}]]).")
            for item in table:
                check_table(item, SCHEMA[section], section, where, f"[{section}]")
        else:
            check_table(table, SCHEMA[section], section, where, f"[{section}]")


def _roads_and_bases(raw: dict[str, Any], folder: Path, where: str) -> tuple[dict[str, Any], dict[str, Any]]:
    """The [roads] and [bases] tables with their files resolved against the study's folder (each must exist)."""
    roads = dict(raw["roads"])
    roads["source"] = str(_file(folder, roads["source"], "roads.source", where))
    if "boundary" in roads:
        roads["boundary"] = str(_file(folder, roads["boundary"], "roads.boundary", where))
    if "profile" in roads and (roads["profile"].endswith(".toml") or "/" in roads["profile"]):
        roads["profile"] = str(_file(folder, roads["profile"], "roads.profile", where))
    if isinstance(roads.get("fields"), str):  # a mapping text, e.g. "ng911" (the NENA NG9-1-1 fields)
        from coverkit.network.centerlines import parse_fields

        try:
            roads["fields"] = parse_fields(roads["fields"])
        except CoverkitError as exc:
            raise StudyError(f"{where}: roads.fields: {exc}") from None
    bases = dict(raw["bases"])
    bases["file"] = str(_file(folder, bases["file"], "bases.file", where))
    return roads, bases


def _demand_settings(raw: dict[str, Any], folder: Path, where: str) -> list[DemandSpec]:
    """Each [[demand]] entry checked (one source, what the source needs, unique name, kind, filter syntax)."""
    demand: list[DemandSpec] = []
    names = set()
    for i, item in enumerate(raw["demand"]):
        key = f"demand[{i}]"
        given = [k for k in demand_sources.NAMES if k in item]
        if len(given) != 1:
            raise StudyError(
                f"{where}: {key} ('{item['name']}') needs exactly one of {', '.join(demand_sources.NAMES)}."
            )
        src_kind = given[0]
        for needed in demand_sources.BY_NAME[src_kind].needs:
            if needed not in item:
                raise StudyError(f"{where}: {key} ('{item['name']}') uses {src_kind}; add {needed}.")
        if item["name"] in names:
            raise StudyError(f"{where}: two [[demand]] entries are named '{item['name']}'; names must differ.")
        names.add(item["name"])
        kind = item.get("kind", demand_sources.BY_NAME[src_kind].default_kind)
        if kind not in DEMAND_KINDS:
            raise StudyError(f"{where}: {key}.kind must be one of {', '.join(DEMAND_KINDS)}, got '{kind}'.")
        if "where" in item:  # a filter's syntax is checked before any data is read
            try:
                parse_filter(item["where"])
            except CoverkitError as exc:
                raise StudyError(f"{where}: {key}.where: {exc}") from None
        if not 0 <= item.get("max_rejected_share", 0) <= 1:
            raise StudyError(f"{where}: {key}.max_rejected_share must be a share 0..1 (0.01 = 1 %).")
        demand.append(
            DemandSettings.from_table(item, _file(folder, item[src_kind], f"{key}.{src_kind}", where), src_kind, kind)
        )
    return demand


def _check_unit_standards(study: Study, where: str) -> None:
    """A standard by unit type or force needs the ``[units]`` section."""
    from coverkit.arrivals import check_fleet
    from coverkit.units import read_units

    if study.siting and study.siting.unit_type and study.units is None:
        raise StudyError(f"{where}: siting.unit_type needs a [units] section with file = the units table.")
    judged = next((s for s in study.standards if s.kind != "base"), None)
    if judged is not None and study.units is None:
        raise StudyError(
            f"{where}: standard '{judged.name}' judges {judged.judged().removesuffix(' in ')}; add a [units] section "
            "with file = the units table (unit_id, base_id, type, staffing)."
        )
    if study.units is not None:  # the table's own rows and the standards' types, before any work is done
        fleet = read_units(study.units.file, None, layer=study.units.layer)
        if study.units.hour is not None:
            if not 0 <= study.units.hour < 24:
                raise StudyError(f"{where}: units.hour must be a clock hour 0..24 (e.g. 8.5), got {study.units.hour}.")
            fleet = fleet.on_duty(study.units.hour)
        for std in study.standards:
            try:
                check_fleet(fleet, std)
            except CoverkitError as exc:
                raise StudyError(f"{where}: {exc}") from None


def refuse_unit_standards(study: Study, what: str) -> None:
    """Stop ``what`` (a comparison, the web page) on a study with standards by unit type or force, which it does not
    evaluate yet: one line naming the standard."""
    judged = next((s for s in study.standards if s.kind != "base"), None)
    if judged is not None:
        raise StudyError(
            f"{study.path}: {what} does not yet evaluate standards by unit type or force ('{judged.name}'); run "
            "them with `coverkit run`, or keep a copy of the study without them."
        )


def _unit_keys(item: dict[str, Any]) -> dict[str, Any]:
    """The unit keys of one ``[[standard]]`` as :class:`Standard` keywords."""
    from coverkit.units import parse_assignment

    out: dict[str, Any] = {k: item[k] for k in ("unit_type", "nth", "personnel") if k in item}
    if "assignment" in item:
        out["assignment"] = parse_assignment(item["assignment"])
    return out


def load_fleet(study: Study, bases: gpd.GeoDataFrame):
    """The study's units table checked against its bases (None without ``[units]``)."""
    from coverkit.units import read_units

    if study.units is None:
        return None
    fleet = read_units(study.units.file, bases["id"].astype(str).tolist(), layer=study.units.layer)
    return fleet if study.units.hour is None else fleet.on_duty(study.units.hour)


def _preset(item: dict[str, Any], where: str) -> list[Standard]:
    """The standards of a ``preset`` entry (:mod:`coverkit.nfpa`; its figures are quoted from memory)."""
    from coverkit import nfpa

    name = item["preset"]
    if name not in nfpa.PRESETS:
        raise StudyError(f"{where}: preset '{name}' is not known; use one of {', '.join(nfpa.PRESETS)}.")
    try:
        if name == "nfpa1710":
            return nfpa.nfpa1710_standards(
                engine=item.get("engine_type", "engine"), als=item.get("als_type", "medic-als")
            )
        return nfpa.nfpa1720_standards(float(item.get("turnout_s", nfpa.NFPA1720_TURNOUT_S)))
    except CoverkitError as exc:
        raise StudyError(f"{where}: {exc.worded('turnout_s')}") from None


def density_zone_layers(study: Study, net: RoadNetwork, runs: list[CoverageStage]) -> dict[str, Any]:
    """With an ``nfpa1720`` preset: the density zones of the first raster demand layer and, per demand layer, each
    zone judged against its own row (:func:`coverkit.nfpa.zone_table`); empty otherwise."""
    from coverkit import nfpa

    window = density_window_m(study)
    if window is None:
        return {}
    raster = next((spec.path for spec in study.demand if spec.source_kind == "raster"), None)
    blocks = next((spec for spec in study.demand if spec.source_kind == "polygons"), None)
    first = next(iter(runs[0].results.values()))
    remote = partial(nfpa.remote_mask, net, first.bases)
    if raster is not None:
        zones = nfpa.density_zones(raster, net.crs, window, remote=remote)
    elif blocks is not None:
        zones = nfpa.density_zones_from_blocks(blocks.path, blocks.population_field, net.crs, remote=remote)
    else:
        raise StudyError(
            f"{study.path}: the nfpa1720 preset takes its density zones from a population raster or blocks; add a "
            "[[demand]] with raster = the population raster (or polygons = blocks with population_field)."
        )
    out: dict[str, Any] = {layer_name("density_zones"): zones}
    names = {nfpa.zone_standard_name(z) for z in nfpa.NFPA1720_ZONES}
    rural = nfpa.zone_standard_name(nfpa.NFPA1720_ZONES[-1])
    for dname in runs[0].results:
        results = {run.standard.name: run.results[dname] for run in runs if run.standard.name in names}
        results[nfpa.zone_standard_name(nfpa.NFPA1720_REMOTE)] = _remote_result(net, results[rural])
        out[layer_name("by_density_zone", dname)] = nfpa.zone_table(results, zones)
    return out


def _remote_result(net: RoadNetwork, rural: CoverageResult) -> CoverageResult:
    """The NFPA 1720 remote row's force (4 staff) on the rural standard's demand, table and fleet."""
    from coverkit import nfpa

    std = nfpa.remote_standard(rural.standard)
    demand = rural.demand[[c for c in rural.demand.columns if c in ("id", "weight", "geometry")]]
    extra = rural.extra
    return evaluate_coverage(net, rural.bases, demand, std, table=extra["table"], fleet=extra.get("fleet"))


def density_window_m(study: Study) -> float | None:
    """The density window of the study's ``nfpa1720`` preset (m), or None when it has none."""
    from coverkit import nfpa

    for item in study.raw.get("standard", []):
        if item.get("preset") == "nfpa1720":
            return float(item.get("density_window_m", nfpa.DENSITY_WINDOW_M))
    return None


def _standards(raw: dict[str, Any], where: str) -> list[Standard]:
    """The [[standard]] entries as :class:`Standard` (which checks its own values); names must differ."""
    standards = []
    for i, item in enumerate(raw["standard"]):
        if "preset" in item:
            standards += _preset(item, f"{where}: standard[{i}]")
            continue
        for key in ("name", "travel_s"):
            if key not in item:
                raise StudyError(f"{where}: standard[{i}] has no {key}; give it (or a preset, e.g. 'nfpa1710').")
        try:
            standards.append(
                Standard(
                    item["name"],
                    float(item["travel_s"]),
                    float(item.get("turnout_s", settings.TURNOUT_S)),
                    float(item.get("fractile", settings.FRACTILE)),
                    item.get("source", ""),
                    **_unit_keys(item),
                )
            )
        except Exception as exc:  # Standard validates its own values
            raise StudyError(f"{where}: standard[{i}]: {exc}") from None
    if len({s.name for s in standards}) != len(standards):
        raise StudyError(f"{where}: two [[standard]] entries share a name; names must differ.")
    return standards


def _siting_table(raw: dict[str, Any], folder: Path, where: str) -> dict[str, Any]:
    """The [siting] table checked: one candidate source, a known model with what it needs, a known method."""
    siting_cfg = dict(raw["siting"])
    if ("candidates" in siting_cfg) == ("generate" in siting_cfg):
        raise StudyError(f"{where}: [siting] needs exactly one of candidates (a file) or generate (a road class).")
    if "candidates" in siting_cfg:
        siting_cfg["candidates"] = str(_file(folder, siting_cfg["candidates"], "siting.candidates", where))
    model = siting_cfg.get("model", siting_models.DEFAULT_MODEL)
    if model not in siting_models.NAMES:
        names = siting_models.NAMES
        raise StudyError(f"{where}: siting.model '{model}' is unknown; use {', '.join(names[:-1])} or {names[-1]}.")
    for needed in siting_models.BY_NAME[model].needs:
        if needed not in siting_cfg and "unit_type" not in siting_cfg:  # units of a type need no covering model
            raise StudyError(
                f"{where}: [siting] with model {model} needs {needed} ({siting_models.PARAMETERS[needed]})."
            )
    if siting_cfg.get("method", settings.SITING_METHOD) not in settings.SITING_METHODS:
        raise StudyError(f"{where}: siting.method must be one of {', '.join(settings.SITING_METHODS)}.")
    return siting_cfg


def _availability_table(raw: dict[str, Any], where: str) -> dict[str, Any]:
    """The [availability] table with its queue and method checked."""
    availability_cfg = dict(raw["availability"])
    if availability_cfg.get("queue", settings.QUEUE) not in settings.QUEUES:
        raise StudyError(f"{where}: availability.queue must be 'infinite' or 'zero'.")
    if availability_cfg.get("method", settings.AVAILABILITY_METHOD) not in settings.AVAILABILITY_METHODS:
        raise StudyError(f"{where}: availability.method must be 'auto', 'exact' or 'approx'.")
    return availability_cfg


def _calibration_table(raw: dict[str, Any], folder: Path, where: str) -> dict[str, Any]:
    """The [calibration] table with its observed file resolved and its hours checked."""
    calibration_cfg = dict(raw["calibration"])
    calibration_cfg["observed"] = str(_file(folder, calibration_cfg["observed"], "calibration.observed", where))
    hours = calibration_cfg.get("hours")
    if hours is not None and not all(isinstance(h, int) and 0 <= h <= 23 for h in hours):
        raise StudyError(f"{where}: calibration.hours must be a list of whole hours 0..23.")
    return calibration_cfg


# -- running ----------------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class StudyRun:
    """The outcome of :func:`run_study`: every stage's result, and the files written.

    Attributes
    ----------
    runs
        One :class:`coverkit.stages.CoverageStage` per standard, in file order.
    siting_stage, availability_stage, calibration_stage
        The optional sections' results (:mod:`coverkit.stages`), or None when the study has no such section.
    """

    study: Study
    network: RoadNetwork
    build_summary: str
    bases: gpd.GeoDataFrame
    demand: dict[str, gpd.GeoDataFrame]
    polygons: gpd.GeoDataFrame
    surface_path: Path
    runs: list[CoverageStage]
    summary: pd.DataFrame  # one row per standard x demand
    outputs: dict[str, Path]
    network_reused: bool
    siting_stage: SitingStage | None = None
    availability_stage: AvailabilityStage | None = None
    calibration_stage: CalibrationStage | None = None
    simulation: Any = None  # coverkit.simulate.run.SimulationRun when the study has [simulation]
    periods: pd.DataFrame | None = None  # compliance per [[period]] (time of day), side by side
    unit_siting: UnitSitingStage | None = None  # [siting] unit_type: the next units of a type
    density_layers: dict[str, Any] | None = None  # the nfpa1720 preset's zones and per-zone tables

    @property
    def site_plan(self) -> SitePlan | None:
        """The siting section's :class:`coverkit.site_plan.SitePlan`, or None."""
        return self.siting_stage.plan if self.siting_stage else None

    @property
    def availability(self) -> AvailabilityRun | None:
        """The availability section's :class:`coverkit.availability.AvailabilityRun`, or None."""
        return self.availability_stage.run if self.availability_stage else None

    @property
    def calibration(self) -> CalibrationResult | None:
        """The calibration section's :class:`coverkit.calibrate.CalibrationResult`, or None."""
        return self.calibration_stage.result if self.calibration_stage else None

    def stages(self) -> list[CoverageStage | SitingStage | AvailabilityStage | CalibrationStage]:
        """Every stage result, coverage first (each knows its ``layers()``)."""
        extra = (self.siting_stage, self.availability_stage, self.calibration_stage)
        return [*self.runs, *(s for s in extra if s is not None)]


def polygon_layers(polygons: gpd.GeoDataFrame) -> dict[str, gpd.GeoDataFrame]:
    """Drive-time polygons as their two layers: per base, and per band from any base (when present)."""
    from coverkit.isochrones import ANY_BASE_ID

    any_base = (polygons["base_id"] == ANY_BASE_ID).to_numpy()
    out = {layer_name("reach_by_base"): polygons[~any_base]}
    if any_base.any():
        out[layer_name("reach_any_base")] = polygons[any_base]
    return out


def reusable_network(path: Path, key: str) -> RoadNetwork | None:
    """The network cached at ``path`` when it was built from inputs with digest ``key``, else None.

    Only the small ``build_info`` layer is read to compare the key; a damaged cache is never trusted.
    """
    from coverkit.network import RoadNetwork
    from coverkit.progress import note

    if not path.is_file():
        return None
    try:
        if RoadNetwork.read_info(path).get("cache_key") != key:
            return None
        net = RoadNetwork.load(path)
    except Exception:  # a damaged or foreign file is rebuilt over, never trusted
        return None
    note(f"network: inputs unchanged, reusing {path}")
    return net


def cached_network(study: Study, folder: Path) -> tuple[RoadNetwork, str, bool]:
    """Build the study's network, or reuse ``folder/network.gpkg`` when its inputs are unchanged."""
    from coverkit.network import build_network
    from coverkit.network.centerlines import parse_fields

    key = study.network_cache_key()
    path = output_file(folder, "network")
    net = reusable_network(path, key)
    if net is not None:
        return net, net.info.get("summary_text", ""), True
    roads = study.roads
    fields = roads.fields
    if isinstance(fields, dict):
        fields = parse_fields(",".join(f"{k}={v}" for k, v in fields.items()))
    net, report = build_network(
        str(roads.source),
        profile=roads.profile,
        boundary=str(roads.boundary) if roads.boundary else None,
        buffer_m=roads.buffer_m,
        crs=roads.crs,
        fields=fields,
        **({"layer": roads.layer} if fields and roads.layer else {}),
    )
    text = report.summary_text()
    net.info["cache_key"] = key
    net.info["summary_text"] = text
    net.save(path)
    return net, text, False


def study_area(study: Study, net: RoadNetwork) -> shapely.Geometry | None:
    """The study's boundary as one polygon in the network's CRS, or None when the study gives none."""
    from coverkit.network.build import read_boundary

    path = study.roads.boundary
    return read_boundary(path).to_crs(net.crs).union_all() if path else None


def load_inputs(
    study: Study, net: RoadNetwork
) -> tuple[gpd.GeoDataFrame, dict[str, gpd.GeoDataFrame], dict[str, str], dict[str, float]]:
    """The bases and demand layers of a study, projected to the network's CRS.

    Returns
    -------
    bases, demand, kinds, snaps
        Bases GeoDataFrame; ``{name: demand GeoDataFrame}``, ``{name: kind}`` (``residents`` / ``incidents``) and
        ``{name: snap limit (m)}`` per ``[[demand]]`` entry, in file order.
    """
    from coverkit.demand import load_demand
    from coverkit.travel import read_points

    bases = read_points(
        str(study.bases.file),
        net.crs,
        id_field=study.bases.id_field,
        what="bases",
        layer=study.bases.layer,
    )
    demand = {}
    for spec in study.demand:
        demand[spec.name] = load_demand(
            spec.path,
            net,
            where=spec.where,
            population_field=spec.population_field,
            weight_field=spec.weight_field,
            id_field=spec.id_field,
            time_field=spec.time_field,
            start=spec.start,
            end=spec.end,
            max_rejected_share=spec.max_rejected_share,
        )
    kinds = {spec.name: spec.kind for spec in study.demand}
    snaps = {spec.name: spec.snap_m for spec in study.demand}
    return bases, demand, kinds, snaps


def _study_siting(
    study: Study, net: RoadNetwork, bases: gpd.GeoDataFrame, demand: dict, snaps: dict[str, float]
) -> SitingStage:
    cfg = study.siting
    std = study.standard_named(cfg.standard, "siting.standard")
    dname = study.demand_named(cfg.demand, "siting.demand", "residents")
    problem = siting_problem(
        net, bases, demand[dname], std, cfg, max_snap_m=snaps[dname], base_snap_m=study.bases.snap_m
    )
    return siting_stage(problem, cfg, dname)


def _study_unit_siting(study: Study, net: RoadNetwork, bases, demand: dict, snaps, fleet) -> UnitSitingStage:
    """``[siting]`` with ``unit_type``: the next units of the type (:func:`coverkit.site_units.place_units`)."""
    from coverkit.site_plan import generate_candidates
    from coverkit.site_units import place_units
    from coverkit.travel import read_points

    cfg = study.siting
    if fleet is None:
        raise StudyError(f"{study.path}: siting.unit_type needs a [units] section (the units table).")
    std = study.standard_named(cfg.standard, "siting.standard")
    dname = study.demand_named(cfg.demand, "siting.demand", "residents")
    if (cfg.candidates is None) == (cfg.generate is None):
        raise StudyError(f"{study.path}: [siting] needs either candidates or generate (not both, not neither).")
    if cfg.candidates is not None:
        candidates = read_points(str(cfg.candidates), net.crs, what="candidates")
    else:
        candidates = generate_candidates(net, cfg.generate, cfg.spacing_m)
    plan = place_units(
        net, bases, candidates, demand[dname], std, fleet, cfg.unit_type, cfg.add or 1, staffing=cfg.staffing,
        max_snap_m=snaps[dname], base_snap_m=study.bases.snap_m,
    )  # fmt: skip
    return UnitSitingStage(plan, dname)


def _study_availability(
    study: Study,
    net: RoadNetwork,
    bases: gpd.GeoDataFrame,
    demand: dict,
    snaps: dict[str, float],
    fleet: Fleet | None = None,
) -> AvailabilityStage:
    cfg = study.availability
    std = study.standard_named(cfg.standard, "availability.standard")
    dname = study.demand_named(cfg.demand, "availability.demand", "incidents")
    spec = next(d for d in study.demand if d.name == dname)
    return availability_stage(
        net,
        bases,
        demand[dname],
        std,
        cfg,
        demand_name=dname,
        max_snap_m=snaps[dname],
        window=(spec.start, spec.end),
        **({"fleet": fleet} if fleet is not None else {}),
    )


def _study_calibration(study: Study, net: RoadNetwork, bases: gpd.GeoDataFrame) -> CalibrationStage:
    from coverkit.calibrate import calibrate_speeds, read_observed

    cfg = study.calibration
    observed = read_observed(
        str(cfg.observed), base_ids=bases["id"].astype(str).tolist(), bases_name=study.bases.file.name
    )
    hours = list(cfg.hours) if cfg.hours is not None else None
    return CalibrationStage(calibrate_speeds(net, bases, observed, hours=hours, source=cfg.observed.name))


@study_keys
def run_study(study: Study | str | Path, out: str | Path | None = None) -> StudyRun:
    """Run a whole study: network, bases, demand, drive-time polygons, surface, coverage per standard, and the
    optional siting, availability and calibration sections.

    Every layer and table is written atomically into ``out`` (default: ``outputs.folder`` of the study, relative to
    the study file, else ``results``). The maps and the report are written by the caller from the result:
    :func:`coverkit.report.study_report.report_study`.
    """
    import pandas as pd

    from coverkit.arrivals import check_fleet
    from coverkit.compute import InProcess, current_runner, runner_for
    from coverkit.isochrones import drive_time_polygons, write_travel_surface
    from coverkit.progress import Steps

    if not isinstance(study, Study):
        study = load_study(study)
    if study.compute and isinstance(current_runner(), InProcess):
        # the study's [compute] section, unless the caller (e.g. the command line) already chose a runner
        with runner_for(scheduler=study.compute.scheduler, workers=study.compute.workers):
            return run_study(study, out)
    folder = Path(out) if out else study.folder / study.outputs.folder
    folder.mkdir(parents=True, exist_ok=True)
    opts = study.outputs
    steps = Steps(5, "study")

    steps.step("road network")
    net, build_text, reused = cached_network(study, folder)

    steps.step("bases and demand")
    bases, demand, kinds, snaps = load_inputs(study, net)
    fleet = load_fleet(study, bases)
    for std in study.standards:
        check_fleet(fleet, std)
    zones = None
    if study.zones:
        zones = read_zones(study.zones.file, study.zones.id_field, layer=study.zones.layer)

    steps.step("drive-time polygons and travel-time surface")
    minutes = list(opts.isochrone_minutes)
    polygons = drive_time_polygons(
        net,
        bases,
        minutes,
        reach_m=opts.reach_m,
        direction=study.direction,
        max_snap_m=study.bases.snap_m,
    )
    surface_path = write_travel_surface(
        net,
        bases,
        output_file(folder, "surface"),
        max(minutes),
        cell_m=opts.surface_cell_m,
        reach_m=opts.reach_m,
        direction=study.direction,
        max_snap_m=study.bases.snap_m,
    )

    steps.step(
        f"coverage for {len(study.standards)} standards x {len(demand)} demand layers"
        + (", siting" if study.siting else "")
        + (", availability" if study.availability else "")
    )
    runs = _coverage_runs(study, net, bases, demand, kinds, snaps, zones, fleet=fleet)
    summary = pd.DataFrame([row for run in runs for row in run.summary_rows()])
    periods = _period_table(study, net, bases, demand, kinds, snaps, zones, fleet) if study.periods else None
    site_plan, unit_siting = None, None
    if study.siting and study.siting.unit_type:
        unit_siting = _study_unit_siting(study, net, bases, demand, snaps, fleet)
    elif study.siting:
        site_plan = _study_siting(study, net, bases, demand, snaps)
    avail = _study_availability(study, net, bases, demand, snaps, fleet) if study.availability else None
    calibration = _study_calibration(study, net, bases) if study.calibration else None
    simulation = _study_simulation(study, net, bases, demand, kinds, snaps) if study.simulation else None

    steps.step("writing layers and tables")
    layers: dict[str, pd.DataFrame] = {layer_name("bases"): bases, **polygon_layers(polygons)}
    for run in runs:
        layers.update(run.layers())
    density = density_zone_layers(study, net, runs)
    layers.update(density)
    for name, d in demand.items():  # point rows set aside for want of a usable position
        if d.attrs.get("rejected"):
            layers[layer_name("rejected", name)] = d.attrs["rejected"].table
    for stage in (site_plan, unit_siting, avail, calibration):
        if stage is not None:
            layers.update(stage.layers())
    layers[layer_name("summary")] = summary.drop(columns=["standard_text"])
    if periods is not None:
        layers[layer_name("period_compliance")] = periods
    outputs = _write_outputs(folder, surface_path, layers, summary, site_plan, calibration)
    if simulation is not None:
        from coverkit.simulate.outputs import write_simulation

        sim_folder = output_file(folder, "simulate_folder")
        outputs.update(write_simulation(simulation, sim_folder, charts=opts.maps or opts.report))
    result = StudyRun(
        study,
        net,
        build_text,
        bases,
        demand,
        polygons,
        surface_path,
        runs,
        summary,
        outputs,
        reused,
        site_plan,
        avail,
        calibration,
        simulation=simulation,
        periods=periods,
        density_layers=density or None,
        unit_siting=unit_siting,
    )

    return result


def _period_table(study: Study, net: RoadNetwork, bases, demand, kinds, snaps, zones, fleet=None) -> pd.DataFrame:
    """Compliance of every standard and demand layer in each [[period]]: the coverage stages on the network timed
    for that moment (:func:`coverkit.network.hour_bands.network_at`, the stage the commands' ``at`` uses)."""
    import pandas as pd

    from coverkit.network.hour_bands import network_at

    rows = []
    for name, at in study.periods:
        timed = network_at(net, at)
        band = timed.info.get("changes", [""])[-1] if timed is not net else "outside every hour band"
        for run in _coverage_runs(study, timed, bases, demand, kinds, snaps, zones, fleet=fleet):
            for r in run.summary_rows():
                row = {"period": name, "at": at, "timing": band, "standard": r["standard"], "demand": r["demand"]}
                keep = ("covered", "covered_share", "fractile_response_s", "meets_standard", "expected_covered_share")
                rows.append(row | {k: r[k] for k in keep if k in r})
    return pd.DataFrame(rows)


def _coverage_runs(
    study: Study,
    net: RoadNetwork,
    bases: gpd.GeoDataFrame,
    demand: dict[str, gpd.GeoDataFrame],
    kinds: dict[str, str],
    snaps: dict[str, float],
    zones: gpd.GeoDataFrame | None,
    *,
    fleet: Fleet | None = None,
) -> list[CoverageStage]:
    """The coverage stage of every standard, in the study's order, sharing one travel table per demand layer."""
    from coverkit.coverage import travel_table

    opts = study.outputs
    # one search per demand layer serves every standard: the horizon covers the longest standard
    base_snap_m = study.bases.snap_m
    tables = {
        name: travel_table(net, bases, dem, study.horizon_s, snaps[name], base_snap_m, study.direction)
        for name, dem in demand.items()
    }
    grid, area = None, study_area(study, net)
    runs: list[CoverageStage] = []
    for std in study.standards:
        stage = coverage_stage(
            net,
            bases,
            demand,
            std,
            kinds=kinds,
            tables=tables,
            zones=zones,
            zone_id_field=study.zones.id_field if zones is not None else None,
            area=area,
            grid=grid,
            cell_m=opts.grid_cell_m,
            reach_m=opts.area_reach_m,
            spread=study.spread,
            **({"fleet": fleet} if fleet is not None else {}),
        )
        grid = stage.areas.grid
        runs.append(stage)
    return runs


def _write_outputs(
    folder: Path,
    surface_path: Path,
    layers: dict[str, pd.DataFrame],
    summary: pd.DataFrame,
    site_plan: SitingStage | None,
    calibration: CalibrationStage | None,
) -> dict[str, Path]:
    """Write the study's files atomically into ``folder``; each output's path by its name."""
    from coverkit.atomic import write_csv_atomic, write_gpkg_layers

    outputs: dict[str, Path] = {"network": output_file(folder, "network"), "surface": surface_path}
    if site_plan is not None:
        outputs["site_curve_csv"] = write_csv_atomic(table_file(folder, "site_curve"), site_plan.plan.curve)
    if calibration is not None:
        from coverkit.calibrate import calibration_chart, write_calibrated_profile

        outputs["calibrated_profile"] = write_calibrated_profile(
            calibration.result, output_file(folder, "calibrated_profile")
        )
        outputs["calibration_chart"] = calibration_chart(calibration.result, map_file(folder, "calibration"))
        from coverkit.spread import write_spread

        outputs["travel_spread"] = write_spread(calibration.result.spread, output_file(folder, "travel_spread"))
    outputs["layers"] = write_gpkg_layers(output_file(folder, "layers"), layers)
    outputs["summary_csv"] = write_csv_atomic(output_file(folder, "summary_csv"), summary)
    return outputs


def headline_lines(run: StudyRun) -> list[str]:
    """The headline numbers of a study, one line each, for the CLI."""
    lines = [f"{run.study.name}", ""]
    for name, d in run.demand.items():
        if d.attrs.get("rejected"):
            lines.append(
                f"{name}: {d.attrs['rejected'].text(verb=False)} rejected; see layer {layer_name('rejected', name)}"
            )
    # thousands separated by a comma in every figure, as in the report (coverkit.report.tables.THOUSANDS)
    standards = {s.name: s for s in run.study.standards}
    for r in run.summary.itertuples(index=False):
        frac = r.fractile_response_s
        frac_text = standards[r.standard].unreached_text() if frac == float("inf") else f"{frac / 60:.1f} min"
        unit = demand_sources.unit_word(r.kind)
        lines.append(
            f"{r.standard:<22} {r.demand:<12} covered {r.covered_share * 100:5.1f} % "
            f"({r.covered:,.0f} of {r.demand_total:,.0f} {unit}); {r.fractile * 100:g}th percentile response "
            f"{frac_text} - {'meets' if r.meets_standard else 'misses'} the standard"
        )
    for stage in (run.siting_stage, run.unit_siting, run.availability_stage):
        if stage is not None:
            lines.append(stage.headline())
    if run.calibration_stage is not None:
        lines.append(run.calibration_stage.headline(run.outputs["calibrated_profile"].name))
    for srun in run.runs:
        lines.extend(srun.gap_lines())
    return lines


def _study_simulation(study: Study, net: RoadNetwork, bases, demand, kinds, snaps):
    """The ``[simulation]`` section's run (:mod:`coverkit.simulate`) on the study's loaded inputs."""
    from coverkit.simulate.study_run import study_settings, study_simulation

    try:
        return study_simulation(study, net, bases, demand, kinds, snaps, study_settings(study, net, bases, {}))
    except CoverkitError as exc:  # name the [simulation] key, not another section's key of the same name
        if exc.param is None:
            raise
        raise type(exc)(f"{study.path}: {exc.worded('simulation.' + exc.param)}") from None
