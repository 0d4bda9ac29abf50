"""Profile one DMRG sweep and print its efficiency (not part of the benchmark sets).

``python -m benchmarks.sweep_profile square 128 [--no-charges] [--profile]`` grows a seeded state of
the width-6 square Heisenberg cylinder (or ``kagome``: the width-6 kagome chiral cylinder) to bond
dimension D (one sweep per rung 32, 64, ... D), then times one more sweep at D with one BLAS thread:
matvec flops / GEMM rate of the sweep's dtype / wall time, and with ``--profile`` the cProfile
table of that sweep by cumulative time. ``--state FILE`` starts from a state saved before (HDF5,
``--save FILE`` writes the grown one), ``--warm N`` runs N untimed sweeps first (index plans built,
as in a long run), and ``--split`` prints where the profiled sweep's time went (matvec GEMMs and
block copies, index plans, environments, SVD, Lanczos).
"""

from __future__ import annotations

import argparse
import cProfile
import io
import pstats

import h5py

from benchmarks import workloads as wl
from benchmarks.machine import gemm_rate

__all__ = ["main"]


def main(argv=None) -> None:
    from netprobe.engines.dmrg.engine import GroundStateSearch
    from netprobe.engines.mps.mpo import build_mpo
    from netprobe.engines.mps import random_state
    from netprobe.engines.mps.store import read_mps, write_mps

    parser = argparse.ArgumentParser(prog="python -m benchmarks.sweep_profile")
    parser.add_argument("model", choices=("square", "kagome"))
    parser.add_argument("bond_dimension", type=int)
    parser.add_argument("--no-charges", action="store_true")
    parser.add_argument("--profile", action="store_true")
    parser.add_argument("--split", action="store_true", help="profile and print the split of the sweep's time")
    parser.add_argument("--state", help="start from this saved state (HDF5) instead of growing one")
    parser.add_argument("--save", help="write the grown state to this file (HDF5)")
    parser.add_argument("--warm", type=int, default=0, help="untimed sweeps before the timed one")
    args = parser.parse_args(argv)
    ham = wl.heisenberg_cylinder(6, 6) if args.model == "square" else wl.kagome_cylinder()
    chi = 32
    if args.state:
        with h5py.File(args.state, "r") as f:
            state = read_mps(f["state"])
        chi = args.bond_dimension
    else:
        state = random_state(ham, bond_dimension=16, rng=wl.SEED)
    while not args.state:
        chi = min(chi, args.bond_dimension)
        engine = GroundStateSearch(build_mpo(ham), state, wl.sweep_settings(chi), progress=None)
        record = engine.step()
        print(f"grown to D={chi}: {record.seconds:.1f} s, E = {record.energy:.8f}", flush=True)
        state = engine.state
        if chi == args.bond_dimension:
            break
        chi *= 2
    if args.save:
        with h5py.File(args.save, "w") as f:
            write_mps(f.create_group("state"), state)
    if args.no_charges:
        ham = wl.without_charges_of(ham)
        state = wl.without_charges(state, ham)
    engine = GroundStateSearch(build_mpo(ham), state, wl.sweep_settings(chi), progress=None)
    for _ in range(args.warm):
        record = engine.step()
        print(f"untimed sweep at D={chi}: {record.seconds:.1f} s, E = {record.energy:.8f}", flush=True)
    gemm = gemm_rate(engine.dtype, 1024)
    profiler = cProfile.Profile() if args.profile or args.split else None
    if profiler:
        profiler.enable()
    record = engine.step()
    if profiler:
        profiler.disable()
    gemm = max(gemm, gemm_rate(engine.dtype, 1024))
    print(f"{args.model} D={chi} charges={not args.no_charges} {engine.dtype}: {record.seconds:.1f} s, "
          f"{record.matvecs} matvecs, {record.matvec_flops / 1e9:.1f} GFlop of matvecs, GEMM "
          f"{gemm / 1e9:.1f} GFlop/s: efficiency {record.matvec_flops / gemm / record.seconds:.3f}")
    if args.split:
        _print_split(pstats.Stats(profiler).stats)
    if args.profile:
        out = io.StringIO()
        pstats.Stats(profiler, stream=out).sort_stats("cumulative").print_stats(30)
        print(out.getvalue())


def _print_split(stats) -> None:
    """Seconds and fractions of the profiled sweep in its main parts (cProfile adds its own overhead)."""
    def seconds(name, which):
        return sum(row[2] if which == "own" else row[3]
                   for (_, _, fn), row in stats.items() if fn == name)

    total = seconds("step", "cum")
    rows = [("two-site matvecs", seconds("apply", "cum")),
            ("  contract, own time (sector GEMMs, result blocks as views)", seconds("contract", "own")),
            ("  block copies into sector matrices (_assemble)", seconds("_assemble", "own")),
            ("  index plans built", seconds("_contract_plan", "cum")),
            ("environment updates", seconds("update_left", "cum") + seconds("update_right", "cum")),
            ("SVD of the two-site tensor", seconds("svd", "cum")),
            ("Lanczos, own time", seconds("lanczos_lowest", "own")),
            ("packing blocks into vectors", seconds("pack", "cum"))]
    print(f"split of the profiled sweep ({total:.1f} s under cProfile):")
    for label, value in rows:
        print(f"  {label}: {value:.2f} s = {value / total:.1%}")


if __name__ == "__main__":
    main()
