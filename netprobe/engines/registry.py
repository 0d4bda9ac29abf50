"""One registry of ground-state engines and the protocol they satisfy.

Every engine turns a :class:`~netprobe.model.spec.Model` into one or more :class:`GroundState` objects,
handed to a ``visit`` callable as soon as each exists (a DMRG ladder hands over every rung in memory,
the exact and free-fermion engines one state). Whatever comes after (probes, cut diagnostics, studies,
assessment) only sees :class:`GroundState`, whose ``kind`` tells the probes which implementation
applies:

``"many-body"``
    a state vector (:class:`~netprobe.engines.exact.ExactResult`) or an MPS; reduced density matrices through
    :mod:`netprobe.rdm`.
``"gaussian"``
    a free-fermion or Majorana state (:mod:`netprobe.engines.gaussian`); probes from correlation matrices.

Engines (:data:`ENGINES`)
    ``exact``     exact diagonalisation in the model's charge sector.
    ``dmrg``      a ladder of bond dimensions (one ground state per rung).
    ``gaussian``  free fermions (quadratic models only).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Callable, Mapping, Protocol

from netprobe.engines.dmrg import LadderSettings, SweepSettings, run_ladder
from netprobe.engines.exact import ground_state as exact_ground_state
from netprobe.engines.gaussian import gaussian_state
from netprobe.errors import GaussianStateError, NetprobeError
from netprobe.model.spec import build_model

__all__ = ["GroundState", "SolveSettings", "Engine", "ENGINES", "get_engine", "solve", "ground_state"]


@dataclass(frozen=True, eq=False)
class GroundState:
    """A ground state as the measurement stages see it.

    Attributes
    ----------
    engine : str
        The engine's name in :data:`ENGINES`.
    kind : {"many-body", "gaussian"}
    state : object
        ``ExactResult``, ``MPS``, ``FreeFermionState`` or ``MajoranaState``.
    energy : float
    model : netprobe.model.spec.Model
    bond_dimension : int or None
        The rung of a DMRG ladder.
    discarded_weight : float or None
    info : dict
        Engine-specific facts (DMRG: sweeps, converged, message, state_file; exact: dimension, method).
    """

    engine: str
    kind: str
    state: Any = field(repr=False)
    energy: float
    model: Any = field(repr=False)
    bond_dimension: int | None = None
    discarded_weight: float | None = None
    info: Mapping[str, Any] = field(default_factory=dict)

    def __repr__(self) -> str:
        rung = "" if self.bond_dimension is None else f", D={self.bond_dimension}"
        return f"GroundState({self.engine}{rung}: E = {self.energy:.10g})"


@dataclass(frozen=True, kw_only=True)
class SolveSettings:
    """What an engine needs besides the model.

    Parameters
    ----------
    bond_dimensions : tuple of int
        The DMRG ladder (ignored by the other engines).
    sweeps : SweepSettings or None
        Template of every DMRG stage (None: the defaults).
    seed : int or None
    initial : MPS, optional
        Warm start of the first DMRG stage.
    out : str or Path, optional
        Folder for DMRG state files and checkpoints (None writes nothing).
    resume : bool
    variance : bool
        Compute the energy variance of every DMRG stage.
    progress : file-like, "stderr" or None
    blas_threads : int or None
    overrides : mapping of str to str, optional
        The ``--set`` values the model was built with (stored in DMRG state files).
    """

    bond_dimensions: tuple[int, ...] = (32, 64)
    sweeps: SweepSettings | None = None
    seed: int | None = 0
    initial: Any = None
    out: str | Path | None = None
    resume: bool = False
    variance: bool = False
    progress: Any = "stderr"
    blas_threads: int | None = 1
    overrides: Mapping[str, str] | None = None


class Engine(Protocol):
    """The ground-state protocol: ``solve`` calls ``visit`` once per ground state and returns a summary."""

    name: str
    kind: str  # the kind of the ground states it hands over ("many-body" or "gaussian")

    def solve(self, model, settings: SolveSettings, visit: Callable[[GroundState], None]) -> dict:
        ...


class ExactEngine:
    """Exact diagonalisation in the model's sector (:func:`netprobe.engines.exact.ground_state`)."""

    name = "exact"
    kind = "many-body"

    def solve(self, model, settings, visit):
        result = exact_ground_state(model.hamiltonian)
        dimension = int(result.basis.dim)
        visit(GroundState(self.name, self.kind, result, float(result.energy), model,
                          info={"dimension": dimension, "method": result.method}))
        return {"dimension": dimension, "method": result.method}


class GaussianEngine:
    """Free fermions (:func:`netprobe.engines.gaussian.gaussian_state`); quadratic models only."""

    name = "gaussian"
    kind = "gaussian"

    def solve(self, model, settings, visit):
        info = {}
        try:
            state = gaussian_state(model)
        except GaussianStateError as err:
            retry = _twisted(model, settings, err)
            if retry is None:
                raise
            model, info["note"] = retry
            state = gaussian_state(model)
        info["state"] = type(state).__name__
        visit(GroundState(self.name, self.kind, state, float(state.energy), model, info=info))
        return info


_EDGE_TWIST = 0.3  # radians: lifts edge zero modes of circumferences up to ~20 by a level spacing of ~1e-2


def _twisted(model, settings, err):
    """The model with a small flux through the cylinder, when twist 0 leaves degenerate levels at E_F.

    Edge modes of a chiral free-fermion state cross the Fermi level at allowed momenta of some
    circumferences, so the Slater determinant is not unique; a flux of 0.3 rad shifts the momenta off
    the crossing. Bulk probes of a gapped state change only by corrections exponentially small in the
    circumference, and the note says what was done.
    """
    if "degenerate" not in str(err) or "twist" not in model.spec.parameters:
        return None
    if model.lattice.geometry != "cylinder" or float(model.parameters.get("twist", 0.0)) != 0.0:
        return None
    overrides = dict(settings.overrides) if settings.overrides is not None else {
        k: str(v) for k, v in model.parameters.items()
        if k in model.spec.parameters and isinstance(v, (int, float, str)) and not isinstance(v, bool)}
    overrides["twist"] = repr(_EDGE_TWIST)
    note = (f"the free-fermion ground state at twist 0 is degenerate (edge zero modes at the Fermi level); "
            f"solved with twist = {_EDGE_TWIST} (a flux through the cylinder changes bulk probes of a gapped "
            "state only by corrections exponentially small in the circumference)")
    return build_model(model.spec, overrides), note


class LadderEngine:
    """A DMRG ladder (:func:`netprobe.engines.dmrg.run_ladder`); every rung is handed over in memory."""

    name = "dmrg"
    kind = "many-body"

    def solve(self, model, settings, visit):
        sweeps = settings.sweeps or SweepSettings()
        if settings.initial is not None:
            sweeps = replace(sweeps, ramp=())
        ladder_settings = LadderSettings(bond_dimensions=tuple(settings.bond_dimensions), sweeps=sweeps,
                                         variance=settings.variance)

        def on_stage(stage, state):
            visit(GroundState(self.name, self.kind, state, float(stage.energy), model,
                              bond_dimension=int(stage.bond_dimension),
                              discarded_weight=float(stage.discarded_weight), info=stage.to_dict()))

        ladder = run_ladder(model, ladder_settings, overrides=settings.overrides,
                            seed=settings.seed, out=settings.out, resume=settings.resume,
                            progress=settings.progress, blas_threads=settings.blas_threads,
                            initial=settings.initial, on_stage=on_stage)
        return ladder.to_dict()


ENGINES: dict[str, Engine] = {e.name: e for e in (LadderEngine(), ExactEngine(), GaussianEngine())}
"""The engines by name."""


def get_engine(name: str) -> Engine:
    """The engine called ``name``; an unknown name is an error that lists the valid ones."""
    try:
        return ENGINES[name]
    except (KeyError, TypeError):
        raise NetprobeError(f"unknown engine '{name}'; valid engines: {', '.join(ENGINES)}") from None


def solve(model, engine: str = "dmrg", settings: SolveSettings | None = None,
          visit: Callable[[GroundState], None] | None = None) -> tuple[list[GroundState], dict]:
    """Run ``engine`` on ``model``; return the ground states (kept only without ``visit``) and the summary."""
    kept: list[GroundState] = []
    summary = get_engine(engine).solve(model, settings or SolveSettings(), visit or kept.append)
    return kept, summary


def ground_state(model, engine: str = "dmrg", settings: SolveSettings | None = None) -> GroundState:
    """The ground state of ``model`` by ``engine`` (for a DMRG ladder, its last rung)."""
    states, _ = solve(model, engine, settings)
    return states[-1]
