"""Travel times: snapping points to roads and bounded multi-source shortest paths."""

from coverkit.network.road_classes import NO_ACCESS_CLASSES
from coverkit.travel.points import read_points
from coverkit.travel.search import (
    count_within,
    nearest_node_times,
    nearest_sources,
    node_times,
    point_times,
)
from coverkit.travel.snap import DEFAULT_MAX_SNAP_M, Snapped, island_mask, snap_points

__all__ = [
    "DEFAULT_MAX_SNAP_M",
    "NO_ACCESS_CLASSES",
    "Snapped",
    "count_within",
    "island_mask",
    "nearest_node_times",
    "nearest_sources",
    "node_times",
    "point_times",
    "read_points",
    "snap_points",
]
