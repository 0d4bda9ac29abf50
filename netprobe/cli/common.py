"""What every command shares: loading the model named on the command line, one output policy (text lines or
one JSON object through :func:`netprobe.jsonio.json_default`), bond-dimension lists, solver settings and plot names.
"""

from __future__ import annotations

import json
import sys

from netprobe.jsonio import json_default
from netprobe.errors import NetprobeError
from netprobe.model.spec import load_model, parse_overrides
from netprobe.engines.dmrg import SweepSettings
from netprobe.engines import SolveSettings

__all__: list[str] = []  # shared by the command modules of this package


def _load(args, memory_budget: int | None = None):
    return load_model(args.spec, parse_overrides(args.overrides), memory_budget=memory_budget)


def _emit(args, payload: dict, lines: list[str]):
    if getattr(args, "json", False):
        json.dump(payload, sys.stdout, indent=2, default=json_default)
        sys.stdout.write("\n")
    else:
        print("\n".join(lines))


def _bond_dimensions(text: str) -> tuple[int, ...]:
    try:
        values = tuple(int(v) for v in text.split(",") if v.strip())
    except ValueError:
        raise NetprobeError(f"--bond-dimension {text}: give integers separated by commas, e.g. 64,128,256") from None
    if not values or min(values) < 1:
        raise NetprobeError(f"--bond-dimension {text}: every bond dimension must be at least 1, e.g. 64,128,256")
    if any(b <= a for a, b in zip(values, values[1:])):
        raise NetprobeError(f"--bond-dimension {text}: the ladder must increase, e.g. 64,128,256")
    return values


def _solve_settings(args, overrides):
    return SolveSettings(bond_dimensions=_bond_dimensions(args.bond_dimension),
                         sweeps=SweepSettings(sweep_limit=args.sweeps) if args.sweeps else None,
                         seed=args.seed, out=getattr(args, "out", None), progress=sys.stderr,
                         overrides=overrides)


def _check_png(path: str):
    if not str(path).lower().endswith(".png"):
        raise NetprobeError(f"--plot {path}: plots are written as PNG; give a file name ending in .png")
