"""Maps and the HTML report of a study run (:func:`coverkit.study.run_study`).

Draws and tabulates what the study computed; no number is computed here that the modules do not expose.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
import rasterio

from coverkit import CAUTION, __version__
from coverkit.report.html import HtmlReport
from coverkit.report.maps import coverage_depth_map, first_due_map, gaps_map, travel_surface_map

if TYPE_CHECKING:
    from coverkit.study import StudyRun

_MODEL_SOURCES = {
    "mclp": "Church & ReVelle 1974",
    "lscp": "Toregas, Swain, ReVelle & Bergman 1971",
    "backup": "Hogan & ReVelle 1986",
    "mexclp": "Daskin 1983",
    "p-median": "Hakimi 1964",
}

FRACTILE_NOTE = (
    "Fractile response: the smallest response time such that the stated share of demand (by weight) is reached "
    "within it (inverted empirical CDF; Hyndman & Fan 1996, definition 1). Demand not reached within the search "
    "horizon counts as slower than any time."
)


def _minutes(seconds: float) -> str:
    return "not reached" if not np.isfinite(seconds) else f"{seconds / 60:.1f} min"


def _compliance_for_display(table: pd.DataFrame) -> pd.DataFrame:
    """A compliance table with the share in percent and the fractile in minutes."""
    t = table.copy()
    t["covered_share"] = t["covered_share"] * 100
    t["fractile_response_s"] = t["fractile_response_s"] / 60
    return t.rename(columns={"covered_share": "covered %", "fractile_response_s": "fractile (min)"})


def write_study_report(run: StudyRun, folder: Path, html: bool = True) -> dict[str, Path]:
    """Write the study's PNG maps into ``folder/maps`` and, if ``html``, ``folder/report.html``."""
    from coverkit.study import slug

    maps_dir = folder / "maps"
    out: dict[str, Path] = {}
    roads = run.network.road_lines()
    bases = run.bases.rename(columns={"id": "base_id"})
    minutes = run.study.outputs["isochrone_minutes"]
    first_std = run.runs[0].standard
    with rasterio.open(run.surface_path) as src:
        surface = src.read(1).astype(float)
        surface[surface == src.nodata] = np.nan
        transform = src.transform
    out["map_surface"] = travel_surface_map(
        maps_dir / "travel_time.png",
        surface,
        transform,
        run.network.crs,
        bases,
        roads,
        [0.0, *minutes],
        "Travel time from the nearest base",
        f"Bands: {', '.join(f'{m:g}' for m in minutes)} min; "
        f"profile '{run.network.profile.name}'; turnout not included",
    )
    images = {"surface": out["map_surface"]}
    for srun in run.runs:
        s = slug(srun.standard.name)
        text = srun.standard.describe(with_source=False)
        residents = next(iter(srun.results))
        res = srun.results[residents]
        out[f"map_depth_{s}"] = coverage_depth_map(
            maps_dir / f"depth_{s}.png", res.demand, bases, roads, f"Coverage depth - {srun.standard.name}", text
        )
        out[f"map_gaps_{s}"] = gaps_map(
            maps_dir / f"gaps_{s}.png", srun.areas.gaps, bases, roads, f"Gaps - {srun.standard.name}", text
        )
        out[f"map_first_due_{s}"] = first_due_map(
            maps_dir / f"first_due_{s}.png",
            srun.areas.first_due,
            bases,
            roads,
            f"First-due areas - {srun.standard.name}",
            text,
        )
        images[s] = (out[f"map_depth_{s}"], out[f"map_gaps_{s}"], out[f"map_first_due_{s}"])
    if not html:
        return out

    rep = HtmlReport(f"{run.study.name} - coverage study")
    figures = {}
    for r in run.summary.itertuples(index=False):
        if r.standard == first_std.name:
            figures[f"{r.demand} covered ({r.standard})"] = f"{r.covered_share * 100:.1f} %"
            figures[f"{r.demand}: {r.fractile * 100:g}th pct response"] = _minutes(r.fractile_response_s)
    figures["bases"] = str(len(run.bases))
    rep.add_key_figures(figures)

    rep.add_heading("Inputs")
    inputs = [
        f"Roads: {Path(run.study.roads['source']).name} -> {run.network.n_nodes:,} nodes, "
        f"{run.network.n_edges:,} directed edges (CRS {run.network.crs.name})",
        f"Speed profile: {run.network.profile.name} - {run.network.profile.description}",
        f"Bases: {Path(run.study.bases['file']).name} ({len(run.bases)} bases)",
    ]
    for spec in run.study.demand:
        d = run.demand[spec.name]
        extra = f", filter: {spec.options['where']}" if spec.options.get("where") else ""
        inputs.append(
            f"Demand '{spec.name}' ({spec.kind}): {spec.path.name}, {len(d):,} points, total weight "
            f"{d['weight'].sum():,.0f}{extra}"
        )
    if run.study.zones:
        inputs.append(f"Zones: {Path(run.study.zones['file']).name} by '{run.study.zones['id_field']}'")
    rep.add_list(inputs)
    rep.add_heading("Standards evaluated", 3)
    rep.add_list([s.describe() for s in run.study.standards])

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
            "Gaps and first-due areas are drawn on a grid of road-near cells timed like demand points.",
        ]
    )

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
    ].copy()
    table["covered_share"] = table["covered_share"] * 100
    table["fractile_response_s"] = table["fractile_response_s"] / 60
    table["meets_standard"] = table["meets_standard"].map({True: "yes", False: "no"})
    table.columns = ["standard", "layer", "total", "covered", "covered %", "by one base", "by 2+ bases",
                     "fractile (min)", "meets", "off network"]  # fmt: skip
    rep.add_table(table, caption="Coverage per standard and demand layer")
    rep.add_heading("Drive-time polygons", 3)
    poly = run.polygons.drop(columns="geometry")
    rep.add_table(poly, caption="Area and road reached per base and band")
    rep.add_image(out["map_surface"], "Travel time from the nearest base")

    for srun in run.runs:
        s = slug(srun.standard.name)
        rep.add_heading(f"Standard: {srun.standard.describe()}")
        for name, table in srun.per_base.items():
            t = table.copy()
            t["first_due_share"] = t["first_due_share"] * 100
            rep.add_table(t.rename(columns={"first_due_share": "first-due %"}), caption=f"Per base - {name}")
        for label, tables in (("zone", srun.zones), ("priority", srun.by_priority)):
            for name, table in tables.items():
                rep.add_table(_compliance_for_display(table), caption=f"Compliance by {label} - {name}")
        gaps = srun.areas.gaps.drop(columns="geometry").head(10)
        rep.add_table(pd.DataFrame(gaps), caption="Largest gaps (people and incidents not covered)")
        depth, gaps_png, first_png = images[s]
        rep.add_image(depth, f"Coverage depth - {srun.standard.name}")
        rep.add_image(gaps_png, f"Gaps - {srun.standard.name}")
        rep.add_image(first_png, f"First-due areas - {srun.standard.name}")
    if run.site_plan is not None:
        plan = run.site_plan
        sm = plan.summary
        rep.add_heading("Where a new station would help")
        rep.add_paragraph(
            f"Model {sm['model']} ({_MODEL_SOURCES.get(sm['model'], '')}) on demand '{sm['demand']}', "
            f"{sm['standard']}. Solved by {sm['method']}: {sm['status']}, gap {sm['mip_gap'] * 100:.3f} % to the "
            f"{sm['bound_source']}. Covered {sm['covered_share_before'] * 100:.1f} % with the existing bases, "
            f"{sm['covered_share_after'] * 100:.1f} % with the chosen sites."
        )
        rep.add_table(pd.DataFrame(plan.chosen.drop(columns="geometry")), caption="Chosen sites and what each adds")
        curve = plan.curve[["new_sites", "covered_share", "gain_share", "fractile_response_s", "site_ids"]].copy()
        curve["covered_share"] *= 100
        curve["gain_share"] *= 100
        curve["fractile_response_s"] /= 60
        rep.add_table(
            curve.rename(
                columns={"covered_share": "covered %", "gain_share": "gain %", "fractile_response_s": "fractile (min)"}
            ),
            caption="Coverage curve: best sites for each number of new stations (MCLP optima)",
        )
        from coverkit.report.maps import line_chart

        out["site_curve"] = line_chart(
            maps_dir / "site_curve.png",
            plan.curve["new_sites"].to_numpy(),
            {"covered %": plan.curve["covered_share"].to_numpy() * 100},
            "new sites",
            "demand covered (%)",
            "Coverage curve",
            note="each point an MCLP optimum (Church & ReVelle 1974)",
        )
        rep.add_image(out["site_curve"], "Coverage curve")
        rank = plan.ranking.copy()
        rank["added_share"] *= 100
        rank["share_with_site"] *= 100
        rep.add_table(
            rank.rename(columns={"added_share": "adds %", "share_with_site": "covered with it %"}),
            caption="Every candidate alone: what it adds to the existing bases",
        )
    if run.availability is not None:
        av = run.availability
        a = av.summary
        rep.add_heading("Busy units: who actually responds")
        rep.add_paragraph(
            f"Hypercube model ({a['method']}, {a['queue']} queue; Larson 1974, 1975) with closest-available "
            f"dispatch on the network's travel times: {a['calls_per_h']:.2f} calls per hour on demand "
            f"'{a['demand']}', {a['mean_service_min']:g} min busy per call ({a['offered_load_erlang']:.2f} erlang) "
            f"over {a['units']} units. {a['standard']}."
        )
        rep.add_key_figures(
            {
                "reached in standard, drive time only": f"{a['drive_time_coverage'] * 100:.1f} %",
                "reached by the unit that answers": f"{a['availability_coverage'] * 100:.1f} %",
                "mean travel of the answering unit": f"{a['expected_travel_s'] / 60:.1f} min",
                "chance all units busy": f"{a['all_busy_probability'] * 100:.2f} %",
            }
        )
        rep.add_table(av.units, caption="Unit workloads (busy fraction) and calls answered per hour")
    if run.calibration is not None:
        cal = run.calibration
        rep.add_heading("Modelled against observed travel times")
        rep.add_paragraph(
            f"{cal.n_used} observed responses matched to modelled routes; one speed multiplier per road class fitted "
            "by bounded robust least squares with re-routing. The calibrated profile is written beside this report; "
            "the coverage above uses the study's profile, not the calibrated one."
        )
        rep.add_table(cal.errors, caption="Errors before and after calibration, by route length")
        rep.add_table(cal.classes, caption="Fitted factors per road class")
        rep.add_image(run.outputs["calibration_chart"], "Observed and modelled travel times")
    rep.add_heading("About this report")
    rep.add_paragraph(f"Made with coverkit {__version__}. {CAUTION}")
    out["report"] = rep.write(folder / "report.html")
    return out
