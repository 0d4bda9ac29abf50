"""Profile one DMRG sweep and print its efficiency (not part of the benchmark sets).

``python -m benchmarks.sweep_profile square 128 [--no-charges] [--profile]`` grows a seeded state of
the width-6 square Heisenberg cylinder (or ``kagome``: the width-6 kagome chiral cylinder) to bond
dimension D (one sweep per rung 32, 64, ... D), then times one more sweep at D with one BLAS thread:
matvec flops / GEMM rate of the sweep's dtype / wall time, and with ``--profile`` the cProfile
table of that sweep by cumulative time.
"""

from __future__ import annotations

import argparse
import cProfile
import io
import pstats

from benchmarks import workloads as wl
from benchmarks.machine import gemm_rate

__all__ = ["main"]


def main(argv=None) -> None:
    from netprobe.engines.dmrg.engine import GroundStateSearch
    from netprobe.engines.mps.mpo import build_mpo
    from netprobe.engines.mps import random_state

    parser = argparse.ArgumentParser(prog="python -m benchmarks.sweep_profile")
    parser.add_argument("model", choices=("square", "kagome"))
    parser.add_argument("bond_dimension", type=int)
    parser.add_argument("--no-charges", action="store_true")
    parser.add_argument("--profile", action="store_true")
    args = parser.parse_args(argv)
    ham = wl.heisenberg_cylinder(6, 6) if args.model == "square" else wl.kagome_cylinder()
    state = random_state(ham, bond_dimension=16, rng=wl.SEED)
    chi = 32
    while True:
        chi = min(chi, args.bond_dimension)
        engine = GroundStateSearch(build_mpo(ham), state, wl.sweep_settings(chi), progress=None)
        record = engine.step()
        print(f"grown to D={chi}: {record.seconds:.1f} s, E = {record.energy:.8f}", flush=True)
        state = engine.state
        if chi == args.bond_dimension:
            break
        chi *= 2
    if args.no_charges:
        ham = wl.without_charges_of(ham)
        state = wl.without_charges(state, ham)
    engine = GroundStateSearch(build_mpo(ham), state, wl.sweep_settings(chi), progress=None)
    gemm = gemm_rate(engine.dtype, 1024)
    profiler = cProfile.Profile() if args.profile else None
    if profiler:
        profiler.enable()
    record = engine.step()
    if profiler:
        profiler.disable()
    gemm = max(gemm, gemm_rate(engine.dtype, 1024))
    print(f"{args.model} D={chi} charges={not args.no_charges} {engine.dtype}: {record.seconds:.1f} s, "
          f"{record.matvecs} matvecs, {record.matvec_flops / 1e9:.1f} GFlop of matvecs, GEMM "
          f"{gemm / 1e9:.1f} GFlop/s: efficiency {record.matvec_flops / gemm / record.seconds:.3f}")
    if profiler:
        out = io.StringIO()
        pstats.Stats(profiler, stream=out).sort_stats("cumulative").print_stats(30)
        print(out.getvalue())


if __name__ == "__main__":
    main()
