"""``netprobe assess``: c- and gamma with error bars and a verdict."""

from __future__ import annotations

import sys
from pathlib import Path

from netprobe.errors import NetprobeError
from netprobe.cli import options
from netprobe.cli.common import _bond_dimensions, _check_png, _circumferences, _emit, _load, _plots, _solve_settings
from netprobe.engines.dmrg.ladder import CHECKPOINT_NAME
from netprobe.engines import GroundState
from netprobe.engines.mps.store import load_state
from netprobe.pipeline.assess import assess_model, assess_states
from netprobe.pipeline.edge import edge_ladder
from netprobe.model.spec import load_spec, parse_overrides

__all__ = ["add_parser", "cmd_assess"]


def _state_sources(text: str) -> list:

    source = Path(text)
    if source.is_dir():
        files = sorted((p for p in source.glob("*.h5") if p.name != CHECKPOINT_NAME),
                       key=lambda p: (len(p.name), p.name))
        if not files:
            raise NetprobeError(f"{text}: no state files (*.h5) in this folder; give the --out folder of 'netprobe run'")
        return files
    parts = [Path(t) for t in text.split(",") if t]
    if all(p.suffix in (".h5", ".hdf5") for p in parts):
        return parts
    return []


def _saved_grounds(files) -> list:
    grounds = []
    for path in files:
        saved = load_state(path)
        model = saved.model()
        grounds.append(GroundState("dmrg", "many-body", saved.state, float(saved.info.get("energy", float("nan"))),
                                   model, bond_dimension=int(saved.state.max_bond_dimension),
                                   discarded_weight=saved.info.get("discarded_weight"),
                                   info={"state_file": str(path)}))
    grounds.sort(key=lambda g: g.bond_dimension)
    if len({(g.model.spec.text, repr(sorted(g.model.parameters.items()))) for g in grounds}) > 1:
        raise NetprobeError("the state files belong to different models or parameters; give one ladder")
    return grounds


def add_parser(sub) -> None:
    """Register ``netprobe assess`` on an ``argparse`` subparsers object."""
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
    p.add_argument("--seed", type=options.seed, default=0, metavar="S", help="DMRG seed (default 0)")
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


def cmd_assess(args) -> int:
    """c- and gamma with error bars, a certificate and a verdict."""
    if args.max_sites < 3:
        raise NetprobeError(f"--max-sites {args.max_sites}: a three-sector region needs at least 3 sites")
    if args.placements < 1:
        raise NetprobeError(f"--placements {args.placements}: give at least 1")
    if not 0 < args.eps < 1e-3:
        raise NetprobeError(f"--eps {args.eps}: choose a small positive floor such as 1e-12 (large floors bias J)")
    budget = None
    if args.memory_budget is not None:
        if not args.memory_budget > 0 or args.memory_budget == float("inf"):
            raise NetprobeError(f"--memory-budget must be a positive number of GB, got {args.memory_budget}")
        budget = int(args.memory_budget * 2**30)
    if args.plot:
        _check_png(args.plot)
    files = _state_sources(args.spec)
    circumferences = _circumferences(args.circumferences) if getattr(args, "circumferences", None) else None
    if circumferences and files:
        raise NetprobeError("--circumferences needs a model source (each circumference runs the engine); state "
                            "files hold one circumference")
    common = dict(max_sites=args.max_sites, placements=args.placements, eps=args.eps, memory_budget=budget,
                  progress=sys.stderr)
    if files:
        if args.overrides:
            raise NetprobeError("--set applies to model sources; state files carry their own parameters")
        result = assess_states(_saved_grounds(files), **common)
    else:
        # assess_model refuses a lattice without regions before the ground state is sought
        result = assess_model(_load(args), engine=args.engine,
                              settings=_solve_settings(args, parse_overrides(args.overrides)), **common)
    if circumferences:
        result = result.with_polarization(_polarization(args, circumferences))
    payload = result.to_json()
    lines = _assess_lines(result)
    if args.plot:
        _plots().plot_assessment(result, args.plot, title=f"{result.model.name} ({result.engine})")
        lines.append(f"plot written to {args.plot}")
    _emit(args, payload, lines)
    return 0


def _polarization(args, circumferences) -> dict:
    """The momentum-polarization fit of ``netprobe edge --circumferences`` on the same model and engine."""
    overrides = {k: v for k, v in parse_overrides(args.overrides).items() if k != "circumference"}
    ladder = edge_ladder(load_spec(args.spec), overrides, circumferences, engine=args.engine,
                         bond_dimensions=_bond_dimensions(args.bond_dimension), sweeps=args.sweeps, seed=args.seed,
                         progress=sys.stderr if args.engine == "dmrg" else None)
    return ladder["polarization"]


def polarization_line(a) -> str:
    """One line: the momentum-polarization c- beside the bulk one, and whether they agree."""
    p = a.polarization
    err = "n/a" if p.get("c_minus_error") is None else f"{p['c_minus_error']:.3f}"
    head = (f"momentum polarization (cylinder cut, L_y = {','.join(map(str, p.get('circumferences') or []))}): "
            f"c- = {p['c_minus']:+.3f} +- {err} (mod 24)")
    return f"{head}; {p['statement']}"


def _assess_lines(a) -> list[str]:
    def pm(v, e, spec="+.4f"):
        return "n/a" if v is None else f"{v:{spec}} +- {e:.4f}"

    lines = [f"{a.model.name} ({a.engine}): {a.model.num_sites} sites, {len(a.sizes)} region sizes"]
    lines.append(f"{'sites':>6} {'R':>6} {'J':>12} {'+-':>8} {'c-':>8} {'gamma':>9} {'+-':>8}  certified")
    for e in a.sizes:
        lines.append(f"{e.sites:>6} {e.linear_size:>6.2f} {e.J:>12.6f} {e.J_error:>8.1e} {3 * e.J / 3.141592653589793:>8.4f} "
                     f"{e.gamma:>9.5f} {e.gamma_error:>8.1e}  {'yes' if e.certified else 'no'}")
    xi = a.markov_length
    lines.append(f"Markov length: {'n/a' if xi is None else f'{xi:.3f}'} ({a.markov.get('method', '')})")
    near = a.nearest
    lines.append(f"c- = {pm(a.c_minus, a.c_minus_error)}" + (f"   (nearest multiple of 1/2: {near['c_minus']:+g})"
                                                               if "c_minus" in near else ""))
    lines.append(f"gamma = {pm(a.gamma, a.gamma_error)}" + (f"   (nearest: {near['gamma']['name']})"
                                                             if "gamma" in near else ""))
    lines.append(f"verdict: {a.verdict} ({'certified' if a.certified else 'uncertified'}): {a.reason}")
    if a.polarization is not None:
        lines.append(polarization_line(a))
    lines += [f"note: {n}" for n in a.notes]
    return lines
