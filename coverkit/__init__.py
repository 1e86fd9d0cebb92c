"""coverkit: drive-time polygons, coverage, siting and availability for fire and EMS planning.

Results are planning estimates, not for live dispatch or routing. Validate them against local response data;
local standards, medical direction and licensed professionals decide.
"""

from coverkit.errors import CoverkitError

__version__ = "0.1.0"

CAUTION = (
    "Planning estimates only - not for live dispatch or routing. Validate against local response data; "
    "local standards, medical direction and licensed professionals decide."
)

__all__ = ["CAUTION", "CoverkitError", "__version__"]
