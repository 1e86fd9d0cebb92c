"""The reader-neutral form of road data, before profiles and directions are applied.

Every reader (OSM XML, OSM PBF, centerline layers) returns :class:`RawRoads`; :mod:`coverkit.network.build` turns
it into a :class:`~coverkit.network.model.RoadNetwork`. Segments are undirected pieces of road between two graph
nodes (junctions or ends), with the tags that decide drivability, direction and speed.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from pyproj import CRS

#: Columns of :attr:`RawRoads.segments` (plus ``geometry``, a numpy array of shapely LineStrings).
SEGMENT_COLUMNS = {
    "u_key": "int64",  # node key of the first vertex
    "v_key": "int64",  # node key of the last vertex
    "source_id": "int64",  # OSM way id, or the centerline feature's row/id
    "highway": "object",  # road class (OSM highway value, or a centerline class mapped to one)
    "maxspeed": "object",  # raw OSM maxspeed text, None when absent
    "speed_kph": "float64",  # numeric speed already in km/h (centerlines), NaN when absent
    "oneway": "object",  # "yes" (forward), "-1" (backward), "no"/None (two-way), raw OSM values allowed
    "junction": "object",  # OSM junction tag (roundabout implies one-way)
    "access": "object",  # OSM access / motor_vehicle tag value (the more specific one)
    "bridge": "bool",
    "tunnel": "bool",
    "name": "object",
}


@dataclass
class RawRoads:
    """Road data as read, before filtering and projection.

    Attributes
    ----------
    segments
        DataFrame with :data:`SEGMENT_COLUMNS`, one row per undirected segment between graph nodes.
    geometry
        Shapely LineStrings (in ``crs``), one per segment row, drawn from ``u_key`` to ``v_key``.
    nodes
        DataFrame with ``key`` (int64, unique), ``x``, ``y`` (in ``crs``) and ``signal`` (bool): every segment
        end node.
    crs
        CRS of the coordinates (EPSG:4326 for OSM).
    source
        Path of the file read.
    stats
        Counts from reading, e.g. ``ways_read``, ``ways_unusable`` (too few located nodes), ``near_miss_endpoints``.
    restrictions
        OSM turn restrictions as read (:data:`coverkit.network.osm_restrictions.READ_COLUMNS`), None for data
        without them. Optional segment columns ``maxspeed_forward`` and ``maxspeed_backward`` carry directional
        speed tags (along and against the drawn direction).
    """

    segments: pd.DataFrame
    geometry: np.ndarray
    nodes: pd.DataFrame
    crs: CRS
    source: str
    stats: dict = field(default_factory=dict)
    restrictions: pd.DataFrame | None = None

    def __post_init__(self) -> None:
        if len(self.segments) != len(self.geometry):
            raise ValueError("segments and geometry differ in length")
