"""Exact diagonalisation in a charge sector: sector bases (``basis``) and their compiled kernels (``kernels``, loaded
on first use), operators, ground states and measurements (``solve``).
"""

from netprobe.engines.exact.basis import (  # noqa: F401 (re-exported)
    SectorBasis, sector_basis,
)
from netprobe.engines.exact.solve import (  # noqa: F401 (re-exported)
    ExactOptions, ExactResult, hamiltonian_matrix, hamiltonian_operator, operator_matrix, apply_operator,
    ground_state, expectation, local_expectations, correlation, full_vector,
)

__all__ = [
    "SectorBasis",
    "sector_basis",
    "ExactOptions",
    "ExactResult",
    "hamiltonian_matrix",
    "hamiltonian_operator",
    "operator_matrix",
    "apply_operator",
    "ground_state",
    "expectation",
    "local_expectations",
    "correlation",
    "full_vector",
]
