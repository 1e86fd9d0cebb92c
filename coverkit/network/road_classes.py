"""The road classes coverkit knows, one entry each: adding a class is one :class:`RoadClass` in :data:`ROAD_CLASSES`.

Speeds are not held here: a class's default speed, factor and cap live in the speed profiles
(``coverkit/network/profiles/*.toml``), and a class a profile does not list is not drivable under that profile.
What is held here is how the rest of coverkit treats a class: its place in the hierarchy (candidate generation,
"this class or better"), whether population may be served from it, whether OSM implies it is one-way, whether a
station may be sited on it, its line width on maps, and the centerline class values that mean it.

The names are OpenStreetMap ``highway`` values (OSM wiki, Key:highway, from memory).
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class RoadClass:
    """How coverkit treats one road class.

    Attributes
    ----------
    name
        The OSM-style class name (the ``road_class`` of network edges, the ``[speeds.<name>]`` table of profiles).
    rank
        Place in the road hierarchy, 0 = highest; ``None`` for link roads, which are not a level of their own
        ("a class or better" in candidate generation counts ranked classes only).
    demand_snap
        Population (raster cells, polygons) may snap to it. False for roads with no access from the land beside
        them (motorway carriageways and their links, trunk links): residents are not served from a carriageway.
        Incidents and bases snap to every class.
    implied_oneway
        One-way in the drawn direction unless tagged otherwise (OSM wiki, Key:oneway: implied on motorways).
    station_site
        A generated candidate station may stand at a node of it (not on a motorway carriageway or its ramps).
    map_width_pt
        Line width on maps (points); ``None`` draws the thinnest line (:data:`coverkit.report.maps.ROAD_MIN_WIDTH_PT`).
    centerline_values
        Class values of county centerline layers that mean this class, lower case (common practice, no single
        source; functional classes after the US FHWA Highway Functional Classification concepts, from memory).
    """

    name: str
    rank: int | None = None
    demand_snap: bool = True
    implied_oneway: bool = False
    station_site: bool = True
    map_width_pt: float | None = None
    centerline_values: tuple[str, ...] = ()


#: Every known class, highest first. Map widths are our own choice (common cartographic practice, no source).
ROAD_CLASSES: tuple[RoadClass, ...] = (
    RoadClass(
        "motorway",
        rank=0,
        demand_snap=False,
        implied_oneway=True,
        station_site=False,
        map_width_pt=1.2,
        centerline_values=("interstate", "freeway"),
    ),
    RoadClass("motorway_link", demand_snap=False, station_site=False, map_width_pt=0.6, centerline_values=("ramp",)),
    RoadClass("trunk", rank=1, map_width_pt=1.1, centerline_values=("expressway", "highway")),
    RoadClass("trunk_link", demand_snap=False, map_width_pt=0.6),
    RoadClass(
        "primary", rank=2, map_width_pt=0.9, centerline_values=("principal arterial", "major arterial", "arterial")
    ),
    RoadClass("primary_link", map_width_pt=0.5),
    RoadClass("secondary", rank=3, map_width_pt=0.75, centerline_values=("minor arterial",)),
    RoadClass("secondary_link"),
    RoadClass("tertiary", rank=4, map_width_pt=0.6, centerline_values=("major collector", "collector")),
    RoadClass("tertiary_link"),
    RoadClass("unclassified", rank=5, centerline_values=("minor collector",)),
    RoadClass("residential", rank=6, centerline_values=("local", "local road", "street")),
    RoadClass("living_street", rank=7),
    RoadClass("service", rank=8, centerline_values=("alley", "driveway", "private")),
)

BY_NAME: dict[str, RoadClass] = {c.name: c for c in ROAD_CLASSES}

#: Ranked classes from the highest; "a class or better" means this class or any before it.
CLASS_ORDER: tuple[str, ...] = tuple(
    c.name for c in sorted((c for c in ROAD_CLASSES if c.rank is not None), key=lambda c: c.rank)
)

#: Classes population is never snapped onto (no access from the land beside them).
NO_ACCESS_CLASSES: tuple[str, ...] = tuple(c.name for c in ROAD_CLASSES if not c.demand_snap)

#: Classes one-way in the drawn direction unless tagged otherwise.
IMPLIED_ONEWAY_CLASSES: frozenset[str] = frozenset(c.name for c in ROAD_CLASSES if c.implied_oneway)

#: Classes a generated candidate station may not stand on.
NO_STATION_CLASSES: frozenset[str] = frozenset(c.name for c in ROAD_CLASSES if not c.station_site)

#: Map line width (points) of the classes drawn wider than the thinnest line.
MAP_WIDTH_PT: dict[str, float] = {c.name: c.map_width_pt for c in ROAD_CLASSES if c.map_width_pt is not None}

#: Centerline class values mapped to a class (lower case value -> class name).
CENTERLINE_ALIASES: dict[str, str] = {v: c.name for c in ROAD_CLASSES for v in c.centerline_values}
