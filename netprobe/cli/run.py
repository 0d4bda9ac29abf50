"""``netprobe run``: DMRG ground state over a ladder of bond dimensions, with checkpoints."""

from __future__ import annotations

import sys

from netprobe.errors import NetprobeError
from netprobe.engines.limits import check_dmrg_model
from netprobe.cli.common import _bond_dimensions, _emit, _load
from netprobe.engines.dmrg import LadderSettings, SweepSettings, run_ladder
from netprobe.model.spec import parse_overrides

__all__ = ["cmd_run"]


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
