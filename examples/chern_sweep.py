"""Invented scenario: where in its mass window is a two-orbital Chern insulator chiral?

A (fictional) group plans a cold-atom realisation of the square-lattice two-orbital Chern insulator
(bundled model ``chern_square``) and can tune the orbital mass m. Before building anything they want
to see, on a finite strip, the range of m in which the bulk probes say "chiral": the modular
commutator J gives c- = 3J/pi, the real-space Chern number gives nu, and the conditional mutual
information (CMI) of a shielded split tells whether the disk is large compared with the correlation
length. The scenario is invented; the model and the expectations are published (Qi, Wu, Zhang,
Phys. Rev. B 74, 085308 (2006): |C| = 1 for 0 < |m| < 2, C = 0 for |m| > 2).

Run:  python examples/chern_sweep.py FOLDER [--small]
Writes FOLDER/chern_sweep.png and prints one line per mass. Uses the free-fermion engine (about 30 s of CPU; --small a few seconds).
"""

import argparse
import math
import sys
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

import netprobe  # noqa: E402


def sweep(masses, size, radius):
    """c-, Chern number and CMI of a centred three-sector disk for every mass."""
    rows = []
    for m in masses:
        model = netprobe.load_model("chern_square", {"m": repr(m), "length": str(size),
                                                     "circumference": str(size), "geometry": "strip"})
        values = netprobe.probe_model(model, f"disk:radius={radius}", engine="gaussian").last.values
        rows.append((m, values.c_minus, values.chern_number, values.cmi))
        print(f"m = {m:+.2f}   c- = {values.c_minus:+.3f}   nu = {values.chern_number:+.3f}   "
              f"CMI = {values.cmi:.3f}")
    return rows


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("folder", type=Path, help="folder for the figure")
    parser.add_argument("--small", action="store_true", help="a small strip and few masses (for tests)")
    args = parser.parse_args(argv)
    args.folder.mkdir(parents=True, exist_ok=True)
    if args.small:
        masses, size, radius = [-3.0, -1.0, 1.0, 3.0], 10, 2.5
    else:
        masses, size, radius = [round(-3.0 + 0.25 * k, 2) for k in range(25)], 16, 4
    rows = sweep(masses, size, radius)
    m, c, nu, cmi = (list(col) for col in zip(*rows))
    fig, (top, bottom) = plt.subplots(2, 1, figsize=(6, 5.5), sharex=True)
    top.plot(m, c, "o-", label="c- = 3J/pi")
    top.plot(m, nu, "s--", label="real-space Chern number")
    for edge in (-2, 0, 2):
        top.axvline(edge, color="0.7", lw=0.8)
    top.set_ylabel("invariant")
    top.legend()
    top.set_title(f"invented scenario: chern_square, {size} x {size} strip, disk radius {radius}")
    bottom.plot(m, cmi, "o-", color="C2")
    bottom.set_ylabel("I(A:C|B) (nats)")
    bottom.set_xlabel("orbital mass m")
    fig.tight_layout()
    out = args.folder / "chern_sweep.png"
    fig.savefig(out, dpi=120)
    plt.close(fig)
    print(f"figure: {out}")
    return 0 if all(math.isfinite(x) for x in c) else 1


if __name__ == "__main__":
    sys.exit(main())
