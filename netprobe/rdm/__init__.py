"""Reduced density matrices of site sets, for spins and for fermions.

Conventions
-----------
Basis of a site set
    A set S of MPS sites is always listed in MPS order. Its basis states are the configurations
    ``(s_1, ..., s_m)`` of its sites, ``s_1`` (the smallest site) the most significant digit, in the
    local basis of the site space; a dense ``rho_S`` has shape ``(d**m, d**m)``.
Fermions
    For a fermionic site space the basis of S is its own Jordan-Wigner basis,
    ``|n_1 ... n_m> = (c_1^dag)^n_1 ... (c_m^dag)^n_m |0>`` over the modes of S alone, and ``rho_S`` is
    the fermionic reduced density matrix: ``Tr(rho_S O) = <psi|O|psi>`` for every even operator ``O``
    on S. The spin-basis partial trace of a non-contiguous set is a different (wrong) matrix.
Square-root form
    ``rho_S = Y Y^dag`` with ``Y`` graded by the conserved charges (and the fermion parity) of S: one
    block ``Y_q`` of shape ``(rows of charge q, r_q)`` per charge (:class:`GradedRoot`). Eigenvalues of
    ``rho_S`` are the squared singular values of the blocks.
Charge blocks
    ``rho_S`` itself in its charge blocks (:class:`BlockedRho`), never a dense ``d**m x d**m`` matrix.

Layout
------
``common`` (result types, signs, input checks), ``tables`` (charge tables, the step meter),
``vector`` (dense vectors), ``zipper`` (the dense density-matrix zipper, the reference), ``root``
(the square-root zipper), ``split`` (two double-layer walks joined into charge blocks, with fermion
parity strings), ``routes`` (the registry of routes and the one dispatcher), ``api`` (public entry
points), ``parts`` (regions made of parts A|B|C), ``blocked`` (parts of a reduced state kept in
charge blocks: partial traces and the traces that J needs). Every public entry point goes through
:func:`netprobe.rdm.routes.dispatch`.

References
----------
Fermionic reduced density matrices and the Jordan-Wigner parity strings: design notes, section 6.
Free-fermion check used in the tests: I. Peschel, J. Phys. A 36, L205 (2003).
"""

from netprobe.rdm.api import (
    estimate_blocks_memory, estimate_rdm_memory, rdm_route, reduced_blocks, reduced_density_matrix, reduced_root,
)
from netprobe.rdm.blocked import PartBlocks, SubsetBlocks, part_blocks, prefix_suffix_trace, subset_rho
from netprobe.rdm.common import BlockedRho, GradedRoot, PartRoot, RootBlock, as_pure_state, permutation_sign
from netprobe.rdm.parts import check_parts, part_root, reorder_parts, subset_weights
from netprobe.rdm.routes import RDM_METHODS, ROUTES, Route, choose_route
from netprobe.resources import check_memory_budget, default_memory_budget

__all__ = [
    "RDM_METHODS",
    "ROUTES",
    "Route",
    "RootBlock",
    "GradedRoot",
    "BlockedRho",
    "PartRoot",
    "default_memory_budget",
    "check_memory_budget",
    "permutation_sign",
    "as_pure_state",
    "reduced_density_matrix",
    "reduced_root",
    "reduced_blocks",
    "estimate_rdm_memory",
    "estimate_blocks_memory",
    "PartBlocks",
    "SubsetBlocks",
    "part_blocks",
    "subset_rho",
    "prefix_suffix_trace",
    "rdm_route",
    "choose_route",
    "check_parts",
    "reorder_parts",
    "part_root",
    "subset_weights",
]
