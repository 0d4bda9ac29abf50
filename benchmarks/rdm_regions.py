"""Child process of the large-region benchmarks: one disk, one JSON line, its own peak memory.

``python -m benchmarks.rdm_regions --model kagome_chiral --set length=6 --set circumference=3 --bond 128
--sites 15 [--state FILE] [--spin-twin]`` takes the ``--sites`` sites nearest to the default centre of
the model's lattice in three counterclockwise 120-degree sectors A, B, C (as ``benchmarks.rdm_probe``),
and measures the reduced state with J, CMI and the entropies (``measure_probes``). The state is a saved
one (``--state``) or a seeded random MPS of bond dimension ``--bond`` in the model's sector.
``--spin-twin`` replaces the model by a spin-1/2 chain (twice_sz conserved) of as many sites, same MPS site
indices and bond dimension, complex if the model is: the spin state of the same geometry that a
fermionic region is compared with. Prints the time, the route, the memory estimate, the resident
memory before the measurement and the peak (VmHWM), and the CPU seconds of the process (on a
shared machine the wall time also counts the waits for a core). ``--profile`` adds ``phases``: wall
seconds spent in the walk steps, the join, the eigenvalues of the blocks, the eigendecompositions
for K_AB and K_BC, the J products and the planning (cumulative, main thread, which waits for its
worker threads inside the same calls); with ``--cpu-profile`` the phases are CPU seconds of the whole
process instead (all threads, so that a loaded machine does not inflate them).
"""

from __future__ import annotations

import argparse
import json
import sys
import time

import numpy as np


def _rss(key: str) -> int:
    from benchmarks.machine import proc_kib

    value = proc_kib("/proc/self/status", key)
    return int(value) if value is not None else 0  # bytes


#: (module file, function) -> phase name for ``--profile``
_PHASES = {
    ("split.py", "_double_layer_step"): "walk_steps",
    ("split.py", "_join_into"): "join",
    ("split.py", "_plan"): "planning",
    ("spectra.py", "block_eigenvalues"): "eigenvalues",
    ("blocked.py", "eigh"): "eigh_ab_bc",
    ("blocked.py", "prefix_suffix_trace"): "j_products",
    ("blocked.py", "subset_rho"): "partial_traces",
}


def _phases(prof) -> dict:
    """Cumulative wall seconds of the phases in :data:`_PHASES` (outermost calls only)."""
    import os
    import pstats

    out = {name: 0.0 for name in _PHASES.values()}
    for (path, _, func), (_, _, _, cum, _) in pstats.Stats(prof).stats.items():
        name = _PHASES.get((os.path.basename(path), func))
        if name is not None:
            out[name] += cum
    return {k: round(v, 2) for k, v in out.items()}


def main(argv=None) -> int:
    from benchmarks.rdm_probe import disk_parts
    from netprobe.engines.mps import MPS, random_state
    from netprobe.probes import measure_probes
    from netprobe.model.spec import load_model
    from netprobe.engines.mps.store import load_state

    p = argparse.ArgumentParser(prog="python -m benchmarks.rdm_regions")
    p.add_argument("--model", required=True)
    p.add_argument("--set", action="append", default=[])
    p.add_argument("--bond", type=int, default=64)
    p.add_argument("--sites", type=int, required=True)
    p.add_argument("--state")
    p.add_argument("--seed", type=int, default=5)
    p.add_argument("--spin-twin", action="store_true")
    p.add_argument("--budget-gb", type=float, default=16.0)
    p.add_argument("--profile", action="store_true")
    p.add_argument("--cpu-profile", action="store_true",
                   help="with --profile: the phases in CPU seconds of the process (all threads), not wall seconds")
    args = p.parse_args(argv)
    overrides = dict(item.split("=", 1) for item in args.set)
    model = load_model(args.model, overrides)
    parts = disk_parts(model.lattice, args.sites)
    if args.state:
        state = load_state(args.state).state
        space = model.space
    elif args.spin_twin:
        twin = load_model("heisenberg", {"length": str(model.num_sites)})
        state = random_state(twin.hamiltonian, bond_dimension=args.bond, rng=args.seed)
        if np.iscomplexobj(np.zeros(0, model.hamiltonian.dtype)):
            state = MPS([t.astype(np.complex128) for t in state.tensors], state.basis, centre=state.centre)
        space = twin.space
    else:
        state = random_state(model.hamiltonian, bond_dimension=args.bond, rng=args.seed)
        space = model.space
    baseline = _rss("VmRSS")
    start, cpu = time.perf_counter(), time.process_time()
    prof = None
    if args.profile:
        import cProfile

        prof = cProfile.Profile(time.process_time if args.cpu_profile else time.perf_counter)
        prof.enable()
    report = measure_probes(state, parts, space, probes=("S", "CMI", "J"), memory_budget=int(args.budget_gb * 1e9))
    seconds, cpu = time.perf_counter() - start, time.process_time() - cpu
    phases = None
    if prof is not None:
        prof.disable()
        phases = _phases(prof)
    peak = _rss("VmHWM")
    print(json.dumps({
        "seconds": seconds, "cpu_seconds": cpu, "route": report.route, "J": report.modular_commutator.value,
        "cmi": report.cmi,
        "estimate_bytes": report.memory_estimate, "baseline_rss_bytes": baseline,
        "peak_rss_bytes": peak, "parts": parts, "num_sites": model.num_sites,
        "max_bond": state.max_bond_dimension, "dtype": str(state.dtype), "fermionic": space.fermionic,
        "phases": phases,
    }))
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
