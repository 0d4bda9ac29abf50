"""The ``netprobe`` command line.

Every subcommand turns our own errors (:class:`netprobe.errors.NetprobeError`) into one line on
standard error and exit status 2; a traceback means a bug. ``--json`` makes standard output one
JSON object, with progress and notes on standard error.
"""

from __future__ import annotations

import argparse
import json
import sys
import time

import numpy as np

from netprobe import __version__
from netprobe.errors import NetprobeError

__all__ = ["main", "build_parser"]


class _Parser(argparse.ArgumentParser):
    """An argument parser whose usage errors are one line and exit status 2."""

    def error(self, message):
        self.exit(2, f"{self.prog}: error: {message} (see '{self.prog} --help')\n")


def _add_model_arguments(p):
    p.add_argument("spec", metavar="SPEC", help="model file (path) or the name of a bundled model")
    p.add_argument("--set", dest="overrides", action="append", default=[], metavar="NAME=VALUE",
                   help="override a parameter of the model file (repeatable)")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of the ``netprobe`` command."""
    parser = _Parser(prog="netprobe", description="Ground states of lattice models and bulk probes of chiral "
                                                  "topological order.")
    parser.add_argument("--version", action="version", version=f"netprobe {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    p = sub.add_parser("models", help="list the bundled model files")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=cmd_models)

    p = sub.add_parser("check", help="validate a model: sites, terms, charges, dimensions")
    _add_model_arguments(p)
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=cmd_check)

    p = sub.add_parser("exact", help="ground state by exact diagonalisation in the target sector")
    _add_model_arguments(p)
    p.add_argument("--states", type=int, default=1, metavar="K", help="number of lowest states (default 1)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=cmd_exact)

    p = sub.add_parser("regions", help="carve a region layout on the lattice; list its sites, draw it")
    _add_model_arguments(p)
    p.add_argument("--layout", required=True, metavar="KIND:KEY=VALUE,...",
                   help="e.g. sectors:radius=3  disk:radius=2.5,center=4,2  levin_wen:inner=1,outer=3,cut=40")
    p.add_argument("--plot", metavar="FILE.png", help="draw the lattice with the parts coloured")
    p.add_argument("--json", action="store_true", help="print one JSON object (sites and coordinates)")
    p.set_defaults(func=cmd_regions)
    return parser


def _load(args):
    from netprobe.spec import load_model, parse_overrides

    return load_model(args.spec, parse_overrides(args.overrides))


def _emit(args, payload: dict, lines: list[str]):
    if getattr(args, "json", False):
        json.dump(payload, sys.stdout, indent=2, default=_json_default)
        sys.stdout.write("\n")
    else:
        print("\n".join(lines))


def _json_default(value):
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (np.floating,)):
        return float(value)
    if isinstance(value, complex):
        return [value.real, value.imag]
    if isinstance(value, np.ndarray):
        return value.tolist()
    raise TypeError(f"not JSON serialisable: {type(value).__name__}")


def cmd_models(args) -> int:
    """List the bundled models, one line each."""
    from netprobe.spec import list_models, load_spec

    entries = []
    for path in list_models():
        spec = load_spec(str(path))
        entries.append({"name": spec.name, "file": str(path), "site": spec.site, "description": spec.description})
    width = max((len(e["name"]) for e in entries), default=0)
    _emit(args, {"models": entries}, [f"{e['name']:<{width}}  {e['description']}" for e in entries])
    return 0


def _model_summary(model) -> dict:
    from netprobe.mpo import build_mpo
    from netprobe.sites import count_sector_states

    ham = model.hamiltonian
    mpo = build_mpo(ham)
    families = {}
    for entry in model.spec.terms:
        families[entry.on] = len(model.lattice.family(entry.on))
    dim = count_sector_states(model.space, model.num_sites, ham.conserve, ham.sector)
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
        f"exact dim  {info['exact_dimension']:,} basis states in the sector",
        f"MPO        max bond dimension {max(info['mpo_bond_dimensions'], default=1)} "
        f"(bonds: {' '.join(map(str, info['mpo_bond_dimensions']))})",
        "Hermitian  yes",
    ]
    _emit(args, info, lines)
    return 0


def cmd_exact(args) -> int:
    """Exact ground state (and low states) of a model in its target sector."""
    from netprobe.exact import ground_state

    if args.states < 1:
        raise NetprobeError(f"--states must be at least 1, got {args.states}")
    model = _load(args)
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


def cmd_regions(args) -> int:
    """Build a region layout on the model's lattice, print or plot it."""
    from netprobe.regions import parse_region

    model = _load(args)
    layout = parse_region(args.layout, model.lattice)
    if args.plot:
        from netprobe.plots import plot_layout

        _check_png(args.plot)
        plot_layout(layout, args.plot, title=f"{model.name}: {layout.describe()}")
    payload = {"model": model.name, "lattice": model.lattice.describe(), **layout.to_json()}
    lines = [f"{model.name}: {model.lattice.describe()}", layout.describe()]
    for name in layout.names:
        lines.append(f"  {name}: {len(layout[name])} sites  {' '.join(map(str, layout[name]))}")
    if args.plot:
        lines.append(f"plot written to {args.plot}")
    _emit(args, payload, lines)
    return 0


def _check_png(path: str):
    if not str(path).lower().endswith(".png"):
        raise NetprobeError(f"--plot {path}: plots are written as PNG; give a file name ending in .png")


def main(argv=None) -> int:
    """Entry point of the ``netprobe`` console script."""
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.func(args)
    except NetprobeError as err:
        message = " ".join(str(err).split())  # one line, whatever the message held
        print(f"netprobe: error: {message}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("netprobe: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
