"""``netprobe flux``: thread one flux quantum through the cylinder."""

from __future__ import annotations

import sys

import numpy as np

from netprobe.errors import NetprobeError
from netprobe.cli import options
from netprobe.cli.common import _add_model_arguments, _check_png, _emit, _plots
from netprobe.pipeline.flux import thread_flux
from netprobe.model.spec import load_spec, parse_overrides

__all__ = ["add_parser", "cmd_flux"]


def add_parser(sub) -> None:
    """Register ``netprobe flux`` on an ``argparse`` subparsers object."""
    p = sub.add_parser("flux", help="thread one flux quantum through the cylinder; charge pumped across the cut")
    _add_model_arguments(p)
    p.add_argument("--steps", type=int, default=8, metavar="N", help="flux steps from 0 to 2 pi (default 8)")
    p.add_argument("--bond-dimension", type=int, default=64, metavar="D", help="DMRG bond dimension (default 64)")
    p.add_argument("--sweeps", type=int, default=4, metavar="N", help="DMRG sweeps per step (default 4)")
    p.add_argument("--seed", type=options.seed, default=0, metavar="S", help="seed of the first step (default 0)")
    p.add_argument("--plot", metavar="FILE.png", help="plot <Q_L> and the entanglement spectrum against the flux")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=cmd_flux)


def cmd_flux(args) -> int:
    """Flux threading: <Q_L> at the central cut against the twist, warm-started step to step."""
    if args.bond_dimension < 1:
        raise NetprobeError(f"--bond-dimension must be at least 1, got {args.bond_dimension}")
    if args.sweeps < 1:
        raise NetprobeError(f"--sweeps must be at least 1, got {args.sweeps}")
    if args.plot:
        _check_png(args.plot)
    spec = load_spec(args.spec)
    result = thread_flux(spec, parse_overrides(args.overrides), steps=args.steps, bond_dimension=args.bond_dimension,
                         sweeps=args.sweeps, seed=args.seed, progress=sys.stderr)
    payload = {"model": spec.name, **result.to_json()}
    lines = [f"{spec.name}: charge {result.charge} of the left half at bond {result.bond}"]
    for theta, q, e in zip(result.thetas, result.left_charge, result.energies):
        lines.append(f"  theta/2pi = {theta / (2 * np.pi):.3f}   <Q_L> = {q:.6f}   energy {e:.10f}")
    lines.append(f"pumped per flux quantum: {result.pumped:+.4f}  (Hall conductance estimate)")
    if args.plot:
        _plots().plot_flux(result, args.plot, title=f"{spec.name}: flux threading")
        lines.append(f"plot written to {args.plot}")
    _emit(args, payload, lines)
    return 0
