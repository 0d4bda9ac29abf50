"""``netprobe probe``: bulk probes of a ground state on a region."""

from __future__ import annotations

from pathlib import Path

from netprobe.errors import NetprobeError
from netprobe.engines.limits import check_dmrg_model, check_exact_model
from netprobe.cli import options
from netprobe.cli.common import _check_png, _emit, _load, _plots, _solve_settings
from netprobe.pipeline import probe_model, probe_saved_state
from netprobe.model.spec import parse_overrides

__all__ = ["add_parser", "cmd_probe"]


def add_parser(sub) -> None:
    """Register ``netprobe probe`` on an ``argparse`` subparsers object."""
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


def cmd_probe(args) -> int:
    """Bulk probes on a region of a saved state or of a model's ground state."""

    probes = [p for p in args.probes.split(",") if p.strip()]
    budget = None
    if args.memory_budget is not None:
        if args.memory_budget <= 0:
            raise NetprobeError(f"--memory-budget must be positive (in GB), got {args.memory_budget}")
        budget = int(args.memory_budget * 2**30)
    if not 0 < args.eps < 1e-3:
        raise NetprobeError(f"--eps {args.eps}: choose a small positive floor such as 1e-12 (large floors bias J)")
    if args.plot:
        _check_png(args.plot)
    source = Path(args.spec)
    if source.suffix in (".h5", ".hdf5"):
        if args.overrides:
            raise NetprobeError("--set applies to model sources; a state file carries its own parameters")
        result = probe_saved_state(source, args.region, probes=probes, eps=args.eps, memory_budget=budget)
    else:
        model = _load(args, budget)
        settings = _solve_settings(args, parse_overrides(args.overrides))
        if args.engine == "dmrg":
            check_dmrg_model(model, settings.bond_dimensions[-1], where=f"--bond-dimension "
                             f"{settings.bond_dimensions[-1]}", budget=budget)
        elif args.engine == "exact":
            check_exact_model(model, where="--engine exact", budget=budget)
        result = probe_model(model, args.region, engine=args.engine, probes=probes, settings=settings,
                             eps=args.eps, memory_budget=budget, cmi_region=args.cmi_region)
    payload = result.to_json()
    lines = _probe_lines(payload)
    if args.plot:
        _plot_probe(result, args.plot)
        lines.append(f"plot written to {args.plot}")
    _emit(args, payload, lines)
    return 0


def _probe_lines(r: dict) -> list[str]:
    def fmt(v, spec=".8f"):
        return "n/a" if v is None else format(v, spec)

    main = r["regions"]["main"]
    sizes = ", ".join(f"{k} {len(v['sites'])}" for k, v in main["parts"].items())
    lines = [f"{r['model']} ({r['engine']}): {r['sites']} sites; region {main['spec']} ({sizes})"]
    if r.get("J") is not None:
        loose = f"  (at 100 eps: {r['J_loose']:.8f})" if r.get("J_loose") is not None else ""
        lines.append(f"J = {r['J']:.8f}   c- = 3J/pi = {r['c_minus']:.6f}{loose}")
    if r.get("chern_number") is not None:
        lines.append(f"real-space Chern number = {r['chern_number']:.6f}")
    if r.get("gamma") is not None:
        lines.append(f"gamma (Kitaev-Preskill) = {r['gamma']:.8f}   (ln 2 = {0.6931471806:.8f})")
    if r.get("gamma_levin_wen") is not None:
        lines.append(f"gamma (Levin-Wen) = {r['gamma_levin_wen']:.8f}")
    if r.get("cmi") is not None:
        lines.append(f"CMI I(A:C|B) = {fmt(r['cmi'], '.3e')}")
    if r.get("entropies"):
        lines.append("entropies: " + "  ".join(f"S_{k} = {v:.6f}" for k, v in r["entropies"].items()))
    for rung in r.get("ladder", []):
        lines.append(f"  D = {rung['bond_dimension']:>5}: energy {rung['energy']:.10f}  J = {fmt(rung.get('J'))}  "
                     f"gamma = {fmt(rung.get('gamma'))}  CMI = {fmt(rung.get('cmi'), '.2e')}")
    if r.get("note"):
        lines.append(f"note: {r['note']}")
    return lines


def _plot_probe(result, path: str):
    layout = result.plan.main
    title = f"{result.model.name}: {layout.spec}"
    values = result.last.values
    if values.J is not None:
        title += f"\nJ = {values.J:.5f}, c- = {values.c_minus:.4f}"
    _plots().plot_layout(layout, path, title=title)
    if len(result.rungs) > 1:
        rungs = result.rungs
        _plots().plot_profiles({"J": [r.values.J or 0.0 for r in rungs]}, f"{path[:-4]}_ladder.png",
                      title="J by ladder rung: D = " + ", ".join(str(r.ground.bond_dimension) for r in rungs))
