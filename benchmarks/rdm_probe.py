"""Child process of the reduced-density-matrix benchmark: one region, one JSON line, its own peak memory.

``python -m benchmarks.rdm_probe STATE N`` loads a saved width-6 Heisenberg state (length 6), takes
the N sites nearest to the default centre of the cylinder (a disk; ties broken by angle), splits
them counterclockwise into three sectors A, B, C of 120 degrees from 90 degrees, builds the reduced
state and the modular commutator J, and prints the time, J and the peak resident memory of this
process (``resource.getrusage``; Linux reports kilobytes).
"""

from __future__ import annotations

import json
import resource
import sys
import time

import numpy as np


def disk_parts(lattice, n: int) -> dict[str, list[int]]:
    """The ``n`` sites nearest to the default centre, in three counterclockwise 120-degree sectors."""
    from netprobe.regions.layout import _displacements, default_center

    d = _displacements(lattice, default_center(lattice))  # minimal image around the cylinder
    dx, dy = d[:, 0], d[:, 1]
    angle = (np.degrees(np.arctan2(dy, dx)) - 90.0) % 360.0
    order = np.lexsort((angle, np.round(np.hypot(dx, dy), 9)))[:n]
    parts = {"A": [], "B": [], "C": []}
    for site in sorted(order.tolist()):
        parts["ABC"[int(angle[site] // 120.0) % 3]].append(site)
    return parts


def _peak_rss() -> int:
    """Peak resident bytes of this process since exec (VmHWM; getrusage where /proc is missing)."""
    from benchmarks.machine import proc_kib

    peak = proc_kib("/proc/self/status", "VmHWM")
    return peak if peak is not None else resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def main(argv=None) -> int:
    from netprobe.probes import measure_probes
    from netprobe.engines.mps.store import load_state
    from benchmarks.workloads import heisenberg_cylinder

    path, n = argv or sys.argv[1:]
    ham = heisenberg_cylinder(6, 6)
    saved = load_state(path)
    parts = disk_parts(ham.lattice, int(n))
    start = time.perf_counter()
    # the budget is the largest target of the benchmark (16 GB): a larger estimate is a refusal
    report = measure_probes(saved.state, parts, ham.space, probes=("J",), memory_budget=16 * 10**9)
    seconds = time.perf_counter() - start
    peak = _peak_rss()
    data = report.to_json()
    print(json.dumps({"seconds": seconds, "J": data["J"], "route": data["route"], "parts": parts,
                      "peak_rss_bytes": peak}))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
