"""Size limits of the engines, checked before anything large is built.

=======================  ======================================================================
check                    what it estimates
=======================  ======================================================================
:func:`check_exact_size` the sector of exact diagonalisation (codes and Lanczos vectors)
:func:`check_dmrg_size`  matrix product state and environments at a bond dimension (lower bound)
=======================  ======================================================================

Model assembly and study grids are estimated in :mod:`netprobe.model.limits`.
"""

from __future__ import annotations

import math

import numpy as np

from netprobe.engines.mps.mpo import build_mpo
from netprobe.errors import MemoryBudgetError
from netprobe.model.sites import count_sector_states
from netprobe.resources import default_memory_budget, format_bytes

__all__ = [
    "estimate_exact_bytes",
    "check_exact_size",
    "check_exact_model",
    "check_dmrg_model",
    "estimate_dmrg_bytes",
    "charge_spans",
    "check_dmrg_size",
]

# Lanczos vectors the exact engine keeps besides the sector codes (ARPACK's ncv, at least 20).
_EXACT_VECTORS = 20
_EXACT_BITS = 62  # basis codes of the exact engine are 62-bit integers


def _budget(budget: int | None) -> int:
    return default_memory_budget() if budget is None else int(budget)


def estimate_exact_bytes(dimension: int, *, itemsize: int = 16, num_states: int = 1) -> int:
    """Bytes exact diagonalisation needs at least for a sector of ``dimension`` states.

    The matrix-free path keeps the sector's codes (8 bytes each), the diagonal and the Lanczos
    vectors (``max(2 k + 1, 20)`` for ``k`` states); the CSR matrix, when it fits, only adds to it.
    """
    vectors = max(2 * int(num_states) + 1, _EXACT_VECTORS) + 5
    return int(dimension) * (vectors * int(itemsize) + 24)


def check_exact_size(dimension: int, *, sites: int, where: str, itemsize: int = 16, num_states: int = 1,
                     budget: int | None = None) -> None:
    """Refuse exact diagonalisation of a sector that would not fit the memory budget.

    Raises
    ------
    MemoryBudgetError
        One line with the sector dimension, the estimate and what to do instead.
    """
    allowed = _budget(budget)
    need = estimate_exact_bytes(dimension, itemsize=itemsize, num_states=num_states)
    if need > allowed:
        dim = f"{dimension:,}" if dimension < 10**12 else f"about {float(dimension):.2g}"
        raise MemoryBudgetError(
            f"{where}: exact diagonalisation of {sites} sites works in a sector of {dim} states and would "
            f"need at least {format_bytes(need)}, over the memory budget of {format_bytes(allowed)}; use "
            "fewer sites or the dmrg engine"
        )


def check_exact_model(model, *, where: str, num_states: int = 1, budget: int | None = None) -> int:
    """Refuse exact diagonalisation of a model (:class:`netprobe.model.spec.Model`) beyond the budget.

    Returns
    -------
    int
        The dimension of the model's sector.

    Raises
    ------
    MemoryBudgetError
        If the basis codes need more than 62 bits or the sector would not fit the budget.
    """
    space, n, ham = model.space, model.num_sites, model.hamiltonian
    if n * math.log2(max(space.dim, 2)) > _EXACT_BITS:
        raise MemoryBudgetError(
            f"{where}: exact diagonalisation of {n} sites needs {space.dim}^{n} basis codes, more than "
            f"{_EXACT_BITS} bits; use fewer sites or the dmrg engine")
    dim = count_sector_states(space, n, ham.conserved, ham.sector)
    check_exact_size(dim, sites=n, where=where, itemsize=16 if ham.is_complex else 8, num_states=num_states,
                     budget=budget)
    return dim


def check_dmrg_model(model, bond_dimension: int, *, where: str, budget: int | None = None) -> None:
    """Refuse DMRG of a model (:class:`netprobe.model.spec.Model`) whose state certainly exceeds the budget.

    Raises
    ------
    MemoryBudgetError
        From :func:`check_dmrg_size`.
    """
    ham = model.hamiltonian
    check_dmrg_size(model.num_sites, local_dim=model.space.dim,
                    mpo_bond=max(build_mpo(ham).bond_dimensions, default=1), bond_dimension=bond_dimension,
                    where=where, charge_spans=charge_spans(model.space.charge_values(ham.conserved)),
                    budget=budget)


def _bond_sectors(n: int, spans: list[int]) -> int:
    """At most this many charge sectors on a bond with ``n`` sites on its shorter side."""
    out = 1
    for span in spans:
        out *= n * span + 1
    return out


def estimate_dmrg_bytes(num_sites: int, *, local_dim: int, mpo_bond: int, bond_dimension: int,
                        charge_spans: list[int] | None = None, itemsize: int = 16) -> int:
    """A lower bound of the bytes of DMRG's state and environments at one bond dimension.

    Bond ``i`` holds ``D_i = min(D, d^i, d^(N - i))`` states; with ``m_i`` charge sectors on it the
    blocks of the state tensor hold at least ``d D_i^2 / m_i`` numbers and those of the environment
    at least ``w D_i^2 / m_i`` (Cauchy-Schwarz over the sector dimensions), ``w`` the MPO bond
    dimension. ``charge_spans`` gives, per conserved charge, the spread of the local charge values
    in units of their step (``m_i <= prod(n span + 1)`` with ``n`` sites on the shorter side).
    """
    n_sites, d, w, chi = int(num_sites), int(local_dim), int(mpo_bond), int(bond_dimension)
    spans = list(charge_spans or [])
    # bonds deep inside a long chain all hold D states: count them in one step
    log_chi = math.log(max(chi, 1)) / math.log(max(d, 2))
    edge = min(n_sites // 2, int(log_chi) + 2)
    total = 0.0
    for i in range(1, edge + 1):
        dim = min(chi, d**i)
        weight = 2 if 2 * i != n_sites else 1
        total += weight * dim * dim * (d + w) / _bond_sectors(i, spans)
    inner = n_sites - 1 - 2 * edge
    if inner > 0:
        # interior bonds: sectors bounded by the charges of the shorter side (at most n/2 sites)
        total += inner * chi * chi * (d + w) / _bond_sectors(n_sites // 2, spans)
    return int(total * itemsize)


def charge_spans(values) -> list[int]:
    """Spread of each conserved charge over a local basis, in units of its step.

    Parameters
    ----------
    values : array of shape (d, k)
        Charges of the local basis states (``SiteSpace.charge_values``).
    """
    spans = []
    for column in np.asarray(values).T:
        steps = np.unique(column)
        step = int(np.gcd.reduce(np.diff(steps))) if len(steps) > 1 else 1
        spans.append(int((steps.max() - steps.min()) // max(step, 1)))
    return spans


def check_dmrg_size(num_sites: int, *, local_dim: int, mpo_bond: int, bond_dimension: int, where: str,
                    charge_spans: list[int] | None = None, budget: int | None = None) -> None:
    """Refuse a DMRG run whose state and environments certainly exceed the memory budget.

    Raises
    ------
    MemoryBudgetError
        One line with the lower bound, the budget and what to shrink.
    """
    allowed = _budget(budget)
    need = estimate_dmrg_bytes(num_sites, local_dim=local_dim, mpo_bond=mpo_bond,
                               bond_dimension=bond_dimension, charge_spans=charge_spans)
    if need > allowed:
        raise MemoryBudgetError(
            f"{where}: DMRG on {num_sites} sites at bond dimension {bond_dimension} would need at least "
            f"{format_bytes(need)} for the state and its environments, over the memory budget of "
            f"{format_bytes(allowed)}; use a smaller bond dimension or fewer sites"
        )
