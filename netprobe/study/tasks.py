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
import sqlite3
import threading
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import numpy as np
from threadpoolctl import threadpool_limits

from netprobe.engines.dmrg import ConvergenceWarning, SweepSettings
from netprobe.engines import GroundState, SolveSettings, ground_state
from netprobe.errors import NetprobeError
from netprobe.pipeline.assess import assess_states
from netprobe.pipeline.measure import local_means, measure
from netprobe.regions import parse_region
from netprobe.engines.mps.store import load_state, save_state
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


_ASSESS_SITES = {"gaussian": 100, "many-body": 12}  # free-fermion regions of 100 sites take seconds

def evaluate_probes(description: StudyDescription, ground: GroundState) -> dict:
    """Values of the study's probes on one ground state.

    Parameters
    ----------
    description : StudyDescription
    ground : GroundState
        From any engine (:mod:`netprobe.engines`).

    Returns
    -------
    dict of str to float
        Keyed by the probe text as written in the study file.

    """
    model = ground.model
    layouts = _region_layouts(description, model.lattice) if description.regions else {}
    wanted: dict[str, set] = {}
    for probe in description.probes:
        need = probe.kind.measures
        if need is not None:
            if need != "S":
                _abc(layouts[probe.region], probe.text)
            wanted.setdefault(probe.region, set()).add(need)
    values = {region: measure(ground, layouts[region], probes=sorted(names)) for region, names in wanted.items()}
    means: dict[str, np.ndarray] = {}
    out: dict[str, float] = {}
    assessment = None
    for probe in description.probes:
        if probe.name in ("assessed_c_minus", "assessed_gamma"):
            if assessment is None:
                assessment = assess_states([ground], max_sites=_ASSESS_SITES.get(ground.kind, 12))
            key = probe.name.removeprefix("assessed_")
            value, error = getattr(assessment, key), getattr(assessment, f"{key}_error")
            out[probe.text] = math.nan if value is None else float(value)
            out[f"{probe.text}_error"] = math.nan if error is None else float(error)
        elif probe.name == "energy":
            out[probe.text] = float(ground.energy)
        elif probe.name == "energy_per_site":
            out[probe.text] = float(ground.energy) / model.num_sites
        elif probe.operator is not None:
            if probe.operator not in means:
                means[probe.operator] = local_means(ground, probe.operator)
            sites = range(model.num_sites) if probe.region is None else _sites_of(layouts[probe.region])
            out[probe.text] = _real(np.mean(means[probe.operator][list(sites)]), probe.text)
        else:
            m = values[probe.region]
            value = {"entropy": (m.entropies or {}).get("A"), "J": m.J, "c_minus": m.c_minus, "cmi": m.cmi,
                     "gamma": m.gamma, "chern_number": m.chern_number}[probe.name]
            if value is None:
                raise NetprobeError(f"probe '{probe.text}' is not available with the {ground.engine} engine")
            out[probe.text] = float(value)
    return out


def _start_state(needed: list[TaskRow], folder: Path, model):
    """The state a DMRG task starts from (or None), and a note saying where it came from."""
    if not needed:
        return None, "random initial state"
    done = [r for r in needed if r.status == "done" and r.state_file]
    if not done:
        return None, f"random initial state (task {needed[0].id}, its intended start, failed)"

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
    initial, origin, seed = None, None, None
    if engine == "dmrg":
        initial, origin = _start_state(needed, folder, model)
        seed = point_seed(description.seed, point.index)
    sweeps = SweepSettings(bond_dimension=bond_dimension, **description.sweep_settings) if engine == "dmrg" else None
    settings = SolveSettings(bond_dimensions=(bond_dimension,), sweeps=sweeps, seed=seed, initial=initial,
                             variance=description.variance, progress=None, blas_threads=blas_threads)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)  # recorded below as "converged"
        ground = ground_state(model, engine, settings)
    energy = float(ground.energy)
    if engine == "exact":
        result["exact"] = {"dimension": int(ground.info["dimension"]), "method": ground.info["method"]}
    elif engine == "gaussian":
        result["gaussian"] = {"kind": type(ground.state).__name__,
                              "gap": float(getattr(ground.state, "gap", math.nan))}
    else:
        stage = ground.info
        variance = stage.get("variance")
        name = state_file_name(point.index, bond_dimension, lease)
        info = {
            "study": description.name,
            "point": point.index,
            "parameters": dict(point.values),
            "bond_dimension": bond_dimension,
            "energy": energy,
            "discarded_weight": ground.discarded_weight,
            "variance": variance,
            "sweeps": stage["sweeps"],
            "converged": stage["converged"],
            "message": stage["message"],
        }
        save_state(
            folder / STATES_FOLDER / name,
            ground.state,
            model_text=description.model_text,
            overrides=description.overrides(point),
            seed=seed,
            kind="state",
            info=info,
        )
        state_file = f"{STATES_FOLDER}/{name}"
        result["dmrg"] = {
            "discarded_weight": float(ground.discarded_weight),
            "variance": variance,
            "sweeps": int(stage["sweeps"]),
            "converged": bool(stage["converged"]),
            "message": stage["message"],
            "max_bond_dimension": int(ground.state.max_bond_dimension),
            "start": origin,
            "seed": seed,
        }
    result["energy"] = energy
    result["probes"] = evaluate_probes(description, ground)
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
