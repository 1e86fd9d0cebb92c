"""Maps and the HTML report of a scenario comparison (:func:`coverkit.compare_run.compare_study`).

Draws and tabulates what the comparison computed: the changes applied, coverage before and after, who loses and
gains coverage, per-base changes, and a diverging difference map of the areas whose coverage changed.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import geopandas as gpd
import numpy as np
import pandas as pd

from coverkit import CAUTION, __version__
from coverkit.demand_sources import row_word, unit_word
from coverkit.layer_names import map_file, output_file, slug
from coverkit.report.html import HtmlReport
from coverkit.report.maps import MapFrame, difference_map, gaps_map, study_frame
from coverkit.report.study_report import gap_columns
from coverkit.report.tables import present
from coverkit.report.web_map import add_map_section, compare_map

if TYPE_CHECKING:
    from coverkit.compare_run import CompareRun


def _minutes(seconds: float) -> str:
    return "not reached" if not np.isfinite(seconds) else f"{seconds / 60:.1f} min"


def _closure_areas(run: CompareRun) -> gpd.GeoDataFrame | None:
    """The scenario's closure polygons (e.g. a flood zone) in the network's CRS, or None."""
    crs = run.network_after.crs
    parts = [
        gpd.GeoSeries([c.polygon], crs=c.polygon_crs or "EPSG:4326").to_crs(crs)
        for c in run.scenario.closures
        if c.kind == "polygon" and c.polygon is not None
    ]
    if not parts:
        return None
    return gpd.GeoDataFrame(geometry=pd.concat(parts, ignore_index=True), crs=crs)


def _frame(run: CompareRun, bases: gpd.GeoDataFrame) -> MapFrame:
    crs = run.network_after.crs
    study = run.study
    boundary = gpd.read_file(study.roads.boundary).to_crs(crs) if study.roads.boundary else None
    zones = zone_field = None
    if study.zones:
        zones = gpd.read_file(study.zones.file, layer=study.zones.layer).to_crs(crs)
        zone_field = study.zones.id_field
    return study_frame(
        crs, boundary=boundary, zones=zones, zone_field=zone_field, include=[bases],
        fallback_bounds=run.network_after.nodes.total_bounds,
    )  # fmt: skip


def write_compare_report(run: CompareRun, folder: Path) -> dict[str, Path]:
    """Write the difference maps into ``folder/maps`` and ``folder/compare_report.html``."""
    out: dict[str, Path] = {}
    roads = run.network_after.road_lines()
    before = run.bases_before.rename(columns={"id": "base_id"})
    after = run.bases_after.rename(columns={"id": "base_id"})
    frame = _frame(run, pd.concat([before, after], ignore_index=True))
    closures = _closure_areas(run)
    closed = run.changes.closed if len(run.changes.closed) else None
    kinds = {spec.name: spec.kind for spec in run.study.demand}
    words = {spec.name: row_word(spec.source_kind) for spec in run.study.demand}
    residents = next((n for n, k in kinds.items() if k == "residents"), run.study.demand[0].name)
    images = {}
    for std_name, ca in run.areas.items():
        s = slug(std_name)
        std = next(st for st in run.study.standards if st.name == std_name)
        poly = ca.polygons.copy()
        unit = unit_word(kinds.get(residents))
        if len(poly):
            poly["coverage_change"] = np.where(poly["change"] == "gained", 1.0, -1.0) * poly["weight"]
            path = difference_map(
                map_file(folder, "difference", std_name),
                poly,
                "coverage_change",
                before,
                after,
                roads,
                f"{run.scenario.name}: change in coverage - {std_name}",
                std.describe(with_source=False),
                f"{unit} gaining (+) or losing (\u2212) coverage in each area",
                increase_label="gains coverage",
                decrease_label="loses coverage",
                closed_roads=closed,
                closure_areas=closures,
                frame=frame,
            )
        else:
            path = None
        value, value_unit, count = gap_columns(ca.after.gaps, kinds.get(residents, "residents"))
        gaps_after = gaps_map(
            map_file(folder, "gaps_after", std_name),
            ca.after.gaps,
            after,
            roads,
            f"Gaps after - {std_name}",
            std.describe(with_source=False),
            value_column=value,
            value_unit=value_unit,
            count_column=count,
            frame=frame,
        )
        images[std_name] = (path, gaps_after)
        if path:
            out[f"map_difference_{s}"] = path
        out[f"map_gaps_after_{s}"] = gaps_after

    rep = HtmlReport(f"{run.study.name} - scenario: {run.scenario.name}")
    first = run.summary.iloc[0]
    first_unit = unit_word(kinds.get(first["demand"]))
    rep.add_key_figures(
        {
            f"covered before ({first['standard']}, {first['demand']})": f"{first['covered_share_before'] * 100:.1f} %",
            "covered after": f"{first['covered_share_after'] * 100:.1f} %",
            "lose coverage": f"{first['lost_weight']:,.0f} {first_unit}",
            "gain coverage": f"{first['gained_weight']:,.0f} {first_unit}",
            f"{first['fractile'] * 100:g}th pct response after": _minutes(first["fractile_response_s_after"]),
        }
    )
    rep.add_heading("What changes")
    if run.scenario.description:
        rep.add_paragraph(run.scenario.description)
    rep.add_list(run.changes.lines() or ["no change"])
    add_map_section(rep, compare_map(run), "Pan and zoom; switch between before and after; hover a base or an area.")
    rep.add_heading("Before and after")
    table = run.summary[
        [
            "standard",
            "demand",
            "demand_total",
            "covered_share_before",
            "covered_share_after",
            "fractile_response_s_before",
            "fractile_response_s_after",
            "lost_weight",
            "gained_weight",
        ]
    ].rename(columns={"demand": "demand layer"})
    shown, formats = present(table)
    rep.add_table(shown, caption="Coverage before and after, per standard and demand layer", formats=formats)
    for std_name in dict.fromkeys(std for std, _ in run.comparisons):
        rep.add_heading(std_name, 3)
        for (std, dem), comp in run.comparisons.items():
            if std != std_name:
                continue
            shown, formats = present(comp.bases, point_word=words.get(dem, "points"))
            rep.add_table(
                shown,
                caption=f"Per base - {dem}: first-due demand and demand reached within the standard",
                formats=formats,
            )
        path, gaps_after = images.get(std_name, (None, None))
        if path:
            rep.add_image(path, f"Areas that lose or gain coverage - {std_name}")
        if std_name in run.areas and len(run.areas[std_name].polygons):
            shown, formats = present(run.areas[std_name].polygons.head(15))
            rep.add_table(shown, caption="Largest areas that change", formats=formats)
        if gaps_after:
            rep.add_image(gaps_after, f"Gaps after the change - {std_name}")
    rep.add_heading("About this report")
    rep.add_paragraph(
        "Both runs use the same road network, profile, demand and standards; only the scenario's changes differ. "
        f"Made with coverkit {__version__}. {CAUTION}"
    )
    out["report"] = rep.write(output_file(folder, "compare_report"))
    return out
