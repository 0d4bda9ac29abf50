"""The ``netprobe`` command line: the parser assembly and :func:`main`; one module per command beside.

Every subcommand turns our own errors (:class:`netprobe.errors.NetprobeError`) into one line on
standard error and exit status 2; a traceback means a bug. ``--json`` makes standard output one
JSON object, with progress and notes on standard error.
"""

from __future__ import annotations

import argparse
import os
import sys

import numpy as np

from netprobe import __version__
from netprobe.cli import options
from netprobe.cli.models import cmd_models
from netprobe.cli.check import cmd_check
from netprobe.cli.exact import cmd_exact
from netprobe.cli.run import cmd_run
from netprobe.cli.measure import cmd_measure
from netprobe.cli.probe import cmd_probe
from netprobe.cli.assess import cmd_assess
from netprobe.cli.flux import cmd_flux
from netprobe.cli.edge import _add_edge_parser
from netprobe.cli.regions import cmd_regions
from netprobe.errors import NetprobeError
from netprobe.cli.study import add_report_parser, add_study_parser

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

    p = sub.add_parser("measure", help="observables of a saved state")
    p.add_argument("state", metavar="STATE", help="state file written by 'netprobe run'")
    p.add_argument("--local", action="append", default=[], metavar="OP", help="<OP_i> on every site (repeatable)")
    p.add_argument("--correlation", action="append", default=[], metavar="OP,OP",
                   help="<A_i B_j> from the centre site i to every j (repeatable)")
    p.add_argument("--entropy", action="store_true", help="entanglement entropy at every bond")
    p.add_argument("--energy", action="store_true", help="energy and variance")
    p.add_argument("--plot", metavar="FILE.png", help="plot the requested profiles")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=cmd_measure)

    p = sub.add_parser("probe", help="bulk probes of a ground state on a region: J, c-, gamma, CMI, entropies")
    p.add_argument("spec", metavar="SOURCE", help="a state file from 'netprobe run', or a model file / bundled model")
    p.add_argument("--set", dest="overrides", action="append", default=[], metavar="NAME=VALUE",
                   help="override a model parameter (model sources only; repeatable)")
    p.add_argument("--region", required=True, metavar="KIND:KEY=VALUE,...",
                   help="disk:radius=R[,center=X,Y] (three sectors for J and gamma, a shielded split for CMI), "
                        "or any layout of 'netprobe regions'")
    p.add_argument("--cmi-region", default=None, metavar="KIND:KEY=VALUE,...",
                   help="layout for the CMI instead of the shielded split of the disk, e.g. shielded:a=1,b=2,c=3")
    p.add_argument("--probes", default="J,CMI,TEE,S", metavar="LIST", help="subset of J,CMI,TEE,S (default all)")
    p.add_argument("--engine", default="dmrg", choices=("dmrg", "exact", "gaussian"),
                   help="ground-state engine for a model source (default dmrg)")
    p.add_argument("--bond-dimension", default="32,64", metavar="D[,D...]",
                   help="DMRG ladder; the probes are evaluated on every rung (default 32,64)")
    p.add_argument("--sweeps", type=int, default=None, metavar="N", help="maximum DMRG sweeps per rung")
    p.add_argument("--seed", type=options.seed, default=0, metavar="S", help="DMRG seed (default 0)")
    p.add_argument("--out", type=options.output_folder, default=None, metavar="DIR", help="keep the DMRG state files here")
    p.add_argument("--eps", type=float, default=1e-12, metavar="EPS",
                   help="relative eigenvalue floor of the modular Hamiltonians (J is also shown at 100 EPS)")
    p.add_argument("--memory-budget", type=options.positive_gigabytes, default=None, metavar="GB",
                   help="refuse reduced density matrices above this estimate (default half the memory)")
    p.add_argument("--plot", metavar="FILE.png", help="draw the regions (and J against bond dimension)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=cmd_probe)

    p = sub.add_parser("assess", help="c- and gamma with error bars and a verdict: region-size and bond-dimension "
                                      "ladders, Markov-length certificate")
    p.add_argument("spec", metavar="SOURCE", help="a model file / bundled model, or state files of 'netprobe run' "
                                                   "(a folder, or comma-separated files, in increasing D)")
    p.add_argument("--set", dest="overrides", action="append", default=[], metavar="NAME=VALUE",
                   help="override a model parameter (model sources only; repeatable)")
    p.add_argument("--engine", default="dmrg", choices=("dmrg", "exact", "gaussian"),
                   help="ground-state engine for a model source (default dmrg)")
    p.add_argument("--bond-dimension", default="32,64", metavar="D[,D...]",
                   help="DMRG ladder; every region is measured on every rung (default 32,64)")
    p.add_argument("--sweeps", type=int, default=None, metavar="N", help="maximum DMRG sweeps per rung")
    p.add_argument("--seed", type=int, default=0, metavar="S", help="DMRG seed (default 0)")
    p.add_argument("--max-sites", type=int, default=15, metavar="N",
                   help="largest region (sites) of the size ladder and the Markov series (default 15)")
    p.add_argument("--placements", type=int, default=3, metavar="K", help="regions per size (default 3)")
    p.add_argument("--eps", type=float, default=1e-12, metavar="EPS",
                   help="relative eigenvalue floor of the modular Hamiltonians (default 1e-12)")
    p.add_argument("--memory-budget", type=float, default=None, metavar="GB",
                   help="leave out regions whose reduced state would exceed this (default half the memory)")
    p.add_argument("--circumferences", default=None, metavar="L1,L2,...",
                   help="model sources: also fit the momentum polarization of the cylinder cut over these "
                        "circumferences (as 'netprobe edge') and compare its c- with the bulk one")
    p.add_argument("--plot", metavar="FILE.png", help="J, gamma, CMI against size with the fits; J against 1/D")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=cmd_assess)

    p = sub.add_parser("flux", help="thread one flux quantum through the cylinder; charge pumped across the cut")
    _add_model_arguments(p)
    p.add_argument("--steps", type=int, default=8, metavar="N", help="flux steps from 0 to 2 pi (default 8)")
    p.add_argument("--bond-dimension", type=int, default=64, metavar="D", help="DMRG bond dimension (default 64)")
    p.add_argument("--sweeps", type=int, default=4, metavar="N", help="DMRG sweeps per step (default 4)")
    p.add_argument("--seed", type=options.seed, default=0, metavar="S", help="seed of the first step (default 0)")
    p.add_argument("--plot", metavar="FILE.png", help="plot <Q_L> and the entanglement spectrum against the flux")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=cmd_flux)

    _add_edge_parser(sub)

    add_study_parser(sub)
    add_report_parser(sub)

    p = sub.add_parser("regions", help="carve a region layout on the lattice; list its sites, draw it")
    _add_model_arguments(p)
    p.add_argument("--layout", required=True, metavar="KIND:KEY=VALUE,...",
                   help="e.g. sectors:radius=3  disk:radius=2.5,center=4,2  levin_wen:inner=1,outer=3,cut=40")
    p.add_argument("--plot", metavar="FILE.png", help="draw the lattice with the parts coloured")
    p.add_argument("--json", action="store_true", help="print one JSON object (sites and coordinates)")
    p.set_defaults(func=cmd_regions)
    return parser


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


def _closed_output() -> int:
    """Standard output is closed (``>&-``) or its reader went away: say so in one line."""
    try:  # later writes and the interpreter's final flush go nowhere instead of failing again
        sys.stdout = open(os.devnull, "w")
    except OSError:
        pass
    print("netprobe: error: standard output is closed; redirect it to a file or /dev/null (> out.txt)",
          file=sys.stderr)
    return 2


def main(argv=None) -> int:
    """Entry point of the ``netprobe`` console script."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if sys.stdout is None:
        return _closed_output()
    try:
        return args.func(args)
    except BrokenPipeError:
        return _closed_output()
    except NetprobeError as err:
        message = " ".join(str(err).split())  # one line, whatever the message held
        print(f"netprobe: error: {message}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("netprobe: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
