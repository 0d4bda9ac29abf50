"""Probes of reduced states: the registry of bulk probes (``registry``) and the kernels (``kernels``):
entropies, CMI, topological combinations and the modular commutator.
"""

from netprobe.probes import kernels as _kernels
from netprobe.probes import registry as _registry
from netprobe.probes.kernels import *  # noqa: F401,F403 (re-exported: its __all__)
from netprobe.probes.registry import *  # noqa: F401,F403 (re-exported: its __all__)

__all__ = [*_registry.__all__, *_kernels.__all__]
