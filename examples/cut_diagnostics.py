"""Invented scenario: reading the chiral edge off the cut between two halves of a cylinder.

A (fictional) student has a Chern-insulator ground state and wants a second, independent look at its
chirality besides the bulk modular commutator: the entanglement spectrum at a cut across the
cylinder, resolved by momentum around the cylinder, should count levels like a chiral boson
(1, 1, 2, 3, 5, ...) in one direction only (Li and Haldane, Phys. Rev. Lett. 101, 010504 (2008)), and
the momentum polarization over several circumferences gives h_a - c-/24 (Tu, Zhang, Qi, Phys. Rev. B
88, 195412 (2013)). The scenario is invented; the model is the bundled ``chern_square``.

The script runs the ``netprobe edge`` command with the free-fermion engine, odd circumferences and a
small twist (even circumferences need the twist to lift the edge zero modes and behave differently,
see the user guide), keeps the figure and prints the fitted numbers.

Run:  python examples/cut_diagnostics.py FOLDER [--small]
Writes FOLDER/cut_spectrum.png and FOLDER/cut.json.
"""

import argparse
import json
import subprocess
import sys
from pathlib import Path


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("folder", type=Path, help="folder for the figure and the JSON output")
    parser.add_argument("--small", action="store_true", help="short cylinders, three circumferences (for tests)")
    args = parser.parse_args(argv)
    args.folder.mkdir(parents=True, exist_ok=True)
    length, circumferences = (10, "5,7,9") if args.small else (16, "7,9,11,13,15,17,19")
    figure = args.folder / "cut_spectrum.png"
    command = [sys.executable, "-m", "netprobe", "edge", "chern_square", "--engine", "gaussian",
               "--set", f"length={length}", "--set", "twist=0.3", "--circumferences", circumferences,
               "--plot", str(figure), "--json"]
    print("running:", " ".join(command[2:]))
    done = subprocess.run(command, capture_output=True, text=True)
    if done.returncode != 0:
        sys.stderr.write(done.stderr)
        return done.returncode
    result = json.loads(done.stdout)
    (args.folder / "cut.json").write_text(json.dumps(result, indent=1), encoding="utf-8")
    fit = result["polarization"]
    lowest = result["counting_details"]["lowest_sector"]
    sector = next(s for s in result["counting_details"]["sectors"] if s["charge"] == lowest)
    print(f"counting in the most probable charge sector: {sector['counts']} (direction {sector['direction']:+d})")
    print(f"h_a - c-/24 = {fit['h_minus_c_over_24']:+.4f} (mod 1) over circumferences {fit['circumferences']}")
    print(f"vacuum-sector reading: c- = {fit['c_minus']:+.3f} (mod 24)")
    print(f"figure: {figure}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
