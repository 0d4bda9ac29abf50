"""``netprobe exact``: ground state by exact diagonalisation in the target sector."""

from __future__ import annotations

import time

import numpy as np

from netprobe.errors import NetprobeError
from netprobe.engines.limits import check_exact_model
from netprobe.cli.common import _add_model_arguments, _emit, _load
from netprobe.engines.exact import ground_state

__all__ = ["add_parser", "cmd_exact"]


def add_parser(sub) -> None:
    """Register ``netprobe exact`` on an ``argparse`` subparsers object."""
    p = sub.add_parser("exact", help="ground state by exact diagonalisation in the target sector")
    _add_model_arguments(p)
    p.add_argument("--states", type=int, default=1, metavar="K", help="number of lowest states (default 1)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=cmd_exact)


def cmd_exact(args) -> int:
    """Exact ground state (and low states) of a model in its target sector."""
    if args.states < 1:
        raise NetprobeError(f"--states must be at least 1, got {args.states}")
    model = _load(args)
    check_exact_model(model, where="netprobe exact", num_states=args.states)
    start = time.perf_counter()
    result = ground_state(model.hamiltonian, num_states=args.states)
    seconds = time.perf_counter() - start
    energies = [float(e) for e in np.atleast_1d(result.energies)]
    payload = {
        "model": model.name,
        "engine": "exact",
        "energy": energies[0],
        "energy_per_site": energies[0] / model.num_sites,
        "energies": energies,
        "sites": model.num_sites,
        "dimension": int(result.basis.dim),
        "sector": model.hamiltonian.sector,
        "parameters": model.numeric_parameters(),
        "seconds": seconds,
    }
    lines = [
        f"{model.name}: {model.lattice.describe()}, sector dimension {result.basis.dim:,}",
        f"ground-state energy   {energies[0]:.12f}",
        f"energy per site       {energies[0] / model.num_sites:.12f}",
    ]
    if len(energies) > 1:
        lines.append("lowest energies       " + "  ".join(f"{e:.10f}" for e in energies))
    lines.append(f"time                  {seconds:.2f} s")
    _emit(args, payload, lines)
    return 0
