"""Probes of reduced states: the registry of bulk probes (``registry``) and the kernels (``kernels``):
entropies, CMI, topological combinations and the modular commutator.
"""

from netprobe.probes.registry import (  # noqa: F401 (re-exported)
    STATE_KINDS, ProbeInfo, PROBES, probes_of_kind,
)
from netprobe.probes.kernels import (  # noqa: F401 (re-exported)
    MANY_BODY_PROBES, DEFAULT_EPS, ModularCommutator, ProbeReport, entropy_from_weights, renyi_from_weights,
    von_neumann_entropy, renyi_entropy, root_weights, mutual_information, conditional_mutual_information, kitaev_preskill_combination,
    levin_wen_gamma, c_minus_from_j, partial_trace, modular_hamiltonian, modular_commutator, modular_commutator_root,
    measure_probes, probe_state,
)

__all__ = [
    "STATE_KINDS",
    "ProbeInfo",
    "PROBES",
    "probes_of_kind",
    "MANY_BODY_PROBES",
    "DEFAULT_EPS",
    "ModularCommutator",
    "ProbeReport",
    "entropy_from_weights",
    "renyi_from_weights",
    "von_neumann_entropy",
    "renyi_entropy",
    "root_weights",
    "mutual_information",
    "conditional_mutual_information",
    "kitaev_preskill_combination",
    "levin_wen_gamma",
    "c_minus_from_j",
    "partial_trace",
    "modular_hamiltonian",
    "modular_commutator",
    "modular_commutator_root",
    "measure_probes",
    "probe_state",
]
