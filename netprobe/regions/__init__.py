"""Region layouts in real-space coordinates (``layout``), their shapes and syntax (``shapes``), and ladders of
growing regions (``ladders``).
"""

from netprobe.regions import layout as _layout
from netprobe.regions import shapes as _shapes
from netprobe.regions.layout import *  # noqa: F401,F403 (re-exported: its __all__)
from netprobe.regions.shapes import *  # noqa: F401,F403 (re-exported: its __all__)

__all__ = [*_layout.__all__, *_shapes.__all__]
