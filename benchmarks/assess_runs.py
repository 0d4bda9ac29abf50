"""End-to-end assessment of the kagome chiral spin liquid (not in the default suite).

``python -m benchmarks.assess_runs [--bond-dimensions 64,128] [--max-sites 12] [--record]`` runs DMRG on
the width-6 kagome cylinder (``kagome_chiral``, J1 = 1, Jchi = 0.5, length 6, circumference 3, 54 sites),
then ``netprobe assess`` on every rung, and with ``--record`` appends a dated section to
benchmarks/RESULTS.md with the sizes, the extrapolation, the verdict and its reason. The expected phase
is the bosonic Laughlin state: c- = 1, gamma = ln 2 / 2 (Kalmeyer and Laughlin, PRL 59, 2095 (1987);
Bauer et al., Nat. Commun. 5, 5137 (2014)).
"""

from __future__ import annotations

import argparse
import datetime
import json
import sys
import time
from pathlib import Path

import netprobe
from netprobe.engines.dmrg import SweepSettings
from netprobe.output.plots import plot_assessment

MODEL = ("kagome_chiral", {"length": "6", "circumference": "3"})


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(prog="python -m benchmarks.assess_runs")
    parser.add_argument("--bond-dimensions", default="64,128")
    parser.add_argument("--max-sites", type=int, default=12)
    parser.add_argument("--sweeps", type=int, default=6)
    parser.add_argument("--record", action="store_true", help="append a dated section to benchmarks/RESULTS.md")
    parser.add_argument("--plot", default="benchmarks/results/assess_kagome.png")
    args = parser.parse_args(argv)
    dims = tuple(int(d) for d in args.bond_dimensions.split(","))
    start = time.perf_counter()
    model = netprobe.load_model(MODEL[0], MODEL[1])
    settings = netprobe.SolveSettings(bond_dimensions=dims, sweeps=SweepSettings(sweep_limit=args.sweeps), seed=1,
                                      progress=sys.stderr)
    grounds, ladder = netprobe.solve(model, "dmrg", settings)
    dmrg_seconds = time.perf_counter() - start
    result = netprobe.assess_states(grounds, max_sites=args.max_sites, placements=2, progress=sys.stderr)
    Path(args.plot).parent.mkdir(parents=True, exist_ok=True)
    plot_assessment(result, args.plot, title="kagome chiral spin liquid, width 6 (DMRG)")
    out = result.to_json()
    out["dmrg_seconds"] = dmrg_seconds
    out["ladder"] = ladder
    print(json.dumps({k: out[k] for k in ("c_minus", "c_minus_error", "gamma", "gamma_error", "verdict", "reason",
                                          "certified", "markov_length")}, indent=2))
    if args.record:
        command = "python -m benchmarks.assess_runs " + " ".join(argv if argv is not None else sys.argv[1:])
        lines = [f"\n## {datetime.date.today().isoformat()}: assessment of the kagome chiral spin liquid (width 6)\n",
                 f"Command: `{command}` ({dmrg_seconds:.0f} s DMRG, {result.seconds:.0f} s assessment, shared "
                 "2-core machine).\n",
                 "| D | energy | discarded weight |", "| --- | --- | --- |"]
        lines += [f"| {s['bond_dimension']} | {s['energy']:.8f} | {s['discarded_weight']:.2e} |" for s in ladder["stages"]]
        lines += ["", "| sites | R | J (1/D-extrapolated) | +- | c- | gamma | certified |", "| --- | --- | --- | --- | --- | --- | --- |"]
        lines += [f"| {e.sites} | {e.linear_size:.2f} | {e.J:+.5f} | {e.J_error:.1e} | {3 * e.J / 3.141592653589793:+.4f} "
                  f"| {e.gamma:+.4f} | {'yes' if e.certified else 'no'} |" for e in result.sizes]
        c = "n/a" if result.c_minus is None else f"{result.c_minus:+.3f} +- {result.c_minus_error:.3f}"
        g = "n/a" if result.gamma is None else f"{result.gamma:+.3f} +- {result.gamma_error:.3f}"
        xi = "n/a" if result.markov_length is None else f"{result.markov_length:.3f}"
        lines += ["", f"Extrapolated c- = {c}, gamma = {g} (ln 2 / 2 = 0.347), Markov length {xi}.",
                  f"Verdict: **{result.verdict}** ({'certified' if result.certified else 'uncertified'}): {result.reason}.",
                  *[f"Note: {n}." for n in result.notes], ""]
        with open("benchmarks/RESULTS.md", "a") as fh:
            fh.write("\n".join(lines))
    return 0


if __name__ == "__main__":
    sys.exit(main())
