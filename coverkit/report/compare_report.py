"""Maps and the HTML report of a scenario comparison (:func:`coverkit.compare_run.compare_study`).

Draws and tabulates what the comparison computed: the changes applied, coverage before and after, who loses and
gains coverage, per-base changes, and a diverging difference map of the areas whose coverage changed.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from coverkit import CAUTION, __version__
from coverkit.report.html import HtmlReport
from coverkit.report.maps import difference_map, gaps_map

if TYPE_CHECKING:
    from coverkit.compare_run import CompareRun


def _minutes(seconds: float) -> str:
    return "not reached" if not np.isfinite(seconds) else f"{seconds / 60:.1f} min"


def write_compare_report(run: CompareRun, folder: Path) -> dict[str, Path]:
    """Write the difference maps into ``folder/maps`` and ``folder/compare-report.html``."""
    from coverkit.study import slug

    maps_dir = folder / "maps"
    out: dict[str, Path] = {}
    roads = run.network_after.road_lines()
    before = run.bases_before.rename(columns={"id": "base_id"})
    after = run.bases_after.rename(columns={"id": "base_id"})
    images = {}
    for std_name, ca in run.areas.items():
        s = slug(std_name)
        std = next(st for st in run.study.standards if st.name == std_name)
        poly = ca.polygons.copy()
        if len(poly):
            poly["coverage_change"] = np.where(poly["change"] == "gained", 1.0, -1.0) * poly["weight"]
            path = difference_map(
                maps_dir / f"difference_{s}.png",
                poly,
                "coverage_change",
                before,
                after,
                roads,
                f"{run.scenario.name}: change in coverage - {std_name}",
                std.describe(with_source=False),
                "demand gaining (+) or losing (-) coverage",
                increase_label="gains coverage",
                decrease_label="loses coverage",
            )
        else:
            path = None
        gaps_after = gaps_map(
            maps_dir / f"gaps_after_{s}.png",
            ca.after.gaps,
            after,
            roads,
            f"Gaps after - {std_name}",
            std.describe(with_source=False),
        )
        images[std_name] = (path, gaps_after)
        if path:
            out[f"map_difference_{s}"] = path
        out[f"map_gaps_after_{s}"] = gaps_after

    rep = HtmlReport(f"{run.study.name} - scenario: {run.scenario.name}")
    first = run.summary.iloc[0]
    rep.add_key_figures(
        {
            f"covered before ({first['standard']}, {first['demand']})": f"{first['covered_share_before'] * 100:.1f} %",
            "covered after": f"{first['covered_share_after'] * 100:.1f} %",
            "lose coverage": f"{first['lost_weight']:,.0f}",
            "gain coverage": f"{first['gained_weight']:,.0f}",
            f"{first['fractile'] * 100:g}th pct response after": _minutes(first["fractile_response_s_after"]),
        }
    )
    rep.add_heading("What changes")
    if run.scenario.description:
        rep.add_paragraph(run.scenario.description)
    rep.add_list(run.changes.lines() or ["no change"])
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
    ]
    table = table.copy()
    for c in ("covered_share_before", "covered_share_after"):
        table[c] = table[c] * 100
    for c in ("fractile_response_s_before", "fractile_response_s_after"):
        table[c] = table[c] / 60
    table.columns = ["standard", "layer", "total", "covered % before", "covered % after", "fractile before (min)",
                     "fractile after (min)", "lose coverage", "gain coverage"]  # fmt: skip
    rep.add_table(table, caption="Coverage before and after, per standard and demand layer")
    for (std_name, dem), comp in run.comparisons.items():
        if dem != run.summary["demand"].iloc[0]:
            continue
        rep.add_heading(f"{std_name} - {dem}", 3)
        rep.add_table(comp.bases, caption="Per base: first-due demand and demand reached within the standard")
        path, gaps_after = images.get(std_name, (None, None))
        if path:
            rep.add_image(path, f"Areas that lose or gain coverage - {std_name}")
        if std_name in run.areas and len(run.areas[std_name].polygons):
            areas = pd.DataFrame(run.areas[std_name].polygons.drop(columns="geometry")).head(15)
            rep.add_table(areas, caption="Largest areas that change")
        if gaps_after:
            rep.add_image(gaps_after, f"Gaps after the change - {std_name}")
    rep.add_heading("About this report")
    rep.add_paragraph(
        "Both runs use the same road network, profile, demand and standards; only the scenario's changes differ. "
        f"Made with coverkit {__version__}. {CAUTION}"
    )
    out["report"] = rep.write(folder / "compare-report.html")
    return out
