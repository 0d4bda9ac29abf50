"""What every command shares: the model arguments and loading the model named on the command line, one output
policy (text lines or one JSON object through :func:`netprobe.jsonio.json_default`), bond-dimension lists, solver
settings, plot names and the figure module.
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


def _add_model_arguments(p):
    p.add_argument("spec", metavar="SPEC", help="model file (path) or the name of a bundled model")
    p.add_argument("--set", dest="overrides", action="append", default=[], metavar="NAME=VALUE",
                   help="override a parameter of the model file (repeatable)")


def _load(args, memory_budget: int | None = None):
    return load_model(args.spec, parse_overrides(args.overrides), memory_budget=memory_budget)


def _emit(args, payload: dict, lines: list[str]):
    if getattr(args, "json", False):
        json.dump(payload, sys.stdout, indent=2, default=json_default)
        sys.stdout.write("\n")
    else:
        print("\n".join(lines))


def _print_json(payload) -> None:
    """One JSON object on standard output, refusing NaN and infinities (study ledgers and reports)."""
    json.dump(payload, sys.stdout, indent=2, allow_nan=False)
    sys.stdout.write("\n")


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


def _circumferences(text: str) -> list[int]:
    """The ``--circumferences`` ladder: at least three different integers >= 2, ascending."""
    try:
        values = sorted({int(v) for v in text.split(",") if v.strip()})
    except ValueError:
        raise NetprobeError(f"--circumferences {text}: give integers separated by commas, e.g. 7,9,11,13") from None
    if len(values) < 3 or values[0] < 2:
        raise NetprobeError(f"--circumferences {text}: give at least three different circumferences of 2 or more, "
                            "e.g. 7,9,11,13")
    return values


def _solve_settings(args, overrides):
    return SolveSettings(bond_dimensions=_bond_dimensions(args.bond_dimension),
                         sweeps=SweepSettings(sweep_limit=args.sweeps) if args.sweeps else None,
                         seed=args.seed, out=getattr(args, "out", None), progress=sys.stderr,
                         overrides=overrides)


def _check_png(path: str):
    if not str(path).lower().endswith(".png"):
        raise NetprobeError(f"--plot {path}: plots are written as PNG; give a file name ending in .png")


def _plots():
    """:mod:`netprobe.output.plots`, imported when a command draws a figure.

    With matplotlib and numba loaded up front, ``import netprobe.cli`` took 2.5 s CPU on every command, most of
    which draw nothing; without them 1.1 s (``python -m benchmarks.startup``; benchmarks/RESULTS.md, 2026-12-03).
    """
    from netprobe.output import plots  # matplotlib only when a figure is drawn (see the docstring)

    return plots
