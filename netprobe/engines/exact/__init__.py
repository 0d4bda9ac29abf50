"""Exact diagonalisation in a charge sector: sector bases (``basis``) and their compiled kernels (``kernels``, loaded
on first use), operators, ground states and measurements (``solve``).
"""

from netprobe.engines.exact import basis as _basis
from netprobe.engines.exact import solve as _solve
from netprobe.engines.exact.basis import *  # noqa: F401,F403 (re-exported: its __all__)
from netprobe.engines.exact.solve import *  # noqa: F401,F403 (re-exported: its __all__)

__all__ = [*_basis.__all__, *_solve.__all__]
