"""Typed settings, defaults once: every default a run falls back on, and one frozen dataclass per study section.

The defaults below are the one home of each value: the library functions, the study file and (through them) the
command line read them from here, so changing a default is one edit. Each says where it comes from. The section
dataclasses (:class:`RoadsSettings`, :class:`BasesSettings`, :class:`DemandSettings`, :class:`ZonesSettings`,
:class:`SitingSettings`, :class:`AvailabilitySettings`, :class:`CalibrationSettings`, :class:`OutputsSettings`)
are built from a study file's already checked tables (:func:`coverkit.study.load_study` checks names, types and
files first, with :mod:`coverkit.tomlcheck`); a response standard is a :class:`coverkit.coverage.Standard`.

This module sits below every other (it imports only the standard library), so any layer may read a default.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

# -- defaults ---------------------------------------------------------------------------------------------------------
#: Snap limit (m) for bases, candidates and demand: a point farther from every road is off the network (bases:
#: an error; demand: counted as not covered, never moved). Common practice, no source: a few hundred metres
#: spans a long driveway or a large lot without joining a point to a road across a field.
SNAP_M = 500.0
#: Road data kept around a study boundary (m), so that routes leaving and re-entering the area are found (our
#: choice: a few km covers the usual detours across a boundary).
BUFFER_M = 3000.0
#: Speed profile used when none is named (one of ``coverkit/network/profiles``).
PROFILE = "emergency"
#: Id field of bases, demand points and candidates.
ID_FIELD = "id"
#: Travel direction: ``out`` (base to demand, a unit responding) or ``in`` (demand to base).
DIRECTION = "out"
#: Drive-time polygon bands of a study (min), common practice for fire/EMS first-due planning.
ISOCHRONE_MINUTES = (4.0, 8.0, 12.0)
#: How far off a reached road a place still counts as reached (m), drive-time polygons and surface (our choice).
REACH_M = 150.0
#: The area grid (gaps, depth, first-due areas) reaches this much farther than the polygons (m), so that the
#: cells of every reached place are on the grid (our choice).
AREA_REACH_MARGIN_M = 50.0
#: Grid cells farther than this from a road carry no area (m): the polygons' reach plus the margin.
AREA_REACH_M = REACH_M + AREA_REACH_MARGIN_M
#: Cell size of the area grid behind first-due areas and gap polygons (m).
AREA_CELL_M = 100.0
#: Travel-time surface cell size (m).
SURFACE_CELL_M = 50.0
#: Turnout time (s) added to travel when a standard gives none: none, so a standard without it is travel only.
TURNOUT_S = 0.0
#: Share of demand a standard must reach when it gives none: 90 %, the fractile NFPA 1710 (2020) uses for its
#: response-time objectives (from memory).
FRACTILE = 0.9
#: Spacing of generated candidate sites (m); our choice, about a station's first few minutes of travel.
SPACING_M = 1500.0
#: Road class generated candidates stand on "or better" when none is named (a class of
#: :data:`coverkit.network.road_classes.CLASS_ORDER`).
CANDIDATE_CLASS = "tertiary"
#: Seconds for all the solving of one siting run, curve included (our choice: a minute answers a county).
SITING_TIME_LIMIT_S = 60.0
#: Siting solver: ``auto`` (exact MILP when the problem is small enough, else the heuristic), ``milp``, ``heuristic``.
SITING_METHOD = "auto"
#: Hypercube queue: ``infinite`` (calls wait) or ``zero`` (calls finding every unit busy are lost to mutual aid).
QUEUE = "infinite"
#: Hypercube solution: ``auto`` (exact for few units, Larson's approximation above), ``exact``, ``approx``.
AVAILABILITY_METHOD = "auto"
#: Timestamp field of incident points.
TIME_FIELD = "received_at"
#: Output folder of a study, relative to the study file.
OUTPUT_FOLDER = "results"
#: Share of rows a point file may lose to bad coordinates before the import stops (1 %; our choice).
MAX_REJECTED_SHARE = 0.01

#: Allowed values of the settings that take a word.
#: Share of the memory available when a step starts (``MemAvailable`` of ``/proc/meminfo``, or what is left under
#: the process's address-space limit) that the step may plan to use; the rest is headroom for the interpreter, the
#: operating system and other processes (our choice).
MEMORY_SHARE = 0.8
#: Environment variable giving the memory budget of a step in GB instead (a shared machine, a container, a test).
MEMORY_ENV = "COVERKIT_MEMORY_GB"


def memory_budget_bytes() -> int:
    """How many bytes a step may plan to use: :data:`MEMORY_ENV` when set, else :data:`MEMORY_SHARE` of the memory
    available now (the smaller of ``MemAvailable`` and the room left under ``ulimit -v``); a very large number where
    neither can be read."""
    import os

    env = os.environ.get(MEMORY_ENV, "").strip()
    if env:
        return int(float(env) * 1e9)
    room = []
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    room.append(int(line.split()[1]) * 1024)
                    break
    except OSError:
        pass
    try:
        import resource

        soft, _ = resource.getrlimit(resource.RLIMIT_AS)
        if soft != resource.RLIM_INFINITY:
            used = 0
            with open("/proc/self/status", encoding="ascii") as fh:
                for line in fh:
                    if line.startswith("VmSize:"):
                        used = int(line.split()[1]) * 1024
            room.append(max(soft - used, 0))
    except (OSError, ValueError, ImportError):
        pass
    return int(min(room) * MEMORY_SHARE) if room else 2**62


DIRECTIONS = ("out", "in")
QUEUES = ("infinite", "zero")
AVAILABILITY_METHODS = ("auto", "exact", "approx")
SITING_METHODS = ("auto", "milp", "heuristic")
DEMAND_KINDS = ("residents", "incidents")


def _opt_path(value: Any) -> Path | None:
    return None if value is None else Path(value)


# -- sections ---------------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class RoadsSettings:
    """``[roads]``: the road data and how the network is built from it."""

    source: Path
    boundary: Path | None = None
    buffer_m: float = BUFFER_M
    profile: str = PROFILE
    crs: str | None = None
    fields: dict[str, str] | None = None
    layer: str | None = None

    @classmethod
    def from_table(cls, t: dict[str, Any]) -> RoadsSettings:
        """From the checked ``[roads]`` table (paths already resolved)."""
        return cls(
            Path(t["source"]),
            _opt_path(t.get("boundary")),
            float(t.get("buffer_m", BUFFER_M)),
            str(t.get("profile", PROFILE)),
            t.get("crs"),
            dict(t["fields"]) if t.get("fields") is not None else None,
            t.get("layer"),
        )


@dataclass(frozen=True)
class BasesSettings:
    """``[bases]``: the existing stations."""

    file: Path
    id_field: str = ID_FIELD
    snap_m: float = SNAP_M
    layer: str | None = None

    @classmethod
    def from_table(cls, t: dict[str, Any]) -> BasesSettings:
        """From the checked ``[bases]`` table."""
        return cls(Path(t["file"]), str(t.get("id_field", ID_FIELD)), float(t.get("snap_m", SNAP_M)), t.get("layer"))


#: Keys of a ``[[demand]]`` entry passed on to the demand reader.
DEMAND_OPTIONS = (
    "where",
    "population_field",
    "weight_field",
    "id_field",
    "time_field",
    "start",
    "end",
    "max_rejected_share",
)


@dataclass(frozen=True)
class DemandSettings:
    """One ``[[demand]]`` entry.

    Attributes
    ----------
    name
        The layer's name in outputs.
    path
        The file read.
    source_kind
        Which demand source reads it (a name of :data:`coverkit.demand.DEMAND_SOURCES`: ``raster``, ``polygons``,
        ``points``).
    kind
        ``residents`` (population) or ``incidents`` (calls).
    snap_m
        Snap limit (m).
    where, population_field, weight_field, id_field, time_field, start, end, max_rejected_share
        Options of the demand reader (:func:`coverkit.demand.load_demand`).
    """

    name: str
    path: Path
    source_kind: str
    kind: str
    snap_m: float = SNAP_M
    where: str | None = None
    population_field: str | None = None
    weight_field: str | None = None
    id_field: str = ID_FIELD
    time_field: str | None = None
    start: str | None = None
    end: str | None = None
    max_rejected_share: float = MAX_REJECTED_SHARE

    @property
    def options(self) -> dict[str, Any]:
        """The reader options given, as a dict (None-valued options left out)."""
        return {k: getattr(self, k) for k in DEMAND_OPTIONS if getattr(self, k) is not None}

    @classmethod
    def from_table(cls, t: dict[str, Any], path: Path, source_kind: str, kind: str) -> DemandSettings:
        """From one checked ``[[demand]]`` table, the file it names, its source and its kind."""
        return cls(
            str(t["name"]),
            Path(path),
            source_kind,
            kind,
            float(t.get("snap_m", SNAP_M)),
            t.get("where"),
            t.get("population_field"),
            t.get("weight_field"),
            str(t.get("id_field", ID_FIELD)),
            t.get("time_field"),
            t.get("start"),
            t.get("end"),
            float(t.get("max_rejected_share", MAX_REJECTED_SHARE)),
        )


@dataclass(frozen=True)
class ZonesSettings:
    """``[zones]``: a polygon layer for compliance by zone."""

    file: Path
    id_field: str
    layer: str | None = None

    @classmethod
    def from_table(cls, t: dict[str, Any]) -> ZonesSettings:
        """From the checked ``[zones]`` table."""
        return cls(Path(t["file"]), str(t["id_field"]), t.get("layer"))


@dataclass(frozen=True)
class UnitsSettings:
    """``[units]``: a units table (``unit_id, base_id, type, staffing[, hours]``, :mod:`coverkit.units`)."""

    file: Path
    layer: str | None = None
    hour: float | None = None  # clock hour (0..24) whose units are in service; None: every unit at every hour

    @classmethod
    def from_table(cls, t: dict[str, Any]) -> UnitsSettings:
        """From the checked ``[units]`` table."""
        return cls(Path(t["file"]), t.get("layer"), None if t.get("hour") is None else float(t["hour"]))


@dataclass(frozen=True)
class SitingSettings:
    """``[siting]``: candidate sites and the covering model (a name of :data:`coverkit.siting_models.NAMES`)."""

    candidates: Path | None = None
    generate: str | None = None
    spacing_m: float = SPACING_M
    model: str = "mclp"
    add: int | None = None
    target: float | None = None
    busy_fraction: float | None = None
    relocate: bool = False
    method: str = SITING_METHOD
    time_limit_s: float = SITING_TIME_LIMIT_S
    curve: int | None = None
    standard: str | None = None
    demand: str | None = None
    unit_type: str | None = None  # place units of this type (coverkit.site_units) instead of new stations
    staffing: int | None = None  # people on each added unit (default: the type's median crew)

    @classmethod
    def from_table(cls, t: dict[str, Any]) -> SitingSettings:
        """From the checked ``[siting]`` table."""
        from coverkit.siting_models import DEFAULT_MODEL

        return cls(
            _opt_path(t.get("candidates")),
            t.get("generate"),
            float(t.get("spacing_m", SPACING_M)),
            str(t.get("model", DEFAULT_MODEL)),
            t.get("add"),
            t.get("target"),
            t.get("busy_fraction"),
            bool(t.get("relocate", False)),
            str(t.get("method", SITING_METHOD)),
            float(t.get("time_limit_s", SITING_TIME_LIMIT_S)),
            t.get("curve"),
            t.get("standard"),
            t.get("demand"),
            t.get("unit_type"),
            t.get("staffing"),
        )


@dataclass(frozen=True)
class AvailabilitySettings:
    """``[availability]``: busy units by the hypercube model."""

    service_min: float
    calls_per_h: float | None = None
    queue: str = QUEUE
    method: str = AVAILABILITY_METHOD
    time_field: str = TIME_FIELD
    standard: str | None = None
    demand: str | None = None

    @classmethod
    def from_table(cls, t: dict[str, Any]) -> AvailabilitySettings:
        """From the checked ``[availability]`` table."""
        return cls(
            float(t["service_min"]),
            t.get("calls_per_h"),
            str(t.get("queue", QUEUE)),
            str(t.get("method", AVAILABILITY_METHOD)),
            str(t.get("time_field", TIME_FIELD)),
            t.get("standard"),
            t.get("demand"),
        )


@dataclass(frozen=True)
class CalibrationSettings:
    """``[calibration]``: observed response times to fit speed factors to."""

    observed: Path
    hours: tuple[int, ...] | None = None

    @classmethod
    def from_table(cls, t: dict[str, Any]) -> CalibrationSettings:
        """From the checked ``[calibration]`` table."""
        hours = t.get("hours")
        return cls(Path(t["observed"]), None if hours is None else tuple(int(h) for h in hours))


@dataclass(frozen=True)
class OutputsSettings:
    """``[outputs]``: what a study writes and at which resolution."""

    folder: str = OUTPUT_FOLDER
    isochrone_minutes: tuple[float, ...] = ISOCHRONE_MINUTES
    surface_cell_m: float = SURFACE_CELL_M
    grid_cell_m: float = AREA_CELL_M
    reach_m: float = REACH_M
    horizon_s: float | None = None
    maps: bool = True
    report: bool = True

    @property
    def area_reach_m(self) -> float:
        """Reach of the area grid (m): the polygons' reach plus :data:`AREA_REACH_MARGIN_M`."""
        return self.reach_m + AREA_REACH_MARGIN_M

    @classmethod
    def from_table(cls, t: dict[str, Any]) -> OutputsSettings:
        """From the checked ``[outputs]`` table (``isochrone_minutes`` already checked as positive numbers)."""
        return cls(
            str(t.get("folder", OUTPUT_FOLDER)),
            tuple(sorted(float(m) for m in t.get("isochrone_minutes", ISOCHRONE_MINUTES))),
            float(t.get("surface_cell_m", SURFACE_CELL_M)),
            float(t.get("grid_cell_m", AREA_CELL_M)),
            float(t.get("reach_m", REACH_M)),
            float(t["horizon_s"]) if t.get("horizon_s") else None,
            bool(t.get("maps", True)),
            bool(t.get("report", True)),
        )


@dataclass(frozen=True)
class ComputeSettings:
    """``[compute]``: where the independent blocks of a study's steps run (:mod:`coverkit.compute`): a Dask
    scheduler's address, or a local cluster of ``workers`` processes; neither: this process."""

    scheduler: str | None = None
    workers: int | None = None

    @classmethod
    def from_table(cls, t: dict[str, Any]) -> ComputeSettings:
        """From the checked ``[compute]`` table."""
        return cls(t.get("scheduler"), int(t["workers"]) if t.get("workers") is not None else None)


# -- simulation (issue 15) --------------------------------------------------------------------------------------------
#: How calls enter the simulation: the incidents as they happened, or drawn from a Poisson process.
SIM_CALLS = ("replay", "synthetic")
#: Service-time distributions when the incidents carry no busy time per call.
SIM_SERVICE_DISTS = ("lognormal", "exponential")
#: Replications of a simulation: 20 gives a 95 % t-interval whose half-width is about 0.47 standard deviations
#: (t(0.975, 19) = 2.093 over sqrt(20)); common practice, no single source.
SIM_REPLICATIONS = 20
#: Seed of the first replication's stream (every replication gets its own child seed).
SIM_SEED = 1
#: Mean busy time per call when the incidents carry none (min): an example value for the demo, set it locally.
SIM_SERVICE_MIN = 45.0
#: Spread of the lognormal busy time: coefficient of variation (sd / mean); an example value, set it locally.
SIM_SERVICE_CV = 0.5
#: Lognormal travel-time multiplier's coefficient of variation; 0 = the engine's times as they are.
SIM_TRAVEL_CV = 0.0
#: Coefficient of variation of turnout around the standard turnout; 0 = fixed.
SIM_TURNOUT_CV = 0.0
#: Field with each call's priority (1 most urgent); calls without one are one priority class.
SIM_PRIORITY_FIELD = "priority"


@dataclass(frozen=True)
class SimulationSettings:
    """``[simulation]``: calls replayed or drawn through the fleet (:mod:`coverkit.simulate`).

    ``mutual_aid_after_s`` is the longest a call waits for a unit of the fleet before it goes to mutual aid (None:
    as long as it takes); ``queue = "zero"`` is the same as 0. ``turnout_s`` None takes each standard's own.
    ``cover`` holds the planner's cover rules, ``"EMPTY:FROM:MINUTES"`` (base ids; see
    :mod:`coverkit.simulate.kernel`).
    """

    calls: str | None = None
    hours: float | None = None
    calls_per_h: float | None = None
    service_min: float = SIM_SERVICE_MIN
    service_dist: str = "lognormal"
    service_cv: float = SIM_SERVICE_CV
    service_field: str | None = None
    turnout_s: float | None = None
    turnout_cv: float = SIM_TURNOUT_CV
    travel_cv: float = SIM_TRAVEL_CV
    queue: str = QUEUE
    mutual_aid_after_s: float | None = None
    replications: int = SIM_REPLICATIONS
    seed: int = SIM_SEED
    time_field: str = TIME_FIELD
    priority_field: str = SIM_PRIORITY_FIELD
    demand: str | None = None
    cover: tuple[str, ...] = ()
    travel_cv_source: str = "given"

    @property
    def max_wait_s(self) -> float:
        """Longest wait before mutual aid (s): 0 with a zero queue, infinite when calls wait as long as it takes."""
        if self.queue == "zero":
            return 0.0
        return float("inf") if self.mutual_aid_after_s is None else float(self.mutual_aid_after_s)

    @classmethod
    def from_table(cls, t: dict[str, Any]) -> SimulationSettings:
        """From the checked ``[simulation]`` table."""
        names = cls.__dataclass_fields__
        table = {k: v for k, v in t.items() if k in names}
        if "cover" in table:
            table["cover"] = tuple(str(rule) for rule in table["cover"])
        return cls(**table)
