"""The free-fermion engine: quadratic forms, momentum blocks and Gaussian ground states."""

from netprobe.engines.gaussian import states as _states
from netprobe.engines.gaussian.states import *  # noqa: F401,F403 (re-exported: its __all__)
from netprobe.engines.gaussian.quadratic import GaussianStateError  # noqa: F401 (re-exported)

__all__ = [*_states.__all__, "GaussianStateError"]
