"""coverkit: drive-time polygons, coverage, siting and availability for fire and EMS planning.

Results are planning estimates, not for live dispatch or routing. Validate them against local response data;
local standards, medical direction and licensed professionals decide.

The main entry points are importable from here (loaded on first use, so ``import coverkit`` stays quick)::

    import coverkit as ck
    net, report = ck.build_network("data/demo/varrowby.osm.bz2")
    bases = ck.read_points("data/demo/stations.csv", net.crs, what="bases")
    demand = ck.load_demand("data/demo/population.tif", net)
    result = ck.evaluate_coverage(net, bases, demand, ck.Standard("ALS", travel_s=480, turnout_s=60))
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

from coverkit.errors import CoverkitError

__version__ = "0.1.0"

CAUTION = (
    "Planning estimates only - not for live dispatch or routing. Validate against local response data; "
    "local standards, medical direction and licensed professionals decide."
)

#: public name -> module that defines it; imported lazily by :func:`__getattr__` (PEP 562)
_LAZY = {
    "RoadNetwork": "coverkit.network",
    "build_network": "coverkit.network",
    "load_profile": "coverkit.network",
    "read_points": "coverkit.travel",
    "snap_points": "coverkit.travel",
    "load_demand": "coverkit.demand",
    "Standard": "coverkit.coverage",
    "CoverageResult": "coverkit.coverage",
    "evaluate_coverage": "coverkit.coverage",
    "area_layers": "coverkit.coverage",
    "per_base": "coverkit.coverage",
    "compliance_by_zone": "coverkit.coverage",
    "drive_time_polygons": "coverkit.isochrones",
    "write_travel_surface": "coverkit.isochrones",
    "build_problem": "coverkit.site_plan",
    "solve": "coverkit.site_plan",
    "calibrate_speeds": "coverkit.calibrate",
    "load_scenario": "coverkit.scenario",
    "WhatIf": "coverkit.whatif",
    "load_study": "coverkit.study",
    "run_study": "coverkit.study",
    "report_study": "coverkit.report.study_report",
    "coverage_stage": "coverkit.stages",
    "compare_study": "coverkit.compare_run",
    "layer_name": "coverkit.layer_names",
    "simulate": "coverkit.simulate.run",
    "network_at": "coverkit.network.hour_bands",
    "calibrate_hour_bands": "coverkit.calibrate_hours",
    "fit_spread": "coverkit.spread",
    "read_spread": "coverkit.spread",
    "read_units": "coverkit.units",
    "place_units": "coverkit.site_units",
    "availability_by_type": "coverkit.availability_types",
}

__all__ = [
    "CAUTION",
    "CoverageResult",
    "CoverkitError",
    "RoadNetwork",
    "Standard",
    "WhatIf",
    "__version__",
    "area_layers",
    "availability_by_type",
    "build_network",
    "build_problem",
    "calibrate_hour_bands",
    "calibrate_speeds",
    "compare_study",
    "compliance_by_zone",
    "coverage_stage",
    "drive_time_polygons",
    "evaluate_coverage",
    "fit_spread",
    "layer_name",
    "load_demand",
    "load_profile",
    "load_scenario",
    "load_study",
    "network_at",
    "per_base",
    "place_units",
    "read_points",
    "read_spread",
    "read_units",
    "report_study",
    "run_study",
    "simulate",
    "snap_points",
    "solve",
    "write_travel_surface",
]

if TYPE_CHECKING:  # for type checkers and editors; at run time the names load on first use
    from coverkit.availability_types import availability_by_type
    from coverkit.calibrate import calibrate_speeds
    from coverkit.calibrate_hours import calibrate_hour_bands
    from coverkit.compare_run import compare_study
    from coverkit.coverage import (
        CoverageResult,
        Standard,
        area_layers,
        compliance_by_zone,
        evaluate_coverage,
        per_base,
    )
    from coverkit.demand import load_demand
    from coverkit.isochrones import drive_time_polygons, write_travel_surface
    from coverkit.layer_names import layer_name
    from coverkit.network import RoadNetwork, build_network, load_profile
    from coverkit.network.hour_bands import network_at
    from coverkit.report.study_report import report_study
    from coverkit.scenario import load_scenario
    from coverkit.simulate.run import simulate
    from coverkit.site_plan import build_problem, solve
    from coverkit.site_units import place_units
    from coverkit.spread import fit_spread, read_spread
    from coverkit.stages import coverage_stage
    from coverkit.study import load_study, run_study
    from coverkit.travel import read_points, snap_points
    from coverkit.units import read_units
    from coverkit.whatif import WhatIf


def __getattr__(name: str) -> Any:
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'coverkit' has no attribute '{name}'")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY))
