"""DMRG over a ladder of bond dimensions, with state files, checkpoints, resume and extrapolation.

Each stage runs two-site DMRG at one bond dimension, warm-started from the previous stage's state,
and writes its state to ``<out>/stage<k>_D<chi>.h5``. After every sweep the whole run (current
state, sweep history, settings, finished stages, the random generator's state and the model
description) is checkpointed atomically to ``<out>/checkpoint.h5``; :func:`resume_ladder` (or
``run_ladder(..., resume=True)``) continues from it, skipping finished stages, and reaches the same
energies as an uninterrupted run with the same seed.

Every random choice (the initial state) comes from one ``numpy.random.Generator`` seeded by ``seed``;
its ``bit_generator.state`` is saved as JSON text in each checkpoint.
"""

from __future__ import annotations

import numbers
import time
import warnings
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path

import numpy as np

from netprobe.engines.dmrg.engine import ConvergenceWarning, GroundStateSearch, SweepRecord, SweepSettings
from netprobe.engines.dmrg.progress import ProgressWriter
from netprobe.errors import NetprobeError
from netprobe.engines.mps import MPS, BlockMPO, SiteBasis, energy_variance, random_state
from netprobe.engines.mps.mpo import build_mpo
from netprobe.engines.mps.store import damaged, load_state, remove_stale_temporaries, save_state
from netprobe.fitting import extrapolate_to_zero

__all__ = ["LadderSettings", "StageResult", "Extrapolation", "LadderResult", "extrapolate_energy",
           "run_ladder", "resume_ladder", "CHECKPOINT_NAME", "stage_file_name"]

CHECKPOINT_NAME = "checkpoint.h5"
_INITIAL_BOND_DIMENSION = 16  # largest bond dimension of the random initial state
_BIT_GENERATORS = ("PCG64", "PCG64DXSM", "Philox", "SFC64", "MT19937")


def stage_file_name(index: int, bond_dimension: int) -> str:
    """File name of the state of stage ``index`` (from 0): ``stage<index+1>_D<bond_dimension>.h5``."""
    return f"stage{index + 1}_D{bond_dimension}.h5"


@dataclass(frozen=True, kw_only=True)
class LadderSettings:
    """A ladder of bond dimensions and the sweep settings of its stages.

    Parameters
    ----------
    bond_dimensions : tuple of int
        Strictly increasing, each at least 1.
    sweeps : SweepSettings
        Template of every stage; its ``bond_dimension`` is replaced by the stage's. The first stage
        ramps up as the template says (``ramp=None``: the default doubling ramp); later stages start
        at their bond dimension from the previous stage's state.
    variance : bool
        Compute the energy variance of every stage's state (an exact contraction that costs about as
        much as one sweep).

    Raises
    ------
    NetprobeError
        For an empty or non-increasing ladder or a bond dimension below 1.
    """

    bond_dimensions: tuple[int, ...]
    sweeps: SweepSettings = field(default_factory=SweepSettings)
    variance: bool = True

    def __post_init__(self):
        try:
            chis = tuple(self.bond_dimensions)
        except TypeError:
            raise NetprobeError(
                f"LadderSettings: bond_dimensions={self.bond_dimensions!r} must be a list such as 64,128,256"
            ) from None
        if not chis:
            raise NetprobeError(
                "LadderSettings: bond_dimensions is empty; give at least one, e.g. 64,128,256")
        for chi in chis:
            if isinstance(chi, bool) or not isinstance(chi, (numbers.Integral, np.integer)) or chi < 1:
                raise NetprobeError(
                    f"LadderSettings: bond dimension {chi!r} must be an integer of at least 1")
        if any(b <= a for a, b in zip(chis, chis[1:])):
            raise NetprobeError(
                f"LadderSettings: bond dimensions {list(chis)} must increase from stage to stage; sort them"
            )
        if not isinstance(self.sweeps, SweepSettings):
            raise NetprobeError("LadderSettings: sweeps must be a SweepSettings")
        object.__setattr__(self, "bond_dimensions", tuple(int(c) for c in chis))

    def stage(self, index: int) -> SweepSettings:
        """Sweep settings of stage ``index`` (from 0)."""
        chi = self.bond_dimensions[index]
        if index == 0:
            ramp = None if self.sweeps.ramp is None else tuple(c for c in self.sweeps.ramp if c < chi)
        else:
            ramp = ()
        return replace(self.sweeps, bond_dimension=chi, ramp=ramp)

    def to_dict(self) -> dict:
        """Plain values (JSON-ready)."""
        return {"bond_dimensions": list(self.bond_dimensions), "sweeps": self.sweeps.to_dict(),
                "variance": bool(self.variance)}

    @classmethod
    def from_dict(cls, data: dict) -> LadderSettings:
        """Inverse of :meth:`to_dict`."""
        return cls(bond_dimensions=tuple(data["bond_dimensions"]),
                   sweeps=SweepSettings.from_dict(data["sweeps"]), variance=bool(data["variance"]))


@dataclass(frozen=True)
class StageResult:
    """One finished stage of a ladder.

    Attributes
    ----------
    bond_dimension : int
    energy : float
        Energy of the stage's final sweep (the energy of the saved state).
    discarded_weight : float
        Largest discarded weight of the final sweep.
    variance : float or None
        ``<H^2> - <H>^2`` of the saved state (None if not computed).
    sweeps : int
    seconds : float
        Wall time of the stage, including time before an interruption.
    state_file : str or None
    converged : bool
    message : str
    """

    bond_dimension: int
    energy: float
    discarded_weight: float
    variance: float | None
    sweeps: int
    seconds: float
    state_file: str | None
    converged: bool
    message: str

    def to_dict(self) -> dict:
        """Plain values (JSON-ready)."""
        return asdict(self)

    @classmethod
    def from_dict(cls, data: dict) -> StageResult:
        """Inverse of :meth:`to_dict`."""
        return cls(**data)


@dataclass(frozen=True)
class Extrapolation:
    """Energy extrapolated to zero discarded weight, ``E = energy + slope * w``.

    Attributes
    ----------
    energy : float
        Extrapolated energy ``E0``.
    error : float
        Error estimate (see :func:`extrapolate_energy`).
    slope : float
    points : int
        Stages used.
    method : str
    """

    energy: float
    error: float
    slope: float
    points: int
    method: str

    def to_dict(self) -> dict:
        """Plain values (JSON-ready)."""
        return asdict(self)


def extrapolate_energy(discarded_weights, energies) -> Extrapolation:
    """Linear extrapolation of the energy to zero discarded weight, with an error estimate.

    Parameters
    ----------
    discarded_weights, energies : sequence of float
        One pair per stage (at least two).

    Returns
    -------
    Extrapolation

    Raises
    ------
    NetprobeError
        For fewer than two points, or lengths that differ.

    Notes
    -----
    The energy of a well-converged DMRG state approaches the exact one linearly in the discarded
    weight w (common practice in DMRG). The line ``E = E0 + a w`` is fitted by least squares through
    all points. The error estimate is

    - two points: ``|E0 - E(w_min)|``, the whole extrapolation distance;
    - three or more: the larger of the standard error of ``E0`` from the fit residuals and
      ``|E0 - E0'|``, where ``E0'`` comes from the line through the two points of smallest ``w``,
      so that curvature left by the stages far from the limit shows up in the error.

    If all discarded weights are equal (e.g. all zero: the ladder is exact), ``E0`` is the lowest
    energy and the error the spread of the energies.
    """
    w = np.asarray(discarded_weights, float)
    e = np.asarray(energies, float)
    if w.shape != e.shape or w.ndim != 1:
        raise NetprobeError("extrapolate_energy: give one discarded weight per energy")
    if len(w) < 2:
        raise NetprobeError(
            "extrapolate_energy: needs at least two stages; run a ladder of two or more bond dimensions")
    fit = extrapolate_to_zero(w, e, variable="the discarded weight")
    method = {"constant": "constant (equal discarded weights)"}.get(fit.form) or (
        "line through two points" if fit.points == 2 else "least-squares line")
    return Extrapolation(fit.value, fit.error, fit.slope, fit.points, method)


@dataclass(frozen=True, eq=False)
class LadderResult:
    """Outcome of a ladder run.

    Attributes
    ----------
    stages : tuple of StageResult
    extrapolation : Extrapolation or None
        None for a single stage.
    converged : bool
        Whether the last stage converged.
    message : str
    out : str or None
        Output folder.
    state : MPS
        State of the last stage.
    """

    stages: tuple[StageResult, ...]
    extrapolation: Extrapolation | None
    converged: bool
    message: str
    out: str | None
    state: MPS = field(repr=False)

    @property
    def energy(self) -> float:
        """Energy of the last stage."""
        return self.stages[-1].energy

    def to_dict(self) -> dict:
        """Plain values (JSON-ready): ``stages``, ``extrapolation``, ``converged``, ``message``, ``out``."""
        return {"stages": [s.to_dict() for s in self.stages],
                "extrapolation": None if self.extrapolation is None else self.extrapolation.to_dict(),
                "converged": self.converged, "message": self.message, "out": self.out}

    def __repr__(self) -> str:
        chis = ",".join(str(s.bond_dimension) for s in self.stages)
        extra = "" if self.extrapolation is None else (
            f", extrapolated={self.extrapolation.energy:.10g}+-{self.extrapolation.error:.1e}")
        return f"LadderResult(D={chis}, energy={self.energy:.12g}{extra}, converged={self.converged})"


def _restore_rng(state: dict | None, seed) -> np.random.Generator:
    if state is None:
        return np.random.default_rng(seed)
    name = state.get("bit_generator")
    if name not in _BIT_GENERATORS:
        raise NetprobeError(
            f"checkpoint: unknown bit generator {name!r}; known: {', '.join(_BIT_GENERATORS)}")
    bitgen = getattr(np.random, name)()
    bitgen.state = state
    return np.random.Generator(bitgen)


def _checked_stage(entry) -> dict:
    """A stored stage entry with the types :class:`StageResult` needs (else ValueError)."""
    if not isinstance(entry, dict):
        raise ValueError(f"stage entry {entry!r} is not an object")
    kinds = {"bond_dimension": (int,), "energy": (int, float), "discarded_weight": (int, float),
             "sweeps": (int,), "seconds": (int, float), "converged": (bool,), "message": (str,),
             "variance": (int, float, type(None)), "state_file": (str, type(None))}
    for key, allowed in kinds.items():
        value = entry.get(key, ...)
        if value is ... or not isinstance(value, allowed) or (isinstance(value, bool) and bool not in allowed):
            shown = "missing" if value is ... else repr(value)
            raise ValueError(f"stage entry {key} = {shown} has the wrong type")
    return entry


def _read_checkpoint(saved, seed, rungs: int):
    """Generator, finished stages, current stage, sweep history and time of a checkpoint.

    Raises
    ------
    StateFileError
        If an entry does not fit the layout (the message names the file and the entry).
    """
    info = saved.info
    try:
        rng = _restore_rng(saved.rng_state, seed)
        stages = [StageResult.from_dict(_checked_stage(s)) for s in info["stages"]]
        first = info["stage"]
        if isinstance(first, bool) or not isinstance(first, int):
            raise ValueError(f"stage {first!r} is not a whole number")
        if not 0 <= first <= rungs or len(stages) != first:
            raise ValueError(
                f"stage {first} with {len(stages)} finished stage(s) does not fit a ladder of {rungs}")
        engine = info.get("engine") or {}
        history = [SweepRecord.from_dict(r) for r in engine.get("history", [])]
        elapsed = float(engine.get("elapsed", 0.0))
    except (KeyError, TypeError, ValueError, AttributeError, OverflowError) as err:
        detail = f"missing entry {err}" if isinstance(err, KeyError) else str(err)
        raise damaged(saved.path, f"its stage entries are malformed ({detail})") from None
    return rng, stages, first, history, elapsed


def _describe_mismatch(saved, model_text, overrides, settings, seed) -> list[str]:
    diffs = []
    if saved.model_text != model_text:
        diffs.append("the model file")
    if {str(k): str(v) for k, v in saved.overrides.items()} != {str(k): str(v) for k, v in overrides.items()}:
        diffs.append(f"the --set values (checkpoint: {saved.overrides})")
    stored = saved.info.get("ladder")
    if stored != settings.to_dict():
        if stored and stored.get("bond_dimensions") != list(settings.bond_dimensions):
            diffs.append(f"the bond dimensions (checkpoint: {stored.get('bond_dimensions')})")
        else:
            diffs.append("the sweep settings")
    if saved.seed != seed:
        diffs.append(f"the seed (checkpoint: {saved.seed})")
    return diffs


def run_ladder(model, settings: LadderSettings, *, overrides=None, seed: int | None = 0, out=None,
               resume: bool = False, progress="stderr", blas_threads: int | None = 1, initial=None,
               on_stage=None) -> LadderResult:
    """Run DMRG over a ladder of bond dimensions (the engine behind ``netprobe run``).

    Parameters
    ----------
    model : netprobe.model.spec.Model
        Its ``spec.text`` and ``overrides`` are stored with every file.
    settings : LadderSettings
    overrides : dict of str to str, optional
        The ``--set`` values the model was built with (stored so that a state can be traced back).
    seed : int or None
        Seed of the one random generator of the run.
    out : str or Path, optional
        Folder for the state files and the checkpoint (created if needed); None writes nothing.
    resume : bool
        Continue from ``<out>/checkpoint.h5`` if it exists (stages already finished are kept); without
        a checkpoint the run starts from the beginning.
    progress : file-like, "stderr" or None
    blas_threads : int or None
        Threads of the BLAS/LAPACK libraries during sweeps and variances (see
        :class:`netprobe.engines.dmrg.GroundStateSearch`); None leaves them as they are.
    initial : MPS, optional
        Start the first stage from this state instead of a random one (a warm start; the seed still
        drives the noise).
    on_stage : callable, optional
        ``on_stage(stage, state)`` after every finished stage, with its :class:`StageResult` and the
        state in memory (the measurement pipeline evaluates its probes there).

    Returns
    -------
    LadderResult

    Raises
    ------
    NetprobeError
        If ``resume`` is asked without ``out``, or the checkpoint belongs to another model, other
        ``--set`` values, other settings or another seed.
    StateFileError
        If the checkpoint cannot be read.

    Warns
    -----
    ConvergenceWarning
        If the last stage did not converge (the results are returned all the same).
    """
    writer = ProgressWriter(progress)
    ham = model.hamiltonian
    model_text = model.spec.text
    overrides = {str(k): str(v) for k, v in (overrides or {}).items()}
    if not isinstance(settings, LadderSettings):
        raise NetprobeError("run_ladder: settings must be a LadderSettings")
    if seed is not None and (isinstance(seed, bool) or not isinstance(seed, (numbers.Integral, np.integer))):
        raise NetprobeError(f"run_ladder: seed={seed!r} must be an integer or None")
    seed = None if seed is None else int(seed)
    folder = None if out is None else Path(out)
    if resume and folder is None:
        raise NetprobeError("run_ladder: resume needs the output folder of the interrupted run (--out DIR)")
    if folder is not None:
        folder.mkdir(parents=True, exist_ok=True)
        remove_stale_temporaries(folder)
    basis = SiteBasis.from_hamiltonian(ham)
    mpo = BlockMPO.from_mpo(build_mpo(ham), basis)
    chis = settings.bond_dimensions

    saved = None
    if resume:
        ckpt = folder / CHECKPOINT_NAME
        if ckpt.exists():
            saved = load_state(ckpt)
            try:
                diffs = _describe_mismatch(saved, model_text, overrides, settings, seed)
            except (AttributeError, TypeError, ValueError) as err:
                raise damaged(ckpt, f"its ladder entry is malformed ({err})") from None
            if diffs:
                raise NetprobeError(
                    f"run_ladder: the checkpoint {ckpt} was written for a different run "
                    f"({'; '.join(diffs)}); resume with the same model, --set values, ladder and seed, "
                    "or use another --out"
                )
        else:
            writer.line(f"ladder | no checkpoint in {folder}; starting from the beginning")
    if saved is not None:
        rng, stages, first, history, elapsed = _read_checkpoint(saved, seed, len(chis))
        state = saved.state
        writer.line(f"ladder | resuming from {folder / CHECKPOINT_NAME}: {len(stages)} stage(s) done, "
                    f"{len(history)} sweep(s) into stage {first + 1}")
    else:
        rng = np.random.default_rng(seed)
        stages, first, history, elapsed = [], 0, [], 0.0
        chi0 = settings.stage(0).bond_dimension_at(0)
        state = initial if initial is not None else random_state(
            ham, bond_dimension=min(chi0, _INITIAL_BOND_DIMENSION), rng=rng)

    def write_checkpoint(stage_index, current_state, engine_info):
        info = {"ladder": settings.to_dict(), "stage": stage_index, "stages": [s.to_dict() for s in stages],
                "engine": engine_info}
        save_state(folder / CHECKPOINT_NAME, current_state, model_text=model_text, overrides=overrides,
                   seed=seed, kind="checkpoint", info=info, rng_state=rng.bit_generator.state)

    for k in range(first, len(chis)):
        chi = chis[k]
        stage_settings = settings.stage(k)
        stage_writer = ProgressWriter(writer.stream, prefix=f"D={chi} | ")
        if not history:
            writer.line(f"ladder | stage {k + 1}/{len(chis)}: bond dimension {chi}"
                        + (f", warm start from D={chis[k - 1]}" if k else ", random initial state"))
        engine = GroundStateSearch(mpo, state, stage_settings, rng=rng, progress=stage_writer, history=history,
                            blas_threads=blas_threads)
        start = time.perf_counter() - elapsed

        def on_sweep(eng, record, k=k, start=start):
            if folder is not None:
                write_checkpoint(k, eng.state, {"history": [r.to_dict() for r in eng.history],
                                                "elapsed": time.perf_counter() - start})

        result = engine.finish(on_sweep=on_sweep, warn=False)
        variance = None
        if settings.variance:
            with engine.blas_limit():
                variance = energy_variance(result.state, mpo)
        seconds = time.perf_counter() - start
        state_file = None
        if folder is not None:
            info = {"energy": result.energy, "discarded_weight": result.discarded_weight,
                    "variance": variance, "bond_dimension": chi, "sweeps": result.sweeps,
                    "converged": result.converged, "message": result.message,
                    "settings": stage_settings.to_dict(), "history": [r.to_dict() for r in result.history]}
            state_file = str(save_state(folder / stage_file_name(k, chi), result.state, model_text=model_text,
                                        overrides=overrides, seed=seed, kind="state", info=info))
        stage = StageResult(bond_dimension=chi, energy=result.energy,
                            discarded_weight=result.discarded_weight, variance=variance,
                            sweeps=result.sweeps, seconds=seconds, state_file=state_file,
                            converged=result.converged, message=result.message)
        stages.append(stage)
        state, history, elapsed = result.state, [], 0.0
        if on_stage is not None:
            on_stage(stage, state)
        var_text = "" if variance is None else f", variance {variance:.3e}"
        writer.line(f"ladder | stage {k + 1} done: energy {stage.energy:.12f}, "
                    f"discarded {stage.discarded_weight:.2e}{var_text}, {stage.sweeps} sweeps, "
                    f"{seconds:.1f} s ({result.message})" + (f" -> {state_file}" if state_file else ""))
        if folder is not None:
            write_checkpoint(k + 1, state, None)

    extrapolation = None
    if len(stages) >= 2:
        extrapolation = extrapolate_energy([s.discarded_weight for s in stages], [s.energy for s in stages])
        writer.line(f"ladder | extrapolated energy {extrapolation.energy:.12f} +- {extrapolation.error:.2e} "
                    f"({extrapolation.method}, {extrapolation.points} stages)")
    last = stages[-1]
    if not last.converged:
        warnings.warn(f"DMRG ladder: last stage (D={last.bond_dimension}) {last.message}", ConvergenceWarning,
                      stacklevel=2)
    return LadderResult(stages=tuple(stages), extrapolation=extrapolation, converged=last.converged,
                        message=last.message, out=None if folder is None else str(folder), state=state)


def resume_ladder(out, *, progress="stderr", blas_threads: int | None = 1) -> LadderResult:
    """Continue the ladder whose checkpoint is in ``out``, with the model, settings and seed stored there.

    Raises
    ------
    StateFileError
        If ``<out>/checkpoint.h5`` is missing or unreadable.
    """
    saved = load_state(Path(out) / CHECKPOINT_NAME)
    settings = LadderSettings.from_dict(saved.info["ladder"])
    return run_ladder(saved.model(), settings, overrides=saved.overrides, seed=saved.seed, out=out,
                      resume=True, progress=progress, blas_threads=blas_threads)
