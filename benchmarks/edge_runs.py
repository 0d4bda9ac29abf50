"""End-to-end cut diagnostics on two interacting chiral phases (not part of the default suite).

Runs ``netprobe.pipeline.edge.edge_ladder`` (DMRG at each circumference, the momentum-resolved Schmidt
spectrum at the central cut, level counting and the momentum-polarization fit) for

- the kagome Heisenberg model with scalar chirality (``models/kagome_chiral.toml``), expected in the
  nu = 1/2 bosonic Laughlin phase: counting 1, 1, 2, 3 per Sz sector, s = -1/24 (vacuum) or +5/24
  (semion) mod 1 (shared/references.md);
- the Kitaev honeycomb model with the three-spin term kappa (``models/kitaev.toml``), expected
  c- = 1/2: Ising counting and s = -1/48, +1/24 or 23/48 by sector (shared/references.md).

These are invented benchmark settings of our own at the sizes a shared 2-core workstation runs in
about 20 minutes (measured: 470 s kagome, 258 s Kitaev at four sweeps, one core); at circumferences
2-4 and D = 64 the fits are far from their asymptotic regime (three circumferences leave the fit
no degree of freedom, and the counting sees at most L_y // 2 momentum steps), so the numbers record
what the method gives there, not converged values (benchmarks/RESULTS.md). Usage::

    python -m benchmarks.edge_runs            # both models, print a summary
    python -m benchmarks.edge_runs --record   # also append a dated section to benchmarks/RESULTS.md
    python -m benchmarks.edge_runs --only kitaev --set edge_bias=0.5 --set flux_bias=0.5 --output kitaev_pinned

The Kitaev model needs ``edge_bias`` (and ``flux_bias``) for a nonzero lambda: without them DMRG
settles in a pattern of the conserved end spins that the translation around y does not preserve, and
the overlap vanishes (models/kitaev.toml, benchmarks/RESULTS.md).
"""

from __future__ import annotations

import argparse
import datetime
import json
import sys
import time
from pathlib import Path

from netprobe.pipeline.edge import edge_ladder
from netprobe.model.spec import load_spec

__all__ = ["RUNS", "run", "main"]

RUNS = {
    "kagome_chiral": {"overrides": {"length": "4", "Jchi": "0.5"}, "circumferences": (2, 3, 4),
                      "bond_dimensions": (64,)},
    "kitaev": {"overrides": {"length": "4", "kappa": "0.1"}, "circumferences": (2, 3, 4),
               "bond_dimensions": (64,)},
}
"""Sizes a shared 2-core workstation finishes in about 20 minutes (both models, one core)."""


def run(name: str, *, sweeps: int = 6, progress=sys.stderr, extra: dict | None = None) -> dict:
    """One model's ladder; returns the JSON result with the wall time.

    ``extra`` adds or replaces model parameters (e.g. ``{"edge_bias": "0.5"}`` for the Kitaev model).
    """
    cfg = RUNS[name]
    start = time.perf_counter()
    out = edge_ladder(load_spec(name), {**cfg["overrides"], **(extra or {})}, cfg["circumferences"], engine="dmrg",
                      bond_dimensions=cfg["bond_dimensions"], sweeps=sweeps, progress=progress)
    out["wall_seconds"] = time.perf_counter() - start
    return out


def _summary(name: str, out: dict) -> list[str]:
    pol = out["polarization"]
    err = "n/a" if pol["error"] is None else f"{pol['error']:.4f}"
    lines = [f"{name}: {out['lattice']} (largest), D = {', '.join(map(str, RUNS[name]['bond_dimensions']))}, "
             f"{out['wall_seconds']:.0f} s"]
    for r in out["runs"]:
        lines.append(f"    L_y = {r['circumference']}: |lambda| = {r['lambda_abs']:.6g}, arg = {r['lambda_arg']:+.5f}, "
                     f"counting {r['counting']}")
    lines.append(f"    s = h_a - c-/24 = {pol['h_minus_c_over_24']:+.5f} +- {err}; c- (vacuum) = {pol['c_minus']:+.3f}; "
                 f"{pol['note']}")
    details = out["counting_details"]
    low = next(s for s in details["sectors"] if s["charge"] == details["lowest_sector"])
    lines.append(f"    lowest sector {low['charge']}: counts {low['counts']} direction {low['direction']} "
                 f"matches {low['matches'] or 'none'}")
    return lines


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description="End-to-end cut diagnostics on interacting chiral phases.")
    parser.add_argument("--only", default=",".join(RUNS), help="comma-separated subset of " + ",".join(RUNS))
    parser.add_argument("--sweeps", type=int, default=6, help="maximum DMRG sweeps per rung")
    parser.add_argument("--set", action="append", default=[], metavar="KEY=VALUE",
                        help="extra model parameter for every selected run (repeatable)")
    parser.add_argument("--output", default="", help="results file suffix: results/edge_runs_SUFFIX.json")
    parser.add_argument("--record", action="store_true", help="append a dated section to benchmarks/RESULTS.md")
    args = parser.parse_args(argv)
    names = [n for n in args.only.split(",") if n]
    unknown = [n for n in names if n not in RUNS]
    if unknown:
        parser.error(f"unknown run(s) {', '.join(unknown)}; valid: {', '.join(RUNS)}")
    bad = [item for item in args.set if "=" not in item]
    if bad:
        parser.error(f"--set {bad[0]}: write KEY=VALUE, e.g. --set edge_bias=0.5")
    extra = dict(item.split("=", 1) for item in args.set)
    if args.output and not args.output.replace("_", "").replace("-", "").isalnum():
        parser.error(f"--output {args.output!r}: use letters, digits, '_' and '-' only")
    lines, results = [], {}
    for name in names:
        out = run(name, sweeps=args.sweeps, extra=extra)
        results[name] = out
        lines.extend(_summary(name, out))
        print("\n".join(_summary(name, out)), flush=True)
    folder = Path(__file__).parent / "results"
    folder.mkdir(exist_ok=True)
    target = folder / (f"edge_runs_{args.output}.json" if args.output else "edge_runs.json")
    tmp = target.with_suffix(".json.tmp")
    tmp.write_text(json.dumps(results, indent=1, default=str))
    tmp.replace(target)
    if args.record:
        stamp = datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
        command = "python -m benchmarks.edge_runs " + " ".join(argv if argv is not None else sys.argv[1:])
        section = [f"\n## {stamp}: cut diagnostics end to end (`{command.strip()}`)\n", "```", *lines, "```", ""]
        with open(Path(__file__).parent / "RESULTS.md", "a") as fh:
            fh.write("\n".join(section))
    return 0


if __name__ == "__main__":
    sys.exit(main())
