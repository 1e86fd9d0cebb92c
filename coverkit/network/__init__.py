"""Road networks: reading road data, speed profiles, and the :class:`RoadNetwork`.

Names are imported on first use (PEP 562): a command that only loads a saved network does not import the readers
and the build (pyproj's geodesics, osmium, the centerline tools).
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

_LAZY = {
    "BuildReport": "coverkit.network.build",
    "build_network": "coverkit.network.build",
    "read_roads": "coverkit.network.build",
    "RoadNetwork": "coverkit.network.model",
    "grid_network": "coverkit.network.model",
    "network_from_arrays": "coverkit.network.model",
    "Profile": "coverkit.network.profile",
    "load_profile": "coverkit.network.profile",
    "parse_maxspeed_kph": "coverkit.network.profile",
    "shipped_profiles": "coverkit.network.profile",
}

if TYPE_CHECKING:
    from coverkit.network.build import BuildReport, build_network, read_roads
    from coverkit.network.model import RoadNetwork, grid_network, network_from_arrays
    from coverkit.network.profile import Profile, load_profile, parse_maxspeed_kph, shipped_profiles


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        value = getattr(importlib.import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'coverkit.network' has no attribute {name!r}")


__all__ = [
    "BuildReport",
    "Profile",
    "RoadNetwork",
    "build_network",
    "grid_network",
    "load_profile",
    "network_from_arrays",
    "parse_maxspeed_kph",
    "read_roads",
    "shipped_profiles",
]
