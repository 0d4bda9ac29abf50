"""``netprobe check``: validate a model file and summarise sites, terms, charges and dimensions."""

from __future__ import annotations

import math

from netprobe.cli.common import _emit, _load
from netprobe.engines.mps.mpo import build_mpo
from netprobe.model.sites import count_sector_states

__all__ = ["cmd_check"]


_EXACT_BITS = 62  # basis codes of the exact engine are 62-bit integers


def _model_summary(model) -> dict:
    ham = model.hamiltonian
    mpo = build_mpo(ham)
    families = {}
    for entry in model.spec.terms:
        families[entry.on] = len(model.lattice.family(entry.on))
    # beyond 62 bits of basis codes exact diagonalisation is impossible, and the count itself is slow
    if model.num_sites * math.log2(max(model.space.dim, 2)) <= _EXACT_BITS:
        dim = count_sector_states(model.space, model.num_sites, ham.conserve, ham.sector)
    else:
        dim = None
    return {
        "model": model.name,
        "lattice": model.lattice.describe(),
        "sites": model.num_sites,
        "site_space": model.space.name,
        "local_dimension": model.space.dim,
        "terms": len(ham.products),
        "bond_families": families,
        "conserved": list(ham.conserve),
        "sector": ham.sector,
        "complex": bool(ham.is_complex),
        "exact_dimension": dim,
        "mpo_bond_dimensions": mpo.bond_dimensions,
        "mpo_bond_dimensions_uncompressed": list(mpo.uncompressed_bond_dimensions),
        "parameters": model.numeric_parameters(),
    }


def cmd_check(args) -> int:
    """Validate a model and print what it contains."""
    model = _load(args)
    info = _model_summary(model)
    sector = ", ".join(f"{k} = {v}" for k, v in info["sector"].items()) or "none (no conserved charge)"
    lines = [
        f"model      {info['model']}: {model.spec.description}",
        f"lattice    {info['lattice']}",
        f"sites      {info['sites']} x {info['site_space']} (local dimension {info['local_dimension']})",
        f"terms      {info['terms']} operator strings"
        + ("" if not info["complex"] else " (complex couplings)"),
        "families   " + ", ".join(f"{k}: {v} bonds" for k, v in info["bond_families"].items()),
        f"sector     {sector}",
        (f"exact dim  {info['exact_dimension']:,} basis states in the sector" if info["exact_dimension"] is not None
         else f"exact dim  far beyond exact diagonalisation ({model.space.dim}^{model.num_sites} basis states)"),
        f"MPO        max bond dimension {max(info['mpo_bond_dimensions'], default=1)} "
        f"(bonds: {' '.join(map(str, info['mpo_bond_dimensions']))})",
        f"           before exact compression {max(info['mpo_bond_dimensions_uncompressed'], default=1)} "
        f"(bonds: {' '.join(map(str, info['mpo_bond_dimensions_uncompressed']))})",
        "Hermitian  yes",
    ]
    _emit(args, info, lines)
    return 0
