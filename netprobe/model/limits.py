"""Size limits as estimates: what a request would need, checked before anything large is built.

Every check estimates the bytes a stage would hold, compares them with the memory budget
(:func:`netprobe.resources.default_memory_budget`, half the physical memory, unless a budget is
given) and refuses with one line that carries the estimate and what to shrink. The engines' own
estimates (exact sectors, DMRG states) are in :mod:`netprobe.engines.limits`.

=======================  ======================================================================
check                    what it estimates
=======================  ======================================================================
:func:`check_model_size` lattice sites and placed operator products of a model file (assembly)
:func:`check_grid_size`  the points of a study grid (descriptions, plan and ledger rows)
=======================  ======================================================================
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping


from netprobe.errors import MemoryBudgetError, NetprobeError
from netprobe.model.lattice import build_lattice
from netprobe.resources import default_memory_budget, format_bytes

__all__ = [
    "ModelSize",
    "estimate_model_size",
    "check_model_size",
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
_REFERENCE_CELLS = 4  # cells along each direction of the small lattice whose bonds are counted


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
