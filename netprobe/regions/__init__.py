"""Region layouts in real-space coordinates (``layout``), their shapes and syntax (``shapes``), and ladders of
growing regions (``ladders``).
"""

from netprobe.regions.layout import (  # noqa: F401 (re-exported)
    Layout, RegionLimits, CENTER_OFFSET, default_center,
)
from netprobe.regions.shapes import (  # noqa: F401 (re-exported)
    LAYOUTS, SYNTAX, build_layout, parse_region, disk, sectors,
    annulus, levin_wen, shielded, strips, half,
)

__all__ = [
    "Layout",
    "RegionLimits",
    "CENTER_OFFSET",
    "default_center",
    "LAYOUTS",
    "SYNTAX",
    "build_layout",
    "parse_region",
    "disk",
    "sectors",
    "annulus",
    "levin_wen",
    "shielded",
    "strips",
    "half",
]
