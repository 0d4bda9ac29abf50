"""``netprobe check``: validate a model file and summarise sites, terms, charges and dimensions."""

from __future__ import annotations

import math

from netprobe.cli.common import _add_model_arguments, _emit, _load
from netprobe.engines.mps.mpo import build_mpo
from netprobe.model.sites import count_sector_states

__all__ = ["add_parser", "cmd_check"]


_EXACT_BITS = 62  # basis codes of the exact engine are 62-bit integers
_SHORT_PROFILE = 12  # bond profiles up to this length are printed in full, longer ones summarised
_ENDS = 3  # bonds shown at each end of a summarised profile
_EXACT_REACH = 10**9  # sector sizes beyond this are far out of reach of exact diagonalisation


def _about(log10: float) -> str:
    """A huge count as ``about 2.5e173``, from its decimal logarithm (the count may not fit a float)."""
    exponent = math.floor(log10)
    mantissa = 10 ** (log10 - exponent)
    if mantissa >= 9.95:  # rounding to one decimal would print 10.0
        mantissa, exponent = 1.0, exponent + 1
    return f"about {mantissa:.1f}e{exponent}"


def _dimension_line(dim: int | None, local_dim: int, sites: int) -> str:
    """The sector dimension for a person: exact digits when small, ``about 2.5e173`` when huge."""
    if dim is not None and dim <= _EXACT_REACH:
        return f"exact dim  {dim:,} basis states in the sector"
    if dim is not None:
        return f"exact dim  {_about(math.log10(dim))} basis states in the sector: far beyond exact diagonalisation"
    full = _about(sites * math.log10(max(local_dim, 1))) if local_dim > 1 else "1"
    return (f"exact dim  far beyond exact diagonalisation: the full space has {full} basis states "
            f"({local_dim}^{sites})")


def _profile(values) -> str:
    """A bond-dimension profile in one short line: maximum and where it sits, then the ends when long."""
    values = [int(v) for v in values]
    if not values:
        return "1 (no bonds)"
    top = max(values)
    where = [i + 1 for i, v in enumerate(values) if v == top]
    at = f"bond {where[0]}" if len(where) == 1 else f"bonds {where[0]}..{where[-1]} ({len(where)} of them)"
    if len(values) <= _SHORT_PROFILE:
        return f"{top} at {at} (bonds: {' '.join(map(str, values))})"
    head = " ".join(map(str, values[:_ENDS]))
    tail = " ".join(map(str, values[-_ENDS:]))
    return f"{top} at {at} of {len(values)} (bonds: {head} ... {tail}; all of them under --json)"


def _model_summary(model) -> dict:
    ham = model.hamiltonian
    mpo = build_mpo(ham)
    families = {}
    for entry in model.spec.terms:
        families[entry.on] = len(model.lattice.family(entry.on))
    # beyond 62 bits of basis codes exact diagonalisation is impossible, and the count itself is slow
    if model.num_sites * math.log2(max(model.space.dim, 2)) <= _EXACT_BITS:
        dim = count_sector_states(model.space, model.num_sites, ham.conserved, ham.sector)
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
        "conserved": list(ham.conserved),
        "sector": ham.sector,
        "complex": bool(ham.is_complex),
        "exact_dimension": dim,
        "mpo_bond_dimensions": mpo.bond_dimensions,
        "mpo_bond_dimensions_uncompressed": list(mpo.uncompressed_bond_dimensions),
        "parameters": model.numeric_parameters(),
    }


def add_parser(sub) -> None:
    """Register ``netprobe check`` on an ``argparse`` subparsers object."""
    p = sub.add_parser("check", help="validate a model: sites, terms, charges, dimensions")
    _add_model_arguments(p)
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=cmd_check)


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
        _dimension_line(info["exact_dimension"], model.space.dim, model.num_sites),
        f"MPO        max bond dimension {_profile(info['mpo_bond_dimensions'])}",
        f"           before exact compression {_profile(info['mpo_bond_dimensions_uncompressed'])}",
        "Hermitian  yes",
    ]
    _emit(args, info, lines)
    return 0
