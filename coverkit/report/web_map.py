"""The interactive map of the static HTML reports: Leaflet and the layers inlined into one file that opens offline.

The vendored Leaflet (``coverkit/serve/static/vendor/leaflet``, its one home) is read at report time and inlined
with its licence; the layers are inlined as GeoJSON (EPSG:4326, 6 decimals, simplified) inside a
``<script type="application/json">`` block that ``web_map.js`` (shipped beside this module) draws. Nothing is
fetched: no tiles, no images (bases are circle markers), no scripts or styles from elsewhere.

The colour ramp for roads timed from the nearest base is held here (:data:`RAMP`) and passed to the page with the
data, so the report's ramp has one home in Python.
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd

from coverkit import CAUTION
from coverkit.coverage import grid_polygons
from coverkit.travel import nearest_node_times, snap_points

#: Sequential ramp, light = near, dark = far (cividis stops, matplotlib's perceptual colormap); the serve page
#: (coverkit/serve/static/app.js) uses the same stops.
RAMP = ("#fee838", "#d3c164", "#a59c74", "#7c7b78", "#575d6d", "#31446b", "#00224e")
#: Minutes at which the ramp reaches its darkest stop.
RAMP_MAX_MIN = 14.0
#: Colour of roads no base reaches within the search horizon.
UNREACHED_COLOUR = "#c5c8cc"
#: Lost and gained coverage (diverging red / blue).
CHANGE_COLOUR = {"lost": "#b2182b", "gained": "#2166ac"}
#: Simplification tolerance (m, in the network's projected CRS) for road lines and for area polygons drawn from
#: the area grid (a fraction of a cell: the staircase edges of grid cells carry no information).
ROAD_TOLERANCE_M = 8.0
AREA_TOLERANCE_SHARE = 0.5
#: Decimal places of degrees (about 0.1 m), as the serve API writes.
COORD_DIGITS = 6

_HERE = Path(__file__).resolve().parent
_LEAFLET = _HERE.parent / "serve" / "static" / "vendor" / "leaflet"
_JS = _HERE / "web_map.js"

_CSS = """
.ckmap { display: grid; grid-template-columns: 1fr 15rem; gap: 0.6rem; margin: 1rem 0 1.5rem; }
.ckmap-canvas { height: 34rem; border: 1px solid var(--rule); background: #f4f4f1; }
.ckmap-panel { font-size: 0.85rem; }
.ckmap-panel fieldset { border: 1px solid var(--rule); margin: 0 0 0.5rem; padding: 0.3rem 0.5rem; }
.ckmap-panel legend { font-weight: bold; padding: 0 0.2rem; }
.ckmap-panel label { display: block; }
.ckmap-panel select { width: 100%; }
.ckmap-ramp span { display: inline-block; width: 1.6rem; height: 0.7rem; }
.ckmap-ticks { display: flex; justify-content: space-between; color: var(--muted); }
.ckmap-caution { position: absolute; left: 0; right: 0; bottom: 0; z-index: 800; background: rgba(255,246,224,.92);
  border-top: 2px solid var(--warn-edge); font-size: 0.75rem; padding: 0.2rem 0.5rem; pointer-events: none; }
.ckmap-label { background: rgba(255,255,255,.85); border: 1px solid #24313f; font-size: 0.72rem; padding: 0 3px;
  box-shadow: none; }
.ckmap-label::before { display: none; }
@media print { .ckmap { display: none; } }
""".strip()


@dataclass
class MapData:
    """The layers of one interactive map, JSON-ready (FeatureCollections in EPSG:4326).

    ``standards`` holds, per standard name, its layers by state (``"now"``, or ``"before"`` / ``"after"`` in a
    comparison): ``{"gaps": fc, "first_due": fc, "depth": fc}``. ``bases`` holds the bases by state, each base's
    ``figures`` property giving, per standard and demand layer, its per-base figures.
    """

    title: str
    states: list[str]
    boundary: dict[str, Any] | None = None
    roads: dict[str, Any] | None = None
    bases: dict[str, dict[str, Any]] = field(default_factory=dict)
    standards: dict[str, dict[str, Any]] = field(default_factory=dict)
    changed: dict[str, dict[str, Any]] = field(default_factory=dict)
    closed_roads: dict[str, Any] | None = None
    units: dict[str, str] = field(default_factory=dict)

    def to_json(self) -> str:
        """The map's data with the ramp and the caution, as compact JSON."""
        body = {
            "title": self.title,
            "caution": CAUTION,
            "ramp": list(RAMP),
            "ramp_max_min": RAMP_MAX_MIN,
            "unreached": UNREACHED_COLOUR,
            "change_colour": CHANGE_COLOUR,
            "states": self.states,
            "boundary": self.boundary,
            "roads": self.roads,
            "bases": self.bases,
            "standards": self.standards,
            "changed": self.changed,
            "closed_roads": self.closed_roads,
            "units": self.units,
        }
        return json.dumps(body, separators=(",", ":"), allow_nan=False, sort_keys=False)


def ramp_index(minutes: np.ndarray) -> np.ndarray:
    """The ramp stop of each time (minutes), -1 where not reached (the serve page's binning)."""
    m = np.asarray(minutes, dtype=float)
    idx = np.minimum(len(RAMP) - 1, np.floor(np.where(np.isfinite(m), m, 0.0) / RAMP_MAX_MIN * len(RAMP)))
    return np.where(np.isfinite(m), idx, -1).astype(int)


def feature_collection(frame: gpd.GeoDataFrame, columns: list[str], *, tolerance_m: float = 0.0) -> dict[str, Any]:
    """``frame`` as a GeoJSON FeatureCollection (EPSG:4326, 6 decimals) with ``columns`` as properties, its
    geometry first simplified by ``tolerance_m`` (in the frame's projected CRS, topology kept)."""
    from coverkit.serve.state import geojson  # the serve API's writer: one GeoJSON writer for both

    g = frame
    if tolerance_m > 0 and len(g) and g.crs is not None and g.crs.is_projected:
        g = g.set_geometry(g.geometry.simplify(tolerance_m, preserve_topology=True))
    return geojson(g, columns)


def road_layer(
    net: Any,
    bases: gpd.GeoDataFrame,
    states: dict[str, tuple[Any, gpd.GeoDataFrame]],
    *,
    limit_s: float,
    direction: str,
    max_snap_m: float,
) -> dict[str, Any]:
    """The road pieces merged by ramp stop: one feature per combination of stops across ``states``.

    ``states`` maps a state name to (network, bases) in that state; each road piece of ``net`` is timed from the
    nearest base in every state (minutes to the nearer end of the piece, one search per state). A property per
    state holds the ramp stop (-1: not reached). Merging keeps the file small and the drawn paths few.
    """
    lines = net.road_lines()
    uv = net.edges.loc[lines.index, ["u", "v"]].to_numpy()
    stops = {}
    for name, (n, b) in states.items():
        snapped = snap_points(n, b, max_snap_m=max_snap_m, off_network="raise", what="bases")
        t, _ = nearest_node_times(n, snapped, limit_s, direction=direction)
        stops[name] = ramp_index(np.minimum(t[uv[:, 0]], t[uv[:, 1]]) / 60.0)
    keys = pd.DataFrame(stops)
    geoms = gpd.GeoDataFrame(keys, geometry=lines.geometry.to_numpy(), crs=net.crs)
    geoms = geoms.set_geometry(geoms.geometry.simplify(ROAD_TOLERANCE_M, preserve_topology=True))
    merged = geoms.dissolve(by=list(stops), as_index=False, sort=True)
    return feature_collection(merged, list(stops))


def area_layers(areas: Any, crs: Any, *, depth: bool = True) -> dict[str, Any]:
    """Gaps, first-due areas and (if ``depth``) coverage depth of one :class:`coverkit.coverage.AreaLayers`."""
    cell_m = abs(float(areas.transform.a))
    tol = cell_m * AREA_TOLERANCE_SHARE
    out = {
        "gaps": feature_collection(areas.gaps, ["gap_id", *areas.gap_counts(), "area_km2"], tolerance_m=tol),
        "first_due": feature_collection(areas.first_due, ["base_id", "status", "area_km2"], tolerance_m=tol),
    }
    if depth:
        grid = areas.depth_grid
        poly = grid_polygons(grid, areas.transform, crs, valid=grid >= 0).dissolve("value", as_index=False)
        out["depth"] = feature_collection(poly.rename(columns={"value": "depth"}), ["depth"], tolerance_m=tol)
    return out


def base_layer(bases: gpd.GeoDataFrame, figures: dict[str, dict[str, pd.DataFrame]]) -> dict[str, Any]:
    """The bases as points with their per-base figures: ``figures[standard][demand]`` is a
    :func:`coverkit.coverage.per_base` table; each base gets ``{standard: {demand: {column: value}}}``."""
    fc = feature_collection(bases, ["id", *[c for c in ("name", "units") if c in bases.columns]])
    tables = {
        std: {dem: t.set_index("base_id").to_dict("index") for dem, t in per_dem.items()}
        for std, per_dem in figures.items()
    }
    for f in fc["features"]:
        bid = str(f["properties"]["id"])
        f["properties"]["figures"] = {
            std: {dem: _clean_row(rows.get(bid)) for dem, rows in per_dem.items() if bid in rows}
            for std, per_dem in tables.items()
        }
    return fc


def _clean_row(row: dict[str, Any] | None) -> dict[str, Any]:
    out = {}
    for k, v in (row or {}).items():
        v = v.item() if isinstance(v, np.generic) else v
        out[k] = None if isinstance(v, float) and not np.isfinite(v) else v
    return out


def leaflet_text() -> tuple[str, str]:
    """The vendored Leaflet's JS and CSS, read from their one home, with the licence notice on top of the JS.

    The CSS's ``url(images/...)`` backgrounds (marker and layer-control icons, not used here) are dropped so the
    page asks for no file.
    """
    from coverkit.errors import CoverkitError

    try:
        js = (_LEAFLET / "leaflet.js").read_text(encoding="utf-8")
        css = (_LEAFLET / "leaflet.css").read_text(encoding="utf-8")
        licence = (_LEAFLET / "LICENSE").read_text(encoding="utf-8")
    except OSError as exc:
        raise CoverkitError(
            f"{_LEAFLET}: cannot read the vendored Leaflet ({exc.strerror}); reinstall coverkit."
        ) from None
    css = re.sub(r"url\(images/[^)]*\)", "none", css)
    css = re.sub(r"/\*.*?\*/", "", css, flags=re.S)  # comments only (bug links, notes): the licence is on the JS
    notice = "/*! Leaflet 1.9.4, inlined from coverkit's vendored copy. Licence:\n" + licence.replace("*/", "* /")
    return notice + "\n*/\n" + js, css


def map_html(data: MapData, element_id: str = "ckmap") -> str:
    """The map's HTML: a panel, the map box with the caution on it, the inlined Leaflet, data and drawing code."""
    js, css = leaflet_text()
    payload = data.to_json().replace("</", "<\\/")
    own_js = _JS.read_text(encoding="utf-8")
    return (
        f"<style>\n{css}\n{_CSS}\n</style>\n"
        f'<div class="ckmap" id="{element_id}"><div class="ckmap-canvas" style="position:relative">'
        f'<div class="ckmap-caution" role="note">{_escape(CAUTION)}</div></div>'
        f'<form class="ckmap-panel" onsubmit="return false"></form></div>\n'
        f'<script type="application/json" id="{element_id}-data">{payload}</script>\n'
        f"<script>\n{_script_safe(js)}\n</script>\n"
        f"<script>\n{_script_safe(own_js)}\ncoverkitMap({json.dumps(element_id)});\n</script>"
    )


def add_map_section(rep: Any, data: MapData, intro: str) -> None:
    """The map's own report section on a :class:`coverkit.report.html.HtmlReport`: heading, a line, the map."""
    rep.add_heading("Interactive map")
    rep.add_paragraph(f"{intro} The printable maps follow below.")
    rep.add_raw_html(map_html(data))


def _escape(text: str) -> str:
    import html

    return html.escape(text, quote=True)


def _script_safe(js: str) -> str:
    # an inline script ends at the first "</script"; the inlined code must not contain one
    return re.sub(r"</(script)", r"<\\/\1", js, flags=re.IGNORECASE)


# -- what the two reports put on the map ---------------------------------------------------------------------------
def study_map(run: Any) -> MapData:
    """The interactive map of a study run (:class:`coverkit.study.StudyRun`)."""
    net, study = run.network, run.study
    data = MapData(title=study.name, states=["now"])
    data.units = {spec.name: ("people" if spec.kind == "residents" else "calls") for spec in study.demand}
    if study.roads.boundary:
        data.boundary = feature_collection(gpd.read_file(study.roads.boundary).to_crs(net.crs), [], tolerance_m=20.0)
    data.roads = road_layer(
        net, run.bases, {"now": (net, run.bases)}, limit_s=study.horizon_s, direction=study.direction,
        max_snap_m=study.bases.snap_m,
    )  # fmt: skip
    data.bases["now"] = base_layer(run.bases, {s.standard.name: dict(s.by_base) for s in run.runs})
    for srun in run.runs:
        data.standards[srun.standard.name] = {
            "text": srun.standard.describe(with_source=False),
            "now": area_layers(srun.areas, net.crs),
        }
    return data


def compare_map(run: Any) -> MapData:
    """The interactive map of a scenario comparison (:class:`coverkit.compare_run.CompareRun`): before and after,
    the areas losing and gaining coverage, the closed roads."""
    from coverkit.coverage import per_base

    study, net = run.study, run.network_after
    data = MapData(title=f"{study.name} - {run.scenario.name}", states=["before", "after"])
    data.units = {spec.name: ("people" if spec.kind == "residents" else "calls") for spec in study.demand}
    if study.roads.boundary:
        data.boundary = feature_collection(gpd.read_file(study.roads.boundary).to_crs(net.crs), [], tolerance_m=20.0)
    data.roads = road_layer(
        run.network_before, run.bases_before,
        {"before": (run.network_before, run.bases_before), "after": (net, run.bases_after)},
        limit_s=study.horizon_s, direction=study.direction, max_snap_m=study.bases.snap_m,
    )  # fmt: skip
    for state, bases, results in (("before", run.bases_before, run.before), ("after", run.bases_after, run.after)):
        figures: dict[str, dict[str, pd.DataFrame]] = {}
        for (std, dem), res in results.items():
            figures.setdefault(std, {})[dem] = per_base(res)
        data.bases[state] = base_layer(bases, figures)
    for std_name, ca in run.areas.items():
        std = next(s for s in study.standards if s.name == std_name)
        data.standards[std_name] = {
            "text": std.describe(with_source=False),
            "before": area_layers(ca.before, net.crs),
            "after": area_layers(ca.after, net.crs),
        }
        cols = ["area_id", "change", "weight", "points", "incidents", "area_km2"]
        data.changed[std_name] = feature_collection(ca.polygons, cols, tolerance_m=abs(float(ca.transform.a)) / 2)
    if len(run.changes.closed):
        data.closed_roads = feature_collection(run.changes.closed, ["edge_id", "name", "road_class", "length_m"])
    return data


__all__ = [
    "CHANGE_COLOUR",
    "RAMP",
    "RAMP_MAX_MIN",
    "MapData",
    "add_map_section",
    "area_layers",
    "base_layer",
    "compare_map",
    "feature_collection",
    "leaflet_text",
    "map_html",
    "ramp_index",
    "road_layer",
    "study_map",
]
