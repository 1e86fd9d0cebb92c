"""Maps and the HTML report.

Checks are against outside references: the 1-2-5 scale-bar rule (common cartographic practice, no source; cases
worked by hand), the sRGB transfer function (IEC 61966-2-1:1999) with ITU-R BT.709 luminance coefficients, the PNG
pixel size implied by the page size and dpi, Python's ``html.parser`` for well-formed markup, and shapely for the
adjacency of first-due areas.
"""

from __future__ import annotations

import base64
import itertools
import re
from html.parser import HTMLParser
from pathlib import Path

import affine
import geopandas as gpd
import matplotlib
import matplotlib.image as mpimg
import numpy as np
import pandas as pd
import pytest
import shapely
from matplotlib.collections import LineCollection, PathCollection
from matplotlib.figure import Figure
from PIL import Image

import coverkit
from coverkit.errors import CoverkitError, FieldError, InputFileError
from coverkit.network.model import grid_network
from coverkit.report import maps
from coverkit.report.html import HtmlReport

CRS = "EPSG:32633"
X0, Y0 = 500000.0, 5000000.0
STD = "Standard: 60 s turnout + 480 s travel, 90 % of calls"
PX_W, PX_H = round(maps.FIGSIZE_IN[0] * maps.DPI), round(maps.FIGSIZE_IN[1] * maps.DPI)


# ----------------------------------------------------------------------------------------------------------------
# Synthetic inputs: a 3 x 2.4 km grid town with two bases
# ----------------------------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def roads() -> gpd.GeoDataFrame:
    return grid_network(7, 6, 500.0, 40.0).edges[["road_class", "geometry"]]


@pytest.fixture(scope="module")
def bases() -> gpd.GeoDataFrame:
    return gpd.GeoDataFrame(
        {"base_id": ["B2", "B1"]}, geometry=shapely.points([[X0 + 2500, Y0 + 2000], [X0 + 500, Y0 + 500]]), crs=CRS
    )


@pytest.fixture(scope="module")
def surface() -> tuple[np.ndarray, affine.Affine]:
    cell = 100.0
    gx = X0 + (np.arange(30) + 0.5) * cell
    gy = Y0 + 2500 - (np.arange(25) + 0.5) * cell
    xx, yy = np.meshgrid(gx, gy)
    minutes = (np.abs(xx - X0 - 500) + np.abs(yy - Y0 - 500)) / (40 / 3.6) / 60
    minutes[:3, :3] = np.nan  # not reached
    return minutes, affine.Affine(cell, 0, X0, 0, -cell, Y0 + 2500)


@pytest.fixture(scope="module")
def demand() -> gpd.GeoDataFrame:
    rng = np.random.default_rng(7)
    xy = rng.uniform([X0, Y0], [X0 + 3000, Y0 + 2500], size=(150, 2))
    return gpd.GeoDataFrame(
        {"depth": rng.integers(0, 5, len(xy)), "weight": rng.integers(1, 9, len(xy))},
        geometry=shapely.points(xy),
        crs=CRS,
    )


@pytest.fixture(scope="module")
def depth_grid() -> tuple[np.ndarray, affine.Affine]:
    """Depth per 100 m cell over the town: 0 in the west third, 1 in the middle, 2 in the east; no road (-1) in
    the north-west corner."""
    grid = np.zeros((25, 30), dtype=np.int32)
    grid[:, 10:20] = 1
    grid[:, 20:] = 2
    grid[:3, :3] = -1
    return grid, affine.Affine(100.0, 0, X0, 0, -100.0, Y0 + 2500)


def _big_square_gaps() -> gpd.GeoDataFrame:
    return gpd.GeoDataFrame(
        {"gap_id": ["g1"], "uncovered_people": [100.0], "uncovered_calls": [3]},
        geometry=[shapely.box(X0, Y0, X0 + 3000, Y0 + 2500)],
        crs=CRS,
    )


def _all_maps(tmp: Path, roads, bases, surface, demand, depth_grid) -> dict[str, Path]:
    minutes, transform = surface
    grid, grid_transform = depth_grid
    areas = gpd.GeoDataFrame(
        {"base_id": ["B1", "B2"]},
        geometry=[shapely.box(X0, Y0, X0 + 1500, Y0 + 2500), shapely.box(X0 + 1500, Y0, X0 + 3000, Y0 + 2500)],
        crs=CRS,
    )
    diff = demand[["geometry"]].assign(delta_s=np.linspace(-40.0, 90.0, len(demand)))
    return {
        "surface": maps.travel_surface_map(
            tmp / "s.png", minutes, transform, CRS, bases, roads, [2, 4, 6], "Travel time", STD
        ),
        "depth": maps.coverage_depth_map(
            tmp / "d.png", grid, grid_transform, CRS, bases, roads, "Depth", STD, demand=demand
        ),
        "gaps": maps.gaps_map(tmp / "g.png", _big_square_gaps(), bases, roads, "Gaps", STD),
        "first_due": maps.first_due_map(tmp / "f.png", areas, bases, roads, "First due", STD),
        "difference": maps.difference_map(
            tmp / "x.png", diff, "delta_s", bases, bases.iloc[:1], roads, "Change", STD, "change (s)"
        ),
        "chart": maps.line_chart(
            tmp / "c.png", [0, 4, 8, 12], {"residents": [0, 40, 80, 95]}, "minutes", "% covered", "Curve", STD
        ),
    }


@pytest.fixture(scope="module")
def rendered(tmp_path_factory, roads, bases, surface, demand, depth_grid) -> dict[str, Path]:
    return _all_maps(tmp_path_factory.mktemp("maps"), roads, bases, surface, demand, depth_grid)


# ----------------------------------------------------------------------------------------------------------------
# Scale bar
# ----------------------------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("width_m", "expected_m"),
    [
        # Worked by hand: 30 % of the width, then the largest of 1, 2, 5 x 10^k not above it.
        (10_000.0, 2_000.0),  # 3000 -> 2000
        (7_300.0, 2_000.0),  # 2190 -> 2000
        (45_000.0, 10_000.0),  # 13500 -> 10000
        (1_234.0, 200.0),  # 370.2 -> 200
        (3_000.0, 500.0),  # 900 -> 500
        (3_334.0, 1_000.0),  # 1000.2 -> 1000
        (3_333.0, 500.0),  # 999.9 -> 500
        (100_000.0, 20_000.0),  # 30000 -> 20000
        (17.0, 5.0),  # 5.1 -> 5
    ],
)
def test_scale_length_hand_worked(width_m, expected_m):
    """Common cartographic practice (1-2-5 series), no source; values worked by hand."""
    assert maps.nice_scale_length_m(width_m) == pytest.approx(expected_m)


def test_scale_length_is_nice_and_between_10_and_35_percent():
    """A 1-2-5 length between 10 % and 35 % of the map width, for widths from 50 m to 5000 km."""
    for width in np.geomspace(50.0, 5e6, 500):
        length = maps.nice_scale_length_m(float(width))
        mantissa = length / 10 ** np.floor(np.log10(length))
        assert np.isclose(mantissa, [1.0, 2.0, 5.0]).any(), (width, length)
        assert 0.10 <= length / width <= 0.35, (width, length)


def test_length_labels_switch_to_km():
    assert maps.format_length(500.0) == "500 m"
    assert maps.format_length(2000.0) == "2 km"
    assert maps.format_length(2500.0) == "2.5 km"


def test_scale_bar_axis_has_map_scale():
    """The scale strip shares the map's x-limits and drawn width, so its bar is true to the map."""
    page = maps._Page("t", STD, maps.parse_crs(CRS), [X0, Y0, X0 + 9000, Y0 + 2000])  # a wide, flat extent
    page.fig.canvas.draw()
    assert page.scale_ax.get_xlim() == pytest.approx(page.ax.get_xlim())
    map_box, bar_box = page.ax.get_position(), page.scale_ax.get_position()
    assert map_box.width == pytest.approx(bar_box.width) and map_box.x0 == pytest.approx(bar_box.x0)
    # Equal scale in x and y: metres per inch the same both ways.
    (x_lo, x_hi), (y_lo, y_hi) = page.ax.get_xlim(), page.ax.get_ylim()
    w_in, h_in = map_box.width * maps.FIGSIZE_IN[0], map_box.height * maps.FIGSIZE_IN[1]
    assert (x_hi - x_lo) / w_in == pytest.approx((y_hi - y_lo) / h_in)
    assert 0.10 <= page.scale_length_m / (x_hi - x_lo) <= 0.35


# ----------------------------------------------------------------------------------------------------------------
# Colours
# ----------------------------------------------------------------------------------------------------------------


def test_relative_luminance_reference_values():
    """IEC 61966-2-1 linearisation with ITU-R BT.709 weights: white 1, black 0, green 0.7152, sRGB 0.5 grey 0.21404
    (((0.5 + 0.055) / 1.055) ** 2.4, worked by hand)."""
    assert maps.relative_luminance((1, 1, 1)) == pytest.approx(1.0)
    assert maps.relative_luminance((0, 0, 0)) == pytest.approx(0.0)
    assert maps.relative_luminance((0, 1, 0)) == pytest.approx(0.7152)
    assert maps.relative_luminance((0.5, 0.5, 0.5)) == pytest.approx(0.21404, abs=1e-5)


@pytest.mark.parametrize("n", [2, 4, 7])
def test_time_bands_go_light_to_dark(n):
    """Near bands are lighter than far bands (BT.709 relative luminance strictly decreasing)."""
    lum = [maps.relative_luminance(c) for c in maps.band_colors(n)]
    assert all(a > b for a, b in itertools.pairwise(lum))
    assert maps.SEQUENTIAL_CMAP.startswith("cividis")


def test_depth_colours_go_light_to_dark_and_uncovered_stands_apart():
    lum = [maps.relative_luminance(c) for c in maps.depth_colors(3)]
    assert all(a > b for a, b in itertools.pairwise(lum))
    grey = matplotlib.colors.to_rgb(maps.UNCOVERED_COLOR)
    assert all(np.abs(np.subtract(grey, c[:3])).max() > 0.1 for c in maps.depth_colors(3))


def test_diverging_norm_centred_on_zero():
    """Symmetric limits from the largest magnitude; 0 maps to the colormap midpoint."""
    norm = maps.diverging_norm(np.array([-3.0, 10.0, np.nan, 2.0]))
    assert norm(0.0) == pytest.approx(0.5)
    assert norm(-10.0) == pytest.approx(0.0) and norm(10.0) == pytest.approx(1.0)
    assert norm(-3.0) == pytest.approx(0.35)
    cmap = matplotlib.colormaps[maps.DIVERGING_CMAP]
    assert cmap(norm(0.0)) == cmap(0.5)
    # A diverging map: the neutral middle is lighter than either end.
    mid, lo, hi = (maps.relative_luminance(cmap(t)) for t in (0.5, 0.0, 1.0))
    assert mid > lo and mid > hi
    assert maps.diverging_norm(np.zeros(3))(0.0) == pytest.approx(0.5)


def test_first_due_colours_differ_between_touching_areas():
    """With more areas than colours, touching areas still differ (adjacency checked with shapely)."""
    cells = [shapely.box(i, j, i + 1, j + 1) for j in range(5) for i in range(5)]  # 25 areas > 10 colours
    geoms = np.array(cells, dtype=object)
    group = np.array([f"S{k:02d}" for k in range(len(cells))], dtype=object)
    colour = maps.neighbour_colors(geoms, group, len(maps.FIRST_DUE_PALETTE))
    for a in range(len(cells)):
        for b in range(a + 1, len(cells)):
            if cells[a].intersects(cells[b]):
                assert colour[group[a]] != colour[group[b]], (a, b)


def test_gaps_ranked_by_population_then_incidents():
    gaps = gpd.GeoDataFrame(
        {
            "gap_id": ["a", "b", "c", "d"],
            "uncovered_people": [10.0, 300.0, 10.0, np.nan],
            "uncovered_calls": [1, 0, 5, 9],
        },
        geometry=[shapely.box(0, 0, 1, 1)] * 4,
        crs=CRS,
    )
    assert maps.rank_gaps(gaps).tolist() == [1, 2, 0, 3]


# ----------------------------------------------------------------------------------------------------------------
# Rendered PNGs
# ----------------------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("name", ["surface", "depth", "gaps", "first_due", "difference", "chart"])
def test_png_written_at_page_size_and_dpi(rendered, name):
    """8 x 7 in at 150 dpi is 1200 x 1050 pixels. PNG stores whole pixels per metre (PNG spec, pHYs chunk):
    round(150 / 0.0254) = 5906 px/m reads back as 150.012 dpi."""
    path = rendered[name]
    assert path.exists() and path.stat().st_size > 10_000
    img = mpimg.imread(path)
    assert img.shape[:2] == (PX_H, PX_W)
    with Image.open(path) as im:
        assert im.info["dpi"] == pytest.approx((maps.DPI, maps.DPI), abs=0.02)
        assert im.info.get("Comment") == coverkit.CAUTION
        assert "Software" not in im.info
    assert not list(path.parent.glob("*.part*"))


def test_surface_map_shows_near_and_far_band_colours(rendered):
    """The nearest band's colour and the 'beyond the last edge' colour both appear in the picture."""
    img = mpimg.imread(rendered["surface"])[..., :3]
    for colour in (maps.band_colors(4)[0], maps.band_colors(4)[-1]):
        close = np.abs(img - np.asarray(colour[:3])).max(axis=2) < 0.02
        assert close.sum() > 500


def _pixel(xy: tuple[float, float], bounds: list[float]) -> tuple[int, int]:
    """Row, column of a map coordinate, from the fixed page layout and the fitted extent."""
    box_aspect = (maps._MAP_BOX[2] * maps.FIGSIZE_IN[0]) / (maps._MAP_BOX[3] * maps.FIGSIZE_IN[1])
    (x_lo, x_hi), (y_lo, y_hi) = maps.fit_extent(bounds, box_aspect)
    fx = maps._MAP_BOX[0] + maps._MAP_BOX[2] * (xy[0] - x_lo) / (x_hi - x_lo)
    fy = maps._MAP_BOX[1] + maps._MAP_BOX[3] * (xy[1] - y_lo) / (y_hi - y_lo)
    return round((1 - fy) * PX_H), round(fx * PX_W)


def test_gaps_are_filled_and_shaded_by_the_demand_they_hold(tmp_path):
    """Issue 10 item 16: gaps are filled areas, darker the more demand they hold (BT.709 relative luminance),
    with decade classes (common cartographic practice for skewed counts, no source)."""
    west = shapely.box(X0, Y0, X0 + 1400, Y0 + 2500)
    east = shapely.box(X0 + 1600, Y0, X0 + 3000, Y0 + 2500)
    gaps = gpd.GeoDataFrame(
        {"gap_id": [1, 2], "uncovered_people": [4.0, 2500.0], "uncovered_calls": [0, 1]}, geometry=[west, east], crs=CRS
    )
    bounds = [X0, Y0, X0 + 3000, Y0 + 2500]
    img = mpimg.imread(maps.gaps_map(tmp_path / "g.png", gaps, None, None, "Gaps", STD, label_top=0))[..., :3]
    r_w, c_w = _pixel((X0 + 700.0, Y0 + 1900.0), bounds)
    r_e, c_e = _pixel((X0 + 2300.0, Y0 + 1900.0), bounds)
    west_rgb, east_rgb = img[r_w, c_w], img[r_e, c_e]
    assert not np.allclose(west_rgb, 1.0) and not np.allclose(east_rgb, 1.0)  # filled, not outlined
    assert maps.relative_luminance(east_rgb) < maps.relative_luminance(west_rgb)
    assert maps.demand_classes(np.array([0.0, 4.0, 2500.0])) == [(-np.inf, 0.0), (0.0, 10.0), (10.0, 100.0),
                                                                  (100.0, 1000.0), (1000.0, 10000.0)]  # fmt: skip


def test_depth_map_fills_cells_from_the_timed_grid(rendered, depth_grid):
    """Issue 10 item 16: the depth map is drawn from the grid, cell by cell: an uncovered cell shows the
    uncovered colour, a depth-2 cell the depth-2 colour, a cell without a road stays blank."""
    img = mpimg.imread(rendered["depth"])[..., :3]
    _, transform = depth_grid
    bounds = [X0, Y0, X0 + 3000, Y0 + 2500]

    def colour_at(col: int, row: int) -> np.ndarray:
        x, y = transform @ (col + 0.5, row + 0.5)
        r, c = _pixel((x, y), bounds)
        return img[r, c]

    uncovered = np.asarray(matplotlib.colors.to_rgb(maps.UNCOVERED_COLOR))
    assert np.abs(colour_at(6, 20) - uncovered).max() < 0.03
    assert np.abs(colour_at(26, 12) - np.asarray(maps.depth_colors(3)[1][:3])).max() < 0.03
    assert np.allclose(colour_at(1, 1), 1.0, atol=0.02)


def _capture(monkeypatch) -> list[Figure]:
    """Keep the figures the map functions save, to look at their artists."""
    figures: list[Figure] = []
    real = maps._save

    def keep(fig, out_png, title):
        figures.append(fig)
        return real(fig, out_png, title)

    monkeypatch.setattr(maps, "_save", keep)
    return figures


def test_every_study_map_shows_boundary_and_zones_at_one_extent(
    tmp_path, monkeypatch, roads, bases, surface, demand, depth_grid
):
    """Issue 10 item 16: with a study frame every map draws the boundary and the zones and has the same extent,
    whatever its own layers cover; the scale bar is true to that extent (same x-limits)."""
    boundary = gpd.GeoDataFrame(geometry=[shapely.box(X0 - 500, Y0 - 400, X0 + 3400, Y0 + 2900)], crs=CRS)
    zones = gpd.GeoDataFrame(
        {"district": ["West", "East"]},
        geometry=[shapely.box(X0 - 500, Y0 - 400, X0 + 1500, Y0 + 2900), shapely.box(X0 + 1500, Y0 - 400,
                                                                                    X0 + 3400, Y0 + 2900)],
        crs=CRS,
    )  # fmt: skip
    frame = maps.study_frame(CRS, boundary=boundary, zones=zones, zone_field="district", include=[bases])
    assert frame.bounds == pytest.approx(tuple(boundary.total_bounds))
    figures = _capture(monkeypatch)
    minutes, transform = surface
    grid, grid_transform = depth_grid
    small_gap = _big_square_gaps().assign(geometry=[shapely.box(X0, Y0, X0 + 300, Y0 + 300)])
    areas = gpd.GeoDataFrame({"base_id": ["B1"]}, geometry=[shapely.box(X0, Y0, X0 + 900, Y0 + 900)], crs=CRS)
    diff = demand[["geometry"]].iloc[:5].assign(delta=np.arange(5.0) - 2)
    maps.travel_surface_map(tmp_path / "s.png", minutes, transform, CRS, bases, roads, [2, 4], "T", STD, frame=frame)
    maps.coverage_depth_map(tmp_path / "d.png", grid, grid_transform, CRS, bases, roads, "D", STD, frame=frame)
    maps.gaps_map(tmp_path / "g.png", small_gap, bases, roads, "G", STD, frame=frame)
    maps.first_due_map(tmp_path / "f.png", areas, bases, roads, "F", STD, frame=frame)
    maps.difference_map(tmp_path / "x.png", diff, "delta", bases, bases, roads, "X", STD, "change", frame=frame)
    assert len(figures) == 5
    extents = set()
    boundary_xy = shapely.get_coordinates(boundary.boundary.iloc[0])
    for fig in figures:
        ax = fig.axes[0]
        extents.add((ax.get_xlim(), ax.get_ylim()))
        colours = [
            (matplotlib.colors.to_hex(c.get_colors()[0]), c) for c in ax.collections if isinstance(c, LineCollection)
        ]
        drawn = [c for hexc, c in colours if hexc == maps.BOUNDARY_COLOR]
        assert drawn, "boundary not drawn"
        assert np.allclose(np.vstack(drawn[0].get_segments()).min(axis=0), boundary_xy.min(axis=0))
        assert any(hexc == maps.ZONE_COLOR for hexc, _ in colours), "zones not drawn"
        labels = {t.get_text() for t in ax.texts}
        assert {"West", "East"} <= labels
        assert fig.axes[2].get_xlim() == ax.get_xlim()  # the scale-bar axis shares the map's x-limits
    assert len(extents) == 1


def test_difference_map_draws_closures_and_keeps_colour_bar_clear_of_legend(tmp_path, monkeypatch, roads, bases):
    """Issue 10 item 16: closed roads and the closure polygon are drawn and listed; the colour bar, its title and
    its end words do not overlap the legend (window extents from matplotlib's renderer)."""
    figures = _capture(monkeypatch)
    diff = gpd.GeoDataFrame(
        {"change": [-120.0, 40.0]},
        geometry=[shapely.box(X0, Y0, X0 + 900, Y0 + 900), shapely.box(X0 + 1500, Y0, X0 + 2500, Y0 + 900)],
        crs=CRS,
    )
    closed = roads.iloc[:3]
    flood = gpd.GeoDataFrame(geometry=[shapely.box(X0 + 800, Y0 + 800, X0 + 1600, Y0 + 1400)], crs=CRS)
    maps.difference_map(
        tmp_path / "x.png", diff, "change", bases, bases.iloc[:1], roads, "Change", STD,
        "people gaining (+) or losing (-) coverage in each area", increase_label="gains coverage",
        decrease_label="loses coverage", closed_roads=closed, closure_areas=flood,
    )  # fmt: skip
    fig = figures[-1]
    renderer = fig.canvas.get_renderer()
    legend = next(a.get_legend() for a in fig.axes if a.get_legend() is not None)
    labels = [t.get_text() for t in legend.get_texts()]
    assert "closed road" in labels and "closed area" in labels
    ax = fig.axes[0]
    closed_xy = np.vstack([np.asarray(g.coords) for g in closed.geometry])
    assert any(
        isinstance(c, LineCollection)
        and matplotlib.colors.to_hex(c.get_colors()[0]) == maps.CLOSED_ROAD_COLOR
        and np.allclose(np.vstack(c.get_segments()), closed_xy)
        for c in ax.collections
    )
    assert any(
        isinstance(c, PathCollection) and c.get_hatch() and np.allclose(c.get_paths()[0].vertices.min(axis=0),
                                                                        [X0 + 800, Y0 + 800])
        for c in ax.collections
    )  # fmt: skip
    cax = fig.axes[-1]
    legend_box = legend.get_window_extent(renderer)
    for artist in (cax, cax.title, *cax.texts):
        box = artist.get_window_extent(renderer)
        assert not box.overlaps(legend_box), artist
    words = [t.get_window_extent(renderer) for t in cax.texts]
    assert len(words) == 2 and not words[0].overlaps(words[1])


def test_siting_curve_ticks_whole_sites_and_names_them(tmp_path, monkeypatch):
    """Issue 10 item 16: new sites are whole numbers on the axis; each point carries the ids of its sites."""
    figures = _capture(monkeypatch)
    maps.line_chart(
        tmp_path / "c.png", [0, 1, 2, 3], {"covered %": [91.1, 93.6, 95.9, 97.5]}, "new sites", "covered (%)",
        "Coverage curve", whole_x=True, point_labels=["", "C05", "C03 C05", "C03 C04 C05"],
    )  # fmt: skip
    ax = figures[-1].axes[0]
    ticks = [t for t in ax.get_xticks() if ax.get_xlim()[0] <= t <= ax.get_xlim()[1]]
    assert ticks == [0, 1, 2, 3]
    assert {"C05", "C03 C05", "C03 C04 C05"} <= {t.get_text() for t in ax.texts}


def test_same_inputs_give_identical_png(tmp_path, roads, bases, surface):
    minutes, transform = surface
    a = maps.travel_surface_map(tmp_path / "a.png", minutes, transform, CRS, bases, roads, [2, 4, 6], "T", STD)
    b = maps.travel_surface_map(tmp_path / "b.png", minutes, transform, CRS, bases, roads, [2, 4, 6], "T", STD)
    assert a.read_bytes() == b.read_bytes()


def test_failed_map_write_leaves_existing_file(tmp_path, monkeypatch, depth_grid):
    """A write that fails half-way leaves the previous output byte-for-byte and no temporary file."""
    out = tmp_path / "d.png"
    out.write_bytes(b"previous output")

    def broken_savefig(self, fname, **kwargs):
        Path(fname).write_bytes(b"\x89PNG half")
        raise OSError("disk full")

    monkeypatch.setattr(Figure, "savefig", broken_savefig)
    with pytest.raises(OSError):
        maps.coverage_depth_map(out, *depth_grid, CRS, None, None, "Depth", STD)
    assert out.read_bytes() == b"previous output"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["d.png"]


def test_bad_inputs_raise_one_line_errors(tmp_path, demand, bases, surface, depth_grid):
    minutes, transform = surface
    grid, gt = depth_grid
    with pytest.raises(CoverkitError, match="not projected"):
        maps.coverage_depth_map(tmp_path / "a.png", grid, gt, "EPSG:4326", None, None, "T", STD)
    with pytest.raises(FieldError, match="depth"):
        maps.coverage_depth_map(
            tmp_path / "a.png", grid, gt, CRS, None, None, "T", STD, demand=demand[["weight", "geometry"]]
        )
    with pytest.raises(FieldError, match="whole numbers"):
        maps.coverage_depth_map(tmp_path / "a.png", grid, gt, CRS, None, None, "T", STD, demand=demand.assign(depth=-1))
    with pytest.raises(FieldError, match="whole numbers"):
        maps.coverage_depth_map(tmp_path / "a.png", grid + 0.5, gt, CRS, None, None, "T", STD)
    with pytest.raises(CoverkitError, match="strictly increasing"):
        maps.travel_surface_map(tmp_path / "a.png", minutes, transform, CRS, bases, None, [8, 4], "T", STD)
    with pytest.raises(CoverkitError, match="standard_text"):
        maps.travel_surface_map(tmp_path / "a.png", minutes, transform, CRS, bases, None, [4, 8], "T", " ")
    with pytest.raises(CoverkitError, match="rotated"):
        maps.travel_surface_map(
            tmp_path / "a.png", minutes, transform @ affine.Affine.rotation(10), CRS, bases, None, [4], "T", STD
        )
    with pytest.raises(CoverkitError, match="12 values for 4"):
        maps.line_chart(tmp_path / "c.png", [0, 1, 2, 3], {"s": np.zeros(12)}, "x", "y", "T")
    assert not list(tmp_path.iterdir())


# ----------------------------------------------------------------------------------------------------------------
# HTML report
# ----------------------------------------------------------------------------------------------------------------

_VOID = {"meta", "img", "br", "hr", "link", "input", "col", "area", "base", "source", "wbr"}


class _StrictParser(HTMLParser):
    """Python's html.parser, made to record mismatched or unclosed tags (it is lenient by itself)."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.problems: list[str] = []
        self.srcs: list[str] = []

    def handle_starttag(self, tag, attrs):
        for name, value in attrs:
            if name in ("src", "href"):
                self.srcs.append(value or "")
        if tag not in _VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.problems.append(f"unexpected </{tag}> with open {self.stack[-3:]}")
            return
        self.stack.pop()


def _sample_report(png: Path, generated_at: str | None = None) -> HtmlReport:
    rep = HtmlReport("County <review> & 2027", generated_at=generated_at)
    rep.add_key_figures({"residents covered": "91.2 %", "gaps": "4"})
    rep.add_heading("Summary")
    rep.add_paragraph("Coverage of <b>residents</b> & calls.")
    rep.add_list(["one < two", "three"])
    rep.add_table(
        pd.DataFrame({"base <id>": ["A<1>", "B&2"], "population": [1234.5, np.nan], "calls": [10, 2000]}),
        caption="Per base",
    )
    rep.add_image(png, "Travel time")
    rep.add_caution("Demand from the 2020 census.")
    rep.add_caution()  # the standard caution is already there: not repeated
    return rep


def test_html_self_contained_escaped_and_well_formed(rendered):
    png = rendered["surface"]
    text = _sample_report(png).to_html()
    parser = _StrictParser()
    parser.feed(text)
    parser.close()
    assert parser.problems == [] and parser.stack == []
    assert not re.search(r"""(src|href)\s*=\s*["']?\s*(https?:)?//""", text, re.I)
    assert parser.srcs and all(s.startswith("data:image/png;base64,") for s in parser.srcs)
    assert base64.b64decode(parser.srcs[0].split(",", 1)[1]) == png.read_bytes()
    assert "<script" not in text.lower() and "<link" not in text.lower()
    # Escaping: no user text becomes markup.
    assert "<b>" not in text and "A<1>" not in text and "&lt;b&gt;residents&lt;/b&gt;" in text
    assert "A&lt;1&gt;" in text and "B&amp;2" in text and "base &lt;id&gt;" in text
    assert "<title>County &lt;review&gt; &amp; 2027</title>" in text


def test_html_numbers_right_aligned_and_formatted(rendered):
    text = _sample_report(rendered["surface"]).to_html()
    assert '<td class="num">1,234.5</td>' in text and '<td class="num">2,000</td>' in text
    assert '<td class="num">–</td>' in text  # NaN shown as a dash
    assert "<td>A&lt;1&gt;</td>" in text  # text stays left-aligned
    assert '<th scope="col" class="num">population</th>' in text


def test_html_caution_near_top_and_at_end(rendered):
    text = _sample_report(rendered["surface"]).to_html()
    assert text.count(coverkit.CAUTION) == 2
    first, last = text.index(coverkit.CAUTION), text.rindex(coverkit.CAUTION)
    assert first < text.index("<main>") and last > text.index("</main>")
    assert text.count("Demand from the 2020 census.") == 2


def test_html_deterministic_and_dated_only_on_request(rendered):
    png = rendered["surface"]
    assert _sample_report(png).to_html() == _sample_report(png).to_html()
    plain = _sample_report(png).to_html()
    dated = _sample_report(png, generated_at="2027-03-01").to_html()
    assert "generated" not in plain and "generated 2027-03-01" in dated
    assert f"coverkit {coverkit.__version__}" in plain


def test_html_write_is_atomic(tmp_path, rendered):
    out = tmp_path / "report.html"
    _sample_report(rendered["surface"]).write(out)
    assert out.read_text(encoding="utf-8") == _sample_report(rendered["surface"]).to_html()
    before = out.read_bytes()
    broken = HtmlReport("x")
    broken.add_paragraph("lone surrogate \ud800 cannot be encoded")  # UTF-8 encoding fails during the write
    with pytest.raises(UnicodeEncodeError):
        broken.write(out)
    assert out.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report.html"]


def test_html_bad_input(tmp_path):
    rep = HtmlReport("x")
    with pytest.raises(InputFileError, match="cannot read"):
        rep.add_image(tmp_path / "missing.png", "m")
    (tmp_path / "fake.png").write_text("not a png")
    with pytest.raises(InputFileError, match="not a PNG"):
        rep.add_image(tmp_path / "fake.png", "m")
    with pytest.raises(CoverkitError, match="heading level"):
        rep.add_heading("h", level=1)
    with pytest.raises(CoverkitError, match="title"):
        HtmlReport("  ")
