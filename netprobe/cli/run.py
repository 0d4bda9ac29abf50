"""``netprobe run``: DMRG ground state over a ladder of bond dimensions, with checkpoints."""

from __future__ import annotations

import sys

from netprobe.errors import NetprobeError
from netprobe.engines.limits import check_dmrg_model
from netprobe.cli import options
from netprobe.cli.common import _add_model_arguments, _bond_dimensions, _emit, _load
from netprobe.engines.dmrg import LadderSettings, SweepSettings, run_ladder
from netprobe.model.spec import parse_overrides

__all__ = ["add_parser", "cmd_run"]


def add_parser(sub) -> None:
    """Register ``netprobe run`` on an ``argparse`` subparsers object."""
    p = sub.add_parser("run", help="DMRG ground state over a ladder of bond dimensions, with checkpoints")
    _add_model_arguments(p)
    p.add_argument("--bond-dimension", required=True, metavar="D[,D...]",
                   help="ladder of bond dimensions, e.g. 64,128,256 (each stage warm-starts the next)")
    p.add_argument("--sweeps", type=int, default=None, metavar="N", help="maximum sweeps per stage")
    p.add_argument("--seed", type=options.seed, default=0, metavar="S", help="seed of the random initial state (default 0)")
    p.add_argument("--out", type=options.output_folder, default=None, metavar="DIR", help="folder for state files and the checkpoint")
    p.add_argument("--resume", action="store_true", help="continue from the checkpoint in --out")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=cmd_run)


def cmd_run(args) -> int:
    """DMRG over a bond-dimension ladder; state files and checkpoints in --out."""
    chis = _bond_dimensions(args.bond_dimension)
    if args.sweeps is not None and args.sweeps < 1:
        raise NetprobeError(f"--sweeps must be at least 1, got {args.sweeps}")
    if args.resume and not args.out:
        raise NetprobeError("--resume needs --out DIR: the folder that holds the checkpoint")
    model = _load(args)
    check_dmrg_model(model, chis[-1], where=f"--bond-dimension {chis[-1]}")
    sweeps = SweepSettings(sweep_limit=args.sweeps) if args.sweeps else SweepSettings()
    settings = LadderSettings(bond_dimensions=chis, sweeps=sweeps)
    result = run_ladder(model, settings, overrides=parse_overrides(args.overrides), seed=args.seed,
                        out=args.out, resume=args.resume, progress=sys.stderr)
    payload = {"model": model.name, "engine": "dmrg", "sites": model.num_sites,
               "parameters": model.numeric_parameters(), **result.to_dict()}
    lines = [f"{model.name}: {model.lattice.describe()}"]
    lines.append(f"{'D':>6} {'energy':>20} {'discarded':>10} {'variance':>10} {'sweeps':>6} {'seconds':>8}")
    for st in payload["stages"]:
        var = st.get("variance")
        lines.append(f"{st['bond_dimension']:>6} {st['energy']:>20.12f} {st['discarded_weight']:>10.2e} "
                     f"{(var if var is not None else float('nan')):>10.2e} {st['sweeps']:>6} {st['seconds']:>8.1f}")
    ext = payload.get("extrapolation")
    if ext:
        lines.append(f"extrapolated (w -> 0): {ext['energy']:.12f} +- {ext['error']:.2e}  ({ext['method']})")
    if payload.get("out"):
        lines.append(f"state files in {payload['out']}")
    _emit(args, payload, lines)
    return 0
