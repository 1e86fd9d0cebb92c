"""Presets from the published NFPA standards, and the NFPA 1720 demand zones by population density.

Every figure here is quoted **from memory; check the edition you are bound by** (NFPA 1710, *Standard for the
Organization and Deployment of Fire Suppression Operations, Emergency Medical Operations, and Special Operations to
the Public by Career Fire Departments*, 2016 edition as remembered; NFPA 1720, the same for volunteer fire
departments, 2014/2020 editions as remembered). Local standards, medical direction and licensed professionals
decide; these are planning estimates, not for live dispatch.

NFPA 1720 states its objectives per demand zone, by population density, as a number of staff on scene within a
response time that runs from the dispatch notice to arrival (turnout included), for a share of incidents. Here each
demand point takes the zone of the population density around it (people per square mile over a square window of the
population raster), and each zone is judged against its own row. The remote zone (travel distance of 8 miles or
more from the nearest station, whatever the density) is classified by road distance (one multi-source search on the
edges' lengths, :func:`coverkit.travel.distance.nearest_distance_m`); its row (4 staff, 90 %) sets no time, so its
table row gives the time by which 4 staff are on scene for 90 % of its demand and no pass or fail.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd

from coverkit.coverage import Standard, grid_polygons
from coverkit.errors import PARAM, CoverkitError, InputFileError

#: The preset names a study's ``[[standard]]`` may give (``preset = "nfpa1710"``).
PRESETS = ("nfpa1710", "nfpa1720")
#: Said beside every preset.
FROM_MEMORY = "from memory; check the edition you are bound by"
#: One square mile in square metres (1 mile = 1609.344 m exactly, international mile).
SQ_MILE_M2 = 1609.344**2
#: Side of the square window the density is taken over (m): one mile, so a window is one square mile.
DENSITY_WINDOW_M = 1609.344
#: Turnout assumed inside an NFPA 1720 response time when none is given (s): NFPA 1710's fire turnout (80 s),
#: from memory; 1720 itself folds turnout into its response time.
NFPA1720_TURNOUT_S = 80.0


@dataclass(frozen=True)
class DensityZone:
    """One NFPA 1720 demand zone row: density range (people per sq mi, ``low <= d < high``), staff, response (s),
    fractile."""

    name: str
    low_per_sqmi: float
    high_per_sqmi: float
    staff: int
    response_s: float
    fractile: float


#: NFPA 1720 demand zones (from memory; check the edition you are bound by): urban > 1,000 people per sq mi, 15
#: staff in 9 min, 90 %; suburban 500-1,000, 10 staff in 10 min, 80 %; rural < 500, 6 staff in 14 min, 80 %.
NFPA1720_ZONES = (
    DensityZone("urban", 1000.0, np.inf, 15, 540.0, 0.9),
    DensityZone("suburban", 500.0, 1000.0, 10, 600.0, 0.8),
    DensityZone("rural", 0.0, 500.0, 6, 840.0, 0.8),
)


#: NFPA 1720 remote zone (from memory; check the edition you are bound by): travel distance to the nearest station of
#: 8 miles (1 mile = 1609.344 m) or more, 4 staff on scene, 90 %; its time depends on the distance (none given).
REMOTE_DISTANCE_M = 8 * 1609.344
NFPA1720_REMOTE = DensityZone("remote", np.nan, np.nan, 4, np.nan, 0.9)
#: Every NFPA 1720 zone row: the density rows, densest first, then the remote zone (its index in zone layers).
ZONE_ROWS = (*NFPA1720_ZONES, NFPA1720_REMOTE)


def remote_mask(net: object, stations: object, points: object) -> np.ndarray:
    """Per point (GeoSeries, any CRS) whether it lies in the NFPA 1720 remote zone: a road distance from the
    nearest of ``stations`` (GeoDataFrame) of :data:`REMOTE_DISTANCE_M` or more. A point beyond the snap limit of
    every road is left to its density zone (its distance is not known). Points snap as population does, never onto
    a carriageway without access (:data:`coverkit.travel.NO_ACCESS_CLASSES`: a cell beside a motorway is reached
    from its own streets, not from the nearest interchange).

    >>> from coverkit.network.model import grid_network
    >>> import shapely
    >>> net = grid_network(30, 1, 1000.0, 50.0)  # a 29 km straight road, nodes 1 km apart
    >>> st = gpd.GeoDataFrame(geometry=shapely.points([[500000.0, 5e6]]), crs=net.crs)
    >>> pts = gpd.GeoSeries(shapely.points([[512000.0, 5e6], [513000.0, 5e6]]), crs=net.crs)
    >>> remote_mask(net, st, pts).tolist()  # 12 km < 12.87 km <= 13 km
    [False, True]
    """
    from coverkit.travel import NO_ACCESS_CLASSES, snap_points
    from coverkit.travel.distance import nearest_distance_m

    pts = gpd.GeoSeries(points).to_crs(net.crs)
    frame = gpd.GeoDataFrame({"id": np.arange(len(pts))}, geometry=pts.to_numpy(), crs=net.crs)
    st = gpd.GeoDataFrame({"id": np.arange(len(stations))}, geometry=stations.geometry.to_numpy(), crs=stations.crs)
    s_snap = snap_points(net, st.to_crs(net.crs), off_network="raise", what="bases")
    p_snap = snap_points(
        net, frame, off_network="mask", what="zone cells", warn_islands=False, exclude_classes=NO_ACCESS_CLASSES
    )
    dist = nearest_distance_m(net, s_snap, p_snap, REMOTE_DISTANCE_M)
    return p_snap.on_network & ~(dist < REMOTE_DISTANCE_M)


def nfpa1710_standards(
    *, engine: str = "engine", als: str = "medic-als", fire_turnout_s: float = 80.0, ems_turnout_s: float = 60.0
) -> list[Standard]:
    """The NFPA 1710 objectives as standards (from memory; check the edition you are bound by): first engine
    company 240 s travel, second company 360 s, initial full alarm assignment (low hazard, 15 members) 480 s, ALS
    unit 480 s; fire turnout 80 s, EMS 60 s; 90 % of incidents. ``engine`` and ``als`` are the department's labels.

    >>> [s.name for s in nfpa1710_standards()]
    ['NFPA 1710 first engine', 'NFPA 1710 second engine', 'NFPA 1710 full alarm', 'NFPA 1710 ALS']
    """
    src = f"NFPA 1710 ({FROM_MEMORY})"
    return [
        Standard("NFPA 1710 first engine", 240.0, fire_turnout_s, 0.9, src, unit_type=engine),
        Standard(
            "NFPA 1710 second engine",
            360.0,
            fire_turnout_s,
            0.9,
            f"{src}; second company taken as the second engine",
            unit_type=engine,
            nth=2,
        ),
        Standard("NFPA 1710 full alarm", 480.0, fire_turnout_s, 0.9, f"{src}; low hazard, 15 members", personnel=15),
        Standard("NFPA 1710 ALS", 480.0, ems_turnout_s, 0.9, src, unit_type=als),
    ]


def nfpa1720_standards(turnout_s: float = NFPA1720_TURNOUT_S) -> list[Standard]:
    """One force standard per NFPA 1720 zone row; its travel time is the row's response time less ``turnout_s``.

    >>> [(s.name, s.travel_s, s.personnel) for s in nfpa1720_standards(60)][:1]
    [('NFPA 1720 urban', 480.0, 15)]
    """
    out = []
    for z in NFPA1720_ZONES:
        if not turnout_s < z.response_s:
            raise CoverkitError(
                f"{PARAM} {turnout_s:g} s leaves no travel time in {z.response_s:g} s.", param="turnout_s"
            )
        src = f"NFPA 1720 {z.name}: {z.staff} staff in {z.response_s / 60:g} min, {z.fractile:.0%} ({FROM_MEMORY})"
        travel_s = z.response_s - turnout_s
        out.append(Standard(zone_standard_name(z), travel_s, turnout_s, z.fractile, src, personnel=z.staff))
    return out


def remote_standard(rural: Standard) -> Standard:
    """The force standard behind the remote zone's row: 4 staff (from memory), 90 %, with the rural row's turnout
    and travel time (the row sets no time; only its fractile response is reported, from the arrivals up to the
    search horizon)."""
    z = NFPA1720_REMOTE
    src = f"NFPA 1720 remote: {z.staff} staff, {z.fractile:.0%}, travel distance >= 8 miles ({FROM_MEMORY})"
    return Standard(zone_standard_name(z), rural.travel_s, rural.turnout_s, z.fractile, src, personnel=z.staff)


def zone_standard_name(zone: DensityZone) -> str:
    """The name of a zone's standard (``"NFPA 1720 urban"``)."""
    return f"NFPA 1720 {zone.name}"


def density_per_sqmi(values: np.ndarray, cell_m: float, window_m: float = DENSITY_WINDOW_M) -> np.ndarray:
    """People per square mile around every cell: the population in the square window of about ``window_m`` centred
    on the cell (an odd number of cells; cells beyond the raster count as empty) over the window's area.

    >>> v = np.zeros((5, 5)); v[2, 2] = 900.0
    >>> d = density_per_sqmi(v, 100.0, 300.0)  # 3 x 3 cells of 100 m: 900 people over 0.09 km2
    >>> round(float(d[2, 2])), round(float(d[0, 0]))
    (25900, 0)
    """
    from scipy.ndimage import uniform_filter

    size = max(1, round(window_m / cell_m) // 2 * 2 + 1)
    mean = uniform_filter(np.nan_to_num(values, nan=0.0), size=size, mode="constant", cval=0.0)
    return mean / (cell_m * cell_m) * SQ_MILE_M2


def classify_density(density: np.ndarray) -> np.ndarray:
    """Per value the index of its :data:`NFPA1720_ZONES` row (int)."""
    out = np.full(density.shape, len(NFPA1720_ZONES) - 1, dtype=np.int32)
    for i, z in reversed(list(enumerate(NFPA1720_ZONES))):
        out[(density >= z.low_per_sqmi) & (density < z.high_per_sqmi)] = i
    return out


def density_zones(
    path: str | Path, crs: object, window_m: float = DENSITY_WINDOW_M, *, remote: object | None = None
) -> gpd.GeoDataFrame:
    """The NFPA 1720 zones of a population raster as polygons (``zone``, ``people``, ``area_km2``) in ``crs``; every
    cell lies in one zone, so the zones' people add up to the raster's total. ``remote`` (a function of a GeoSeries
    of points giving a bool per point, e.g. :func:`remote_mask` bound to a network and stations) moves the cells
    whose centre it marks into the remote zone.

    Raises
    ------
    InputFileError
        The raster is missing, unreadable, without CRS or not in metres.
    """
    import rasterio

    path = Path(path)
    try:
        with rasterio.open(path) as src:
            if src.crs is None or not src.crs.is_projected:
                raise InputFileError(f"{path}: the density zones need a raster in a projected CRS (metres).")
            data = src.read(1, masked=True).astype("float64").filled(np.nan)
            transform, raster_crs = src.transform, src.crs.to_wkt()
    except rasterio.errors.RasterioIOError as exc:
        raise InputFileError(f"{path}: not a readable raster ({str(exc)[:80]}).") from None
    people = np.where(np.isfinite(data) & (data > 0), data, 0.0)
    cell_m = abs(transform.a)
    zone = classify_density(density_per_sqmi(people, cell_m, window_m))
    if remote is not None:
        rows, cols = (a.ravel() + 0.5 for a in np.indices(zone.shape))
        x = transform.c + transform.a * cols + transform.b * rows
        y = transform.f + transform.d * cols + transform.e * rows
        centres = gpd.GeoSeries(gpd.points_from_xy(x, y), crs=raster_crs)
        zone.ravel()[np.asarray(remote(centres), dtype=bool)] = len(NFPA1720_ZONES)
    polys = grid_polygons(zone, transform, raster_crs, valid=np.ones(zone.shape, dtype=bool))
    polys = polys.dissolve("value", as_index=False).sort_values("value")
    sums = np.bincount(zone.ravel(), weights=people.ravel(), minlength=len(ZONE_ROWS))
    value = polys["value"].to_numpy(dtype=int)
    out = gpd.GeoDataFrame(
        {"zone": [ZONE_ROWS[v].name for v in value], "people": sums[value]},
        geometry=polys.geometry.to_numpy(),
        crs=raster_crs,
    ).to_crs(crs)
    out["area_km2"] = out.area / 1e6
    return out.reset_index(drop=True)


def density_zones_from_blocks(
    path: str | Path, population_field: str, crs: object, *, layer: str | None = None, remote: object | None = None
) -> gpd.GeoDataFrame:
    """The NFPA 1720 zones of census-like blocks: each block's density is its population over its own area (people
    per sq mi; the block is the window), blocks of one zone dissolved (``zone``, ``people``, ``area_km2``), in
    ``crs`` (projected, metres). The zones' people add up to the blocks' total. ``remote`` (as in
    :func:`density_zones`) moves the blocks whose representative point it marks into the remote zone.

    Raises
    ------
    InputFileError
        The layer is unreadable or has no CRS.
    FieldError
        The population field is missing or not numeric.
    """
    import pyogrio

    from coverkit.errors import FieldError

    try:
        blocks = pyogrio.read_dataframe(path, layer=layer)
    except Exception as exc:
        raise InputFileError(f"{path}: not a readable polygon layer ({str(exc)[:60]}).") from None
    if blocks.crs is None:
        raise InputFileError(f"{path}: the layer has no CRS; assign one and retry.")
    if population_field not in blocks.columns:
        raise FieldError(f"{path}: no population field '{population_field}' for the density zones.")
    people = pd.to_numeric(blocks[population_field], errors="coerce")
    if people.isna().any() or (people < 0).any():
        raise FieldError(f"{path}: field '{population_field}' holds values that are not people counts >= 0.")
    blocks = blocks.to_crs(crs).assign(_people=people.to_numpy(dtype=float))
    area_m2 = blocks.area.to_numpy()
    density = np.divide(
        blocks["_people"].to_numpy() * SQ_MILE_M2, area_m2, out=np.zeros(len(blocks)), where=area_m2 > 0
    )
    blocks["_zone"] = classify_density(density)
    if remote is not None:
        far = np.asarray(remote(blocks.geometry.representative_point()), dtype=bool)
        blocks.loc[far, "_zone"] = len(NFPA1720_ZONES)
    out = blocks[["_zone", "_people", "geometry"]].dissolve("_zone", aggfunc="sum", as_index=False)
    out = out.sort_values("_zone")
    zones = gpd.GeoDataFrame(
        {"zone": [ZONE_ROWS[v].name for v in out["_zone"]], "people": out["_people"].to_numpy()},
        geometry=out.geometry.to_numpy(),
        crs=blocks.crs,
    )
    zones["area_km2"] = zones.area / 1e6
    return zones.reset_index(drop=True)


def zone_table(results: dict[str, object], zones: gpd.GeoDataFrame) -> pd.DataFrame:
    """Each NFPA 1720 zone judged against its own row: ``results`` maps each zone's standard name
    (:func:`zone_standard_name`) to its :class:`coverkit.coverage.CoverageResult` on one demand layer; the points
    inside a zone's polygons count for that zone only. The remote row (when ``results`` holds
    :func:`remote_standard`'s) reports its demand and the fractile time of 4 staff, with no covered share and no
    pass or fail (NFPA 1720 sets it no time)."""
    from coverkit.coverage import compliance_by_zone

    rows = []
    for z in ZONE_ROWS:
        if z is NFPA1720_REMOTE and zone_standard_name(z) not in results:
            continue  # the remote row without its force result: nothing to report on
        res = results[zone_standard_name(z)]
        table = compliance_by_zone(res, zones, "zone")
        mine = table[table["zone"] == z.name]
        row = mine.iloc[0].to_dict() if len(mine) else {"points": 0, "demand": 0.0, "covered": 0.0}
        if z is NFPA1720_REMOTE:  # no time objective: the time 4 staff take, no covered share, no pass or fail
            row = {**row, "covered": np.nan, "covered_share": np.nan, "meets_standard": None}
        rows.append(
            {
                "zone": z.name,
                "staff": z.staff,
                "response_s": z.response_s,
                "fractile": z.fractile,
                "points": int(row.get("points", 0)),
                "demand": float(row.get("demand", 0.0)),
                "covered": float(row.get("covered", 0.0)),
                "covered_share": float(row.get("covered_share", np.nan)),
                "fractile_response_s": float(row.get("fractile_response_s", np.nan)),
                "meets_standard": None if z is NFPA1720_REMOTE else bool(row.get("meets_standard", False)),
            }
        )
    return pd.DataFrame(rows)


__all__ = [
    "NFPA1720_REMOTE",
    "NFPA1720_ZONES",
    "REMOTE_DISTANCE_M",
    "ZONE_ROWS",
    "DensityZone",
    "classify_density",
    "density_per_sqmi",
    "density_zones",
    "nfpa1710_standards",
    "nfpa1720_standards",
    "remote_mask",
    "remote_standard",
    "zone_table",
]
