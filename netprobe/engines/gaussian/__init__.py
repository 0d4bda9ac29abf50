"""The free-fermion engine: quadratic forms, momentum blocks and Gaussian ground states."""

from netprobe.engines.gaussian.states import (  # noqa: F401 (re-exported)
    GaussianOptions, QuadraticForm, quadratic_form, FreeFermionState, MajoranaState, gaussian_state,
    peschel_entropy, majorana_entropy, fermion_modular_matrix, majorana_modular_matrix, fermion_modular_commutator, majorana_modular_commutator,
    real_space_chern_number,
)
from netprobe.engines.gaussian.quadratic import (  # noqa: F401 (re-exported)
    GaussianStateError,
)

__all__ = [
    "GaussianOptions",
    "QuadraticForm",
    "quadratic_form",
    "FreeFermionState",
    "MajoranaState",
    "gaussian_state",
    "peschel_entropy",
    "majorana_entropy",
    "fermion_modular_matrix",
    "majorana_modular_matrix",
    "fermion_modular_commutator",
    "majorana_modular_commutator",
    "real_space_chern_number",
    "GaussianStateError",
]
