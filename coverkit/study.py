"""Study files: one TOML file names the inputs, the standards and the outputs of a whole run.

:func:`load_study` reads and validates the file (unknown key, wrong type, missing file: one line naming the key);
:func:`run_study` executes it. Paths in the file are relative to the file. The network build is cached in the
output folder and reused while the road inputs, the profile and the coverkit version are unchanged.
"""

from __future__ import annotations

import hashlib
import json
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from coverkit import __version__
from coverkit.coverage import Standard
from coverkit.errors import StudyError

# -- schema -----------------------------------------------------------------------------------------------------------
# key -> (type(s), required). Types are Python types accepted after TOML parsing.
_NUM = (int, float)
SCHEMA: dict[str, dict[str, tuple[tuple[type, ...] | type, bool]]] = {
    "study": {"name": (str, True), "direction": (str, False), "description": (str, False)},
    "roads": {
        "source": (str, True),
        "boundary": (str, False),
        "buffer_m": (_NUM, False),
        "profile": (str, False),
        "crs": (str, False),
        "fields": (dict, False),
        "layer": (str, False),
    },
    "bases": {"file": (str, True), "id_field": (str, False), "snap_m": (_NUM, False), "layer": (str, False)},
    "demand": {
        "name": (str, True),
        "raster": (str, False),
        "polygons": (str, False),
        "points": (str, False),
        "population_field": (str, False),
        "id_field": (str, False),
        "where": (str, False),
        "weight_field": (str, False),
        "time_field": (str, False),
        "start": (str, False),
        "end": (str, False),
        "kind": (str, False),
        "snap_m": (_NUM, False),
    },
    "standard": {
        "name": (str, True),
        "travel_s": (_NUM, True),
        "turnout_s": (_NUM, False),
        "fractile": (_NUM, False),
        "source": (str, False),
    },
    "zones": {"file": (str, True), "id_field": (str, True), "layer": (str, False)},
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
LIST_SECTIONS = {"demand", "standard"}
REQUIRED_SECTIONS = ("study", "roads", "bases", "demand", "standard")
DEMAND_KINDS = ("residents", "incidents")


@dataclass
class DemandSpec:
    """One ``[[demand]]`` entry."""

    name: str
    path: Path
    source_kind: str  # "raster", "polygons" or "points"
    kind: str  # "residents" (population) or "incidents" (calls)
    options: dict[str, Any] = field(default_factory=dict)
    snap_m: float = 500.0


@dataclass
class Study:
    """A validated study file."""

    path: Path
    name: str
    direction: str
    roads: dict[str, Any]
    bases: dict[str, Any]
    demand: list[DemandSpec]
    standards: list[Standard]
    zones: dict[str, Any] | None
    outputs: dict[str, Any]
    raw: dict[str, Any]

    @property
    def folder(self) -> Path:
        return self.path.parent

    def network_cache_key(self) -> str:
        """Digest of everything the network build depends on."""
        from coverkit.network.build import file_digest
        from coverkit.network.profile import load_profile

        h = hashlib.sha256()
        h.update(__version__.encode())
        for key in ("source", "boundary"):
            if self.roads.get(key):
                h.update(file_digest(Path(self.roads[key])).encode())
        h.update(load_profile(self.roads.get("profile", "emergency")).to_toml().encode())
        rest = {k: v for k, v in self.roads.items() if k not in ("source", "boundary", "profile")}
        h.update(json.dumps(rest, sort_keys=True, default=str).encode())
        return h.hexdigest()


def _check_table(table: Any, section: str, where: str) -> None:
    if not isinstance(table, dict):
        raise StudyError(f"{where}: [{section}] must be a table of keys.")
    schema = SCHEMA[section]
    for key, value in table.items():
        if key not in schema:
            raise StudyError(
                f"{where}: unknown key '{section}.{key}'; allowed keys in [{section}]: {', '.join(schema)}."
            )
        types, _ = schema[key]
        if isinstance(value, bool) and bool not in (types if isinstance(types, tuple) else (types,)):
            raise StudyError(f"{where}: key '{section}.{key}' has the wrong type (got true/false).")
        if not isinstance(value, types):
            want = "/".join(t.__name__ for t in (types if isinstance(types, tuple) else (types,)))
            raise StudyError(f"{where}: key '{section}.{key}' must be {want}, got {type(value).__name__} {value!r}.")
    for key, (_, required) in schema.items():
        if required and key not in table:
            raise StudyError(f"{where}: [{section}] is missing the required key '{key}'.")


def _file(folder: Path, value: str, key: str, where: str) -> Path:
    path = (folder / value).resolve()
    if not path.exists():
        raise StudyError(f"{where}: file for '{key}' not found: {path}; fix the path (relative to the study file).")
    return path


def load_study(path: str | Path) -> Study:
    """Read and validate a study TOML file.

    Raises
    ------
    StudyError
        Syntax error, unknown section or key, wrong type, missing required key or file (one line naming it).
    """
    path = Path(path).resolve()
    where = str(path)
    if not path.is_file():
        raise StudyError(f"study file {path} not found; give a .toml study file (see examples/).")
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise StudyError(f"{where}: not valid TOML ({exc}); fix the syntax.") from None
    except UnicodeDecodeError:
        raise StudyError(f"{where}: not a UTF-8 text file; save the study as UTF-8 TOML.") from None
    for section in raw:
        if section not in SCHEMA:
            raise StudyError(f"{where}: unknown section [{section}]; sections are {', '.join(SCHEMA)}.")
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
                _check_table(item, section, where)
        else:
            _check_table(table, section, where)
    folder = path.parent
    roads = dict(raw["roads"])
    roads["source"] = str(_file(folder, roads["source"], "roads.source", where))
    if "boundary" in roads:
        roads["boundary"] = str(_file(folder, roads["boundary"], "roads.boundary", where))
    if "profile" in roads and (roads["profile"].endswith(".toml") or "/" in roads["profile"]):
        roads["profile"] = str(_file(folder, roads["profile"], "roads.profile", where))
    bases = dict(raw["bases"])
    bases["file"] = str(_file(folder, bases["file"], "bases.file", where))

    demand: list[DemandSpec] = []
    names = set()
    for i, item in enumerate(raw["demand"]):
        key = f"demand[{i}]"
        given = [k for k in ("raster", "polygons", "points") if k in item]
        if len(given) != 1:
            raise StudyError(f"{where}: {key} ('{item['name']}') needs exactly one of raster, polygons, points.")
        src_kind = given[0]
        if src_kind == "polygons" and "population_field" not in item:
            raise StudyError(f"{where}: {key} ('{item['name']}') uses polygons; add population_field.")
        if item["name"] in names:
            raise StudyError(f"{where}: two [[demand]] entries are named '{item['name']}'; names must differ.")
        names.add(item["name"])
        kind = item.get("kind", "incidents" if src_kind == "points" else "residents")
        if kind not in DEMAND_KINDS:
            raise StudyError(f"{where}: {key}.kind must be one of {', '.join(DEMAND_KINDS)}, got '{kind}'.")
        opts = {k: v for k, v in item.items() if k not in ("name", "raster", "polygons", "points", "kind", "snap_m")}
        demand.append(
            DemandSpec(
                item["name"],
                _file(folder, item[src_kind], f"{key}.{src_kind}", where),
                src_kind,
                kind,
                opts,
                float(item.get("snap_m", 500.0)),
            )
        )
    standards = []
    for i, item in enumerate(raw["standard"]):
        try:
            standards.append(
                Standard(
                    item["name"],
                    float(item["travel_s"]),
                    float(item.get("turnout_s", 0.0)),
                    float(item.get("fractile", 0.9)),
                    item.get("source", ""),
                )
            )
        except Exception as exc:  # Standard validates its own values
            raise StudyError(f"{where}: standard[{i}]: {exc}") from None
    if len({s.name for s in standards}) != len(standards):
        raise StudyError(f"{where}: two [[standard]] entries share a name; names must differ.")
    zones = None
    if "zones" in raw:
        zones = dict(raw["zones"])
        zones["file"] = str(_file(folder, zones["file"], "zones.file", where))
    outputs = dict(raw.get("outputs", {}))
    minutes = outputs.get("isochrone_minutes", [4, 8, 12])
    if not all(isinstance(m, int | float) and not isinstance(m, bool) and m > 0 for m in minutes) or not minutes:
        raise StudyError(f"{where}: outputs.isochrone_minutes must be a list of positive numbers, e.g. [4, 8, 12].")
    outputs["isochrone_minutes"] = sorted(float(m) for m in minutes)
    direction = raw["study"].get("direction", "out")
    if direction not in ("out", "in"):
        raise StudyError(f"{where}: study.direction must be 'out' (base to demand) or 'in', got '{direction}'.")
    return Study(path, raw["study"]["name"], direction, roads, bases, demand, standards, zones, outputs, raw)
