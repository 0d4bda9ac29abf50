"""Size limits as estimates: what a request would need, checked before anything large is built.

Every check estimates the bytes a stage would hold, compares them with the memory budget
(:func:`netprobe.resources.default_memory_budget`, half the physical memory, unless a budget is
given) and refuses with one line that carries the estimate and what to shrink.

=======================  ======================================================================
check                    what it estimates
=======================  ======================================================================
:func:`check_model_size` lattice sites and placed operator products of a model file (assembly)
:func:`check_exact_size` the sector of exact diagonalisation (codes and Lanczos vectors)
:func:`check_dmrg_size`  matrix product state and environments at a bond dimension (lower bound)
:func:`check_grid_size`  the points of a study grid (descriptions, plan and ledger rows)
=======================  ======================================================================
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping

import numpy as np

from netprobe.errors import MemoryBudgetError, NetprobeError
from netprobe.lattice import build_lattice
from netprobe.mpo import build_mpo
from netprobe.sites import count_sector_states
from netprobe.resources import default_memory_budget

__all__ = [
    "ModelSize",
    "format_bytes",
    "estimate_model_size",
    "check_model_size",
    "estimate_exact_bytes",
    "check_exact_size",
    "check_exact_model",
    "check_dmrg_model",
    "estimate_dmrg_bytes",
    "charge_spans",
    "check_dmrg_size",
    "check_grid_size",
]

# Peak bytes of model assembly (lattice, placed terms, Hamiltonian, MPO), measured with tracemalloc on
# the bundled models (tfim, heisenberg, hubbard, kagome_chiral, haldane, toric_code, hofstadter at
# 300-16000 sites): 0.9-2.4 KB per placed operator product and 3.8-17 KB per site for the model, up to
# 72 KB per site with the MPO of a wide cylinder. Twice the largest product cost and the MPO's site
# cost keep the estimate above every measurement.
_BYTES_PER_PRODUCT = 5_000
_BYTES_PER_SITE = 32_000
# A study task costs its point's description, its plan and its ledger rows: tracemalloc's peak over
# parsing, planning, fingerprinting and the JSON copy was 0.72 KB per task for 10^5 points x 2 rungs;
# 4 KB leaves room for the ledger's insertion and the executor's copies.
_BYTES_PER_TASK = 4_000
# Lanczos vectors the exact engine keeps besides the sector codes (ARPACK's ncv, at least 20).
_EXACT_VECTORS = 20
_EXACT_BITS = 62  # basis codes of the exact engine are 62-bit integers
_REFERENCE_CELLS = 4  # cells along each direction of the small lattice whose bonds are counted


def format_bytes(nbytes: float) -> str:
    """Bytes in the largest binary unit that keeps the number readable ("1.5 GiB", "3e+08 TiB")."""
    for unit, scale in (("TiB", 2**40), ("GiB", 2**30), ("MiB", 2**20), ("KiB", 2**10)):
        if nbytes >= scale:
            value = nbytes / scale
            return f"{value:.3g} {unit}" if value < 1e6 else f"{value:.2e} {unit}"
    return f"{int(nbytes)} B"


def _count(n: int) -> str:
    return f"{n}" if n < 10**9 else f"{float(n):.3g}"


def _budget(budget: int | None) -> int:
    return default_memory_budget() if budget is None else int(budget)


@dataclass(frozen=True)
class ModelSize:
    """Estimated size of a model on its lattice.

    Attributes
    ----------
    sites : int
    products : int
        Operator products placed on bonds (before merging equal ones).
    bytes : int
        Estimated peak bytes of building the lattice, the terms, the Hamiltonian and the MPO.
    bytes_per_length : float
        The part of ``bytes`` that grows with each unit cell along the length.
    """

    sites: int
    products: int
    bytes: int
    bytes_per_length: float


def _reference_counts(lattice: str, circumference: int, geometry: str, orientation: str,
                      families: Mapping[str, int]) -> tuple[float, float]:
    """Sites and placed products per unit cell, counted on a small lattice of the same kind."""
    ref_length = _REFERENCE_CELLS
    ref_circ = 1 if lattice == "chain" else min(circumference, _REFERENCE_CELLS)
    try:
        ref = build_lattice(lattice, length=ref_length, circumference=ref_circ, geometry=geometry,
                            orientation=orientation)
    except NetprobeError:
        if circumference > 64:
            raise
        ref_circ = circumference
        ref = build_lattice(lattice, length=ref_length, circumference=ref_circ, geometry=geometry,
                            orientation=orientation)
    cells = ref_length * ref_circ
    products = 0
    for family, multiplicity in families.items():
        try:
            products += len(ref.family(family)) * multiplicity
        except NetprobeError:
            continue  # an unknown family is reported by the model builder with the valid names
    return ref.num_sites / cells, products / cells


def estimate_model_size(lattice: str, *, length: int, circumference: int, geometry: str = "cylinder",
                        orientation: str = "zigzag", families: Mapping[str, int]) -> ModelSize:
    """Estimate the size of a model without building its lattice.

    Parameters
    ----------
    lattice : str
        A registered lattice name.
    length, circumference : int
        Unit cells along x and around y.
    geometry, orientation : str
    families : mapping of str to int
        For each bond family used by the terms, the operator products placed per bond (products of
        every term on it, doubled for terms with their conjugate).

    Returns
    -------
    ModelSize

    Raises
    ------
    LatticeError
        For an unknown lattice, geometry or orientation (the builder's own message).
    """
    sites_per_cell, products_per_cell = _reference_counts(lattice, circumference, geometry, orientation,
                                                          families)
    cells = int(length) * int(circumference)
    sites = math.ceil(sites_per_cell * cells)
    products = math.ceil(products_per_cell * cells)
    per_cell = sites_per_cell * _BYTES_PER_SITE + products_per_cell * _BYTES_PER_PRODUCT
    return ModelSize(sites=sites, products=products, bytes=math.ceil(per_cell * cells),
                     bytes_per_length=per_cell * int(circumference))


def check_model_size(size: ModelSize, *, length: int, circumference: int, where: str,
                     budget: int | None = None) -> None:
    """Refuse a model whose assembly would exceed the memory budget.

    Raises
    ------
    MemoryBudgetError
        One line with the sites, the estimate, the budget and the largest length that fits.
    """
    allowed = _budget(budget)
    if size.bytes <= allowed:
        return
    fits = int(allowed // size.bytes_per_length) if size.bytes_per_length > 0 else 0
    shrink = (f"use --set length={fits} or less" if fits >= 1 else
              "use a smaller circumference (and length)")
    raise MemoryBudgetError(
        f"{where}: length {_count(length)} x circumference {_count(circumference)} gives {size.sites:.3g} "
        "sites and "        f"{size.products:.3g} operator products; building the model would need about "
        f"{format_bytes(size.bytes)}, over the memory budget of {format_bytes(allowed)}; {shrink}"
    )


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
    """Refuse exact diagonalisation of a model (:class:`netprobe.spec.Model`) beyond the budget.

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
    dim = count_sector_states(space, n, ham.conserve, ham.sector)
    check_exact_size(dim, sites=n, where=where, itemsize=16 if ham.is_complex else 8, num_states=num_states,
                     budget=budget)
    return dim


def check_dmrg_model(model, bond_dimension: int, *, where: str, budget: int | None = None) -> None:
    """Refuse DMRG of a model (:class:`netprobe.spec.Model`) whose state certainly exceeds the budget.

    Raises
    ------
    MemoryBudgetError
        From :func:`check_dmrg_size`.
    """
    ham = model.hamiltonian
    check_dmrg_size(model.num_sites, local_dim=model.space.dim,
                    mpo_bond=max(build_mpo(ham).bond_dimensions, default=1), bond_dimension=bond_dimension,
                    where=where, charge_spans=charge_spans(model.space.charge_values(ham.conserve)),
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


def check_grid_size(tasks: int, *, where: str, budget: int | None = None) -> None:
    """Refuse a study grid whose task count alone would exceed the memory budget.

    Raises
    ------
    MemoryBudgetError
        One line with the number of tasks, the estimate and what to shrink.
    """
    allowed = _budget(budget)
    need = int(tasks) * _BYTES_PER_TASK
    if need > allowed:
        raise MemoryBudgetError(
            f"{where}: the grid holds at least {tasks:,} tasks (points x rungs); their plan and ledger "
            f"would need about {format_bytes(need)}, over the memory budget of {format_bytes(allowed)}; use a smaller num "
            "or fewer values"
        )
