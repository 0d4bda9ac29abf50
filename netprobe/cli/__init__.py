"""The ``netprobe`` command line.

Every subcommand turns our own errors (:class:`netprobe.errors.NetprobeError`) into one line on
standard error and exit status 2; a traceback means a bug. ``--json`` makes standard output one
JSON object, with progress and notes on standard error.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import sys
import time

import numpy as np

from netprobe import __version__

from netprobe.cli import options
from netprobe.errors import NetprobeError
from netprobe.engines.limits import check_dmrg_model, check_exact_model

__all__ = ["main", "build_parser"]

_EXACT_BITS = 62  # basis codes of the exact engine are 62-bit integers


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

    from netprobe.cli.study import add_report_parser, add_study_parser

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


def _load(args, memory_budget: int | None = None):
    from netprobe.model.spec import load_model, parse_overrides

    return load_model(args.spec, parse_overrides(args.overrides), memory_budget=memory_budget)


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
    from netprobe.model.spec import list_models, load_spec

    entries = []
    for path in list_models():
        spec = load_spec(str(path))
        entries.append({"name": spec.name, "file": str(path), "site": spec.site, "description": spec.description})
    width = max((len(e["name"]) for e in entries), default=0)
    _emit(args, {"models": entries}, [f"{e['name']:<{width}}  {e['description']}" for e in entries])
    return 0


def _model_summary(model) -> dict:
    from netprobe.engines.mps.mpo import build_mpo
    from netprobe.model.sites import count_sector_states

    ham = model.hamiltonian
    mpo = build_mpo(ham)
    families = {}
    for entry in model.spec.terms:
        families[entry.on] = len(model.lattice.family(entry.on))
    # beyond 62 bits of basis codes exact diagonalisation is impossible, and the count itself is slow
    if model.num_sites * math.log2(max(model.space.dim, 2)) <= _EXACT_BITS:
        dim = count_sector_states(model.space, model.num_sites, ham.conserve, ham.sector)
    else:
        dim = None
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
        "mpo_bond_dimensions_uncompressed": list(mpo.uncompressed_bond_dimensions),
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
        (f"exact dim  {info['exact_dimension']:,} basis states in the sector" if info["exact_dimension"] is not None
         else f"exact dim  far beyond exact diagonalisation ({model.space.dim}^{model.num_sites} basis states)"),
        f"MPO        max bond dimension {max(info['mpo_bond_dimensions'], default=1)} "
        f"(bonds: {' '.join(map(str, info['mpo_bond_dimensions']))})",
        f"           before exact compression {max(info['mpo_bond_dimensions_uncompressed'], default=1)} "
        f"(bonds: {' '.join(map(str, info['mpo_bond_dimensions_uncompressed']))})",
        "Hermitian  yes",
    ]
    _emit(args, info, lines)
    return 0


def cmd_exact(args) -> int:
    """Exact ground state (and low states) of a model in its target sector."""
    from netprobe.engines.exact import ground_state

    if args.states < 1:
        raise NetprobeError(f"--states must be at least 1, got {args.states}")
    model = _load(args)
    check_exact_model(model, where="netprobe exact", num_states=args.states)
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


def cmd_run(args) -> int:
    """DMRG over a bond-dimension ladder; state files and checkpoints in --out."""
    from netprobe.engines.dmrg import LadderSettings, SweepSettings, run_ladder
    from netprobe.model.spec import parse_overrides

    chis = _bond_dimensions(args.bond_dimension)
    if args.sweeps is not None and args.sweeps < 1:
        raise NetprobeError(f"--sweeps must be at least 1, got {args.sweeps}")
    if args.resume and not args.out:
        raise NetprobeError("--resume needs --out DIR: the folder that holds the checkpoint")
    model = _load(args)
    check_dmrg_model(model, chis[-1], where=f"--bond-dimension {chis[-1]}")
    sweeps = SweepSettings(max_sweeps=args.sweeps) if args.sweeps else SweepSettings()
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


def cmd_measure(args) -> int:
    """Observables of a saved MPS: local profiles, correlations, entropies, energy."""
    from netprobe.engines import mps as mpsmod
    from netprobe.engines.mps.store import load_state

    saved = load_state(args.state)
    state = saved.state
    model = saved.model()
    payload: dict = {"state_file": str(args.state), "model": model.name, "sites": model.num_sites,
                     "bond_dimension": state.max_bond_dimension}
    lines = [f"{args.state}: {model.name}, {model.num_sites} sites, bond dimension {state.max_bond_dimension}"]
    profiles = {}
    if args.energy or not (args.local or args.correlation or args.entropy):
        from netprobe.engines.mps.mpo import build_mpo

        mpo = build_mpo(model.hamiltonian)
        energy = float(np.real(mpsmod.expectation_value(state, mpo)))
        variance = float(mpsmod.energy_variance(state, mpo))
        payload.update(energy=energy, energy_per_site=energy / model.num_sites, variance=variance)
        lines.append(f"energy {energy:.12f}  per site {energy / model.num_sites:.12f}  variance {variance:.2e}")
    for op in args.local:
        values = mpsmod.local_expectations(state, op)
        payload.setdefault("local", {})[op] = _complex_list(values)
        profiles[f"<{op}>"] = np.real(values)
        lines.append(f"<{op}_i>: " + " ".join(f"{v:.6f}" for v in np.real(values)) + f"   mean {np.mean(np.real(values)):.8f}")
    for pair in args.correlation:
        names = [p.strip() for p in pair.split(",")]
        if len(names) != 2 or not all(names):
            raise NetprobeError(f"--correlation {pair}: give two operators separated by a comma, e.g. Sz,Sz")
        i = model.num_sites // 2
        values = [mpsmod.correlation(state, names[0], names[1], i, j) for j in range(model.num_sites)]
        payload.setdefault("correlation", {})[pair] = {"from_site": i, "values": _complex_list(values)}
        profiles[f"<{names[0]}_{i} {names[1]}_j>"] = np.real(values)
        lines.append(f"<{names[0]}_{i} {names[1]}_j>: " + " ".join(f"{np.real(v):.6f}" for v in values))
    if args.entropy:
        ent = np.asarray(mpsmod.entanglement_entropies(state), dtype=float)
        payload["entropies"] = ent.tolist()
        profiles["S(bond)"] = ent
        lines.append("entanglement entropy per bond: " + " ".join(f"{v:.5f}" for v in ent))
    if args.plot:
        _check_png(args.plot)
        from netprobe.output.plots import plot_profiles

        plot_profiles(profiles, args.plot, title=f"{model.name}, D = {state.max_bond_dimension}")
        lines.append(f"plot written to {args.plot}")
    _emit(args, payload, lines)
    return 0


def _complex_list(values):
    arr = np.asarray(values)
    if np.iscomplexobj(arr) and np.max(np.abs(arr.imag), initial=0.0) > 1e-12:
        return [[float(v.real), float(v.imag)] for v in arr]
    return [float(v) for v in np.real(arr)]


def cmd_probe(args) -> int:
    """Bulk probes on a region of a saved state or of a model's ground state."""
    from pathlib import Path

    from netprobe.engines import SolveSettings
    from netprobe.pipeline import probe_model, probe_saved_state
    from netprobe.model.spec import parse_overrides

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


def _solve_settings(args, overrides):
    from netprobe.engines.dmrg import SweepSettings
    from netprobe.engines import SolveSettings

    return SolveSettings(bond_dimensions=_bond_dimensions(args.bond_dimension),
                         sweeps=SweepSettings(max_sweeps=args.sweeps) if args.sweeps else None,
                         seed=args.seed, out=getattr(args, "out", None), progress=sys.stderr,
                         overrides=overrides)


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
    from netprobe.output.plots import plot_layout, plot_profiles

    layout = result.plan.main
    title = f"{result.model.name}: {layout.spec}"
    values = result.last.values
    if values.J is not None:
        title += f"\nJ = {values.J:.5f}, c- = {values.c_minus:.4f}"
    plot_layout(layout, path, title=title)
    if len(result.rungs) > 1:
        rungs = result.rungs
        plot_profiles({"J": [r.values.J or 0.0 for r in rungs]}, f"{path[:-4]}_ladder.png",
                      title="J by ladder rung: D = " + ", ".join(str(r.ground.bond_dimension) for r in rungs))


def _state_sources(text: str) -> list:
    from pathlib import Path

    from netprobe.engines.dmrg.ladder import CHECKPOINT_NAME

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
    from netprobe.engines import GroundState
    from netprobe.engines.mps.store import load_state

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


def cmd_assess(args) -> int:
    """c- and gamma with error bars, a certificate and a verdict."""
    from netprobe.engines import solve
    from netprobe.pipeline.assess import assess_states
    from netprobe.model.spec import parse_overrides

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
    if files:
        if args.overrides:
            raise NetprobeError("--set applies to model sources; state files carry their own parameters")
        grounds = _saved_grounds(files)
    else:
        model = _load(args)
        grounds, _ = solve(model, args.engine, _solve_settings(args, parse_overrides(args.overrides)))
    result = assess_states(grounds, max_sites=args.max_sites, placements=args.placements, eps=args.eps,
                           memory_budget=budget, progress=sys.stderr)
    payload = result.to_json()
    lines = _assess_lines(result)
    if args.plot:
        from netprobe.output.plots import plot_assessment

        plot_assessment(result, args.plot, title=f"{result.model.name} ({result.engine})")
        lines.append(f"plot written to {args.plot}")
    _emit(args, payload, lines)
    return 0


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
    lines += [f"note: {n}" for n in a.notes]
    return lines


def cmd_flux(args) -> int:
    """Flux threading: <Q_L> at the central cut against the twist, warm-started step to step."""
    from netprobe.pipeline.flux import thread_flux
    from netprobe.model.spec import load_spec, parse_overrides

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
        from netprobe.output.plots import plot_flux

        plot_flux(result, args.plot, title=f"{spec.name}: flux threading")
        lines.append(f"plot written to {args.plot}")
    _emit(args, payload, lines)
    return 0


def _add_edge_parser(sub):
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
    p.add_argument("--seed", type=int, default=0, metavar="S", help="DMRG seed (default 0)")
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


def _circumference_list(text: str) -> list[int]:
    try:
        values = [int(v) for v in text.split(",") if v.strip()]
    except ValueError:
        raise NetprobeError(f"--circumferences {text}: give integers separated by commas, e.g. 7,9,11,13") from None
    if len(set(values)) < 3 or min(values) < 2:
        raise NetprobeError(f"--circumferences {text}: give at least three different circumferences of 2 or more, "
                            "e.g. 7,9,11,13")
    return sorted(set(values))


def cmd_edge(args) -> int:
    """Cut diagnostics: charge- and momentum-resolved Schmidt spectrum, counting, momentum polarization."""
    from netprobe.pipeline.edge import edge_ladder, edge_state
    from netprobe.model.spec import load_spec, parse_overrides

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
        result = edge_ladder(spec, overrides, _circumference_list(args.circumferences), progress=sys.stderr,
                             **common)
    else:
        result = edge_state(_load(args), progress=sys.stderr if args.engine == "dmrg" else None, **common)
    lines = _edge_lines(result)
    if args.plot:
        from netprobe.output.plots import plot_cut_spectrum

        plot_cut_spectrum(result, args.plot, title=f"{result['model']} ({result['engine']}): {result['lattice']}")
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
    pol = r["polarization"]
    lines.append(f"lambda = <T_y^L>: |lambda| = {pol['lambda_abs']:.6g}, arg = {pol['lambda_arg']:+.6f}")
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


def cmd_regions(args) -> int:
    """Build a region layout on the model's lattice, print or plot it."""
    from netprobe.regions import parse_region

    model = _load(args)
    layout = parse_region(args.layout, model.lattice)
    if args.plot:
        from netprobe.output.plots import plot_layout

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
