"""Names of every layer, table and file coverkit writes: the one home of the naming scheme.

Every front end (``coverkit run``/``demo``, the single commands, ``compare``, the report and the Python API) takes
its names from here, so the same inputs give the same names on every path. The scheme, in words:

- a layer tied to one demand layer and one standard is ``<kind>_<demand>_<standard>``
  (``demand_residents_als_8_min``, ``by_base_residents_als_8_min``);
- an area layer tied to one standard is ``<kind>_<standard>`` (``first_due_als_8_min``, ``gaps_als_8_min``);
- a stage's own tables carry the stage as prefix (``site_curve``, ``availability_units``, ``calibration_errors``);
- a table also written as CSV keeps its layer name (``site_curve.csv``); a map is ``maps/<kind>_<standard>.png``.

Demand and standard names are made lower-case ASCII by :func:`slug` (``"ALS 8 min"`` -> ``als_8_min``). A single
command names its standard from the minutes given (``"8 min"``) and its demand from the file name
(``population.tif`` -> ``population``). :data:`KINDS` lists every kind with its pattern and a line saying what the
layer holds; the README's table is printed from it (``python -m coverkit.layer_names``).
"""

from __future__ import annotations

import os
from pathlib import Path

#: kind -> (name pattern, what the layer holds). ``{demand}`` and ``{standard}`` are slugs.
KINDS: dict[str, tuple[str, str]] = {
    "bases": ("bases", "the bases (stations) used, as read"),
    "reach_by_base": ("reach_by_base", "drive-time polygons per base and band"),
    "reach_any_base": ("reach_any_base", "drive-time polygons per band from any base"),
    "demand": ("demand_{demand}_{standard}", "one row per demand point or cell: times, first and second base, depth"),
    "by_base": ("by_base_{demand}_{standard}", "per base: first-due demand, demand reached in standard, sole cover"),
    "by_zone": ("by_zone_{demand}_{standard}", "compliance per zone"),
    "by_priority": ("by_priority_{demand}_{standard}", "compliance per call priority (point demand)"),
    "first_due": ("first_due_{standard}", "area each base reaches first"),
    "first_due_by_type": ("first_due_by_type_{standard}", "per unit type: area each base's unit reaches first"),
    "second_due": ("second_due_{standard}", "area each base reaches second"),
    "third_due": ("third_due_{standard}", "area each base reaches third"),
    "gaps": ("gaps_{standard}", "contiguous areas not covered within the standard, largest first"),
    "single_cover": ("single_cover_{standard}", "areas reached by exactly one base within the standard"),
    "depth": ("depth_{standard}", "coverage depth areas: how many bases reach each place within the standard"),
    "density_zones": (
        "density_zones",
        ("NFPA 1720 demand zones by population density (urban, suburban, rural) and road distance (remote)"),
    ),
    "by_density_zone": ("by_density_zone_{demand}", "each NFPA 1720 density zone judged against its own row"),
    "road_minutes": ("road_minutes", "per road piece: minutes from the nearest base (serve export)"),
    "summary": ("summary", "one row per standard and demand layer: covered share, fractile response"),
    "rejected": ("rejected_{demand}", "point rows set aside (no usable position), with the reason"),
    "site_chosen": ("site_chosen", "chosen new sites and what each adds"),
    "site_ranking": ("site_ranking", "every candidate alone: what it adds"),
    "site_curve": ("site_curve", "covered share for 0, 1, 2 ... new sites"),
    "site_candidates": ("site_candidates", "the candidate sites, snapped"),
    "site_summary": ("site_summary", "model, solver, objective, covered share before and after"),
    "site_unit_chosen": (
        "site_unit_chosen",
        "sites of the added units of a type, in order, and what each adds",
    ),
    "site_unit_summary": ("site_unit_summary", "unit type, standard, method, covered share before and after"),
    "availability_units": ("availability_units", "per unit: workload (busy fraction) and calls answered per hour"),
    "availability_demand": ("availability_demand", "per demand point: drive-time and availability-adjusted cover"),
    "availability_summary": ("availability_summary", "call rate, offered load, chance all units are busy"),
    "availability_by_type": ("availability_by_type", "per unit type: its calls' share, workloads, covered shares"),
    "availability_type_units": ("availability_type_units", "per unit of each type: workload, calls answered per hour"),
    "calibration_classes": ("calibration_classes", "fitted speed factor per road class"),
    "calibration_errors": ("calibration_errors", "errors before and after, by route length"),
    "period_compliance": ("period_compliance", "compliance of each standard and demand layer per time-of-day period"),
    "calibration_spread": ("calibration_spread", "travel-time spread: ln(observed/modelled) by route length, with SEs"),
    "bases_before": ("bases_before", "comparison: bases before the scenario"),
    "bases_after": ("bases_after", "comparison: bases after the scenario"),
    "closed_roads": ("closed_roads", "comparison: road stretches closed"),
    "slowed_roads": ("slowed_roads", "comparison: road stretches slowed"),
    "comparison": ("comparison", "comparison: one row per standard and demand layer, before and after"),
    "about": ("about", "comparison: study, scenario, changes applied, caution"),
    "change_points": ("change_points_{demand}_{standard}", "comparison: per demand point, before and after"),
    "change_by_base": ("change_by_base_{demand}_{standard}", "comparison: per base, before and after"),
    "changed_areas": ("changed_areas_{standard}", "comparison: areas that lose or gain coverage"),
    "gaps_before": ("gaps_before_{standard}", "comparison: gaps before the scenario"),
    "gaps_after": ("gaps_after_{standard}", "comparison: gaps after the scenario"),
    "simulate_points": ("simulate_points", "simulation: per demand point, calls per replication, share in standard"),
    "simulate_bases": ("simulate_bases", "simulation: per base, its units' utilisation and calls per replication"),
    "simulate_intervals": ("simulate_intervals", "simulation: every summary figure with its 95 % interval"),
    "simulate_groups": ("simulate_groups", "simulation: compliance per priority, hour of day and zone, 95 % interval"),
    "simulate_dispatch": ("simulate_dispatch", "simulation: share of each first-due area's calls each base answered"),
    "simulate_difference": ("simulate_difference", "simulation: scenario minus system per figure, paired interval"),
}

#: Files a run writes into its output folder (maps go into ``MAPS_FOLDER``).
FILES: dict[str, tuple[str, str]] = {
    "layers": ("coverage.gpkg", "every layer of a study run"),
    "network": ("network.gpkg", "the road network (cached; reused while its inputs are unchanged)"),
    "surface": ("travel_minutes.tif", "minutes from the nearest base"),
    "summary_csv": ("summary.csv", "the summary table"),
    "report": ("report.html", "the self-contained study report"),
    "calibrated_profile": ("calibrated_profile.toml", "speed profile with the fitted factors"),
    "travel_spread": (
        "travel_spread.csv",
        "travel-time spread by route length, with standard errors (a calibration output)",
    ),
    "compare_layers": ("compare.gpkg", "every layer of a comparison"),
    "compare_csv": ("comparison.csv", "the comparison table"),
    "compare_report": ("compare_report.html", "the self-contained comparison report"),
    "simulate_folder": ("simulation", "a study run's simulation outputs (the files below)"),
    "simulate_layers": ("simulate.gpkg", "simulation: every simulate_ layer"),
    "simulate_summary": ("summary.csv", "simulation: one row per replication and an `all` row"),
    "simulate_units": ("units.csv", "simulation: utilisation and calls per unit and replication"),
    "simulate_report": ("simulate-report.html", "simulation: the self-contained report"),
}
MAPS_FOLDER = "maps"

#: Maps: kind -> (file pattern, what it shows).
MAPS: dict[str, tuple[str, str]] = {
    "travel_time": ("travel_time.png", "travel time from the nearest base, in bands"),
    "density_zones": ("density_zones.png", "NFPA 1720 demand zones by population density"),
    "depth": ("depth_{standard}.png", "coverage depth: bases reaching each place within the standard"),
    "gaps": ("gaps_{standard}.png", "gaps, shaded by the demand they hold"),
    "first_due": ("first_due_{standard}.png", "first-due areas"),
    "second_due": ("second_due_{standard}.png", "second-due areas (when computed)"),
    "third_due": ("third_due_{standard}.png", "third-due areas (when computed)"),
    "site_curve": ("site_curve.png", "covered share against the number of new sites"),
    "calibration": ("calibration.png", "observed against modelled travel times"),
    "difference": ("difference_{standard}.png", "comparison: areas that lose or gain coverage"),
    "gaps_after": ("gaps_after_{standard}.png", "comparison: gaps after the scenario"),
    "simulate_response": ("simulate_response.png", "simulation: share of calls answered within each time"),
    "simulate_units": ("simulate_units.png", "simulation: utilisation per unit with its 95 % interval"),
    "simulate_queue": ("simulate_queue.png", "simulation: calls waiting, found by arriving calls, over time"),
}


def slug(text: str) -> str:
    """Lower-case ASCII name for layers and files (``"ALS 8 min"`` -> ``"als_8_min"``).

    >>> slug("ALS 8 min"), slug("Zone-3 / Nord"), slug("???")
    ('als_8_min', 'zone_3_nord', 'x')
    """
    out = "".join(ch.lower() if ch.isascii() and ch.isalnum() else "_" for ch in str(text))
    return "_".join(filter(None, out.split("_"))) or "x"


def _fill(pattern: str, kind: str, demand: str | None, standard: str | None) -> str:
    values = {}
    for key, value in (("demand", demand), ("standard", standard)):
        if "{" + key + "}" in pattern:
            if value is None:
                raise ValueError(f"layer kind '{kind}' needs a {key} name")
            values[key] = slug(value)
    return pattern.format(**values)


def layer_name(kind: str, demand: str | None = None, standard: str | None = None) -> str:
    """The layer name of ``kind`` for a demand layer and a standard (given by their names, not slugs).

    >>> layer_name("demand", "residents", "ALS 8 min")
    'demand_residents_als_8_min'
    >>> layer_name("gaps", standard="ALS 8 min")
    'gaps_als_8_min'
    """
    if kind not in KINDS:
        raise KeyError(f"unknown layer kind '{kind}'; known: {', '.join(KINDS)}")
    return _fill(KINDS[kind][0], kind, demand, standard)


def table_file(
    folder: str | os.PathLike[str], kind: str, demand: str | None = None, standard: str | None = None
) -> Path:
    """The CSV copy of a table layer: ``folder/<layer name>.csv``."""
    return Path(folder) / f"{layer_name(kind, demand, standard)}.csv"


def map_file(folder: str | os.PathLike[str], kind: str, standard: str | None = None) -> Path:
    """The PNG of a map: ``folder/maps/<kind>_<standard>.png`` (``folder`` is the run's output folder)."""
    if kind not in MAPS:
        raise KeyError(f"unknown map kind '{kind}'; known: {', '.join(MAPS)}")
    return Path(folder) / MAPS_FOLDER / _fill(MAPS[kind][0], kind, None, standard)


def output_file(folder: str | os.PathLike[str], kind: str) -> Path:
    """A run's own file (``coverage.gpkg``, ``summary.csv``, ...) in ``folder``."""
    if kind not in FILES:
        raise KeyError(f"unknown output file '{kind}'; known: {', '.join(FILES)}")
    return Path(folder) / FILES[kind][0]


def single_standard_name(minutes: float, judged: str = "") -> str:
    """The standard's name in a single command: the travel minutes given (``8`` -> ``"8 min"``), after what a
    standard by unit type or force judges (``"first engine"`` -> ``"first engine 4 min"``)."""
    return f"{judged} {minutes:g} min" if judged else f"{minutes:g} min"


def demand_name_of(path: str | os.PathLike[str]) -> str:
    """A demand layer's name in a single command: its file name without extensions (``calls.csv`` -> ``calls``)."""
    name = Path(path).name
    return name.split(".", 1)[0] or name


def _shown(pattern: str) -> str:
    return pattern.replace("{demand}", "<demand>").replace("{standard}", "<standard>")


def markdown_table() -> str:
    """The README's one table of names (layers, files, maps), from :data:`KINDS`, :data:`FILES` and :data:`MAPS`."""
    rows = ["| name | kind | holds |", "| --- | --- | --- |"]
    rows += [f"| `{_shown(pattern)}` | layer | {what} |" for pattern, what in KINDS.values()]
    rows += [f"| `{name}` | file | {what} |" for name, what in FILES.values()]
    rows += [f"| `{MAPS_FOLDER}/{_shown(pattern)}` | map | {what} |" for pattern, what in MAPS.values()]
    return "\n".join(rows)


if __name__ == "__main__":  # pragma: no cover - prints the README table
    print(markdown_table())
