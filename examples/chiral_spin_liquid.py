"""Invented scenario: a first look at a proposed kagome chiral spin liquid, at a size a laptop can hold.

A (fictional) referee receives a manuscript claiming that the kagome Heisenberg antiferromagnet with a
scalar spin chirality term (bundled model ``kagome_chiral``, J1 = 1, Jchi = 0.5) is a chiral spin
liquid, and wants a quick independent check before asking for large-scale numerics. The script
finds DMRG ground states on a short cylinder at two bond dimensions and runs the assessment: the
modular commutator J and the Kitaev-Preskill gamma on a ladder of three-sector regions, the
Markov-length certificate from the CMI of shielded layouts, fits to the infinite region, and a
verdict. The scenario is invented; the expectations (c- = 1, gamma = ln 2 / 2 for the bosonic
nu = 1/2 Laughlin-type state) are published: Bauer et al., Nat. Commun. 5, 5137 (2014); Gong, Zhu,
Sheng, Sci. Rep. 4, 6317 (2014).

At these sizes the regions are far smaller than needed: expect J well below pi/3 and the answer
"uncertified" (see "Convergence" in the user guide). That is the point of the example: the
assessment says how far from the limit a small calculation is, instead of quoting a raw J as c-.

Run:  python examples/chiral_spin_liquid.py FOLDER [--small]
Writes FOLDER/chiral_spin_liquid.png and FOLDER/assessment.json. With --small (D = 16, 32; regions of
6 sites) it took about 4 minutes on a busy 2-core machine; without it expect a few times longer.
"""

import argparse
import json
import math
import sys
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

import netprobe  # noqa: E402
from netprobe.probes import c_minus_from_j  # noqa: E402


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("folder", type=Path, help="folder for the figure and the JSON output")
    parser.add_argument("--small", action="store_true", help="the smallest cylinder and ladder (for tests)")
    args = parser.parse_args(argv)
    args.folder.mkdir(parents=True, exist_ok=True)
    # 4 x 3 unit cells (36 spins) is the smallest kagome cylinder on which three-sector regions of
    # 6 to 9 sites keep a margin to the open ends.
    bond_dimensions, max_sites = ((16, 32), 6) if args.small else ((32, 64, 128), 9)
    model = netprobe.load_model("kagome_chiral", {"length": "4", "circumference": "3", "J1": "1.0",
                                                  "Jchi": "0.5"})
    settings = netprobe.SolveSettings(bond_dimensions=bond_dimensions, progress=None)
    grounds, _ = netprobe.solve(model, "dmrg", settings)
    verdict = netprobe.assess_states(grounds, max_sites=max_sites, placements=2)
    print(verdict)
    result = verdict.to_json()
    (args.folder / "assessment.json").write_text(json.dumps(result, indent=1, default=float), encoding="utf-8")

    sizes = result["sizes"]
    n = [s["sites"] for s in sizes]
    fig, (left, right) = plt.subplots(1, 2, figsize=(9, 3.8))
    left.errorbar(n, [c_minus_from_j(s["J"]) for s in sizes], yerr=[c_minus_from_j(s["J_error"] or 0)
                                                                     for s in sizes], fmt="o")
    left.axhline(1.0, color="0.6", lw=0.8)
    left.set_xlabel("region sites")
    left.set_ylabel("J / (pi/3)")
    left.set_title("modular commutator")
    right.errorbar(n, [s["gamma"] for s in sizes], yerr=[s["gamma_error"] or 0 for s in sizes], fmt="s",
                   color="C1")
    right.axhline(math.log(2) / 2, color="0.6", lw=0.8)
    right.set_xlabel("region sites")
    right.set_ylabel("gamma (nats)")
    right.set_title("Kitaev-Preskill gamma")
    fig.suptitle(f"invented scenario: kagome_chiral 4 x 3, D = {bond_dimensions}; verdict {result['verdict']}"
                 f"{'' if result['certified'] else ' (uncertified)'}", fontsize=9)
    fig.tight_layout()
    out = args.folder / "chiral_spin_liquid.png"
    fig.savefig(out, dpi=120)
    plt.close(fig)
    print(f"figure: {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
