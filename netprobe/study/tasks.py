"""One task of a study: build the model at a point, find its ground state, evaluate the probes.

:func:`run_task` is what a worker process (local or on a Dask worker) calls with a leased task; it
reads everything else from the ledger, so a worker needs only the ledger's path. The work itself is
:func:`compute_task`, which returns plain values and a state file (DMRG only).

DMRG tasks start from a state: rung k > 0 of a point from the state of rung k - 1 of the same
point; the first rung from its grid neighbour's first rung (``warm_start``) or from a random state
seeded by the study seed and the point index. A state file is written atomically under a name
that carries the lease (``p0003_D16_1a2b3c4d.h5``), so a process that has lost its lease can never
replace the file of a finished task.
"""

from __future__ import annotations

import math
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from netprobe.errors import NetprobeError
from netprobe.study.description import StudyDescription, StudyPoint
from netprobe.study.ledger import STATES_FOLDER, Ledger, TaskRow

__all__ = ["TaskOutcome", "point_seed", "state_file_name", "compute_task", "evaluate_probes", "run_task"]


@dataclass(frozen=True)
class TaskOutcome:
    """What a task produced: JSON-ready results and the state file (relative to the study folder)."""

    result: Mapping[str, Any]
    state_file: str | None = None
    seconds: float = 0.0
    notes: tuple[str, ...] = field(default=())


def point_seed(seed: int, point: int) -> int:
    """The seed of a point's random initial state, derived from the study seed and the point index."""
    return int(np.random.SeedSequence([int(seed), int(point)]).generate_state(1, dtype=np.uint32)[0])


def state_file_name(point: int, bond_dimension: int, lease: str) -> str:
    """``p<point>_D<bond dimension>_<lease prefix>.h5``."""
    return f"p{point:04d}_D{bond_dimension}_{lease[:8]}.h5"


def _region_layouts(description: StudyDescription, lattice) -> dict:
    from netprobe.regions import parse_region

    return {name: parse_region(text, lattice) for name, text in description.regions.items()}


def _sites_of(layout, names=None) -> list[int]:
    parts = layout.names if names is None else names
    return sorted(s for n in parts for s in layout[n])


def _real(value, what: str) -> float:
    value = complex(value)
    if abs(value.imag) > 1e-10 * max(1.0, abs(value.real)):
        raise NetprobeError(
            f"probe {what}: the expectation value is complex ({value:.6g}); use a Hermitian operator"
        )
    return float(value.real)


def _abc(layout, text: str):
    missing = [n for n in "ABC" if n not in layout.names]
    if missing:
        raise NetprobeError(
            f"probe '{text}' needs parts A, B and C; the region '{layout.spec}' has "
            f"{', '.join(layout.names)}; "
            "use a three-part layout such as sectors:radius=R"
        )
    return layout["A"], layout["B"], layout["C"]


def evaluate_probes(description: StudyDescription, model, engine: str, state, energy: float) -> dict:
    """Values of the study's probes on one ground state.

    Parameters
    ----------
    description : StudyDescription
    model : netprobe.spec.Model
    engine : {"dmrg", "exact", "gaussian"}
    state : MPS, ExactResult, FreeFermionState or MajoranaState
    energy : float

    Returns
    -------
    dict of str to float
        Keyed by the probe text as written in the study file.

    """
    layouts = _region_layouts(description, model.lattice) if description.regions else {}
    out: dict[str, float] = {}
    if engine == "gaussian":
        for probe in description.probes:
            out[probe.text] = _gaussian_probe(probe, state, layouts, energy, model)
        return out
    from netprobe.probes import c_minus_from_j, measure_probes

    wanted: dict[str, set] = {}
    for probe in description.probes:
        need = {"J": "J", "c_minus": "J", "cmi": "CMI", "gamma": "TEE", "entropy": "S"}.get(probe.name)
        if need is not None:
            wanted.setdefault(probe.region, set()).add(need)
    reports = {}
    for region, names in wanted.items():
        order = tuple(n for n in ("S", "CMI", "J", "TEE") if n in names)
        if order != ("S",):
            _abc(layouts[region], next(p.text for p in description.probes if p.region == region))
        reports[region] = measure_probes(state, layouts[region], model.space, probes=order)
    means: dict[str, np.ndarray] = {}
    for probe in description.probes:
        if probe.name == "energy":
            out[probe.text] = float(energy)
        elif probe.name == "energy_per_site":
            out[probe.text] = float(energy) / model.num_sites
        elif probe.operator is not None:
            if probe.operator not in means:
                if engine == "exact":
                    from netprobe.exact import local_expectations

                    means[probe.operator] = np.asarray(local_expectations(state, model, probe.operator))
                else:
                    from netprobe.mps import local_expectations

                    means[probe.operator] = np.asarray(local_expectations(state, probe.operator))
            values = means[probe.operator]
            sites = range(model.num_sites) if probe.region is None else _sites_of(layouts[probe.region])
            out[probe.text] = _real(np.mean(values[list(sites)]), probe.text)
        else:
            report = reports[probe.region]
            if probe.name == "entropy":
                out[probe.text] = float(report.entropies["A"])
            elif probe.name == "J":
                out[probe.text] = float(report.modular_commutator.value)
            elif probe.name == "c_minus":
                out[probe.text] = float(c_minus_from_j(report.modular_commutator.value))
            elif probe.name == "cmi":
                out[probe.text] = float(report.cmi)
            elif probe.name == "gamma":
                out[probe.text] = float(report.gamma)
    return out


def _gaussian_probe(probe, state, layouts, energy, model) -> float:
    if probe.name == "energy":
        return float(energy)
    if probe.name == "energy_per_site":
        return float(energy) / model.num_sites
    if probe.operator is not None:
        correlation = getattr(state, "correlation", None)
        if correlation is None or probe.operator != "n":
            raise NetprobeError(
                f"probe '{probe.text}': the gaussian engine evaluates mean:n of number-conserving "
                "fermions only"
            )
        occupations = np.real(np.diag(correlation))
        sites = range(model.num_sites) if probe.region is None else _sites_of(layouts[probe.region])
        return float(np.mean(occupations[list(sites)]))
    layout = layouts[probe.region]
    if probe.name == "entropy":
        return float(state.entropy(layout["A"]))
    a, b, c = _abc(layout, probe.text)
    if probe.name == "J":
        return float(state.modular_commutator(a, b, c))
    if probe.name == "c_minus":
        return float(3.0 * state.modular_commutator(a, b, c) / math.pi)
    if probe.name == "cmi":
        return float(state.cmi(a, b, c))
    if probe.name == "gamma":
        return float(-state.kitaev_preskill(a, b, c))
    if probe.name == "chern_number":
        return float(state.chern_number(a, b, c))
    raise NetprobeError(f"probe '{probe.text}' is not available with the gaussian engine")


def _start_state(needed: list[TaskRow], folder: Path, model):
    """The state a DMRG task starts from (or None), and a note saying where it came from."""
    if not needed:
        return None, "random initial state"
    done = [r for r in needed if r.status == "done" and r.state_file]
    if not done:
        return None, f"random initial state (task {needed[0].id}, its intended start, failed)"
    from netprobe.store import load_state

    row = done[0]
    saved = load_state(folder / row.state_file)
    state = saved.state
    if state.num_sites != model.num_sites or dict(state.sector) != dict(model.hamiltonian.sector):
        return None, f"random initial state (the state of point {row.point} is in another sector or lattice)"
    return state, f"state of point {row.point} at D={row.bond_dimension}"


def compute_task(
    description: StudyDescription,
    point: StudyPoint,
    rung: int,
    bond_dimension: int,
    folder,
    lease: str,
    needed: list[TaskRow],
    *,
    blas_threads: int | None = 1,
) -> TaskOutcome:
    """Run one task and return its results (nothing is written to the ledger here).

    Parameters
    ----------
    description : StudyDescription
    point : StudyPoint
    rung : int
        Index in the ladder (0 for the exact and Gaussian engines).
    bond_dimension : int
    folder : str or Path
        The study folder (state files go to its ``states/``).
    lease : str
        The task's lease token (part of the state file's name).
    needed : list of TaskRow
        The finished tasks this one starts from.
    blas_threads : int or None

    Returns
    -------
    TaskOutcome

    Raises
    ------
    NetprobeError
        Whatever the engines raise for this point.

    """
    start = time.perf_counter()
    folder = Path(folder)
    model = description.build_model(point)
    engine = description.engine
    result: dict[str, Any] = {"sites": model.num_sites, "engine": engine}
    state_file = None
    if engine == "exact":
        from netprobe.exact import ground_state

        state = ground_state(model.hamiltonian)
        energy = float(state.energy)
        result["exact"] = {"dimension": int(state.basis.dim), "method": state.method}
    elif engine == "gaussian":
        from netprobe.gaussian import gaussian_state

        state = gaussian_state(model)
        energy = float(state.energy)
        result["gaussian"] = {"kind": type(state).__name__, "gap": float(getattr(state, "gap", math.nan))}
    else:
        from netprobe.dmrg import SweepSettings, find_ground_state
        from netprobe.store import save_state

        initial, origin = _start_state(needed, folder, model)
        seed = point_seed(description.seed, point.index)
        settings = SweepSettings(
            bond_dimension=bond_dimension,
            ramp=() if initial is not None else None,
            **description.sweep_settings,
        )
        run = find_ground_state(
            model, settings, seed=seed, state=initial, progress=None, warn=False, blas_threads=blas_threads
        )
        state = run.state
        energy = float(run.energy)
        variance = None
        if description.variance:
            from threadpoolctl import threadpool_limits

            from netprobe.mpo import build_mpo
            from netprobe.mps import BlockMPO, energy_variance

            with threadpool_limits(limits=blas_threads):
                variance = float(
                    energy_variance(state, BlockMPO.from_mpo(build_mpo(model.hamiltonian), state.basis))
                )
        name = state_file_name(point.index, bond_dimension, lease)
        info = {
            "study": description.name,
            "point": point.index,
            "parameters": dict(point.values),
            "bond_dimension": bond_dimension,
            "energy": energy,
            "discarded_weight": run.discarded_weight,
            "variance": variance,
            "sweeps": run.sweeps,
            "converged": run.converged,
            "message": run.message,
        }
        save_state(
            folder / STATES_FOLDER / name,
            state,
            model_text=description.model_text,
            overrides=description.overrides(point),
            seed=seed,
            kind="state",
            info=info,
        )
        state_file = f"{STATES_FOLDER}/{name}"
        result["dmrg"] = {
            "discarded_weight": float(run.discarded_weight),
            "variance": variance,
            "sweeps": int(run.sweeps),
            "converged": bool(run.converged),
            "message": run.message,
            "max_bond_dimension": int(state.max_bond_dimension),
            "start": origin,
            "seed": seed,
        }
    result["energy"] = energy
    result["probes"] = evaluate_probes(description, model, engine, state, energy)
    seconds = time.perf_counter() - start
    result["seconds"] = seconds
    return TaskOutcome(result, state_file, seconds)


class _Heartbeat:
    """A thread that refreshes a lease every ``interval`` seconds through its own connection."""

    def __init__(self, path, lease: str, interval: float):
        self._path, self._lease, self._interval = path, lease, interval
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="netprobe-lease", daemon=True)

    def _run(self):
        import sqlite3

        ledger = Ledger(self._path)
        try:
            while not self._stop.wait(self._interval):
                try:
                    ledger.beat([self._lease])
                except sqlite3.Error:
                    pass  # a busy ledger only delays this beat; the next one follows
        finally:
            ledger.close()

    def __enter__(self):
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join()


def run_task(ledger_file, task: int, lease: str, *, blas_threads: int | None = 1) -> str:
    """Run a leased task and record its outcome in the ledger (the entry point of every worker).

    Parameters
    ----------
    ledger_file : str or Path
    task : int
    lease : str
        The token of the claim; results are accepted only while the lease holds.
    blas_threads : int or None
        BLAS/LAPACK threads for this task (None leaves them as they are).

    Returns
    -------
    str
        ``"done"``, ``"pending"`` (failed, will be retried), ``"failed"`` or ``"lost"`` (the lease was
        taken back; nothing was recorded).

    """
    from threadpoolctl import threadpool_limits

    ledger = Ledger(ledger_file)
    try:
        if not ledger.start(task, lease):
            return "lost"
        description = ledger.description()
        row = ledger.task(task)
        point = description.points[row.point]
        needed = ledger.needed(task)
        with _Heartbeat(ledger_file, lease, description.executor.heartbeat_seconds):
            try:
                with threadpool_limits(limits=blas_threads):
                    outcome = compute_task(
                        description,
                        point,
                        row.rung,
                        row.bond_dimension,
                        ledger.folder,
                        lease,
                        needed,
                        blas_threads=blas_threads,
                    )
            except NetprobeError as err:
                return ledger.fail(task, lease, str(err)) or "lost"
            except Exception as err:  # a bug or a resource problem: record it, keep the worker alive
                return ledger.fail(task, lease, f"{type(err).__name__}: {err}") or "lost"
        if ledger.finish(task, lease, outcome.result, state_file=outcome.state_file, seconds=outcome.seconds):
            return "done"
        if outcome.state_file:
            (ledger.folder / outcome.state_file).unlink(missing_ok=True)
        return "lost"
    finally:
        ledger.close()
