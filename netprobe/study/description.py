"""Study descriptions: TOML files of our own layout that say which points of coupling space to visit.

Layout
------
::

    [study]
    name = "tfim_sweep"               # required; names the default output folder
    description = "..."               # one line
    model = "tfim"                    # a bundled model, or a model file path (relative to this file)
    engine = "dmrg"                   # dmrg | exact | gaussian
    seed = 5                          # seeds the random initial states (dmrg)
    warm_start = true                 # dmrg: a point's first rung starts from its grid neighbour

    [set]                             # --set values applied at every point (numbers or strings)
    J = 1.0

    [grid]                            # one or two swept parameters, in this order
    length = { values = [16, 32] }    # an explicit list of numbers, or
    h = { start = 0.6, stop = 1.2, num = 7 }   # num evenly spaced values, both ends included

    # instead of [grid], an explicit list of points:
    # [[point]]
    # h = 0.5

    [ladder]                          # dmrg: bond dimensions, increasing; any sweep setting below
    bond_dimensions = [8, 16]         #   (sweep_limit, sweep_minimum, energy_tolerance, noise, ...)
    variance = false                  #   energy variance of every state (costs about one sweep)

    [measure]
    region = "sectors:radius=6"       # a region layout (netprobe.regions syntax), or several:
    # regions = { disk = "sectors:radius=6", ring = "levin_wen:inner=1,outer=3,cut=40" }
    probes = ["energy", "J", "chern_number", "mean:X"]   # names in PROBES; "J@ring" picks a region

    [executor]
    workers = 2                       # local worker processes (default: one per core)
    attempts = 2                      # tries per task and per run before it counts as failed
    heartbeat_seconds = 10.0          # how often a running task says it is alive
    lease_seconds = 120.0             # a running task silent for this long is taken back
    connect_seconds = 10.0            # how long to try a Dask scheduler

    [verdicts]
    change_threshold = 0.01           # flag a probe whose last two rungs differ by more (absolute)
    energy_threshold = 1e-6           # ... and an energy (relative to max(1, |E|))

Every point of the grid is a model (the model file with the ``[set]`` and the point's values as
``--set`` overrides); every (point, bond dimension) of the ladder is one task of the study's ledger.
The exact and Gaussian engines ignore the ladder and have one task per point (bond dimension 0).
"""

from __future__ import annotations

import hashlib
import json
import numbers
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path
from types import MappingProxyType
from typing import Any, Mapping


from netprobe.errors import NetprobeError, SpecError
from netprobe.engines.limits import check_dmrg_model, check_exact_model
from netprobe.engines.registry import ENGINES as ENGINE_REGISTRY
from netprobe.model.spec import (
    LATTICE_KEYS, ModelSpec, _resolve_parameters, check_size, find_toml, models_directory, parse_spec,
)
from netprobe.errors import OperatorError
from netprobe.model.spec import build_model
from netprobe.probes import PROBES as BULK_PROBES
from netprobe.regions import parse_region

__all__ = [
    "ENGINES",
    "PROBES",
    "ProbeKind",
    "ProbeRequest",
    "GridAxis",
    "StudyPoint",
    "TaskPlan",
    "ExecutorSettings",
    "VerdictSettings",
    "StudyDescription",
    "studies_directory",
    "find_study",
    "parse_probe",
]


#: Engines by name, with what each does with the ladder.
ENGINES: Mapping[str, str] = MappingProxyType(
    {
        "dmrg": "two-site DMRG, one task per (point, bond dimension) of the ladder",
        "exact": "exact diagonalisation in the model's sector, one task per point",
        "gaussian": "free-fermion ground state of a quadratic model, one task per point",
    }
)


@dataclass(frozen=True)
class ProbeKind:
    """What a study probe needs: a region with parts A, B, C, and which engines can evaluate it.

    ``measures`` names the bulk probe of the registry :data:`netprobe.probes.PROBES` that computes it
    (None for the energy, local means and assessed values, which the registry does not hold).
    """

    text: str
    region: str  # "none", "A" (part A of any layout) or "ABC"
    engines: frozenset
    measures: str | None = None

    @property
    def unit(self) -> str | None:
        """The unit of the registry probe (None where ``measures`` is None)."""
        return None if self.measures is None else BULK_PROBES[self.measures].unit


_ALL = frozenset(ENGINES)


def _bulk(text: str, measures: str, region: str = "ABC") -> ProbeKind:
    """A study probe computed by a registry probe; the engines are those whose state kind implements it."""
    kinds = BULK_PROBES[measures].kinds
    engines = frozenset(name for name, engine in ENGINE_REGISTRY.items() if engine.kind in kinds)
    return ProbeKind(text, region, engines, measures)


#: Probes by name. ``mean:OP`` averages a local operator over the lattice (or, with ``@region``,
#: over the union of the region's parts).
PROBES: Mapping[str, ProbeKind] = MappingProxyType(
    {
        "energy": ProbeKind("ground-state energy", "none", _ALL),
        "energy_per_site": ProbeKind("ground-state energy divided by the number of sites", "none", _ALL),
        "entropy": _bulk("von Neumann entropy of part A (nats)", "S", "A"),
        "J": _bulk("modular commutator J(A, B, C)", "J"),
        "c_minus": _bulk("chiral central charge estimate 3 J / pi", "J"),
        "cmi": _bulk("conditional mutual information I(A:C|B) (nats)", "CMI"),
        "gamma": _bulk("topological entanglement entropy from the Kitaev-Preskill combination", "TEE"),
        "chern_number": _bulk("real-space Chern number of three sectors (number-conserving fermions)",
                              "chern_number"),
        "mean:OP": ProbeKind("mean of a local operator OP over the sites", "optional", _ALL),
        "assessed_c_minus": ProbeKind(
            "c- from a region-size ladder extrapolated to the infinite region, with its error "
            "(netprobe assess; regions up to 100 sites for gaussian, 12 otherwise)", "none", _ALL),
        "assessed_gamma": ProbeKind(
            "gamma from the same region-size ladder, with its error", "none", _ALL),
    }
)

_STUDY_KEYS = {"name", "description", "model", "engine", "seed", "warm_start"}
_TOP_KEYS = {"study", "set", "grid", "point", "ladder", "measure", "executor", "verdicts"}
_AXIS_KEYS = {"start", "stop", "num", "values"}
_MEASURE_KEYS = {"region", "regions", "probes"}
_LADDER_ONLY = {"bond_dimensions", "variance"}
_SWEEP_KEYS = {
    "sweep_limit",
    "sweep_minimum",
    "energy_tolerance",
    "discarded_tolerance",
    "truncation_weight",
    "noise",
    "noise_sweeps",
    "eigensolver",
    "solver_tolerance",
    "ramp_solver_tolerance",
    "krylov_dimension",
    "solver_restarts",
}
_DEFAULT_REGION = "main"
_MAX_AXES = 2
_DECIMALS = 12  # grid values are rounded so that 0.1 * 3 prints as 0.3 in labels and overrides


def studies_directory() -> Path:
    """The folder of bundled study files (``models/studies/`` beside the package)."""
    return models_directory() / "studies"


def find_study(name_or_path: str) -> Path:
    """Resolve a study argument: a path to a TOML file, or the name of a bundled study."""
    return find_toml(name_or_path, studies_directory(), "study")


@dataclass(frozen=True, kw_only=True)
class ExecutorSettings:
    """How the tasks run.

    Attributes
    ----------
    workers : int or None
        Local worker processes; None means one per core.
    attempts : int
        Tries of a task within one run before it counts as failed (a later run tries again).
    heartbeat_seconds : float
        Interval at which the process running a task refreshes its lease.
    lease_seconds : float
        A running task whose lease has not been refreshed for this long is taken back.
    connect_seconds : float
        How long to try to reach a Dask scheduler.
    blas_threads : int or None
        BLAS/LAPACK threads per task; None shares the cores among the workers.

    """

    workers: int | None = None
    attempts: int = 2
    heartbeat_seconds: float = 10.0
    lease_seconds: float = 120.0
    connect_seconds: float = 10.0
    blas_threads: int | None = None

    def __post_init__(self):
        for name in ("workers", "blas_threads"):
            value = getattr(self, name)
            if value is not None and (
                isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 1
            ):
                raise SpecError(f"[executor] {name} = {value!r} must be a positive integer")
        if (
            isinstance(self.attempts, bool)
            or not isinstance(self.attempts, numbers.Integral)
            or self.attempts < 1
        ):
            raise SpecError(f"[executor] attempts = {self.attempts!r} must be a positive integer")
        for name in ("heartbeat_seconds", "lease_seconds", "connect_seconds"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, numbers.Real) or not value > 0:
                raise SpecError(f"[executor] {name} = {value!r} must be a positive number of seconds")
        if self.lease_seconds < 2 * self.heartbeat_seconds:
            raise SpecError(
                f"[executor] lease_seconds = {self.lease_seconds} must be at least twice heartbeat_seconds = "
                f"{self.heartbeat_seconds}, or live tasks would be taken back"
            )


@dataclass(frozen=True, kw_only=True)
class VerdictSettings:
    """Thresholds of the convergence verdicts.

    Attributes
    ----------
    change_threshold : float
        A probe is flagged when its values at the last two rungs differ by more than this.
    energy_threshold : float
        The energy is flagged when its last two rungs differ by more than this times ``max(1, |E|)``.

    """

    change_threshold: float = 1e-2
    energy_threshold: float = 1e-6

    def __post_init__(self):
        for name in ("change_threshold", "energy_threshold"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, numbers.Real) or not value > 0:
                raise SpecError(f"[verdicts] {name} = {value!r} must be a positive number")


@dataclass(frozen=True)
class ProbeRequest:
    """One entry of ``[measure] probes``: a probe name, its operator (``mean:OP``) and its region."""

    text: str
    name: str
    operator: str | None
    region: str | None

    @property
    def kind(self) -> ProbeKind:
        return PROBES["mean:OP" if self.operator is not None else self.name]


def parse_probe(text: str, regions: Mapping[str, str], engine: str, where: str) -> ProbeRequest:
    """Parse a probe entry such as ``"J"``, ``"cmi@ring"`` or ``"mean:X"`` and check it fits.

    Raises
    ------
    SpecError
        For an unknown probe or region, a probe that needs a region when none is given, or a probe
        the engine cannot evaluate.

    """
    if not isinstance(text, str) or not text.strip():
        raise SpecError(f'{where}: [measure] probes must be a list of names such as "J" or "mean:X"')
    body, _, region = text.strip().partition("@")
    name, colon, operator = body.partition(":")
    valid = ", ".join(PROBES)
    if colon:
        if name != "mean" or not operator.strip():
            raise SpecError(f"{where}: unknown probe '{text}'; valid probes: {valid}")
        kind = PROBES["mean:OP"]
        operator = operator.strip()
    else:
        if name not in PROBES or name == "mean:OP":
            raise SpecError(f"{where}: unknown probe '{text}'; valid probes: {valid}")
        kind = PROBES[name]
        operator = None
    if engine not in kind.engines:
        raise SpecError(
            f"{where}: probe '{text}' is not available with engine '{engine}'; it needs "
            f"{' or '.join(sorted(kind.engines))}"
        )
    if region:
        if kind.region == "none":
            raise SpecError(f"{where}: probe '{text}': {name} takes no region; write '{name}'")
        if region not in regions:
            raise SpecError(
                f"{where}: probe '{text}' names region '{region}'; defined regions: "
                f"{', '.join(regions) or 'none'}"
            )
    elif kind.region in ("A", "ABC"):
        if not regions:
            raise SpecError(
                f"{where}: probe '{text}' needs a region; add [measure] region = \"sectors:radius=R\""
            )
        if len(regions) > 1:
            raise SpecError(
                f"{where}: probe '{text}': several regions are defined ({', '.join(regions)}); write "
                f"'{name}@NAME'"
            )
        region = next(iter(regions))
    return ProbeRequest(text.strip(), name, operator, region or None)


@dataclass(frozen=True)
class GridAxis:
    """One swept parameter and its values."""

    name: str
    values: tuple[float, ...]


@dataclass(frozen=True)
class StudyPoint:
    """One point of coupling space.

    Attributes
    ----------
    index : int
        Position in the study's list of points (from 0).
    values : mapping of str to number
        The swept parameters at this point.
    grid_index : tuple of int or None
        Indices along the grid axes (None for an explicit list of points).

    """

    index: int
    values: Mapping[str, float]
    grid_index: tuple[int, ...] | None

    @property
    def label(self) -> str:
        """``name=value`` pairs, e.g. ``length=16,h=0.9``."""
        return ",".join(f"{k}={_format_value(v)}" for k, v in self.values.items())


@dataclass(frozen=True)
class TaskPlan:
    """A (point, bond dimension) task and the tasks whose states it starts from."""

    point: int
    rung: int
    bond_dimension: int
    needs: tuple[tuple[int, int], ...]  # (point, rung) pairs


def _format_value(value) -> str:
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, numbers.Integral):
        return str(int(value))
    value = float(value)
    if value.is_integer() and abs(value) < 1e15:
        return f"{value:.1f}"
    return repr(round(value, _DECIMALS))


@dataclass(frozen=True, eq=False)
class StudyDescription:
    """A parsed and checked study file.

    Attributes
    ----------
    name, text : str
        Study name and one-line description.
    path : str
        The study file ("" for text parsed without a file).
    model : str
        The model argument as written.
    model_text : str
        The model file's text (kept, so that every worker builds the same model).
    model_path : str
    engine : str
        A name in :data:`ENGINES`.
    seed : int
    warm_start : bool
    fixed : mapping of str to str
        The ``[set]`` overrides.
    axes : tuple of GridAxis
        The swept parameters (empty for an explicit list of points).
    points : tuple of StudyPoint
    swept : tuple of str
        Names of the parameters that vary between points.
    ladder : tuple of int
        Bond dimensions (``(0,)`` for the exact and Gaussian engines).
    sweep_settings : mapping
        ``[ladder]`` sweep settings besides the bond dimensions.
    variance : bool
    regions : mapping of str to str
        Region layouts by name.
    probes : tuple of ProbeRequest
    executor : ExecutorSettings
    verdicts : VerdictSettings

    """

    name: str
    text: str
    path: str
    model: str
    model_text: str = field(repr=False)
    model_path: str
    engine: str
    seed: int
    warm_start: bool
    fixed: Mapping[str, str]
    axes: tuple[GridAxis, ...]
    points: tuple[StudyPoint, ...] = field(repr=False)
    swept: tuple[str, ...]
    ladder: tuple[int, ...]
    sweep_settings: Mapping[str, Any]
    variance: bool
    regions: Mapping[str, str]
    probes: tuple[ProbeRequest, ...]
    executor: ExecutorSettings
    verdicts: VerdictSettings

    @property
    def model_spec(self) -> ModelSpec:
        """The parsed model file."""
        return parse_spec(self.model_text, path=self.model_path)

    def overrides(self, point: StudyPoint) -> dict[str, str]:
        """The ``--set`` values of a point: ``[set]`` first, then the point's own values."""
        out = dict(self.fixed)
        for key, value in point.values.items():
            out[key] = _format_value(value)
        return out

    def build_model(self, point: StudyPoint):
        """The model at a point (:class:`netprobe.model.spec.Model`)."""
        return build_model(self.model_spec, self.overrides(point))

    def lattice_key(self, point: StudyPoint) -> tuple:
        """The lattice-defining overrides of a point (points with equal keys share a lattice)."""
        over = self.overrides(point)
        return tuple(
            (k, over.get(k)) for k in ("lattice", "geometry", "orientation", "length", "circumference")
        )

    def plan(self) -> tuple[TaskPlan, ...]:
        """All tasks of the study, with the tasks each one starts from.

        For the DMRG engine, rung k > 0 of a point starts from rung k - 1 of the same point; with
        ``warm_start`` the first rung starts from the first rung of the point's predecessor
        (:meth:`warm_neighbour`).
        """
        out = []
        for point in self.points:
            for rung, chi in enumerate(self.ladder):
                needs: tuple[tuple[int, int], ...] = ()
                if self.engine == "dmrg":
                    if rung > 0:
                        needs = ((point.index, rung - 1),)
                    elif self.warm_start:
                        neighbour = self.warm_neighbour(point)
                        needs = () if neighbour is None else ((neighbour, 0),)
                out.append(TaskPlan(point.index, rung, chi, needs))
        return tuple(out)

    def warm_neighbour(self, point: StudyPoint) -> int | None:
        """The point whose first-rung state starts this one (None: a random start).

        On a grid, the predecessor along the last swept parameter that leaves the lattice alone (a
        state cannot start a model on another lattice); for a list, the previous point if it has the
        same lattice.
        """
        if not self.warm_start or self.engine != "dmrg":
            return None
        if point.grid_index is None:
            if point.index == 0:
                return None
            prev = self.points[point.index - 1]
            return prev.index if self.lattice_key(prev) == self.lattice_key(point) else None
        lattice_names = set(LATTICE_KEYS) - {"flux", "twist"}
        movable = [k for k, axis in enumerate(self.axes) if axis.name not in lattice_names]
        if not movable:
            return None
        k = movable[-1]
        if point.grid_index[k] == 0:
            return None
        wanted = list(point.grid_index)
        wanted[k] -= 1
        for other in self.points:
            if other.grid_index == tuple(wanted):
                return other.index
        return None

    def identity(self) -> dict:
        """What makes two descriptions the same study (the executor settings and thresholds do not)."""
        return {
            "name": self.name,
            "model_text": self.model_text,
            "engine": self.engine,
            "seed": self.seed,
            "warm_start": self.warm_start,
            "fixed": dict(self.fixed),
            "points": [{"values": dict(p.values), "grid_index": p.grid_index} for p in self.points],
            "ladder": list(self.ladder),
            "sweep_settings": dict(self.sweep_settings),
            "variance": self.variance,
            "regions": dict(self.regions),
            "probes": [p.text for p in self.probes],
        }

    def fingerprint(self) -> str:
        """SHA-256 of the canonical JSON of :meth:`identity`."""
        text = json.dumps(self.identity(), sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(text.encode()).hexdigest()

    def to_dict(self) -> dict:
        """Plain values (JSON-ready); :meth:`from_dict` inverts it."""
        return {
            "name": self.name,
            "text": self.text,
            "path": self.path,
            "model": self.model,
            "model_text": self.model_text,
            "model_path": self.model_path,
            "engine": self.engine,
            "seed": self.seed,
            "warm_start": self.warm_start,
            "fixed": dict(self.fixed),
            "axes": [{"name": a.name, "values": list(a.values)} for a in self.axes],
            "points": [
                {
                    "index": p.index,
                    "values": dict(p.values),
                    "grid_index": None if p.grid_index is None else list(p.grid_index),
                }
                for p in self.points
            ],
            "ladder": list(self.ladder),
            "sweep_settings": dict(self.sweep_settings),
            "variance": self.variance,
            "regions": dict(self.regions),
            "probes": [p.text for p in self.probes],
            "executor": asdict(self.executor),
            "verdicts": asdict(self.verdicts),
        }

    @classmethod
    def from_dict(cls, data: Mapping) -> "StudyDescription":
        """Rebuild a description stored by :meth:`to_dict` (in a ledger)."""
        regions = dict(data["regions"])
        probes = tuple(parse_probe(t, regions, data["engine"], "stored study") for t in data["probes"])
        return cls(
            name=data["name"],
            text=data["text"],
            path=data["path"],
            model=data["model"],
            model_text=data["model_text"],
            model_path=data["model_path"],
            engine=data["engine"],
            seed=int(data["seed"]),
            warm_start=bool(data["warm_start"]),
            fixed=dict(data["fixed"]),
            axes=tuple(GridAxis(a["name"], tuple(a["values"])) for a in data["axes"]),
            points=tuple(
                StudyPoint(
                    int(p["index"]),
                    dict(p["values"]),
                    None if p["grid_index"] is None else tuple(p["grid_index"]),
                )
                for p in data["points"]
            ),
            swept=_swept_names(data["axes"], data["points"]),
            ladder=tuple(int(c) for c in data["ladder"]),
            sweep_settings=dict(data["sweep_settings"]),
            variance=bool(data["variance"]),
            regions=regions,
            probes=probes,
            executor=ExecutorSettings(**data["executor"]),
            verdicts=VerdictSettings(**data["verdicts"]),
        )

    def with_executor(self, **changes) -> "StudyDescription":
        """A copy with some executor settings changed (e.g. from the command line)."""
        return replace(self, executor=replace(self.executor, **changes))

    def check(self) -> None:
        """Check that every point can run: sizes first, then the model, engine and regions.

        Every point's parameters are resolved and its model size estimated (nothing is built); at
        the first point of every distinct lattice the model is built, the engine's memory is
        estimated (the exact engine's sector, DMRG's state at the largest bond dimension) and the
        regions are carved.

        Raises
        ------
        NetprobeError
            The model's own error (a bad value, sector or size), a point beyond the memory budget,
            an unknown operator of a ``mean:OP`` probe, or a region that does not fit the lattice;
            prefixed with the study file and the point.

        """
        where = _where(self.path)
        spec = self.model_spec
        for point in self.points:
            try:
                check_size(spec, _resolve_parameters(spec, self.overrides(point)))
            except NetprobeError as err:
                raise type(err)(f"{where}: at point {point.label}: {' '.join(str(err).split())}") from None
        seen = set()
        for point in self.points:
            key = self.lattice_key(point)
            if key in seen:
                continue
            seen.add(key)
            try:
                model = self.build_model(point)
                self._check_engine(model)
                for text in self.regions.values():
                    parse_region(text, model.lattice)
                for probe in self.probes:
                    if probe.operator is not None:
                        _check_operator(model, probe, self.engine)
            except NetprobeError as err:
                raise type(err)(f"{where}: at point {point.label}: {' '.join(str(err).split())}") from None

    def _check_engine(self, model) -> None:
        """Refuse an engine whose memory estimate for this model exceeds the budget."""
        if self.engine == "exact":
            check_exact_model(model, where="engine exact")
        elif self.engine == "dmrg":
            check_dmrg_model(model, max(self.ladder), where="engine dmrg")

    def __repr__(self) -> str:
        axes = (
            ", ".join(f"{a.name}[{len(a.values)}]" for a in self.axes) or f"{len(self.points)} listed points"
        )
        return (
            f"StudyDescription('{self.name}', model={self.model!r}, engine={self.engine}, {axes}, "
            f"ladder={list(self.ladder)}, probes={[p.text for p in self.probes]})"
        )


def _check_operator(model, probe: ProbeRequest, engine: str) -> None:
    if engine == "gaussian":
        if probe.operator != "n" or model.space.name != "fermion":
            raise SpecError(
                f"probe '{probe.text}': the gaussian engine evaluates only mean:n on fermion sites; use "
                "the exact or dmrg engine"
            )
        return
    try:
        model.space.operator(probe.operator)
    except OperatorError as err:
        raise SpecError(f"probe '{probe.text}': {' '.join(str(err).split())}") from None


def _where(path: str) -> str:
    return f"study file {path}" if path else "study description"


def _swept_names(axes, points) -> tuple[str, ...]:
    if axes:
        return tuple(a["name"] if isinstance(a, Mapping) else a.name for a in axes)
    names: list[str] = []
    for p in points:
        for key in p["values"] if isinstance(p, Mapping) else p.values:
            if key not in names:
                names.append(key)
    return tuple(names)
