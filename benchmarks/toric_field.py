"""Momentum polarization of the toric code's four sectors in a uniform field, DMRG (issue 10).

Kitaev, Ann. Phys. 303, 2 (2003): the anyons 1, e, m, e x m have topological spins h = 0, 0, 0, 1/2 and
c- = 0. At the fixed point the plain ``lambda = <T_y^L>`` is ``+2^(1 - L_y)`` in all four sectors
(:mod:`netprobe.pipeline.loops`), so the fermion's 1/2 cannot show. With the model file's ``field``
(``-field sum (X + Z)`` on every spin) the Schmidt spectrum at the cut is no longer flat, and lambda
is expected to carry ``exp(2 pi i (h_a + K) / L_y)`` with an integer K once ``L_y`` is large against
the correlation length of the entanglement Hamiltonian: a real lambda at odd ``L_y`` is then negative
exactly when ``h_a = 1/2``.

For every circumference, length and sector this runs DMRG up a ladder of bond dimensions (warm
started, as ``netprobe edge --engine dmrg`` does), cuts in the middle (``column_cut`` default) and
prints per bond dimension: energy, largest discarded weight of the last sweep, lambda, the loops of
``[z2_loops]`` on the last column of the left part, ``s = L_y arg(lambda) / 2 pi mod 1`` and the CPU
seconds of the run. Sectors by the end signs (models/toric_code.toml): ``1`` (left_edge, right_edge) =
(1, 1), ``e`` (-1, 1), ``m`` (1, -1), ``em`` (-1, -1). Not part of the default suite. Usage::

    python -m benchmarks.toric_field --circumferences 5 --length 4 --bond-dimensions 64,128
    python -m benchmarks.toric_field --circumferences 7 --sectors 1,em --bond-dimensions 128,256

``--jsonl FILE`` appends one JSON object per run (all rungs) to FILE; ``--table FILE`` prints the
table of such a file without running anything. With three or more circumferences
the script also prints, per sector, the fit of ``netprobe edge --circumferences`` over them
(:func:`netprobe.pipeline.edge.fit_polarization`, the largest bond dimension of each run).
"""

from __future__ import annotations

import argparse
import cmath
import json
import math
import sys
import time

from netprobe.engines.dmrg import SweepSettings, find_ground_state
from netprobe.engines.mps import product_expectation
from netprobe.model.spec import load_model
from netprobe.pipeline.cut import column_cut, mps_cut
from netprobe.pipeline.edge import fit_polarization
from netprobe.pipeline.loops import z2_sector

__all__ = ["SECTOR_ENDS", "FIXED_POINT_SEEDS", "FIXED_POINT_ENERGY", "run_sector", "main"]

FIXED_POINT_SEEDS = 8
FIXED_POINT_ENERGY = 1e-6  # far below the cost 2 of one violated term, far above the sweeps' rounding

SECTOR_ENDS = {"1": (1, 1), "e": (-1, 1), "m": (1, -1), "em": (-1, -1)}
"""Sector name -> (left_edge, right_edge) of models/toric_code.toml (odd circumferences)."""


def _s(ly: int, lam: complex) -> float:
    s = ly * cmath.phase(lam) / (2 * math.pi)
    r = s - math.floor(s + 0.5)
    return 0.5 if r <= -0.5 + 1e-9 else r


def run_sector(ly: int, length: int, sector: str, *, field: float, bond_dimensions, sweeps: int,
               seed: int = 0, from_fixed_point: bool = False, progress=None, out=print) -> dict:
    """DMRG ladder of one sector; returns the rungs (energy, discarded weight, lambda, loops, CPU seconds).

    ``from_fixed_point`` starts from the ground state without the field (same ends) instead of a random
    state. ``progress`` (a file) receives the engine's line per sweep.
    """
    left, right = SECTOR_ENDS[sector]
    model = load_model("toric_code", {"length": str(length), "circumference": str(ly), "field": repr(field),
                                      "left_edge": str(left), "right_edge": str(right)})
    cut = column_cut(model.lattice, None)
    state, rungs = None, []
    if from_fixed_point:
        # the same ends without the field: a stabilizer state, exact at a modest bond dimension and
        # sharply in the sector; the field's runs start from it instead of a random state
        fixed = load_model("toric_code", {"length": str(length), "circumference": str(ly),
                                          "left_edge": str(left), "right_edge": str(right)})
        # frustration free: every star and plaquette term satisfied, E = -(N_stars + N_plaquettes) (Je = Jm
        # = 1) in every sector. DMRG from a random state sometimes stops one end term short (an anyon
        # parked at an end, the wrong loop), so other seeds are tried until the energy is exact
        exact = -float(len(fixed.lattice.family("stars")) + len(fixed.lattice.family("plaquettes")))
        start = time.process_time()
        for attempt in range(FIXED_POINT_SEEDS):
            found = find_ground_state(fixed, SweepSettings(bond_dimension=int(bond_dimensions[0]),
                                                           sweep_limit=int(sweeps)),
                                      seed=seed + attempt, progress=None, warn=False)
            if abs(found.energy - exact) < FIXED_POINT_ENERGY:
                break
        else:
            raise RuntimeError(f"no seed of {FIXED_POINT_SEEDS} reached the fixed point's energy {exact}")
        state = found.state
        out(f"L_y={ly} length={length} sector={sector:2s} fixed point (field 0) as the start: "
            f"E={found.energy:.10f} (exact {exact:.0f}) after {attempt + 1} seed(s), "
            f"cpu={time.process_time() - start:.0f}s")
    for d in bond_dimensions:
        start = time.process_time()
        # the settings of netprobe edge --engine dmrg (pipeline/edge.py)
        kwargs = {"bond_dimension": int(d), "energy_tolerance": 1e-12, "solver_tolerance": 1e-10,
                  "sweep_limit": int(sweeps)}
        if state is not None:
            kwargs["ramp"] = ()
        result = find_ground_state(model, SweepSettings(**kwargs), seed=seed, state=state, progress=progress,
                                   warn=False)
        state = result.state
        lam = mps_cut(state, cut).polarization
        z2 = z2_sector(model, cut.column - 1, lambda p: product_expectation(state, p))
        rung = {"bond_dimension": int(d), "energy": float(result.energy),
                "discarded_weight": float(result.discarded_weight), "converged": bool(result.converged),
                "sweeps": len(result.discarded_weights), "lambda_re": lam.real, "lambda_im": lam.imag,
                "lambda_abs": abs(lam), "s": _s(ly, lam), "charge_loop": z2.charge_loop,
                "flux_loop": z2.flux_loop, "q": z2.charge, "f": z2.flux,
                "cpu_seconds": time.process_time() - start}
        rungs.append(rung)
        out(f"L_y={ly} length={length} sector={sector:2s} D={d:4d} E={rung['energy']:+.10f} "
            f"disc={rung['discarded_weight']:.1e} sweeps={rung['sweeps']} conv={rung['converged']} "
            f"lambda={lam.real:+.6f}{lam.imag:+.1e}j s={rung['s']:+.3f} "
            f"W_charge={z2.charge_loop:+.4f} W_flux={z2.flux_loop:+.4f} (q,f)=({z2.charge},{z2.flux}) "
            f"cpu={rung['cpu_seconds']:.0f}s")
    return {"circumference": ly, "length": length, "sector": sector, "field": field, "cut_column": cut.column,
            "from_fixed_point": from_fixed_point, "rungs": rungs}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description="Toric code in a field: lambda per sector by DMRG.")
    parser.add_argument("--circumferences", default="5", help="odd circumferences, comma-separated")
    parser.add_argument("--length", type=int, default=4)
    parser.add_argument("--sectors", default="1,e,m,em")
    parser.add_argument("--field", type=float, default=0.25)
    parser.add_argument("--bond-dimensions", default="64,128")
    parser.add_argument("--sweeps", type=int, default=8)
    parser.add_argument("--from-fixed-point", action="store_true",
                        help="start each sector from its ground state without the field")
    parser.add_argument("--progress", action="store_true", help="the engine's line per sweep on stderr")
    parser.add_argument("--jsonl", default=None, help="append one JSON object per run to this file")
    parser.add_argument("--table", default=None,
                        help="only print the table and fits of the runs in this file")
    args = parser.parse_args(argv)
    table = []
    if args.table:
        with open(args.table) as fh:
            table = [json.loads(line) for line in fh if line.strip()]
        args.sectors = ",".join(dict.fromkeys(r["sector"] for r in table))
        args.circumferences = ""
    for ly in (int(c) for c in args.circumferences.split(",") if c):
        for sector in args.sectors.split(","):
            run = run_sector(ly, args.length, sector, field=args.field,
                             bond_dimensions=[int(d) for d in args.bond_dimensions.split(",")],
                             sweeps=args.sweeps, from_fixed_point=args.from_fixed_point,
                             progress=sys.stderr if args.progress else None,
                             out=lambda line: print(line, flush=True))
            table.append(run)
            if args.jsonl:
                with open(args.jsonl, "a") as fh:
                    fh.write(json.dumps(run) + "\n")
    print("\n| L_y | length | sector | (q, f) | D | energy | discarded | lambda | s | CPU s |")
    print("|---|---|---|---|---|---|---|---|---|---|")
    for run in table:
        for r in run["rungs"]:
            print(f"| {run['circumference']} | {run['length']} | {run['sector']} | ({r['q']}, {r['f']}) | "
                  f"{r['bond_dimension']} | {r['energy']:.8f} | {r['discarded_weight']:.1e} | "
                  f"{r['lambda_re']:+.5f} | {r['s']:+.2f} | {r['cpu_seconds']:.0f} |")
    # the fit of netprobe edge --circumferences over the largest bond dimension of each run
    for sector, length in dict.fromkeys((r["sector"], r["length"]) for r in table):
        runs = {r["circumference"]: r for r in table if (r["sector"], r["length"]) == (sector, length)}
        runs = [runs[ly] for ly in sorted(runs)]  # the last run per circumference
        if len(runs) >= 3:
            last = [r["rungs"][-1] for r in runs]
            fit = fit_polarization([r["circumference"] for r in runs],
                                   [complex(x["lambda_re"], x["lambda_im"]) for x in last])
            print(f"sector {sector}, length {length}, L_y {fit.circumferences}: "
                  f"h_minus_c_over_24 = {fit.s:+.3f}, error {fit.error}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
