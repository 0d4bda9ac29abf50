"""Matrix product states on block tensors: the state and its canonical forms (``state``), measurements
(``measure``); the MPO (``mpo``), its compression and state files (``store``) live beside.
"""

from netprobe.engines.mps.state import (  # noqa: F401 (re-exported)
    SiteBasis, BlockMPO, MPS, random_state, product_state, overlap,
)
from netprobe.engines.mps.measure import (  # noqa: F401 (re-exported)
    SchmidtSpectrum, expectation_value, energy_variance, local_expectations, correlation, product_expectation,
    schmidt_spectra, entanglement_entropies, entanglement_spectrum, left_boundary, right_boundary, left_environment_step,
    right_environment_step,
)

__all__ = [
    "SiteBasis",
    "BlockMPO",
    "MPS",
    "random_state",
    "product_state",
    "overlap",
    "SchmidtSpectrum",
    "expectation_value",
    "energy_variance",
    "local_expectations",
    "correlation",
    "product_expectation",
    "schmidt_spectra",
    "entanglement_entropies",
    "entanglement_spectrum",
    "left_boundary",
    "right_boundary",
    "left_environment_step",
    "right_environment_step",
]
