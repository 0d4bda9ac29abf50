"""Conserved Z2 labels of a Kitaev DMRG state: <W_p> per hexagon, <Z> on the end sites, and lambda.

Diagnoses why the momentum polarization of ``models/kitaev.toml`` vanishes without ``edge_bias``: the
plaquettes W_p and Z on every single-link site of the two zigzag ends commute with H, so DMRG from a
random state settles in one pattern of them; a left-end pattern that translation around y does not
preserve makes lambda exactly zero (benchmarks/RESULTS.md, issue 10). Not part of the default suite.
Usage::

    python -m benchmarks.kitaev_sectors --circumference 3 --sweeps 4 [--set edge_bias=0.5 ...]
    python -m benchmarks.kitaev_sectors --engine exact --length 2 --circumference 3 --set edge_bias=0.5
"""

from __future__ import annotations

import argparse
import cmath
import sys
import time

import numpy as np

from netprobe.engines.dmrg.engine import SweepSettings, find_ground_state
from netprobe.engines.exact.solve import apply_operator, ground_state
from netprobe.engines.mps.measure import product_expectation
from netprobe.model.spec import load_model
from netprobe.pipeline.cut import column_cut, exact_cut, mps_cut

__all__ = ["main"]


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description="W_p, end-site Z and lambda of a Kitaev DMRG state.")
    parser.add_argument("--length", type=int, default=4)
    parser.add_argument("--circumference", type=int, default=3)
    parser.add_argument("--bond-dimension", type=int, default=64)
    parser.add_argument("--sweeps", type=int, default=4)
    parser.add_argument("--engine", choices=("dmrg", "exact"), default="dmrg")
    parser.add_argument("--column", type=int, default=None, help="left part = columns 0 .. COLUMN-1 (default central)")
    parser.add_argument("--set", action="append", default=[], metavar="KEY=VALUE", help="extra model parameter")
    args = parser.parse_args(argv)
    if any("=" not in item for item in args.set):
        parser.error("--set: write KEY=VALUE, e.g. --set edge_bias=0.5")
    base = {"length": str(args.length), "circumference": str(args.circumference), "kappa": "0.1"}
    model = load_model("kitaev", {**base, **dict(item.split("=", 1) for item in args.set)})
    # -W_p and -Z_j as the products of a model whose only terms are -sum_p W_p - sum_ends Z_j
    probe = load_model("kitaev", {**base, "Kx": "0", "Ky": "0", "Kz": "0", "kappa": "0", "flux_bias": "1",
                                  "edge_bias": "1", "edge_sign": "1"})
    start = time.perf_counter()
    lat = model.lattice
    cut = column_cut(lat, args.column)
    if args.engine == "dmrg":
        settings = SweepSettings(bond_dimension=args.bond_dimension, sweep_limit=args.sweeps,
                                 energy_tolerance=1e-12, solver_tolerance=1e-10)
        result = find_ground_state(model, settings, seed=0, progress=None, warn=False)
        energy = result.energy
        measure = lambda p: product_expectation(result.state, p)  # noqa: E731
        lam = mps_cut(result.state, cut).polarization
    else:
        gs = ground_state(model.hamiltonian, num_states=2)
        energy = gs.energy
        v = gs.vector(0)
        measure = lambda p: np.vdot(v, apply_operator([p], v, gs.basis))  # noqa: E731
        lam = exact_cut(v, gs.basis, model.space, cut).polarization
        print(f"next level {gs.energies[1]:.10f}")
    value = {tuple(p.sites): float(np.real(-measure(p))) for p in probe.hamiltonian.products}
    print(f"{lat.describe()}: energy {energy:.10f} ({time.perf_counter() - start:.0f} s)")
    print("W_p:", " ".join(f"{value[tuple(sorted(b.sites))]:+.4f}" for b in lat.family("hexagons")) or "(no complete hexagon)")
    for family in ("dangling_left", "dangling_right"):
        print(f"Z on {family}:", " ".join(f"{value[tuple(sorted(b.sites))]:+.4f}" for b in lat.family(family)))
    print(f"lambda, left part columns 0..{cut.column - 1}: |lambda| = {abs(lam):.6g}, arg = {cmath.phase(lam):+.5f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
