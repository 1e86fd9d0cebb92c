"""Maps and the HTML report of a study run (:func:`coverkit.study.run_study`).

Draws and tabulates what the study computed; no number is computed here that the modules do not expose.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import geopandas as gpd
import numpy as np
import pandas as pd
import rasterio

from coverkit import CAUTION, __version__, siting_models
from coverkit.coverage import GAP_COUNT_PREFIX, gap_count_columns
from coverkit.demand_sources import row_word
from coverkit.layer_names import layer_name, map_file, output_file, slug
from coverkit.report.html import HtmlReport
from coverkit.report.maps import (
    MapFrame,
    coverage_depth_map,
    density_zone_map,
    first_due_map,
    gaps_map,
    line_chart,
    study_frame,
    travel_surface_map,
)
from coverkit.report.tables import plural, present
from coverkit.report.web_map import add_map_section, study_map

if TYPE_CHECKING:
    from coverkit.study import StudyRun

#: Model name -> its short citation (held in :mod:`coverkit.siting_models`).
_MODEL_SOURCES = {m.name: m.citation for m in siting_models.MODEL_LIST}

FRACTILE_NOTE = (
    "Fractile response: the smallest response time such that the stated share of demand (by weight) is reached "
    "within it (inverted empirical CDF; Hyndman & Fan 1996, definition 1). Demand not reached within the search "
    "horizon counts as slower than any time."
)


def _minutes(seconds: float) -> str:
    return "not reached" if not np.isfinite(seconds) else f"{seconds / 60:.1f} min"


def gap_columns(gaps: pd.DataFrame, kind: str) -> tuple[str, str, str | None]:
    """The column shading gaps on the map, its unit word, and the calls column listed beside it.

    The gaps table names each count ``uncovered_<unit>`` (:func:`coverkit.coverage.gap_count_columns`); residents
    shade by people and list calls, incident demand shades by calls.
    """
    units = {c.removeprefix(GAP_COUNT_PREFIX): c for c in gap_count_columns(gaps)}
    if kind == "incidents" and "calls" in units:
        return units["calls"], "calls", None
    if "people" in units:
        return units["people"], "people", units.get("calls")
    if units:
        unit, column = next(iter(units.items()))
        return column, unit, None
    return "gap_id", "demand", None


def _table(rep: HtmlReport, df: pd.DataFrame, caption: str, point_word: str = "points") -> None:
    table, formats = present(df, point_word=point_word)
    rep.add_table(table, caption=caption, formats=formats)


def study_map_frame(run: StudyRun, bases: gpd.GeoDataFrame) -> MapFrame:
    """One extent, the boundary and the zones for every map of a study."""
    crs = run.network.crs
    boundary = zones = None
    if run.study.roads.boundary:
        boundary = gpd.read_file(run.study.roads.boundary).to_crs(crs)
    zone_field = None
    if run.study.zones:
        zones = gpd.read_file(run.study.zones.file, layer=run.study.zones.layer).to_crs(crs)
        zone_field = run.study.zones.id_field
    return study_frame(
        crs,
        boundary=boundary,
        zones=zones,
        zone_field=zone_field,
        include=[bases],
        fallback_bounds=run.network.nodes.total_bounds,
    )


def write_study_report(run: StudyRun, folder: Path, html: bool = True) -> dict[str, Path]:
    """Write the study's PNG maps into ``folder/maps`` and, if ``html``, ``folder/report.html``."""
    out: dict[str, Path] = {}
    roads = run.network.road_lines()
    bases = run.bases.rename(columns={"id": "base_id"})
    minutes = list(run.study.outputs.isochrone_minutes)
    frame = study_map_frame(run, bases)
    kinds = {spec.name: spec.kind for spec in run.study.demand}
    words = {spec.name: row_word(spec.source_kind) for spec in run.study.demand}
    with rasterio.open(run.surface_path) as src:
        surface = src.read(1).astype(float)
        surface[surface == src.nodata] = np.nan
        transform = src.transform
    out["map_surface"] = travel_surface_map(
        map_file(folder, "travel_time"),
        surface,
        transform,
        run.network.crs,
        bases,
        roads,
        [0.0, *minutes],
        "Travel time from the nearest base",
        f"Bands: {', '.join(f'{m:g}' for m in minutes)} min; "
        f"profile '{run.network.profile.name}'; turnout not included",
        frame=frame,
    )
    images = {"surface": out["map_surface"]}
    for srun in run.runs:
        s = slug(srun.standard.name)
        text = srun.standard.describe(with_source=False)
        residents = next(iter(srun.results))
        res = srun.results[residents]
        out[f"map_depth_{s}"] = coverage_depth_map(
            map_file(folder, "depth", srun.standard.name),
            srun.areas.depth_grid,
            srun.areas.transform,
            run.network.crs,
            bases,
            roads,
            f"Coverage depth - {srun.standard.name}",
            text,
            demand=res.demand,
            frame=frame,
        )
        value, unit, count = gap_columns(srun.areas.gaps, kinds.get(residents, "residents"))
        out[f"map_gaps_{s}"] = gaps_map(
            map_file(folder, "gaps", srun.standard.name),
            srun.areas.gaps,
            bases,
            roads,
            f"Gaps - {srun.standard.name}",
            text,
            value_column=value,
            value_unit=unit,
            count_column=count,
            frame=frame,
        )
        out[f"map_first_due_{s}"] = first_due_map(
            map_file(folder, "first_due", srun.standard.name),
            srun.areas.first_due,
            bases,
            roads,
            f"First-due areas - {srun.standard.name}",
            text,
            frame=frame,
        )
        images[s] = (out[f"map_depth_{s}"], out[f"map_gaps_{s}"], out[f"map_first_due_{s}"])
        for kind, what in (("second_due", "second due"), ("third_due", "third due")):
            layer = getattr(srun.areas, kind, None)
            if layer is not None and len(layer):
                out[f"map_{kind}_{s}"] = first_due_map(
                    map_file(folder, kind, srun.standard.name), layer, bases, roads,
                    f"{what[:1].upper()}{what[1:]} areas - {srun.standard.name}", text, frame=frame, what=what,
                )  # fmt: skip
    if not html:
        return out

    rep = HtmlReport(f"{run.study.name} - coverage study")
    page = ReportPage(run, folder, rep, out, images, words)
    for section in REPORT_SECTIONS:
        if section.applies(run):
            section.write(page)
    out["report"] = rep.write(output_file(folder, "report"))
    return out


@dataclass(frozen=True)
class ReportPage:
    """What every report section draws on: the run, the output folder, the report being written, the maps written
    so far (``out``; a section may add its own), the maps of each standard and the word for each demand layer's
    rows."""

    run: StudyRun
    folder: Path
    rep: HtmlReport
    out: dict[str, Path]
    images: dict[str, object]
    words: dict[str, str]


def _key_figures(page: ReportPage) -> None:
    run, rep = page.run, page.rep
    first_std = run.runs[0].standard
    figures = {}
    for r in run.summary.itertuples(index=False):
        if r.standard == first_std.name:
            figures[f"{r.demand} covered ({r.standard})"] = f"{r.covered_share * 100:.1f} %"
            figures[f"{r.demand}: {r.fractile * 100:g}th pct response"] = _minutes(r.fractile_response_s)
    figures["bases"] = f"{len(run.bases):,}"
    rep.add_key_figures(figures)


def _inputs(page: ReportPage) -> None:
    run, rep = page.run, page.rep
    rep.add_heading("Inputs")
    inputs = [
        f"Roads: {run.study.roads.source.name} -> {run.network.n_nodes:,} nodes, "
        f"{run.network.n_edges:,} directed edges (CRS {run.network.crs.name})",
        f"Speed profile: {run.network.profile.name} - {run.network.profile.description}",
        f"Bases: {run.study.bases.file.name} ({plural(len(run.bases), 'base')})",
    ]
    for spec in run.study.demand:
        d = run.demand[spec.name]
        extra = f", filter: {spec.where}" if spec.where else ""
        unit = ("person", "people") if spec.kind == "residents" else ("call", "calls")
        word = page.words[spec.name]
        inputs.append(
            f"Demand '{spec.name}' ({spec.kind}): {spec.path.name}, {plural(len(d), word[:-1], word)}, "
            f"{plural(float(d['weight'].sum()), *unit)}{extra}"
        )
    if run.study.zones:
        inputs.append(f"Zones: {run.study.zones.file.name} by '{run.study.zones.id_field}'")
    rep.add_list(inputs)
    rep.add_heading("Standards evaluated", 3)
    rep.add_list([s.describe() for s in run.study.standards])


def _assumptions(page: ReportPage) -> None:
    run, rep = page.run, page.rep
    rep.add_heading("Assumptions")
    rep.add_list(
        [
            "Travel is "
            + ("outbound, base to demand" if run.study.direction == "out" else "inbound, demand to base")
            + "; each base is treated as always available (see the availability analysis for busy units).",
            "Points snap to the nearest road edge; travel includes the partial edge. Demand farther than the snap "
            "limit is reported as off-network and counted as not covered.",
            "Speeds: posted speed (or the class default) x the profile's factor, capped; signal delay at signal nodes.",
            "Response time = turnout + travel. Call processing and dispatch delays are not modelled.",
            FRACTILE_NOTE,
            "Gaps, coverage depth and first-due areas are drawn on a grid of road-near cells timed like demand points.",
        ]
    )
    if run.study.units is not None:
        rep.add_list(
            [
                f"Units: {run.study.units.file.name}; each unit leaves from its base with the staffing the table gives "
                + (
                    "and is counted at every hour. "
                    if run.study.units.hour is None
                    else f"and only the units in service at hour {run.study.units.hour:g} are counted. "
                )
                + "A standard by unit type or force is met when the units it names have "
                "arrived (a unit counted once); their arrival times are measured up to the search horizon.",
            ]
        )


def _web_map(page: ReportPage) -> None:
    intro = "Pan and zoom; pick a standard and the layers; hover a base or an area for its figures."
    add_map_section(page.rep, study_map(page.run), intro)


def _summary(page: ReportPage) -> None:
    run, rep = page.run, page.rep
    rep.add_heading("Summary")
    table = run.summary[
        [
            "standard",
            "demand",
            "demand_total",
            "covered",
            "covered_share",
            "covered_once",
            "covered_twice_or_more",
            "fractile_response_s",
            "meets_standard",
            "off_network",
        ]
    ].rename(columns={"demand": "demand layer"})
    _table(rep, table, "Coverage per standard and demand layer")
    rep.add_heading("Drive-time polygons", 3)
    _table(rep, run.polygons, "Area and road reached per base and band")
    rep.add_image(page.out["map_surface"], "Travel time from the nearest base")


def _standards(page: ReportPage) -> None:
    run, rep, out, words = page.run, page.rep, page.out, page.words
    for srun in run.runs:
        s = slug(srun.standard.name)
        rep.add_heading(f"Standard: {srun.standard.describe()}")
        for name, table in srun.by_base.items():
            _table(rep, table, f"Per base - {name}", words.get(name, "points"))
        for label, tables in (("zone", srun.by_zone), ("priority", srun.by_priority)):
            for name, table in tables.items():
                _table(rep, table, f"Compliance by {label} - {name}", words.get(name, "points"))
        gaps = srun.areas.gaps.head(10)
        _table(rep, gaps, "Largest gaps (demand not covered inside each)")
        depth, gaps_png, first_png = page.images[s]
        rep.add_image(depth, f"Coverage depth - {srun.standard.name}")
        rep.add_image(gaps_png, f"Gaps - {srun.standard.name}")
        rep.add_image(first_png, f"First-due areas - {srun.standard.name}")
        for kind, what in (("second_due", "Second-due"), ("third_due", "Third-due")):
            if f"map_{kind}_{s}" in out:
                rep.add_image(out[f"map_{kind}_{s}"], f"{what} areas - {srun.standard.name}")


def _density_zones(page: ReportPage) -> None:
    """The NFPA 1720 preset: the zones' map and each zone judged against its own row."""
    from coverkit.nfpa import FROM_MEMORY

    run, rep = page.run, page.rep
    layers = run.density_layers
    zones = layers[layer_name("density_zones")]
    rep.add_heading("NFPA 1720 demand zones")
    rep.add_list(
        [
            f"Zones by population density (over a square window of the population raster, or per block); rows "
            f"{FROM_MEMORY}.",
            "Each demand point counts in the zone it lies in and is judged against that zone's row (staff on scene "
            "within the response time, turnout included).",
            "The remote zone is the area 8 road miles or more from the nearest station (road distance, whatever the "
            "density); its row sets no time, so its table gives the time by which 4 staff are on scene for 90 % of "
            "its demand, without a pass or fail.",
        ]
    )
    _table(rep, zones.drop(columns="geometry"), "Demand zones")
    for name in run.study.demand:
        table = layers.get(layer_name("by_density_zone", name.name))
        if table is not None:
            _table(rep, table, f"Each zone against its own row - {name.name}", page.words.get(name.name, "points"))
    png = density_zone_map(
        map_file(page.folder, "density_zones"),
        zones,
        run.bases.rename(columns={"id": "base_id"}),
        run.network.road_lines(),
        "NFPA 1720 demand zones",
        f"NFPA 1720 zones ({FROM_MEMORY})",
        frame=study_map_frame(run, run.bases.rename(columns={"id": "base_id"})),
    )
    page.out["map_density_zones"] = png
    rep.add_image(png, "NFPA 1720 demand zones by population density")


def _siting(page: ReportPage) -> None:
    rep = page.rep
    plan = page.run.site_plan
    sm = plan.summary
    rep.add_heading("Where a new station would help")
    rep.add_paragraph(
        f"Model {sm['model']} ({_MODEL_SOURCES.get(sm['model'], '')}) on demand '{sm['demand']}', "
        f"{sm['standard']}. Solved by {sm['method']}: {sm['status']}, gap {sm['mip_gap'] * 100:.3f} % to the "
        f"{sm['bound_source']}. Covered {sm['covered_share_before'] * 100:.1f} % with the existing bases, "
        f"{sm['covered_share_after'] * 100:.1f} % with the chosen sites."
    )
    _table(rep, plan.chosen, "Chosen sites and what each adds")
    curve = plan.curve[["new_sites", "covered_share", "gain_share", "fractile_response_s", "site_ids"]]
    _table(rep, curve, "Coverage curve: best sites for each number of new stations")
    page.out["site_curve"] = site_curve_chart(plan, map_file(page.folder, "site_curve"), str(sm["standard"]))
    rep.add_image(page.out["site_curve"], "Coverage curve")
    _table(rep, plan.ranking, "Every candidate alone: what it adds to the existing bases")


def _availability(page: ReportPage) -> None:
    rep = page.rep
    av = page.run.availability
    a = av.summary
    rep.add_heading("Busy units: who actually responds")
    rep.add_paragraph(
        f"Hypercube model ({a['method']}, {a['queue']} queue; Larson 1974, 1975) with closest-available "
        f"dispatch on the network's travel times: {a['calls_per_h']:.2f} calls per hour on demand "
        f"'{a['demand']}', {a['mean_service_min']:g} min busy per call ({a['offered_load_erlang']:.2f} erlang) "
        f"over {plural(a['units'], 'unit')}. {a['standard']}."
    )
    rep.add_key_figures(
        {
            "reached in standard, drive time only": f"{a['drive_time_coverage'] * 100:.1f} %",
            "reached by the unit that answers": f"{a['availability_coverage'] * 100:.1f} %",
            "mean travel of the answering unit": f"{a['expected_travel_s'] / 60:.1f} min",
            "chance all units busy": f"{a['all_busy_probability'] * 100:.2f} %",
        }
    )
    _table(rep, av.units, "Unit workloads (share of time busy) and calls answered per hour")
    by_type = page.run.availability_stage.by_type
    if by_type is not None:
        rep.add_heading("By unit type, on the calls that need it", 3)
        rep.add_paragraph(
            "Each type is its own dispatch system (the same model) on the calls whose needs name it, at their share "
            "of the call rate; a call needing two types keeps one unit of each busy."
        )
        cols = ["type", "calls_share", "units", "mean_workload", "drive_time_coverage", "availability_coverage"]
        _table(rep, by_type.summary[cols], "Per unit type")
        _table(rep, by_type.units, "Per unit of each type")


def _unit_siting(page: ReportPage) -> None:
    rep, stage = page.rep, page.run.unit_siting
    s = stage.plan.summary
    rep.add_heading(f"The next {s['unit_type']} units")
    rep.add_paragraph(
        f"{s['units_added']} unit(s) of {s['staffing']} people at existing bases or candidate sites, judged by "
        f"{s['standard']}; {s['method']}; best possible: {s['best_possible']}. Covered "
        f"{s['covered_share_before'] * 100:.1f} % -> {s['covered_share_after'] * 100:.1f} % of '{stage.demand}'."
    )
    _table(rep, stage.plan.chosen.drop(columns="geometry"), "Sites of the added units, in order")


def _calibration(page: ReportPage) -> None:
    rep = page.rep
    cal = page.run.calibration
    rep.add_heading("Modelled against observed travel times")
    rep.add_paragraph(
        f"{plural(cal.n_used, 'observed response')} matched to modelled routes; one speed multiplier per road "
        "class fitted by bounded robust least squares with re-routing. The calibrated profile is written beside "
        "this report; the coverage above uses the study's profile, not the calibrated one."
    )
    _table(rep, cal.errors, "Errors before and after calibration, by route length")
    _table(rep, cal.classes, "Fitted factors per road class")
    rep.add_image(page.run.outputs["calibration_chart"], "Observed and modelled travel times")


def _expected_cover(page: ReportPage) -> None:
    """Expected covered demand from the travel-time spread, beside the deterministic figure (numbers from the run)."""
    run, rep = page.run, page.rep
    rep.add_heading("Covered demand with the travel-time spread")
    rep.add_paragraph(
        f"Travel times scatter around the modelled ones (spread fit {run.study.spread.source}, after Budge, "
        "Ingolfsson & Zerom 2010). 'covered' is the deterministic figure: demand whose modelled travel time is "
        "within the standard. 'expected covered' weights each point's demand by its chance of arriving within the "
        "standard (lognormal, by route-length band). Both are planning estimates of the same model."
    )
    cols = ["standard", "demand", "covered", "covered_share", "expected_covered", "expected_covered_share"]
    _table(rep, run.summary[cols].rename(columns={"demand": "demand layer"}), "Deterministic and expected cover")


def _periods(page: ReportPage) -> None:
    """Compliance per time-of-day period, side by side (numbers from the run)."""
    run, rep = page.run, page.rep
    rep.add_heading("Compliance by time of day")
    rep.add_paragraph(
        "Each [[period]] times the network for its moment with the profile's hour-band speed factors (edge times "
        "of each road class scaled); the coverage is then computed as above. Covered share per period:"
    )
    p = run.periods
    wide = p.pivot_table(index=["standard", "demand"], columns="period", values="covered_share", sort=False)
    wide = wide[[n for n, _ in run.study.periods]].reset_index().rename(columns={"demand": "demand layer"})
    wide.columns = [str(c) if c in ("standard", "demand layer") else f"{c}_share" for c in wide.columns]
    _table(rep, wide, "Covered share per period")
    _table(rep, p[["period", "at", "timing"]].drop_duplicates(), "How each period was timed")


def simulation_section(page: ReportPage) -> None:
    """The simulation beside the drive-time and hypercube figures (:mod:`coverkit.report.simulate_report`)."""
    from coverkit.report.simulate_report import add_simulation, beside_table

    add_simulation(page.rep, page.run.simulation, page.run.outputs, beside=beside_table(page.run))


def _about(page: ReportPage) -> None:
    page.rep.add_heading("About this report")
    page.rep.add_paragraph(f"Made with coverkit {__version__}. {CAUTION}")


@dataclass(frozen=True)
class ReportSection:
    """One section of the study report: its name, whether a run has it, and the function that writes it."""

    name: str
    write: Callable[[ReportPage], None]
    applies: Callable[[StudyRun], bool] = lambda run: True


#: The study report's sections, in page order: adding a section is one entry here and its function above.
REPORT_SECTIONS: tuple[ReportSection, ...] = (
    ReportSection("key_figures", _key_figures),
    ReportSection("inputs", _inputs),
    ReportSection("assumptions", _assumptions),
    ReportSection("web_map", _web_map),
    ReportSection("summary", _summary),
    ReportSection("expected_cover", _expected_cover, lambda run: "expected_covered" in run.summary.columns),
    ReportSection("periods", _periods, lambda run: run.periods is not None),
    ReportSection("standards", _standards),
    ReportSection("density_zones", _density_zones, lambda run: bool(getattr(run, "density_layers", None))),
    ReportSection("siting", _siting, lambda run: run.site_plan is not None),
    ReportSection("unit_siting", _unit_siting, lambda run: getattr(run, "unit_siting", None) is not None),
    ReportSection("availability", _availability, lambda run: run.availability is not None),
    ReportSection("calibration", _calibration, lambda run: run.calibration is not None),
    ReportSection("simulation", lambda page: simulation_section(page), lambda run: run.simulation is not None),
    ReportSection("about", _about),
)


def report_study(run: StudyRun) -> dict[str, Path]:
    """The maps and the HTML report of a study run, as its ``[outputs]`` section asks (``maps``, ``report``).

    Written into the run's output folder; the paths are added to ``run.outputs`` and returned.
    """
    opts = run.study.outputs
    if not (opts.maps or opts.report):
        return {}
    written = write_study_report(run, run.outputs["layers"].parent, html=opts.report)
    run.outputs.update(written)
    return written


def site_curve_values(model: str, curve: pd.DataFrame) -> tuple[list[float], str]:
    """The curve's own value per point: what the model optimises (MCLP and LSCP: covered share), as the model's
    registry entry (:mod:`coverkit.siting_models`) says."""
    spec = siting_models.BY_NAME.get(model, siting_models.BY_NAME[siting_models.DEFAULT_MODEL])
    return list(spec.curve_value(curve)), spec.curve_label


def site_curve_chart(plan: object, out_png: Path, standard_text: str = "") -> Path:
    """The siting curve: covered share against whole numbers of new sites, each point labelled with its sites."""
    curve = plan.curve
    model = plan.summary.get("model", "mclp")
    values, label = site_curve_values(model, curve)
    labels = [str(v) if v else "" for v in curve.get("site_ids", pd.Series([""] * len(curve))).fillna("")]
    return line_chart(
        out_png,
        curve["new_sites"].to_numpy(),
        {label: np.asarray(values, dtype=float)},
        siting_models.BY_NAME[model].count_word if model in siting_models.BY_NAME else "new sites",
        label,
        f"{model} curve",
        note=(f"{standard_text}. " if standard_text else "")
        + f"Each point is the {model} answer for that many new sites, started from the one before "
        f"({_MODEL_SOURCES.get(model, '')}); labels name the sites.",
        whole_x=True,
        point_labels=labels,
    )
