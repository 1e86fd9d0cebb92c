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
        Shapely LineStrings (in ``crs``), one per segment row, drawn from ``u_key`` to ``v_key``; or None when the
        reader gives ``lines`` instead.
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
    lines
        The same lines as flat vertex coordinates (V, 2) and offsets (S + 1,) (shapely's ragged layout), when the
        reader has them: the build works on these and never needs a line object per segment.
    """

    segments: pd.DataFrame
    geometry: np.ndarray | None
    nodes: pd.DataFrame
    crs: CRS
    source: str
    stats: dict = field(default_factory=dict)
    restrictions: pd.DataFrame | None = None
    lines: tuple[np.ndarray, np.ndarray] | None = None

    def __post_init__(self) -> None:
        if self.geometry is None and self.lines is None:
            raise ValueError("give the geometry or the lines")
        n_lines = len(self.geometry) if self.geometry is not None else len(self.lines[1]) - 1
        if len(self.segments) != n_lines:
            raise ValueError("segments and geometry differ in length")

    def line_arrays(self) -> tuple[np.ndarray, np.ndarray]:
        """The lines as flat 2-D vertex coordinates and int64 offsets."""
        if self.lines is not None:
            return self.lines
        import shapely

        _, coords, (offsets,) = shapely.to_ragged_array(np.asarray(self.geometry, dtype=object), include_z=False)
        return coords, np.asarray(offsets, dtype=np.int64)

    def line_objects(self) -> np.ndarray:
        """The lines as shapely LineStrings."""
        if self.geometry is not None:
            return self.geometry
        import shapely

        coords, offsets = self.lines
        return shapely.from_ragged_array(shapely.GeometryType.LINESTRING, coords, (offsets,))
