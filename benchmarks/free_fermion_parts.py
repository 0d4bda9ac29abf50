"""Time the parts of the free-fermion end-to-end case (not part of the benchmark sets).

``python -m benchmarks.free_fermion_parts [--threads 1] [--j-threads 1|2] [--method tridiagonal|eigh]``
loads the Haldane cylinder of the end-to-end benchmark (44 x 36 zigzag cells, 3168 sites, twist 1),
finds its ground state, places the 1600-site three-sector disk and measures J and the Chern number,
printing the wall and CPU seconds of each part and the results to all digits (so that two versions of
the code can be compared for identical results and for their ratio of times, run after each other).
``--threads`` is the BLAS thread count; ``--j-threads 2`` forms J's two modular matrices in two Python
threads (each with that many BLAS threads); ``--method eigh`` forms them by full eigendecompositions
(the reference route).
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from threadpoolctl import threadpool_limits

__all__ = ["main"]


def main(argv=None) -> None:
    from benchmarks.cases import _sectors_of_size
    from netprobe.engines.gaussian import gaussian_state
    from netprobe.engines.gaussian.states import fermion_modular_commutator
    from netprobe.model.spec import load_model

    parser = argparse.ArgumentParser(prog="python -m benchmarks.free_fermion_parts")
    parser.add_argument("--threads", type=int, default=1, help="BLAS threads (default 1)")
    parser.add_argument("--j-threads", type=int, default=1, choices=(1, 2),
                        help="Python threads for the two modular matrices of J (default 1)")
    parser.add_argument("--method", default="tridiagonal", choices=("tridiagonal", "eigh"),
                        help="how the modular matrices are formed (default tridiagonal)")
    parser.add_argument("--label", default="", help="text put in front of the printed line")
    args = parser.parse_args(argv)
    params = {"length": "44", "circumference": "36", "twist": "1.0"}
    with threadpool_limits(limits=args.threads):
        marks = [("start", time.perf_counter(), time.process_time())]
        model = load_model("haldane", params)
        marks.append(("load", time.perf_counter(), time.process_time()))
        state = gaussian_state(model)
        marks.append(("ground state", time.perf_counter(), time.process_time()))
        layout = _sectors_of_size(model.lattice, 1600)
        marks.append(("region", time.perf_counter(), time.process_time()))
        a, b, c = (list(layout[k]) for k in "ABC")
        if args.method == "tridiagonal":
            j = state.modular_commutator(a, b, c, threads=args.j_threads)
        else:  # the reference route, through the module function
            units = [state._units(np.sort(np.array(x))) for x in (a, b, c)]
            block = np.array(state._block(np.concatenate(units), np.concatenate(units)))
            j = fermion_modular_commutator(block, tuple(u.size for u in units), state.clip, method="eigh",
                                           threads=args.j_threads)
        marks.append(("J", time.perf_counter(), time.process_time()))
        nu = state.chern_number(a, b, c)
        marks.append(("Chern", time.perf_counter(), time.process_time()))
    parts = ", ".join(f"{name} {w1 - w0:.2f}/{c1 - c0:.2f}"
                      for (_, w0, c0), (name, w1, c1) in zip(marks, marks[1:]))
    print(f"{args.label}BLAS threads={args.threads}, J threads={args.j_threads}, J by {args.method}, wall/CPU seconds: {parts}; total "
          f"{marks[-1][1] - marks[0][1]:.2f}/{marks[-1][2] - marks[0][2]:.2f}; J={j!r} nu={nu!r} "
          f"E={state.energy!r}", flush=True)


if __name__ == "__main__":
    main()
