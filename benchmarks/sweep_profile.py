"""Profile one DMRG sweep and print its efficiency (not part of the benchmark sets).

``python -m benchmarks.sweep_profile square 128 [--no-charges] [--profile]`` grows a seeded state of
the width-6 square Heisenberg cylinder (or ``kagome``: the width-6 kagome chiral cylinder) to bond
dimension D (one sweep per rung 32, 64, ... D), then times one more sweep at D with one BLAS thread:
matvec flops / GEMM rate of the sweep's dtype / wall time, and with ``--profile`` the cProfile
table of that sweep by cumulative time. ``--state FILE`` starts from a state saved before (HDF5,
``--save FILE`` writes the grown one), ``--warm N`` runs N untimed sweeps first (index plans built,
as in a long run), and ``--split`` prints where the profiled sweep's time went (matvec GEMMs and
block copies, index plans, environments, SVD, Lanczos).

``--compare N`` times the sweep N times in turn with each variant of ``--routes`` (default: the
general block-contraction matvec, "blocks", the route before the slab plan, and the slab plan of
:mod:`netprobe.engines.dmrg.sector_matvec`, "slabs"), each from the same starting state in one
process, and prints wall and CPU seconds, matvec flops, efficiencies and the energies to all
digits. The index-plan caches are emptied before every timed run (all runs meet the same legs, so
otherwise only the first would build them). ``--baseline DIR`` (a source tree of an earlier commit, e.g. ``git archive COMMIT netprobe
| tar -x -C DIR``) adds the routes "baseline" (that tree's slab matvec and Lanczos solver) and
"baseline-solver" (only its Lanczos solver), for before/after ratios taken in one process.
``--matvecs N`` times only the two-site matvec of the central bond, N times per route in turn
(``--solves M``: and its whole local eigensolver, M times per route). ``--bonds LO:HI`` replaces the full sweep by the right-moving updates of bonds LO..HI-1
only (the centre moved to LO first, untimed): a partial sweep over central bonds, for states whose
full sweep takes too long here. ``--window LO:HI`` (around ``--bonds``) first runs untimed
right-moving and then left-moving updates of the bonds of the window at D, so that a state saved at
a smaller bond dimension (e.g. D = 256) reaches D on both sides of the timed bonds without a full
sweep at D: the environments outside the window still belong to the smaller bond dimension (their
tensors were not updated), which the output says. ``--compare`` prepares once and times copies of
the prepared engine.
"""

from __future__ import annotations

import argparse
import contextlib
import copy
import cProfile
import importlib.util
import io
import pstats
import resource
import sys
import time

import h5py

from benchmarks import workloads as wl
from benchmarks.machine import gemm_rate
from netprobe.tensor import clear_plan_cache, matmul_tally

__all__ = ["main"]


def main(argv=None) -> None:
    from netprobe.engines.dmrg.engine import GroundStateSearch
    from netprobe.engines.mps.mpo import build_mpo
    from netprobe.engines.mps import random_state
    from netprobe.engines.mps.store import read_mps

    parser = argparse.ArgumentParser(prog="python -m benchmarks.sweep_profile")
    parser.add_argument("model", choices=("square", "kagome"))
    parser.add_argument("bond_dimension", type=int)
    parser.add_argument("--no-charges", action="store_true")
    parser.add_argument("--profile", action="store_true")
    parser.add_argument("--split", action="store_true", help="profile and print the split of the sweep's time")
    parser.add_argument("--state", help="start from this saved state (HDF5) instead of growing one")
    parser.add_argument("--save", help="write the grown state to this file (HDF5); with --window the state "
                        "after the window's untimed updates")
    parser.add_argument("--warm", type=int, default=0, help="untimed sweeps before the timed one")
    parser.add_argument("--compare", type=int, default=0,
                        help="time the sweep N times in turn with the block-contraction and the slab matvec")
    parser.add_argument("--matvecs", type=int, default=0,
                        help="time only the central bond's matvec, N times per route of --routes in turn")
    parser.add_argument("--solves", type=int, default=0,
                        help="with --matvecs: also the central bond's local eigensolver, N times per route in turn")
    parser.add_argument("--routes", default="blocks,slabs",
                        help="comma-separated variants timed in turn by --compare (blocks, slabs; baseline, "
                        "baseline-solver with --baseline)")
    parser.add_argument("--baseline", help="source tree of an earlier commit (git archive) whose slab matvec "
                        "and Lanczos solver the baseline routes load")
    parser.add_argument("--bonds", help="LO:HI: time only the right-moving updates of bonds LO..HI-1")
    parser.add_argument("--window", help="LO:HI around --bonds: untimed right- and left-moving updates of "
                        "bonds LO..HI-1 at D first (from a state of smaller D: the timed bonds then have D on "
                        "both sides, the environments outside the window keep the smaller D)")
    args = parser.parse_args(argv)
    if args.window and not args.bonds:
        parser.error("--window needs --bonds")
    if args.window and not (_bonds(args.window)[0] <= _bonds(args.bonds)[0] < _bonds(args.bonds)[1]
                            <= _bonds(args.window)[1]):
        parser.error("--window LO:HI must contain the --bonds range")
    ham = wl.heisenberg_cylinder(6, 6) if args.model == "square" else wl.kagome_cylinder()
    chi = 32
    if args.state:
        with h5py.File(args.state, "r") as f:
            state = read_mps(f["state"] if "state" in f else f["mps"])
        chi = args.bond_dimension
    else:
        state = random_state(ham, bond_dimension=16, rng=wl.SEED)
    while not args.state:
        chi = min(chi, args.bond_dimension)
        engine = GroundStateSearch(build_mpo(ham), state, wl.sweep_settings(chi), progress=None)
        record = engine.step()
        print(f"grown to D={chi}: {record.seconds:.1f} s, E = {record.energy:.8f}", flush=True)
        state = engine.state
        if chi == args.bond_dimension:
            break
        chi *= 2
    if args.save and not args.window:
        _save(args.save, state)
    if args.no_charges:
        ham = wl.without_charges_of(ham)
        state = wl.without_charges(state, ham)
    if args.matvecs:
        _compare_matvecs(ham, state, args)
        return
    if args.compare:
        _compare(ham, state, chi, args)
        return
    engine = GroundStateSearch(build_mpo(ham), state, wl.sweep_settings(chi), progress=None)
    for _ in range(args.warm):
        record = engine.step()
        print(f"untimed sweep at D={chi}: {record.seconds:.1f} s, E = {record.energy:.8f}", flush=True)
    bonds = _bonds(args.bonds)
    _prepare(engine, bonds, _bonds(args.window))
    if args.save and args.window:
        _save(args.save, engine.state)
    gemm, gemm_cpu = gemm_rate(engine.dtype, 1024), _gemm_rate_cpu(engine.dtype)
    profiler = cProfile.Profile(time.process_time) if args.profile or args.split else None
    wall, cpu, matvecs, flops, energy = _timed(engine, bonds, profiler)
    gemm, gemm_cpu = max(gemm, gemm_rate(engine.dtype, 1024)), max(gemm_cpu, _gemm_rate_cpu(engine.dtype))
    what = _what(bonds, _bonds(args.window), state)
    print(f"{args.model} D={chi} charges={not args.no_charges} {engine.dtype}, {what}: {wall:.1f} s wall, "
          f"{cpu:.1f} s CPU, {matvecs} matvecs, {flops / 1e9:.1f} GFlop of matvecs, GEMM {gemm / 1e9:.1f} "
          f"(wall) / {gemm_cpu / 1e9:.1f} (CPU) GFlop/s: efficiency {flops / gemm / wall:.3f} (wall), "
          f"{flops / gemm_cpu / cpu:.3f} (CPU){' under cProfile' if profiler else ''}; E = {energy!r}")
    if args.split:
        _print_split(pstats.Stats(profiler).stats)
    if args.profile:
        out = io.StringIO()
        pstats.Stats(profiler, stream=out).sort_stats("cumulative").print_stats(30)
        print(out.getvalue())


def _gemm_rate_cpu(dtype, n: int = 1024, repeats: int = 5) -> float:
    """Like :func:`benchmarks.machine.gemm_rate` (one thread) but timed in CPU seconds of this process:
    on a shared machine the CPU-time rate is the one to set against CPU seconds of a sweep."""
    import numpy as np
    from threadpoolctl import threadpool_limits

    rng = np.random.default_rng(0)
    a = rng.standard_normal((n, n))
    if np.dtype(dtype).kind == "c":
        a = a + 1j * rng.standard_normal((n, n))
    out = np.empty_like(a)
    best = float("inf")
    with threadpool_limits(limits=1):
        np.matmul(a, a, out=out)
        for _ in range(repeats):
            start = time.process_time()
            np.matmul(a, a, out=out)
            best = min(best, time.process_time() - start)
    return (8 if np.dtype(dtype).kind == "c" else 2) * n**3 / best


def _bonds(text):
    """``"LO:HI"`` as a pair of ints, None for None."""
    return tuple(int(b) for b in text.split(":")) if text else None


def _save(path, state) -> None:
    from netprobe.engines.mps.store import write_mps

    with h5py.File(path, "w") as f:
        write_mps(f.create_group("state"), state)
    print(f"state written to {path}", flush=True)


def _what(bonds, window, state) -> str:
    """What was timed, in words (and what the environments outside a window belong to)."""
    if bonds is None:
        return "one sweep"
    text = f"bonds {bonds[0]}..{bonds[1] - 1} (right-moving)"
    if window is not None:
        text += (f", after untimed updates of bonds {window[0]}..{window[1] - 1}; tensors and environments "
                 f"outside that window still at the starting state's bond dimensions (largest "
                 f"{max(state.bond_dimensions)})")
    return text


def _bond_stats(engine):
    return {"matvecs": 0, "matvec_flops": 0, "energy": float("nan"), "discarded": 0.0,
            "entropy": float("nan"), "tolerance": engine.settings.solver_tolerance_at(0)}


def _prepare(engine, bonds, window=None) -> None:
    """Untimed: the centre moved to the first timed bond, with valid left environments up to it.

    With ``window = (lo, hi)`` the bonds lo..hi-1 are first updated right-moving and then left-moving
    down to the first timed bond, at the engine's bond dimension and without noise, so that the
    central bonds and the environments inside the window reach that bond dimension; the tensors and
    environments outside the window keep the bond dimension of the starting state.
    """
    if bonds is None:
        return
    lo, hi = bonds
    chi = engine.settings.bond_dimension_at(0)
    with engine.blas_limit():
        if window is not None:
            wlo, whi = window
            engine.state.move_centre(wlo)
            for j in range(wlo):
                engine._env.update_left(j, engine.state.tensors[j])
            stats = _bond_stats(engine)
            start = time.process_time()
            for i in range(wlo, whi):
                engine._update_bond(i, 1, chi=chi, noise=0.0, stats=stats)
            for i in range(whi - 1, lo - 1, -1):
                engine._update_bond(i, -1, chi=chi, noise=0.0, stats=stats)
            print(f"untimed window: bonds {wlo}..{whi - 1} right-moving, then {whi - 1}..{lo} left-moving at "
                  f"D={chi}: {time.process_time() - start:.1f} s CPU, {stats['matvecs']} matvecs, E = "
                  f"{stats['energy']!r}; bond dimensions now {engine.state.bond_dimensions}", flush=True)
        else:
            engine.state.move_centre(lo)
            for j in range(lo):
                engine._env.update_left(j, engine.state.tensors[j])
        # environments the timed bonds never read are dropped (at D = 512 without charges each one is
        # 70-200 MB): left[lo] and right[lo + 2 .. hi + 1] are all they need
        env = engine._env
        for j in range(len(env.left)):
            if j < lo:
                env.left[j] = None
            if not lo + 2 <= j <= hi + 1:
                env.right[j] = None


def _fork(engine):
    """A copy of a prepared engine that can be stepped on its own (tensors are never changed in place)."""
    new = copy.copy(engine)
    new.state = engine.state.copy()
    new._env = copy.copy(engine._env)
    new._env.left, new._env.right = list(engine._env.left), list(engine._env.right)
    new.history = list(engine.history)
    return new


def _timed(engine, bonds, profiler=None):
    """Wall and CPU seconds, matvecs, matvec flops and energy of one sweep (or of bonds LO..HI-1, from
    an engine made ready by :func:`_prepare`); ``profiler`` (a cProfile.Profile) runs during the timed
    part only."""
    profiler = profiler or contextlib.nullcontext()
    if bonds is None:
        cpu = time.process_time()
        with profiler:
            record = engine.step()
        return record.seconds, time.process_time() - cpu, record.matvecs, record.matvec_flops, record.energy
    lo, hi = bonds
    with engine.blas_limit():
        stats = _bond_stats(engine)
        wall, cpu = time.perf_counter(), time.process_time()
        with profiler:
            for i in range(lo, hi):
                engine._update_bond(i, 1, chi=engine.settings.bond_dimension_at(0), noise=0.0, stats=stats)
        return (time.perf_counter() - wall, time.process_time() - cpu, stats["matvecs"], stats["matvec_flops"],
                stats["energy"])


def _load_module(name, path):
    """A module loaded from a file of another source tree (an export of an earlier commit)."""
    spec = importlib.util.spec_from_file_location(name, path)
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module  # dataclasses look their module up there
    spec.loader.exec_module(module)
    return module


def _routes(baseline):
    """Named variants of the sweep code for ``--compare``: name -> context manager that switches to it.

    ``blocks``: the general block-contraction matvec; ``slabs``: this tree's code unchanged. With
    ``--baseline DIR`` (an export of an earlier commit): ``baseline``, that tree's slab matvec and
    Lanczos solver; ``baseline-solver``, this tree's matvec with that tree's Lanczos solver.
    """
    from netprobe.engines.dmrg import effective, solvers
    from netprobe.engines.dmrg.effective import PairOperator

    @contextlib.contextmanager
    def patched(obj, name, value):
        old = getattr(obj, name)
        setattr(obj, name, value)
        try:
            yield
        finally:
            setattr(obj, name, old)

    routes = {"blocks": lambda: patched(PairOperator, "_slab_plan", lambda self: None),
              "slabs": contextlib.nullcontext}
    if baseline:
        matvec = _load_module("baseline_sector_matvec", f"{baseline}/netprobe/engines/dmrg/sector_matvec.py")
        solver = _load_module("baseline_solvers", f"{baseline}/netprobe/engines/dmrg/solvers.py")

        @contextlib.contextmanager
        def both():
            with patched(effective, "plan_sector_matvec", matvec.plan_sector_matvec), \
                    patched(solvers, "lanczos_lowest", solver.lanczos_lowest):
                yield

        routes["baseline"] = both
        routes["baseline-solver"] = lambda: patched(solvers, "lanczos_lowest", solver.lanczos_lowest)
    return routes


def _compare_matvecs(ham, state, args) -> None:
    """The central bond's two-site matvec alone, each route in turn ``--matvecs`` times; best CPU time of each."""
    import numpy as np
    from threadpoolctl import threadpool_limits

    from netprobe.engines.dmrg.solvers import lowest_eigenpair

    routes = _routes(args.baseline)
    names = args.routes.split(",")
    with threadpool_limits(limits=1):
        op, theta = wl.central_operator(state, ham)
        x = op.layout.pack(theta).astype(op.dtype)
        ops, results = {}, {}
        for name in names:
            with routes[name]():
                ops[name] = type(op)(op.left, op.w1, op.w2, op.right, op.layout)
                ops[name].matvec(x)  # plan built outside the timing
        rate = _gemm_rate_cpu(op.dtype)
        best = dict.fromkeys(names, float("inf"))
        flops = {}
        for _ in range(args.matvecs):
            for name in names:
                with routes[name]():
                    tally = matmul_tally().flops
                    cpu = time.process_time()
                    results[name] = ops[name].matvec(x)
                    best[name] = min(best[name], time.process_time() - cpu)
                    flops[name] = matmul_tally().flops - tally
        rate = max(rate, _gemm_rate_cpu(op.dtype))
        solves = {}
        for _ in range(args.solves):
            for name in names:
                with routes[name]():
                    settings = wl.sweep_settings(max(state.bond_dimensions))
                    cpu = time.process_time()
                    pair = lowest_eigenpair(settings.eigensolver, ops[name], x, tol=settings.solver_tolerance,
                                            krylov_dimension=settings.krylov_dimension,
                                            restarts=settings.solver_restarts)
                    cpu = time.process_time() - cpu
                    old = solves.get(name, (float("inf"),))
                    solves[name] = (min(old[0], cpu), pair.matvecs, pair.value)
    print(f"{args.model} central bond, {op.size} entries, {args.matvecs} matvecs per route in turn; GEMM "
          f"{rate / 1e9:.1f} GFlop/s in CPU time")
    for name in names:
        diff = float(np.abs(results[name] - results[names[0]]).max())
        print(f"  {name}: best {best[name] * 1e3:.1f} ms CPU, {flops[name] / 1e9:.2f} GFlop, efficiency "
              f"{flops[name] / rate / best[name]:.3f}, CPU ratio {names[0]} / {name} {best[names[0]] / best[name]:.2f}, "
              f"largest difference from {names[0]} {diff:.2g}")
    for name, (cpu, count, value) in solves.items():
        print(f"  {name}: local solve (best of {args.solves}) {cpu * 1e3:.1f} ms CPU, {count} matvecs, of which "
              f"{cpu * 1e3 - count * best[name] * 1e3:.1f} ms outside the matvecs (at their best time); CPU ratio "
              f"{names[0]} / {name} {solves[names[0]][0] / cpu:.3f}; E = {value!r}")


def _compare(ham, state, chi, args) -> None:
    """The timed sweep (or bonds) in turn with each route of ``--routes``, one process, one prepared start."""
    from netprobe.engines.dmrg.engine import GroundStateSearch
    from netprobe.engines.mps.mpo import build_mpo

    bonds = _bonds(args.bonds)
    routes = _routes(args.baseline)
    names = args.routes.split(",")
    unknown = [n for n in names if n not in routes]
    if unknown:
        raise SystemExit(f"unknown route(s) {', '.join(unknown)}; valid: {', '.join(routes)} "
                         "(baseline routes need --baseline DIR)")
    mpo = build_mpo(ham)
    rows = []
    rate = rate_cpu = 0.0
    start = GroundStateSearch(mpo, state, wl.sweep_settings(chi), progress=None)
    _prepare(start, bonds, _bonds(args.window))
    for turn in range(args.compare):
        for route in names:
            with routes[route]():
                engine = _fork(start)
                rate = max(rate, gemm_rate(engine.dtype, 1024))
                rate_cpu = max(rate_cpu, _gemm_rate_cpu(engine.dtype))
                # every run starts from the same state and meets the same legs: without this, the runs
                # after the first would find the index plans that the first one built (a first sweep at a
                # new bond dimension builds them; later sweeps whose legs stay the same find them cached)
                clear_plan_cache()
                usage = resource.getrusage(resource.RUSAGE_SELF)
                wall, cpu, matvecs, flops, energy = _timed(engine, bonds)
                after = resource.getrusage(resource.RUSAGE_SELF)
                system, faults = after.ru_stime - usage.ru_stime, after.ru_minflt - usage.ru_minflt
            del engine
            rows.append((route, wall, cpu, matvecs, flops, energy))
            print(f"{route}: {wall:.1f} s wall, {cpu:.1f} s CPU ({system:.1f} s of it in the system, "
                  f"{faults} page faults), {matvecs} matvecs, {flops / 1e9:.1f} GFlop, E = {energy!r}", flush=True)
    what = _what(bonds, _bonds(args.window), state)
    print(f"{args.model} D={chi} charges={not args.no_charges}, {what}; GEMM {rate / 1e9:.1f} GFlop/s in wall "
          f"time, {rate_cpu / 1e9:.1f} GFlop/s in CPU time (1024, one thread, best in the run)")
    first_per_mv = [f / m for r, _, _, m, f, _ in rows if r == names[0]]
    ref = min(first_per_mv)
    best = {}
    for route in names:
        mine = [r for r in rows if r[0] == route]
        best_wall = min(mine, key=lambda r: r[1])
        best_cpu = min(mine, key=lambda r: r[2])
        best[route] = (best_wall[1], best_cpu[2])
        print(f"  {route}: best wall {best_wall[1]:.1f} s, best CPU {best_cpu[2]:.1f} s; efficiency (own flops, "
              f"wall / CPU) {best_wall[4] / rate / best_wall[1]:.3f} / {best_cpu[4] / rate_cpu / best_cpu[2]:.3f}; "
              f"with the {names[0]} route's flops per matvec {ref * best_wall[3] / rate / best_wall[1]:.3f} / "
              f"{ref * best_cpu[3] / rate_cpu / best_cpu[2]:.3f}")
    for route in names[1:]:
        print(f"  CPU ratio {names[0]} / {route} (best of each) {best[names[0]][1] / best[route][1]:.2f}, wall "
              f"{best[names[0]][0] / best[route][0]:.2f}")
    energies = [r[5] for r in rows]
    print(f"  largest energy difference between all runs {max(energies) - min(energies):.3g}")


def _print_split(stats) -> None:
    """Seconds and fractions of the profiled sweep in its main parts (cProfile adds its own overhead)."""
    def seconds(name, which, where=""):
        return sum(row[2] if which == "own" else row[3]
                   for (path, _, fn), row in stats.items() if fn == name and path.endswith(where))

    total = seconds("step", "cum") or seconds("_update_bond", "cum")
    rows = [("two-site matvecs", seconds("matvec", "cum", "effective.py")),
            ("  of which building the slab plans", seconds("plan_sector_matvec", "cum")),
            ("  contract, own time (sector GEMMs; inside the matvec on the block route only)", seconds("contract", "own")),
            ("  block copies into sector matrices (_assemble)", seconds("_assemble", "own")),
            ("  index plans built", seconds("_contract_plan", "cum")),
            ("environment updates", seconds("update_left", "cum") + seconds("update_right", "cum")),
            ("SVD of the two-site tensor", seconds("_split", "cum")),
            ("Lanczos, own time", seconds("lanczos_lowest", "own")),
            ("packing blocks into vectors", seconds("pack", "cum"))]
    print(f"split of the profiled sweep ({total:.1f} s of CPU time under cProfile):")
    for label, value in rows:
        print(f"  {label}: {value:.2f} s = {value / total:.1%}")


if __name__ == "__main__":
    main()
