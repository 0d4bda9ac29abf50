"""``netprobe measure``: observables of a saved state."""

from __future__ import annotations

import numpy as np

from netprobe.errors import NetprobeError
from netprobe.cli.common import _check_png, _emit, _plots
from netprobe.engines import mps as mpsmod
from netprobe.engines.mps.store import load_state
from netprobe.engines.mps.mpo import build_mpo

__all__ = ["add_parser", "cmd_measure"]


def add_parser(sub) -> None:
    """Register ``netprobe measure`` on an ``argparse`` subparsers object."""
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


def cmd_measure(args) -> int:
    """Observables of a saved MPS: local profiles, correlations, entropies, energy."""
    saved = load_state(args.state)
    state = saved.state
    model = saved.model()
    payload: dict = {"state_file": str(args.state), "model": model.name, "sites": model.num_sites,
                     "bond_dimension": state.max_bond_dimension}
    lines = [f"{args.state}: {model.name}, {model.num_sites} sites, bond dimension {state.max_bond_dimension}"]
    profiles = {}
    if args.energy or not (args.local or args.correlation or args.entropy):
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
        _plots().plot_profiles(profiles, args.plot, title=f"{model.name}, D = {state.max_bond_dimension}")
        lines.append(f"plot written to {args.plot}")
    _emit(args, payload, lines)
    return 0


def _complex_list(values):
    arr = np.asarray(values)
    if np.iscomplexobj(arr) and np.max(np.abs(arr.imag), initial=0.0) > 1e-12:
        return [[float(v.real), float(v.imag)] for v in arr]
    return [float(v) for v in np.real(arr)]
