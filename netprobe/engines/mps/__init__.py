"""Matrix product states on block tensors: the state and its canonical forms (``state``), measurements
(``measure``); the MPO (``mpo``), its compression and state files (``store``) live beside.
"""

from netprobe.engines.mps import state as _state
from netprobe.engines.mps import measure as _measure
from netprobe.engines.mps.state import *  # noqa: F401,F403 (re-exported: its __all__)
from netprobe.engines.mps.measure import *  # noqa: F401,F403 (re-exported: its __all__)

__all__ = [*_state.__all__, *_measure.__all__]
