"""Static PNG maps and charts for a coverage study (matplotlib, Agg, no screen).

The functions here draw what they are given: travel-time surfaces, demand points with a coverage depth, gap
polygons, first-due areas and before/after differences all come computed from the modules below ``report``.
Every map carries the same furniture so that a printed page stands on its own: title, the response standard used,
the map, a legend with units, a grid-north arrow, a scale bar in round metres or kilometres, the CRS name and the
caution line (``coverkit.CAUTION``).

Figures are built with :class:`matplotlib.figure.Figure` directly (never ``pyplot``), so no GUI backend is touched and
no global figure state leaks between calls. Output is written atomically at a fixed size and dpi, without the
matplotlib version in the PNG metadata, so the same inputs give byte-identical files.
"""

from __future__ import annotations

import itertools
import math
import os
import textwrap
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import affine
import geopandas as gpd
import matplotlib
import numpy as np
import shapely
from matplotlib import colors as mcolors
from matplotlib import patheffects
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.cm import ScalarMappable
from matplotlib.collections import LineCollection, PathCollection
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch, Polygon, Rectangle
from matplotlib.path import Path as MplPath
from pyproj import CRS

import coverkit
from coverkit.atomic import atomic_path
from coverkit.errors import CoverkitError, FieldError
from coverkit.network.crs import parse_crs
from coverkit.network.road_classes import MAP_WIDTH_PT
from coverkit.report.tables import plural

#: Output resolution (dots per inch) and page size (inches); fixed so outputs are comparable run to run.
DPI = 150
FIGSIZE_IN = (8.0, 7.0)

#: Sequential colormap for time bands; reversed cividis so that near (small times) is light and far is dark.
SEQUENTIAL_CMAP = "cividis_r"
#: Diverging colormap for before/after differences, centred on zero.
DIVERGING_CMAP = "PuOr_r"
#: Sequential colormap for the demand a gap holds (light = little, dark = much).
GAP_CMAP = "OrRd"
#: Colour of places no base reaches within the standard (depth 0): warm, apart from the cool depth colours.
UNCOVERED_COLOR = "#c8553d"
UNCOVERED_EDGE = "#7f2a1a"
#: Depth colormap (1, 2, 3+ bases within the standard; light to dark).
DEPTH_CMAP = "GnBu"
#: Study boundary and zones, drawn over every thematic layer of a study's maps.
BOUNDARY_COLOR = "#1a1a1a"
ZONE_COLOR = "#4d4d4d"
#: Closed roads and closure polygons on comparison maps.
CLOSED_ROAD_COLOR = "#111111"
CLOSURE_EDGE_COLOR = "#3b3b3b"
#: Our own muted qualitative palette for first-due areas (light enough for roads and labels to read on top).
FIRST_DUE_PALETTE = (
    "#cdbb9b",
    "#9fbcae",
    "#b7abcb",
    "#dbab9c",
    "#a8c2da",
    "#cbcb93",
    "#d6b6c8",
    "#a9c9a3",
    "#c4c4c4",
    "#e0c98f",
)
ROAD_COLOR = "#8c8c8c"
#: Line width (points) by road class (held with each class in :mod:`coverkit.network.road_classes`); classes not
#: listed get the thinnest line.
ROAD_WIDTH_PT = MAP_WIDTH_PT
ROAD_MIN_WIDTH_PT = 0.35

# Page layout in figure fractions: map on the left, legend panel on the right, scale strip under the map.
_MAP_BOX = (0.035, 0.145, 0.685, 0.765)
_SCALE_BOX = (0.035, 0.085, 0.685, 0.05)
_PANEL_BOX = (0.745, 0.145, 0.245, 0.62)
_NORTH_BOX = (0.80, 0.79, 0.12, 0.12)
_HALO = [patheffects.withStroke(linewidth=2.6, foreground="white")]


# ----------------------------------------------------------------------------------------------------------------
# Pieces that tests check directly
# ----------------------------------------------------------------------------------------------------------------


def nice_scale_length_m(map_width_m: float, max_fraction: float = 0.3) -> float:
    """Length of a scale bar: the largest 1-2-5 x 10^k metres not above ``max_fraction`` of the map width.

    Consecutive 1-2-5 numbers differ by at most a factor 2.5, so with ``max_fraction = 0.3`` the bar is always
    between 12 % and 30 % of the map width (common cartographic practice, no source).

    Parameters
    ----------
    map_width_m
        Width of the map frame in metres (projected CRS units).
    max_fraction
        Upper limit of the bar as a share of the width.

    Returns
    -------
    float
        Bar length in metres.
    """
    if not (math.isfinite(map_width_m) and map_width_m > 0):
        raise CoverkitError(f"map width {map_width_m!r} m is not a positive number; the map has no extent to scale.")
    limit = map_width_m * max_fraction
    exponent = math.floor(math.log10(limit))
    # 10**exponent <= limit < 10**(exponent + 1): the answer is 1, 2 or 5 x 10**exponent.
    best = max(m * 10.0**exponent for m in (1.0, 2.0, 5.0) if m * 10.0**exponent <= limit * (1 + 1e-12))
    return float(best)


def format_length(length_m: float) -> str:
    """A length for a label: metres below 1 km, kilometres from 1 km (``'500 m'``, ``'2 km'``, ``'0.5 km'``)."""
    if length_m < 1000.0:
        return f"{length_m:g} m"
    return f"{length_m / 1000.0:g} km"


def relative_luminance(rgb: Sequence[float]) -> float:
    """Relative luminance of an sRGB colour (components 0..1).

    Components are linearised with the sRGB transfer function (IEC 61966-2-1:1999) and weighted with the ITU-R
    BT.709 coefficients Y = 0.2126 R + 0.7152 G + 0.0722 B.
    """
    c = np.asarray(rgb, dtype=float)[:3]
    lin = np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
    return float(0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2])


def band_colors(n_bands: int) -> list[tuple[float, float, float, float]]:
    """``n_bands`` colours from the sequential time colormap, light (near) to dark (far), evenly spaced."""
    if n_bands < 1:
        raise CoverkitError("at least one travel-time band is needed; give band edges such as [4, 8, 12] minutes.")
    cmap = matplotlib.colormaps[SEQUENTIAL_CMAP]
    if n_bands == 1:
        return [cmap(0.0)]
    return [cmap(float(t)) for t in np.linspace(0.0, 1.0, n_bands)]


def depth_colors(max_depth: int) -> list[tuple[float, float, float, float]]:
    """Colours for coverage depth 1..max_depth (light to dark, sequential); depth 0 uses ``UNCOVERED_COLOR``."""
    cmap = matplotlib.colormaps[DEPTH_CMAP]
    return [cmap(float(t)) for t in np.linspace(0.3, 0.9, max_depth)]


def diverging_norm(values: np.ndarray, limit: float | None = None) -> mcolors.Normalize:
    """Symmetric colour limits around zero: ``[-m, m]`` with ``m`` the largest absolute finite value.

    Zero therefore maps to the colormap midpoint (0.5). ``limit`` fixes ``m`` (for several maps on one scale).
    """
    if limit is None:
        v = np.asarray(values, dtype=float)
        v = v[np.isfinite(v)]
        limit = float(np.max(np.abs(v))) if v.size else 0.0
    if not (math.isfinite(limit) and limit > 0):
        limit = 1.0  # all values zero (or none): any symmetric range shows them at the midpoint
    return mcolors.Normalize(vmin=-limit, vmax=limit)


def neighbour_colors(geoms: np.ndarray, group: np.ndarray, n_colors: int) -> dict[object, int]:
    """Colour index per group so that touching groups differ (greedy colouring in sorted group order).

    When there are no more groups than colours each group gets its own colour. Greedy colouring of a planar
    adjacency rarely needs more than six colours; if it runs out, the least-used colour among neighbours is reused.
    """
    keys = sorted(set(group.tolist()), key=str)
    if len(keys) <= n_colors:
        return {k: i for i, k in enumerate(keys)}
    index = {k: i for i, k in enumerate(keys)}
    gidx = np.array([index[g] for g in group.tolist()], dtype=np.int64)
    tree = shapely.STRtree(geoms)
    left, right = tree.query(geoms, predicate="intersects")
    a, b = gidx[left], gidx[right]
    keep = a != b
    neighbours: list[set[int]] = [set() for _ in keys]
    for i, j in zip(a[keep].tolist(), b[keep].tolist(), strict=True):
        neighbours[i].add(j)
    colour = np.full(len(keys), -1, dtype=np.int64)
    for i in range(len(keys)):
        used = [colour[j] for j in neighbours[i] if colour[j] >= 0]
        free = [c for c in range(n_colors) if c not in used]
        colour[i] = free[0] if free else int(np.argmin(np.bincount(used, minlength=n_colors)))
    return {k: int(colour[i]) for i, k in enumerate(keys)}


def rank_gaps(
    gaps: gpd.GeoDataFrame, value_column: str = "uncovered_people", count_column: str = "uncovered_calls"
) -> np.ndarray:
    """Row positions of ``gaps`` ordered by ``value_column`` (largest first), then ``count_column``, then ``gap_id``."""
    return _rank(gaps, value_column, count_column if count_column in gaps.columns else None)


def fit_extent(
    bounds: Sequence[float], box_aspect: float, margin: float = 0.04, min_size_m: float = 1000.0
) -> tuple[tuple[float, float], tuple[float, float]]:
    """Map limits holding ``bounds`` with a margin, widened so that width/height equals ``box_aspect``.

    Equal scale on both axes then fills the map frame exactly, and the scale bar (drawn under the map with the
    same x-limits) is true to the map.
    """
    xmin, ymin, xmax, ymax = (float(b) for b in bounds)
    if not all(math.isfinite(b) for b in (xmin, ymin, xmax, ymax)):
        raise CoverkitError("the layers to map have no finite extent (empty or all-missing geometry).")
    cx, cy = (xmin + xmax) / 2, (ymin + ymax) / 2
    w = max(xmax - xmin, min_size_m)
    h = max(ymax - ymin, min_size_m)
    pad = margin * max(w, h)
    w, h = w + 2 * pad, h + 2 * pad
    if w / h < box_aspect:
        w = h * box_aspect
    else:
        h = w / box_aspect
    return (cx - w / 2, cx + w / 2), (cy - h / 2, cy + h / 2)


# ----------------------------------------------------------------------------------------------------------------
# Input checks
# ----------------------------------------------------------------------------------------------------------------


def _map_crs(crs: object, what: str) -> CRS:
    if crs is None:
        raise CoverkitError(f"{what} has no CRS; set one (a projected CRS in metres, e.g. a UTM zone) before mapping.")
    return parse_crs(crs, what=what)


def _layer(gdf: gpd.GeoDataFrame | None, what: str, crs: CRS, columns: Sequence[str] = ()) -> gpd.GeoDataFrame | None:
    """Check a layer's columns and bring it to the map CRS (a new frame; the input is not modified)."""
    if gdf is None:
        return None
    if not isinstance(gdf, gpd.GeoDataFrame):
        raise CoverkitError(f"{what}: expected a GeoDataFrame, got {type(gdf).__name__}.")
    missing = [c for c in columns if c not in gdf.columns]
    if missing:
        raise FieldError(f"{what}: missing column(s) {', '.join(missing)}; add them or pass the layer that has them.")
    if len(gdf) and gdf.crs is None:
        raise CoverkitError(f"{what} has no CRS; set it (GeoDataFrame.set_crs) to the CRS of its coordinates.")
    if len(gdf) and CRS.from_user_input(gdf.crs) != crs:
        return gdf.to_crs(crs)
    return gdf


def _check_standard(standard_text: str) -> str:
    if not isinstance(standard_text, str) or not standard_text.strip():
        raise CoverkitError("standard_text is empty; pass the response standard the map shows (time and fractile).")
    return standard_text.strip()


def _bounds_union(*layers: gpd.GeoDataFrame | None, extra: Sequence[float] | None = None) -> list[float]:
    boxes = [np.asarray(layer.total_bounds, float) for layer in layers if layer is not None and len(layer)]
    if extra is not None:
        boxes.append(np.asarray(extra, float))
    boxes = [b for b in boxes if np.all(np.isfinite(b))]
    if not boxes:
        raise CoverkitError("nothing to map: every layer given is empty.")
    stack = np.vstack(boxes)
    return [stack[:, 0].min(), stack[:, 1].min(), stack[:, 2].max(), stack[:, 3].max()]


@dataclass(frozen=True)
class MapFrame:
    """What every map of one study shares: one extent, the study boundary and the zones.

    Build it once per study with :func:`study_frame` and pass it to every map function, so that all maps of a
    study are drawn at the same extent and scale, with the same boundary and zones on top.

    Attributes
    ----------
    bounds
        Map extent ``(xmin, ymin, xmax, ymax)`` in metres of ``crs``.
    crs
        The projected CRS of the maps.
    boundary
        Study boundary polygons (or None when the study has none).
    zones
        Zone polygons (or None), with their id in ``zone_field``.
    zone_field
        Name of the zones' id column (labels on the map).
    """

    bounds: tuple[float, float, float, float]
    crs: CRS
    boundary: gpd.GeoDataFrame | None = None
    zones: gpd.GeoDataFrame | None = None
    zone_field: str | None = None


def study_frame(
    crs: object,
    *,
    boundary: gpd.GeoDataFrame | None = None,
    zones: gpd.GeoDataFrame | None = None,
    zone_field: str | None = None,
    include: Sequence[gpd.GeoDataFrame | None] = (),
    fallback_bounds: Sequence[float] | None = None,
) -> MapFrame:
    """The shared frame of a study's maps: the extent of the boundary (else the zones, else ``fallback_bounds``)
    together with the layers in ``include`` (e.g. the bases, so that a base outside the boundary still shows)."""
    crs = _map_crs(crs, "map frame CRS")
    boundary = _layer(boundary, "study boundary", crs)
    zones = _layer(zones, "zones", crs, [zone_field] if zone_field else ())
    layers = [layer for layer in (boundary, zones) if layer is not None and len(layer)]
    extra = None if layers else fallback_bounds
    bounds = _bounds_union(*(layers[:1] or [None]), *(_layer(g, "layer", crs) for g in include), extra=extra)
    return MapFrame(tuple(float(b) for b in bounds), crs, boundary, zones, zone_field)


# ----------------------------------------------------------------------------------------------------------------
# Geometry to matplotlib collections (geopandas' own plotting redraws the whole figure on every call)
# ----------------------------------------------------------------------------------------------------------------


def _line_segments(geoms: np.ndarray) -> list[np.ndarray]:
    """Vertex arrays of every line part (lines, multilines, polygon boundaries)."""
    parts = shapely.get_parts(shapely.boundary(geoms) if _is_polygonal(geoms) else geoms)
    parts = parts[~shapely.is_empty(parts)]
    parts = shapely.get_parts(parts)
    coords, index = shapely.get_coordinates(parts, return_index=True)
    if not len(coords):
        return []
    cuts = np.flatnonzero(np.diff(index)) + 1
    return np.split(coords, cuts)


def _is_polygonal(geoms: np.ndarray) -> bool:
    types = shapely.get_type_id(geoms)
    return bool(len(types)) and bool(np.all(np.isin(types, (3, 6))))


def _polygon_paths(geoms: np.ndarray) -> tuple[list[MplPath], np.ndarray]:
    """One compound path (exterior and holes) per polygon part, and the row each part came from."""
    parts, row = shapely.get_parts(np.asarray(geoms, dtype=object), return_index=True)
    paths = []
    for poly in parts.tolist():
        rings = [poly.exterior, *poly.interiors]
        paths.append(MplPath.make_compound_path(*(MplPath(np.asarray(r.coords), closed=True) for r in rings)))
    return paths, row


def _draw_polygons(ax: object, geoms: np.ndarray, facecolors: object, **style: object) -> None:
    paths, row = _polygon_paths(geoms)
    if not paths:
        return
    if not isinstance(facecolors, str):
        facecolors = np.asarray(mcolors.to_rgba_array(facecolors))[row]
    ax.add_collection(PathCollection(paths, facecolors=facecolors, **style))


# ----------------------------------------------------------------------------------------------------------------
# Page furniture
# ----------------------------------------------------------------------------------------------------------------


class _Page:
    """One map page: figure, map axes fitted to the data, legend panel, furniture."""

    def __init__(
        self,
        title: str,
        standard_text: str,
        crs: CRS | None,
        bounds: Sequence[float] | None,
        frame: MapFrame | None = None,
    ) -> None:
        self.fig = Figure(figsize=FIGSIZE_IN, dpi=DPI)
        FigureCanvasAgg(self.fig)
        self.crs = crs
        self.frame = frame
        if frame is not None and bounds is not None:
            bounds = frame.bounds  # one extent for every map of a study
        self.fig.text(0.035, 0.972, title, ha="left", va="top", fontsize=13, fontweight="bold")
        self.fig.text(
            0.035, 0.937, "\n".join(textwrap.wrap(standard_text, 110)), ha="left", va="top", fontsize=9, color="#222"
        )
        _caution(self.fig)
        if bounds is None:
            return
        self.ax = self.fig.add_axes(_MAP_BOX)
        box_aspect = (_MAP_BOX[2] * FIGSIZE_IN[0]) / (_MAP_BOX[3] * FIGSIZE_IN[1])
        self.xlim, self.ylim = fit_extent(bounds, box_aspect)
        self.ax.set_xlim(*self.xlim)
        self.ax.set_ylim(*self.ylim)
        self.ax.set_aspect("equal", adjustable="box")
        self.ax.set_xticks([])
        self.ax.set_yticks([])
        for spine in self.ax.spines.values():
            spine.set_linewidth(0.8)
            spine.set_color("#333")
        self.panel = self.fig.add_axes(_PANEL_BOX)
        self.panel.set_axis_off()
        self._entries: list[tuple[object, str]] = []
        self._furniture: list[tuple[object, str]] = []
        self._scale_bar()
        self._north_arrow()
        self._draw_frame()

    def _draw_frame(self) -> None:
        """Zones (thin dashed, labelled) and the study boundary (dark, with a white halo) above the themes."""
        frame = self.frame
        if frame is None:
            return
        if frame.zones is not None and len(frame.zones):
            # each shared edge once: drawn twice, two dash patterns out of phase would read as a solid line
            edges = shapely.line_merge(shapely.union_all(shapely.boundary(frame.zones.geometry.to_numpy())))
            segments = _line_segments(np.array([edges], dtype=object))
            self.ax.add_collection(
                LineCollection(segments, colors=ZONE_COLOR, linewidths=0.7, linestyles=(0, (4, 2)), zorder=6)
            )
            if frame.zone_field:
                pts = shapely.get_coordinates(frame.zones.geometry.representative_point().to_numpy())
                for (x, y), zid in zip(pts, frame.zones[frame.zone_field], strict=True):
                    self.ax.text(
                        x, y, str(zid), ha="center", va="center", fontsize=7, style="italic", color=ZONE_COLOR,
                        path_effects=_HALO, zorder=6.5, clip_on=True,
                    )  # fmt: skip
            self._furniture.append((Line2D([], [], color=ZONE_COLOR, lw=0.8, ls=(0, (4, 2))), "Zone boundary"))
        if frame.boundary is not None and len(frame.boundary):
            segments = _line_segments(frame.boundary.geometry.to_numpy())
            self.ax.add_collection(LineCollection(segments, colors="white", linewidths=3.2, zorder=6.8))
            self.ax.add_collection(LineCollection(segments, colors=BOUNDARY_COLOR, linewidths=1.5, zorder=6.9))
            self._furniture.append((Line2D([], [], color=BOUNDARY_COLOR, lw=1.5), "Study boundary"))

    def clip_to_boundary(self, artist: object) -> None:
        """Clip a full-extent layer (a raster) to the study boundary, when the frame has one."""
        frame = self.frame
        if frame is None or frame.boundary is None or not len(frame.boundary):
            return
        paths, _ = _polygon_paths(frame.boundary.geometry.to_numpy())
        artist.set_clip_path(MplPath.make_compound_path(*paths), self.ax.transData)

    # -- furniture --------------------------------------------------------------------------------------------
    def _scale_bar(self) -> None:
        """A two-segment bar under the map, on an axis with the map's x-limits, so it is at map scale."""
        sax = self.fig.add_axes(_SCALE_BOX)
        sax.set_xlim(*self.xlim)
        sax.set_ylim(0, 1)
        sax.set_axis_off()
        self.scale_ax = sax
        width_m = self.xlim[1] - self.xlim[0]
        length_m = nice_scale_length_m(width_m)
        self.scale_length_m = length_m
        x0 = self.xlim[0] + 0.02 * width_m
        half = length_m / 2
        for i, face in enumerate(("#222", "white")):
            sax.add_patch(Rectangle((x0 + i * half, 0.62), half, 0.22, facecolor=face, edgecolor="#222", lw=0.8))
        unit_km = length_m >= 1000
        for xi, value in ((x0, 0.0), (x0 + half, half), (x0 + length_m, length_m)):
            text = f"{value / 1000:g}" if unit_km else f"{value:g}"
            sax.text(xi, 0.5, text, ha="center", va="top", fontsize=7.5)
        sax.text(x0 + length_m + 0.015 * width_m, 0.73, "km" if unit_km else "m", ha="left", va="center", fontsize=8)
        if self.crs is not None:
            epsg = self.crs.to_epsg()
            crs_text = f"{self.crs.name}" + (f" (EPSG:{epsg})" if epsg else "")
            sax.text(self.xlim[1], 0.73, crs_text, ha="right", va="center", fontsize=7, color="#444")

    def _north_arrow(self) -> None:
        """Arrow pointing up the map: grid north, which in a UTM zone is within a few degrees of true north."""
        nax = self.fig.add_axes(_NORTH_BOX)
        nax.set_xlim(-1, 1)
        nax.set_ylim(-1.25, 1.3)
        nax.set_aspect("equal")
        nax.set_axis_off()
        tip, base_y, half_w, notch_y = (0.0, 0.75), -0.55, 0.38, -0.25
        nax.add_patch(Polygon([tip, (-half_w, base_y), (0, notch_y)], closed=True, fc="#222", ec="#222", lw=0.8))
        nax.add_patch(Polygon([tip, (half_w, base_y), (0, notch_y)], closed=True, fc="white", ec="#222", lw=0.8))
        nax.text(0, 0.82, "N", ha="center", va="bottom", fontsize=12, fontweight="bold")
        nax.text(0, -0.72, "grid north", ha="center", va="top", fontsize=7, color="#333")

    # -- layers -----------------------------------------------------------------------------------------------
    def roads(self, roads: gpd.GeoDataFrame | None) -> None:
        if roads is None or not len(roads):
            return
        lines = roads[~roads.geometry.is_empty & roads.geometry.notna()]
        if "road_class" in lines.columns:
            width = np.array([ROAD_WIDTH_PT.get(str(c), ROAD_MIN_WIDTH_PT) for c in lines["road_class"]])
        else:
            width = np.full(len(lines), ROAD_MIN_WIDTH_PT)
        for w in sorted(set(width.tolist())):  # thin roads first so major roads draw on top
            segments = _line_segments(lines.geometry.to_numpy()[width == w])
            self.ax.add_collection(LineCollection(segments, colors=ROAD_COLOR, linewidths=w, zorder=2))
        self._furniture.append((Line2D([], [], color=ROAD_COLOR, lw=0.9), "Road"))

    def bases(
        self, bases: gpd.GeoDataFrame | None, *, label: str = "Base", filled: bool = True, annotate: bool = True
    ) -> None:
        if bases is None or not len(bases):
            return
        b = bases.iloc[np.argsort(np.asarray([str(i) for i in bases["base_id"]]), kind="stable")]
        pts = shapely.get_coordinates(b.geometry.representative_point().to_numpy())
        face, edge = ("#111", "white") if filled else ("white", "#111")
        self.ax.scatter(
            pts[:, 0], pts[:, 1], s=46, marker="s", facecolor=face, edgecolor=edge, linewidths=1.3, zorder=8
        )
        if annotate:
            for (x, y), bid in zip(pts, b["base_id"], strict=True):
                self.ax.annotate(
                    str(bid),
                    (x, y),
                    xytext=(5, 4),
                    textcoords="offset points",
                    fontsize=8,
                    fontweight="bold",
                    color="#111",
                    path_effects=_HALO,
                    zorder=9,
                    annotation_clip=True,
                )
        handle = Line2D([], [], ls="none", marker="s", ms=7, mfc=face, mec="#111" if filled else edge, mew=1.0)
        self._furniture.append((handle, label))

    def add_legend(self, handle: object, label: str) -> None:
        """A thematic legend entry; roads and bases are listed after all of these."""
        self._entries.append((handle, label))

    def legend(self, title: str) -> object:
        items = self._entries + self._furniture
        return self.panel.legend(
            [h for h, _ in items],
            ["\n".join(textwrap.wrap(t, 25)) for _, t in items],
            title=title,
            loc="upper left",
            bbox_to_anchor=(0.0, 1.0),
            frameon=False,
            fontsize=8,
            title_fontsize=8.5,
            alignment="left",
            handlelength=1.6,
            borderaxespad=0.0,
        )

    def save(self, out_png: str | os.PathLike[str], title: str) -> Path:
        # geopandas labels the axes from the CRS; the CRS is named under the map instead.
        self.ax.set_xlabel("")
        self.ax.set_ylabel("")
        return _save(self.fig, out_png, title)


def _caution(fig: Figure) -> None:
    wrapped = "\n".join(textwrap.wrap(coverkit.CAUTION, 135))
    fig.add_artist(Line2D([0.035, 0.965], [0.062, 0.062], transform=fig.transFigure, color="#999", lw=0.5))
    fig.text(0.035, 0.052, wrapped, ha="left", va="top", fontsize=7, color="#333", linespacing=1.3)


def _save(fig: Figure, out_png: str | os.PathLike[str], title: str) -> Path:
    out = Path(out_png)
    if out.suffix.lower() != ".png":
        raise CoverkitError(f"{out}: map outputs are PNG files; give a path ending in .png.")
    with atomic_path(out) as tmp:
        # No 'Software' entry: the matplotlib version would make outputs differ between installs.
        fig.savefig(
            tmp, format="png", dpi=DPI, metadata={"Software": None, "Title": title, "Comment": coverkit.CAUTION}
        )
    return out


def _fmt_minutes(value: float) -> str:
    return f"{value:g}"


# ----------------------------------------------------------------------------------------------------------------
# Maps
# ----------------------------------------------------------------------------------------------------------------


def travel_surface_map(
    out_png: str | os.PathLike[str],
    surface_minutes: np.ndarray,
    transform: affine.Affine,
    crs: object,
    bases: gpd.GeoDataFrame | None,
    roads: gpd.GeoDataFrame | None,
    band_edges_minutes: Sequence[float],
    title: str,
    standard_text: str,
    *,
    frame: MapFrame | None = None,
) -> Path:
    """Travel-time surface in discrete bands (light = near, dark = far).

    Parameters
    ----------
    out_png
        Output PNG path (written atomically).
    surface_minutes
        2-D array of travel time in minutes, rows north to south as in a GeoTIFF; NaN (or inf) = not reached / no data.
    transform
        Affine transform of the array (cell edges in CRS metres), north-up without rotation.
    crs
        Projected CRS in metres of the array and the map.
    bases, roads
        Point layer with ``base_id``; line layer (optional ``road_class`` sets line width).
    band_edges_minutes
        Increasing upper band edges in minutes, e.g. ``[4, 8, 12]``; a leading 0 is implied. Times above the last
        edge show as one further, darkest band.
    title, standard_text
        Map title; the response standard used (shown under the title).
    frame
        The study's shared extent, boundary and zones (:func:`study_frame`); the surface is clipped to the boundary.

    Returns
    -------
    Path
        ``out_png``.
    """
    standard_text = _check_standard(standard_text)
    crs = _map_crs(crs, "travel surface CRS")
    surface = np.asarray(surface_minutes, dtype=float)
    if surface.ndim != 2 or surface.size == 0:
        raise CoverkitError(f"surface_minutes must be a non-empty 2-D array; got shape {surface.shape}.")
    finite = np.isfinite(surface)
    if np.any(surface[finite] < 0):
        raise CoverkitError("surface_minutes holds negative travel times; use NaN for cells not reached.")
    edges = [float(e) for e in band_edges_minutes]
    if edges and edges[0] == 0.0:
        edges = edges[1:]
    if not edges or any(e <= 0 for e in edges) or any(b <= a for a, b in itertools.pairwise(edges)):
        raise CoverkitError(
            f"band_edges_minutes {list(band_edges_minutes)} must be positive and strictly increasing, e.g. [4, 8, 12]."
        )
    t = affine.Affine(*tuple(transform)[:6])
    if t.b != 0 or t.d != 0 or t.a <= 0 or t.e == 0:
        raise CoverkitError("the surface transform is rotated or degenerate; resample to a north-up grid first.")
    nrows, ncols = surface.shape
    left, right = t.c, t.c + t.a * ncols
    y_a, y_b = t.f, t.f + t.e * nrows
    bottom, top = min(y_a, y_b), max(y_a, y_b)
    origin = "upper" if t.e < 0 else "lower"
    bases = _layer(bases, "bases", crs, ["base_id"])
    roads = _layer(roads, "roads", crs)

    page = _Page(title, standard_text, crs, _bounds_union(bases, extra=[left, bottom, right, top]), frame)
    bounds = [0.0, *edges, math.inf]
    colours = band_colors(len(bounds) - 1)
    cmap = mcolors.ListedColormap(colours[:-1]).with_extremes(over=colours[-1], bad=(0, 0, 0, 0))
    norm = mcolors.BoundaryNorm([0.0, *edges], cmap.N)
    image = page.ax.imshow(
        np.ma.masked_invalid(surface),
        cmap=cmap,
        norm=norm,
        extent=(left, right, bottom, top),
        origin=origin,
        interpolation="nearest",
        zorder=1,
    )
    page.clip_to_boundary(image)
    page.roads(roads)
    page.bases(bases)
    lower = 0.0
    for edge, colour in zip(edges, colours, strict=False):
        page.add_legend(Patch(fc=colour, ec="#555", lw=0.4), f"{_fmt_minutes(lower)}–{_fmt_minutes(edge)}")
        lower = edge
    page.add_legend(Patch(fc=colours[-1], ec="#555", lw=0.4), f"more than {_fmt_minutes(edges[-1])}")
    page.add_legend(Patch(fc="white", ec="#555", lw=0.4), "not reached / no data")
    page.legend("Travel time (minutes)")
    return page.save(out_png, title)


def coverage_depth_map(
    out_png: str | os.PathLike[str],
    depth_grid: np.ndarray,
    transform: affine.Affine,
    crs: object,
    bases: gpd.GeoDataFrame | None,
    roads: gpd.GeoDataFrame | None,
    title: str,
    standard_text: str,
    *,
    demand: gpd.GeoDataFrame | None = None,
    max_depth: int = 3,
    frame: MapFrame | None = None,
) -> Path:
    """Coverage depth (bases reaching a place within the standard) as filled areas from the timed grid.

    Categories 0 (not covered, a warm colour apart from the rest), 1, 2, ..., ``max_depth``+ (sequential, light to
    dark); cells with no road within reach stay blank. With ``demand`` the legend gives each category's share of
    the demand weight.

    Parameters
    ----------
    depth_grid
        2-D integer array of depth per cell, rows north to south; -1 where no road is within reach (as in
        :class:`coverkit.coverage.AreaLayers`).
    transform
        Affine transform of the grid (cell edges in metres), north-up.
    crs
        Projected CRS in metres of the grid.
    demand
        Optional demand with whole-number ``depth`` and numeric ``weight`` (people or calls) for the legend shares.
    max_depth
        Highest category; deeper places join it (``3`` gives 0, 1, 2, 3+).
    frame
        The study's shared extent, boundary and zones (:func:`study_frame`).
    """
    standard_text = _check_standard(standard_text)
    if int(max_depth) < 1:
        raise CoverkitError(f"max_depth {max_depth} must be at least 1.")
    max_depth = int(max_depth)
    crs = _map_crs(crs, "depth grid CRS")
    grid = np.asarray(depth_grid)
    if grid.ndim != 2 or grid.size == 0:
        raise CoverkitError(f"depth_grid must be a non-empty 2-D array; got shape {grid.shape}.")
    if not np.issubdtype(grid.dtype, np.integer):
        raise FieldError("depth_grid must hold whole numbers (bases reaching each cell; -1 where no road is near).")
    shares = None
    if demand is not None:
        demand = _layer(demand, "demand", crs, ["depth", "weight"])
        depth_raw = np.asarray(demand["depth"], dtype=float)
        if np.any(~np.isfinite(depth_raw)) or np.any(depth_raw < 0) or np.any(depth_raw != np.round(depth_raw)):
            raise FieldError("demand: column depth must hold whole numbers >= 0 (bases reaching each point).")
        weight = np.nan_to_num(np.asarray(demand["weight"], dtype=float), nan=0.0)
        cat = np.minimum(depth_raw.astype(np.int64), max_depth)
        total = float(weight.sum())
        shares = np.bincount(cat, weights=weight, minlength=max_depth + 1) / total * 100 if total > 0 else None
    t = affine.Affine(*tuple(transform)[:6])
    if t.b != 0 or t.d != 0 or t.a <= 0 or t.e >= 0:
        raise CoverkitError("the depth grid transform must be north-up (rows north to south), without rotation.")
    nrows, ncols = grid.shape
    extent = (t.c, t.c + t.a * ncols, t.f + t.e * nrows, t.f)
    bases = _layer(bases, "bases", crs, ["base_id"])
    roads = _layer(roads, "roads", crs)

    page = _Page(
        title, standard_text, crs, _bounds_union(bases, extra=[extent[0], extent[2], extent[1], extent[3]]), frame
    )
    colours = [mcolors.to_rgba(UNCOVERED_COLOR), *depth_colors(max_depth)]
    cmap = mcolors.ListedColormap(colours).with_extremes(bad=(0, 0, 0, 0))
    shown = np.ma.masked_less(np.minimum(grid, max_depth), 0)
    image = page.ax.imshow(
        shown, cmap=cmap, norm=mcolors.NoNorm(vmin=0, vmax=max_depth), extent=extent, origin="upper",
        interpolation="nearest", zorder=1,
    )  # fmt: skip
    page.clip_to_boundary(image)
    page.roads(roads)
    for d in range(max_depth + 1):
        name = (
            "0 - not covered" if d == 0 else (f"{d}+ bases" if d == max_depth else f"{d} base" + ("s" if d > 1 else ""))
        )
        if shares is not None:
            name += f" ({shares[d]:.1f} %)"
        page.add_legend(Patch(fc=colours[d], ec="#555", lw=0.4), name)
    page.add_legend(Patch(fc="white", ec="#555", lw=0.4), "no road within reach")
    page.bases(bases)
    page.legend("Bases within the standard" + ("\n(% of demand)" if shares is not None else ""))
    return page.save(out_png, title)


def demand_classes(values: np.ndarray) -> list[tuple[float, float]]:
    """Class limits for shading areas by the demand they hold: 0, then powers of ten up to the largest value.

    Returns ``[(lo, hi), ...]`` with ``lo < v <= hi`` (the first class is exactly 0). Decades read the same on
    any study and keep small and large gaps apart (common cartographic practice for skewed counts, no source).
    """
    v = np.nan_to_num(np.asarray(values, dtype=float), nan=0.0)
    top = float(v.max()) if v.size else 0.0
    classes = [(-math.inf, 0.0)]
    if top <= 0:
        return classes
    hi_exp = max(1, math.ceil(math.log10(top)))
    edges = [0.0, *(10.0**k for k in range(1, hi_exp + 1))]
    if top <= 10.0:
        edges = [0.0, 10.0]
    classes += list(itertools.pairwise(edges))
    return classes


def gaps_map(
    out_png: str | os.PathLike[str],
    gaps: gpd.GeoDataFrame,
    bases: gpd.GeoDataFrame | None,
    roads: gpd.GeoDataFrame | None,
    title: str,
    standard_text: str,
    label_top: int = 5,
    *,
    value_column: str = "uncovered_people",
    value_unit: str = "people",
    count_column: str | None = "uncovered_calls",
    count_unit: str = "calls",
    frame: MapFrame | None = None,
) -> Path:
    """Coverage gaps as filled areas shaded by the demand they hold, with a thin outline; the largest
    ``label_top`` numbered by rank.

    Parameters
    ----------
    gaps
        Polygons with ``gap_id`` and numeric ``value_column`` (uncovered demand inside, in ``value_unit``),
        optionally ``count_column`` (uncovered calls inside), projected CRS in metres.
    label_top
        How many of the largest gaps to number on the map and list in the legend.
    value_column, value_unit
        The column that shades the gaps and its unit word for the legend (``"people"``, ``"calls"``).
    count_column, count_unit
        A second figure listed for the numbered gaps, or None.
    frame
        The study's shared extent, boundary and zones (:func:`study_frame`).
    """
    standard_text = _check_standard(standard_text)
    crs = _map_crs(getattr(gaps, "crs", None), "gaps layer")
    if count_column is not None and count_column not in gaps.columns:
        count_column = None
    gaps = _layer(gaps, "gaps", crs, ["gap_id", value_column, *([count_column] if count_column else [])])
    bases = _layer(bases, "bases", crs, ["base_id"])
    roads = _layer(roads, "roads", crs)

    page = _Page(title, standard_text, crs, _bounds_union(gaps, bases), frame)
    values = np.nan_to_num(np.asarray(gaps[value_column], dtype=float), nan=0.0)
    classes = demand_classes(values)
    cmap = matplotlib.colormaps[GAP_CMAP]
    shades = [cmap(float(t)) for t in np.linspace(0.12, 0.9, len(classes))]
    cls = np.zeros(len(values), dtype=np.int64)
    if len(gaps):
        for i, (lo, hi) in enumerate(classes):
            cls[(values > lo) & (values <= hi)] = i
        faces = [shades[c] for c in cls.tolist()]
        # each gap outlined in a darker tone of its own shade, so that empty ribbons along roads stay quiet
        edges = [_darker(shades[c]) for c in cls.tolist()]
        _draw_polygons(page.ax, gaps.geometry.to_numpy(), faces, zorder=3, linewidths=0.0)
        paths, row = _polygon_paths(gaps.geometry.to_numpy())
        page.ax.add_collection(
            PathCollection(paths, facecolors="none", edgecolors=np.asarray(edges)[row], linewidths=0.5, zorder=3.1)
        )
    page.roads(roads)
    present = set(cls.tolist()) if len(gaps) else set()
    for i, ((lo, hi), colour) in enumerate(zip(classes, shades, strict=True)):
        if i not in present:  # the legend lists the classes the map shows
            continue
        if hi == 0:
            text = f"no {value_unit} (0)"
        elif lo <= 0:
            text = f"up to {hi:,.0f} {value_unit}"
        else:
            text = f"{lo:,.0f}\u2013{hi:,.0f} {value_unit}"
        page.add_legend(Patch(fc=colour, ec=_darker(colour), lw=0.5), text)
    order = _rank(gaps, value_column, count_column)[: max(int(label_top), 0)]
    if len(order):
        points = _label_points(gaps.geometry.iloc[order].to_numpy())
        for rank, (row, (x, y)) in enumerate(zip(order, points, strict=True), start=1):
            page.ax.text(
                x, y, str(rank), ha="center", va="center", fontsize=8, fontweight="bold", color="#111",
                bbox={"boxstyle": "circle,pad=0.25", "fc": "white", "ec": "#111", "lw": 0.8}, zorder=7,
                clip_on=True,
            )  # fmt: skip
            text = _count_text(float(values[row]), value_unit)
            if count_column:
                text += ", " + _count_text(float(np.nan_to_num(gaps[count_column].iloc[row])), count_unit)
            page.add_legend(Line2D([], [], ls="none", marker=f"${rank}$", ms=7, color="#111"), f"gap {rank}: {text}")
    page.bases(bases)
    page.legend(f"Gaps: {value_unit} not covered" + (f"\n({len(order)} largest numbered)" if len(order) else ""))
    return page.save(out_png, title)


_SINGULAR = {"people": "person", "calls": "call", "incidents": "incident"}


def _count_text(n: float, unit: str) -> str:
    """``'1 person'``, ``'2,194 people'``, ``'1 call'``."""
    return plural(n, _SINGULAR.get(unit, unit), unit)


def _label_points(geoms: np.ndarray) -> np.ndarray:
    """A point inside the largest part of each geometry (a gap of many pieces is labelled on its main piece)."""
    parts, row = shapely.get_parts(geoms, return_index=True)
    area = shapely.area(parts)
    order = np.lexsort((-area, row))  # by row, largest part first
    first = order[np.r_[True, np.diff(row[order]) != 0]]
    return shapely.get_coordinates(shapely.point_on_surface(parts[first]))


def _darker(colour: object, amount: float = 0.35) -> tuple[float, float, float, float]:
    """``colour`` mixed towards black by ``amount`` (0..1)."""
    r, g, b, a = mcolors.to_rgba(colour)
    k = 1.0 - amount
    return (r * k, g * k, b * k, a)


def _rank(gaps: gpd.GeoDataFrame, value_column: str, count_column: str | None) -> np.ndarray:
    value = np.nan_to_num(np.asarray(gaps[value_column], dtype=float), nan=0.0)
    count = np.nan_to_num(np.asarray(gaps[count_column], dtype=float), nan=0.0) if count_column else np.zeros(len(gaps))
    ids = np.asarray([str(g) for g in gaps["gap_id"]])
    return np.lexsort((ids, -count, -value))


def first_due_map(
    out_png: str | os.PathLike[str],
    areas: gpd.GeoDataFrame,
    bases: gpd.GeoDataFrame | None,
    roads: gpd.GeoDataFrame | None,
    title: str,
    standard_text: str,
    *,
    frame: MapFrame | None = None,
    what: str = "first due",
) -> Path:
    """First-due areas (the part of the map each base reaches first), in a muted qualitative palette.

    With up to ten bases each gets its own colour and a legend entry; with more, colours are reused but never
    between touching areas.

    Parameters
    ----------
    areas
        Polygons with ``base_id`` (several rows per base allowed), projected CRS in metres.
    frame
        The study's shared extent, boundary and zones (:func:`study_frame`).
    what
        The legend's words for an area (``"first due"``, ``"second due"``, ...).
    """
    standard_text = _check_standard(standard_text)
    crs = _map_crs(getattr(areas, "crs", None), "first-due areas layer")
    areas = _layer(areas, "first-due areas", crs, ["base_id"])
    bases = _layer(bases, "bases", crs, ["base_id"])
    roads = _layer(roads, "roads", crs)

    page = _Page(title, standard_text, crs, _bounds_union(areas, bases), frame)
    palette = FIRST_DUE_PALETTE
    # places no base reaches (base_id missing) are drawn apart, in light grey
    unreached = areas["base_id"].isna().to_numpy() if len(areas) else np.zeros(0, dtype=bool)
    if unreached.any():
        geoms = areas.geometry.to_numpy()[unreached]
        _draw_polygons(page.ax, geoms, ["#eeeeee"] * len(geoms), edgecolors="white", linewidths=1.0, zorder=1)
        page.add_legend(Patch(fc="#eeeeee", ec="#777", lw=0.4), "not reached")
        areas = areas[~unreached]
    groups = np.asarray(areas["base_id"].to_numpy(), dtype=object)
    colour_of = neighbour_colors(areas.geometry.to_numpy(), groups, len(palette)) if len(areas) else {}
    if len(areas):
        faces = [palette[colour_of[g]] for g in groups.tolist()]
        _draw_polygons(page.ax, areas.geometry.to_numpy(), faces, edgecolors="white", linewidths=1.0, zorder=1)
    page.roads(roads)
    page.bases(bases)
    keys = sorted(colour_of, key=str)
    if len(keys) <= len(palette):
        for k in keys:
            page.add_legend(Patch(fc=palette[colour_of[k]], ec="#777", lw=0.4), f"{what} from {k}")
    else:
        page.add_legend(Patch(fc=palette[0], ec="#777", lw=0.4), f"{what} area (colours separate neighbours)")
    page.legend(f"{what[:1].upper()}{what[1:]} areas")
    return page.save(out_png, title)


def density_zone_map(
    out_png: str | os.PathLike[str],
    zones: gpd.GeoDataFrame,
    bases: gpd.GeoDataFrame | None,
    roads: gpd.GeoDataFrame | None,
    title: str,
    standard_text: str,
    *,
    frame: MapFrame | None = None,
) -> Path:
    """Demand zones by population density (``zone`` per polygon, in the order given: densest first), shaded on the
    sequential colormap from dark (dense) to light (sparse)."""
    standard_text = _check_standard(standard_text)
    crs = _map_crs(getattr(zones, "crs", None), "density zones layer")
    zones = _layer(zones, "density zones", crs, ["zone"])
    bases = _layer(bases, "bases", crs, ["base_id"])
    roads = _layer(roads, "roads", crs)
    page = _Page(title, standard_text, crs, _bounds_union(zones, bases), frame)
    names = list(dict.fromkeys(zones["zone"].tolist()))
    cmap = matplotlib.colormaps[SEQUENTIAL_CMAP]
    colour = {z: cmap(0.85 - 0.7 * i / max(len(names) - 1, 1)) for i, z in enumerate(names)}
    faces = [colour[z] for z in zones["zone"].tolist()]
    _draw_polygons(page.ax, zones.geometry.to_numpy(), faces, edgecolors="white", linewidths=0.6, zorder=1)
    page.roads(roads)
    page.bases(bases)
    for z in names:
        page.add_legend(Patch(fc=colour[z], ec="#777", lw=0.4), z)
    page.legend("Demand zones")
    return page.save(out_png, title)


def _draw_closures(page: _Page, closure_areas: gpd.GeoDataFrame | None, closed_roads: gpd.GeoDataFrame | None) -> None:
    """A scenario's closed areas (hatched, outlined) and closed roads (dashed casing), with their legend entries."""
    if closure_areas is not None and len(closure_areas):
        geoms = closure_areas.geometry.to_numpy()
        _draw_polygons(page.ax, geoms, "none", edgecolors=CLOSURE_EDGE_COLOR, hatch="\\\\", linewidths=1.0, zorder=4)
        page.add_legend(Patch(fc="none", ec=CLOSURE_EDGE_COLOR, hatch="\\\\", lw=1.0), "closed area")
    if closed_roads is not None and len(closed_roads):
        segments = _line_segments(closed_roads.geometry.to_numpy())
        # a dark casing broken by white dashes: apart from the boundary's solid line and from any road
        page.ax.add_collection(LineCollection(segments, colors=CLOSED_ROAD_COLOR, linewidths=3.0, zorder=4.5))
        page.ax.add_collection(
            LineCollection(segments, colors="white", linewidths=1.4, linestyles=(0, (2, 2)), zorder=4.6)
        )
        page.add_legend(
            (Line2D([], [], color=CLOSED_ROAD_COLOR, lw=3.0), Line2D([], [], color="white", lw=1.4, ls=(0, (2, 2)))),
            "closed road",
        )


def difference_map(
    out_png: str | os.PathLike[str],
    diff: gpd.GeoDataFrame,
    value_column: str,
    bases_before: gpd.GeoDataFrame | None,
    bases_after: gpd.GeoDataFrame | None,
    roads: gpd.GeoDataFrame | None,
    title: str,
    standard_text: str,
    units_label: str,
    limit: float | None = None,
    increase_label: str | None = None,
    decrease_label: str | None = None,
    *,
    closed_roads: gpd.GeoDataFrame | None = None,
    closure_areas: gpd.GeoDataFrame | None = None,
    frame: MapFrame | None = None,
) -> Path:
    """Before/after difference on a diverging colormap with symmetric limits (zero at the neutral midpoint).

    Parameters
    ----------
    diff
        Polygons or points with a numeric ``value_column`` (after minus before), projected CRS in metres.
        Missing values are drawn hatched grey.
    units_label
        Colour-bar label with units, e.g. ``"change in response time (s)"``.
    limit
        Fixed half-range of the colour scale (same units); default the largest absolute value.
    increase_label, decrease_label
        Optional words for the two ends of the scale, e.g. ``"slower"`` / ``"faster"``.
    closed_roads
        Road lines the scenario closes, drawn dark and thick over the roads.
    closure_areas
        Polygons the scenario closes (e.g. a flood zone), drawn hatched with an outline.
    frame
        The study's shared extent, boundary and zones (:func:`study_frame`).
    """
    standard_text = _check_standard(standard_text)
    crs = _map_crs(getattr(diff, "crs", None), "difference layer")
    diff = _layer(diff, "difference layer", crs, [value_column])
    before = _layer(bases_before, "bases before", crs, ["base_id"])
    after = _layer(bases_after, "bases after", crs, ["base_id"])
    roads = _layer(roads, "roads", crs)
    closed_roads = _layer(closed_roads, "closed roads", crs)
    closure_areas = _layer(closure_areas, "closure areas", crs)
    try:
        values = np.asarray(diff[value_column], dtype=float)
    except (TypeError, ValueError):
        raise FieldError(f"difference layer: column {value_column} must be numeric.") from None
    norm = diverging_norm(values, limit)
    cmap = matplotlib.colormaps[DIVERGING_CMAP]

    page = _Page(title, standard_text, crs, _bounds_union(diff, before, after, closure_areas), frame)
    ok = np.isfinite(values)
    geom_types = set(diff.geometry.geom_type.dropna().unique().tolist())
    is_points = bool(geom_types) and geom_types <= {"Point", "MultiPoint"}
    if is_points:
        page.roads(roads)
        xy = shapely.get_coordinates(diff.geometry.representative_point().to_numpy())
        size = float(np.clip(9000.0 / max(len(diff), 1), 3.0, 30.0))
        order = np.argsort(np.abs(np.where(ok, values, 0.0)), kind="stable")  # largest changes on top
        sel = order[ok[order]]
        page.ax.scatter(
            xy[sel, 0],
            xy[sel, 1],
            s=size,
            c=cmap(norm(values[sel])),
            edgecolors="#777",
            linewidths=0.2,
            zorder=5,
        )
        if np.any(~ok):
            page.ax.scatter(xy[~ok, 0], xy[~ok, 1], s=size, marker="x", c="#888", linewidths=0.6, zorder=4)
    else:
        if np.any(ok):
            geoms = diff.geometry.to_numpy()[ok]
            _draw_polygons(page.ax, geoms, cmap(norm(values[ok])), edgecolors="#bbb", linewidths=0.3, zorder=1)
        if np.any(~ok):
            geoms = diff.geometry.to_numpy()[~ok]
            _draw_polygons(page.ax, geoms, "#eeeeee", edgecolors="#aaa", hatch="///", linewidths=0.3, zorder=1)
        page.roads(roads)
    if np.any(~ok):
        page.add_legend(Patch(fc="#eee", ec="#aaa", hatch="///"), "no value")
    _draw_closures(page, closure_areas, closed_roads)
    page.bases(before, label="Base before", filled=False, annotate=after is None or not len(after))
    page.bases(after, label="Base after", filled=True)
    if before is not None and after is not None and len(before) and len(after):
        _label_removed_bases(page, before, after)
    legend = page.legend("Changes, bases and roads")

    # A horizontal colour bar under the legend, placed from the legend's drawn size so the two never overlap.
    renderer = page.fig.canvas.get_renderer()
    box = legend.get_window_extent(renderer).transformed(page.fig.transFigure.inverted())
    bar_h, title_h, words_h = 0.022, 0.05, 0.075
    bar_y = max(box.y0 - 0.02 - title_h - bar_h, _PANEL_BOX[1] + words_h)
    cax = page.fig.add_axes((_PANEL_BOX[0] + 0.01, bar_y, _PANEL_BOX[2] - 0.03, bar_h))
    bar = page.fig.colorbar(ScalarMappable(norm=norm, cmap=cmap), cax=cax, orientation="horizontal")
    bar.ax.tick_params(labelsize=7)
    bar.ax.axvline(0.0, color="#333", lw=0.6)
    cax.set_title("\n".join(textwrap.wrap(units_label, 30)), fontsize=8, loc="left", pad=4)
    # the two end words on rows of their own, so that long words never run into each other
    if decrease_label:
        cax.text(0.0, -1.7, f"\u2212 {decrease_label}", transform=cax.transAxes, ha="left", va="top", fontsize=7)
    if increase_label:
        cax.text(1.0, -3.0, f"+ {increase_label}", transform=cax.transAxes, ha="right", va="top", fontsize=7)
    return page.save(out_png, title)


def _label_removed_bases(page: _Page, before: gpd.GeoDataFrame, after: gpd.GeoDataFrame) -> None:
    """Name bases that exist only before (closed or moved away), since after-bases carry the labels."""
    after_ids = {str(b) for b in after["base_id"]}
    gone = before[[str(b) not in after_ids for b in before["base_id"]]]
    if not len(gone):
        return
    pts = shapely.get_coordinates(gone.geometry.representative_point().to_numpy())
    for (x, y), bid in zip(pts, gone["base_id"], strict=True):
        page.ax.annotate(
            f"{bid} (before)",
            (x, y),
            xytext=(5, -10),
            textcoords="offset points",
            fontsize=7.5,
            color="#333",
            path_effects=_HALO,
            zorder=9,
        )


# ----------------------------------------------------------------------------------------------------------------
# Charts
# ----------------------------------------------------------------------------------------------------------------

_LINE_COLORS = ("#1b4f72", "#b9770e", "#5b2c6f", "#1e8449", "#922b21", "#566573")
_LINE_STYLES = ("-", "--", "-.", ":")


def line_chart(
    out_png: str | os.PathLike[str],
    x: Sequence[float] | np.ndarray,
    ys: Mapping[str, Sequence[float] | np.ndarray],
    xlabel: str,
    ylabel: str,
    title: str,
    note: str = "",
    *,
    whole_x: bool = False,
    point_labels: Sequence[str] | None = None,
) -> Path:
    """A line chart (e.g. share of demand covered against the time standard), with the caution footnote.

    Parameters
    ----------
    x
        Shared x values.
    ys
        Series label -> y values, one per x. Drawn in the given order with distinct colours and dash patterns,
        so the chart also reads in black and white.
    xlabel, ylabel
        Axis labels with units.
    note
        One line under the title, e.g. the standard or the demand layer used.
    whole_x
        Ticks at whole numbers only (counts such as new sites).
    point_labels
        A label per x value, written beside the first series' points (e.g. the site ids chosen).
    """
    xs = np.asarray(x, dtype=float)
    if xs.ndim != 1 or xs.size == 0:
        raise CoverkitError("line_chart: x must be a non-empty 1-D sequence.")
    if not ys:
        raise CoverkitError("line_chart: ys is empty; give at least one series.")
    fig = Figure(figsize=FIGSIZE_IN, dpi=DPI)
    FigureCanvasAgg(fig)
    fig.text(0.035, 0.972, title, ha="left", va="top", fontsize=13, fontweight="bold")
    if note:
        fig.text(0.035, 0.937, "\n".join(textwrap.wrap(note, 110)), ha="left", va="top", fontsize=9, color="#222")
    _caution(fig)
    ax = fig.add_axes((0.1, 0.15, 0.86, 0.70 if len(textwrap.wrap(note, 110)) > 1 else 0.74))
    for i, (label, y) in enumerate(ys.items()):
        yv = np.asarray(y, dtype=float)
        if yv.shape != xs.shape:
            raise CoverkitError(f"line_chart: series '{label}' has {yv.size} values for {xs.size} x values.")
        ax.plot(
            xs,
            yv,
            color=_LINE_COLORS[i % len(_LINE_COLORS)],
            linestyle=_LINE_STYLES[(i // len(_LINE_COLORS) + i) % len(_LINE_STYLES)],
            lw=1.8,
            marker="o" if xs.size <= 30 else None,
            ms=3.5,
            label=str(label),
        )
    if point_labels is not None:
        if len(point_labels) != xs.size:
            raise CoverkitError(f"line_chart: {len(point_labels)} point labels for {xs.size} x values.")
        first = np.asarray(next(iter(ys.values())), dtype=float)
        for xi, yi, text in zip(xs, first, point_labels, strict=True):
            if text:
                ax.annotate(
                    "\n".join(textwrap.wrap(str(text), 18)), (xi, yi), xytext=(-7, 6), textcoords="offset points",
                    ha="right", va="bottom", fontsize=7.5, color="#333", path_effects=_HALO,
                )  # fmt: skip
        lo, hi = ax.get_ylim()
        ax.set_ylim(lo, hi + 0.06 * (hi - lo))  # room for the label of the highest point
    if whole_x:
        from matplotlib.ticker import MaxNLocator

        ax.xaxis.set_major_locator(MaxNLocator(integer=True))
        pad = 0.3 if xs.size > 1 else 0.5
        ax.set_xlim(xs.min() - pad, xs.max() + pad)
    ax.set_xlabel(xlabel, fontsize=9.5)
    ax.set_ylabel(ylabel, fontsize=9.5)
    ax.grid(True, color="#ddd", lw=0.6)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.tick_params(labelsize=8.5)
    ax.legend(fontsize=8.5, frameon=False, loc="lower right")
    return _save(fig, out_png, title)
