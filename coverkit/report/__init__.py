"""Static maps (PNG) and the self-contained HTML report.

This package draws what it is given; every number it shows comes from the modules that compute it.
"""

from coverkit.report.html import HtmlReport
from coverkit.report.maps import (
    coverage_depth_map,
    difference_map,
    first_due_map,
    gaps_map,
    line_chart,
    nice_scale_length_m,
    travel_surface_map,
)

__all__ = [
    "HtmlReport",
    "coverage_depth_map",
    "difference_map",
    "first_due_map",
    "gaps_map",
    "line_chart",
    "nice_scale_length_m",
    "travel_surface_map",
]
