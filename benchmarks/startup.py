"""Start-up cost of the command line: CPU and wall time of ``python -c "import netprobe.cli"``.

Every ``netprobe`` command, every CLI test and every study worker pays it. Runs alternate between the
source trees given (each put first on ``PYTHONPATH``; default: this checkout), so that a changing load
on a shared machine touches them alike; the medians are printed with the load average and the
libraries that the import left loaded.

``python -m benchmarks.startup [TREE ...] [--runs N]``, e.g. against an export of main::

    git archive main netprobe | tar -x -C /tmp/main-tree
    python -m benchmarks.startup /tmp/main-tree . --runs 9
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import subprocess
import sys
import time
from pathlib import Path

__all__ = ["measure"]

_HEAVY = ("matplotlib", "numba", "distributed", "scipy", "h5py")
_PROBE = ("import json, sys, netprobe.cli; "
          f"print(json.dumps(sorted(m for m in {_HEAVY!r} if m in sys.modules)))")


def measure(trees: list[Path], runs: int) -> dict:
    """Median CPU (user + system) and wall seconds of the import per tree, runs alternating."""
    samples: dict[Path, list[tuple[float, float]]] = {t: [] for t in trees}
    for _ in range(runs):
        for tree in trees:
            env = dict(os.environ, OMP_NUM_THREADS="1", PYTHONPATH=str(tree))
            before = resource.getrusage(resource.RUSAGE_CHILDREN)
            start = time.perf_counter()
            subprocess.run([sys.executable, "-c", "import netprobe.cli"], env=env, check=True, cwd=tree)
            wall = time.perf_counter() - start
            after = resource.getrusage(resource.RUSAGE_CHILDREN)
            cpu = after.ru_utime - before.ru_utime + after.ru_stime - before.ru_stime
            samples[tree].append((cpu, wall))
    out = {}
    for tree in trees:
        env = dict(os.environ, OMP_NUM_THREADS="1", PYTHONPATH=str(tree))
        loaded = subprocess.run([sys.executable, "-c", _PROBE], env=env, check=True, cwd=tree,
                                capture_output=True, text=True).stdout.strip()
        out[str(tree)] = {"cpu": statistics.median(c for c, _ in samples[tree]),
                          "wall": statistics.median(w for _, w in samples[tree]), "loaded": loaded}
    return out


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(prog="python -m benchmarks.startup", description=__doc__.splitlines()[0])
    parser.add_argument("trees", nargs="*", type=Path, help="source trees holding netprobe/ (default: this one)")
    parser.add_argument("--runs", type=int, default=9, help="runs per tree (default 9)")
    args = parser.parse_args(argv)
    trees = [t.resolve() for t in args.trees] or [Path(__file__).resolve().parent.parent]
    load = os.getloadavg()
    for tree, r in measure(trees, args.runs).items():
        print(f"{tree}: CPU {r['cpu']:.2f} s, wall {r['wall']:.2f} s (medians of {args.runs}); loaded {r['loaded']}")
    print(f"load average before: {load[0]:.1f}, after: {os.getloadavg()[0]:.1f} (2 cores)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
