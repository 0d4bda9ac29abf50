"""Region layouts in real-space coordinates, their syntax, and ladders of growing regions."""

from netprobe.regions.layout import (  # noqa: F401 (re-exported)
    Layout, RegionLimits, LAYOUTS, SYNTAX, CENTER_OFFSET, build_layout,
    parse_region, default_center, disk, sectors, annulus, levin_wen,
    shielded, strips, half,
)
from netprobe.regions.layout import (  # noqa: F401 (re-exported)
    _displacements, _face_centres, _is_generic, _nn_length,
)

__all__ = [
    "Layout",
    "RegionLimits",
    "LAYOUTS",
    "SYNTAX",
    "CENTER_OFFSET",
    "build_layout",
    "parse_region",
    "default_center",
    "disk",
    "sectors",
    "annulus",
    "levin_wen",
    "shielded",
    "strips",
    "half",
]
