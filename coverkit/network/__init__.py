"""Road networks: reading road data, speed profiles, and the :class:`RoadNetwork`."""

from coverkit.network.build import BuildReport, build_network, read_roads
from coverkit.network.model import RoadNetwork, grid_network, network_from_arrays
from coverkit.network.profile import Profile, load_profile, parse_maxspeed_kph, shipped_profiles

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
