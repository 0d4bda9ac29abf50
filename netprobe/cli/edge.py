"""``netprobe edge``: the cut between the cylinder halves, momentum-resolved."""

from __future__ import annotations

import sys

from netprobe.errors import NetprobeError
from netprobe.cli import options
from netprobe.cli.common import _bond_dimensions, _check_png, _circumferences, _emit, _load, _plots
from netprobe.pipeline.edge import ZERO_MODE_RATIO, edge_ladder, edge_state
from netprobe.model.spec import load_spec, parse_overrides

__all__ = ["add_parser", "cmd_edge"]


def add_parser(sub) -> None:
    """Register ``netprobe edge`` on an ``argparse`` subparsers object."""
    p = sub.add_parser("edge", help="cut between the cylinder halves: momentum-resolved entanglement spectrum, "
                                    "level counting, momentum polarization (h_a - c-/24)")
    p.add_argument("spec", metavar="SOURCE", help="model file (path) or the name of a bundled model")
    p.add_argument("--set", dest="overrides", action="append", default=[], metavar="NAME=VALUE",
                   help="override a model parameter (repeatable)")
    p.add_argument("--engine", default="dmrg", choices=("dmrg", "exact", "gaussian"),
                   help="ground-state engine (default dmrg)")
    p.add_argument("--bond-dimension", default="64", metavar="D[,D...]",
                   help="DMRG ladder, each rung warm-starts the next; the cut is read on the last (default 64)")
    p.add_argument("--sweeps", type=int, default=None, metavar="N", help="maximum DMRG sweeps per rung")
    p.add_argument("--seed", type=options.seed, default=0, metavar="S", help="DMRG seed (default 0)")
    p.add_argument("--cut", type=int, default=None, metavar="COLUMN",
                   help="columns in the left part (default: half the length, the central cut)")
    p.add_argument("--circumferences", default=None, metavar="L1,L2,...",
                   help="run every circumference and fit arg lambda to (2 pi/L) s + b L + const")
    p.add_argument("--steps", type=int, default=4, metavar="N", help="momentum steps counted (default 4)")
    p.add_argument("--window", type=float, default=None, metavar="XI",
                   help="count every level within XI of the lowest of its sector (default: a window that "
                        "grows with the momentum step)")
    p.add_argument("--flux-quanta", type=int, default=0, metavar="N",
                   help="dmrg: thread N flux quanta through the cylinder (warm-started steps) before the cut, "
                        "to reach another anyon sector")
    p.add_argument("--levels-window", type=float, default=12.0, metavar="XI",
                   help="free fermions: many-body levels enumerated up to XI above the lowest (default 12)")
    p.add_argument("--plot", metavar="FILE.png", help="levels -ln(lambda^2) against momentum, one panel per charge")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=cmd_edge)


def cmd_edge(args) -> int:
    """Cut diagnostics: charge- and momentum-resolved Schmidt spectrum, counting, momentum polarization."""
    chis = _bond_dimensions(args.bond_dimension)
    if args.sweeps is not None and args.sweeps < 1:
        raise NetprobeError(f"--sweeps must be at least 1, got {args.sweeps}")
    if args.steps < 1:
        raise NetprobeError(f"--steps must be at least 1, got {args.steps}")
    if args.window is not None and args.window <= 0:
        raise NetprobeError(f"--window must be positive, got {args.window}")
    if args.levels_window <= 0:
        raise NetprobeError(f"--levels-window must be positive, got {args.levels_window}")
    if args.plot:
        _check_png(args.plot)
    common = dict(engine=args.engine, column=args.cut, bond_dimensions=chis, sweeps=args.sweeps, seed=args.seed,
                  window=args.levels_window, steps=args.steps, count_window=args.window,
                  flux_quanta=args.flux_quanta)
    if args.circumferences:
        overrides = parse_overrides(args.overrides)
        if "circumference" in overrides:
            raise NetprobeError("--set circumference=... and --circumferences both given; use one of them")
        spec = load_spec(args.spec)
        result = edge_ladder(spec, overrides, _circumferences(args.circumferences), progress=sys.stderr,
                             **common)
    else:
        result = edge_state(_load(args), progress=sys.stderr if args.engine == "dmrg" else None, **common)
    lines = _edge_lines(result)
    if args.plot:
        _plots().plot_cut_spectrum(result, args.plot, title=f"{result['model']} ({result['engine']}): {result['lattice']}")
        lines.append(f"plot written to {args.plot}")
    _emit(args, result, lines)
    return 0


def _edge_lines(r: dict) -> list[str]:
    lines = [f"{r['model']} ({r['engine']}): {r['lattice']}; cut after column {r['cut']['column']} "
             f"(bond {r['cut']['bond']})"]
    details = r["counting_details"]
    for sector in details["sectors"]:
        if sector["charge"] != details["lowest_sector"] and len(details["sectors"]) > 5:
            continue
        arrow = {1: "towards +y", -1: "towards -y", 0: "no direction"}[sector["direction"]]
        match = f"  matches {', '.join(sector['matches'])}" if sector["matches"] else ""
        lines.append(f"  charge {sector['charge']:>6}: lowest level {sector['lowest_level']:.4f}, counts "
                     f"{' '.join(map(str, sector['counts']))} ({arrow}; other side "
                     f"{' '.join(map(str, sector['counts_opposite']))}){match}")
    ratio = r.get("zero_mode_ratio")
    if ratio is not None and ratio < ZERO_MODE_RATIO:
        lines.append(f"  warning: neighbouring charges lie {ratio:.3f} momentum steps above the lowest level: a zero "
                     "mode of the edge at the cut (periodic sector); a twist of pi or the other parity of L_y moves "
                     "the allowed momenta off the crossing")
    pol = r["polarization"]
    lines.append(f"lambda = <T_y^L>: |lambda| = {pol['lambda_abs']:.6g}, arg = {pol['lambda_arg']:+.6f}")
    loops = pol.get("z2_loops")
    if loops is not None:
        labels = (f"charge q = {loops['charge']}, flux f = {loops['flux']}" if loops["sharp"]
                  else "not sharp: a mixture of sectors")
        lines.append(f"  Z2 loops on column {loops['column']}: <charge> = {loops['charge_loop']:+.6f}, "
                     f"<flux> = {loops['flux_loop']:+.6f}; {labels}")
    if "h_minus_c_over_24" in pol:
        err = "n/a" if pol["error"] is None else f"{pol['error']:.4f}"
        cerr = "n/a" if pol["c_minus_error"] is None else f"{pol['c_minus_error']:.3f}"
        lines.append(f"h_a - c-/24 = {pol['h_minus_c_over_24']:+.5f} +- {err} (mod 1); vacuum sector: "
                     f"c- = {pol['c_minus']:+.4f} +- {cerr} (mod 24)")
        lines.append(f"  circumferences {pol['circumferences']}: {pol['note']}")
        for f in r.get("sector_fits", []):
            if f["offset"]:
                lines.append(f"  charge offset {f['offset']:+d}: h - c-/24 = {f['h_minus_c_over_24']:+.5f}, "
                             f"h relative to the most probable charge = {f['h_relative']:.5f} (mod 1)")
    if r.get("ladder"):
        for rung in r["ladder"]:
            lines.append(f"  D = {rung['bond_dimension']:>5}: energy {rung['energy']:.10f}  |lambda| "
                         f"{rung['lambda_abs']:.8f}  arg {rung['lambda_arg']:+.8f}")
    return lines
