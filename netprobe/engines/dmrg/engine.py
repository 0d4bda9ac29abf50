"""Two-site DMRG: settings, the steppable engine, per-sweep records and the result.

A sweep optimises the bonds ``(0, 1), (1, 2), ..., (N-2, N-1)`` and then back to ``(0, 1)``. At every
bond the lowest eigenvector of the two-site effective Hamiltonian is found from the current
two-site tensor (a warm start), split by a truncated SVD, and the environment on the side left
behind is extended by one site. A sweep ends with the orthogonality centre at site 0.

Local minima are avoided with the density-matrix perturbation of S. R. White, Phys. Rev. B 72,
180403 (2005): while noise is on, the kept basis is the dominant eigenspace of
``rho / tr(rho) + alpha P / tr(P)``, where ``P`` adds the image of the two-site state under the
Hamiltonian terms that cross the bond, so that charge sectors absent from the state can enter. Noise
is used during the bond-dimension ramp and a few sweeps after; the final sweeps are noise-free, and
convergence is only judged between two noise-free sweeps at the final bond dimension.

Single-site sweeps (``local_update="single-site"``) optimise one site at a time and move the centre by
QR: they keep the bonds of the state they start from (no truncation, no noise, no growth), cost
about d times less per step, and are strictly variational, so the energy never rises from step to
step. Use them to polish a state whose bonds already have the wanted dimension.

Expanding single-site sweeps (``local_update="single-site-expanding"``) follow the bond-dimension
schedule of two-site sweeps at the single-site cost. Before the centre moves on, the optimised site
tensor ``A`` is enlarged by the image of the Hamiltonian terms that reach across the bond,
``[A | sqrt(alpha) P]`` with ``P = L W A`` (subspace expansion: C. Hubig, I. P. McCulloch,
U. Schollwoeck and F. A. Wolf, Phys. Rev. B 91, 155115 (2015)), and truncated to the bond
dimension. The left singular vectors of that matrix are the eigenvectors of
``A A^dag + alpha P P^dag``, the mixed density matrix of the two-site noise above, so both share
one code path. ``alpha`` is ``expansion`` during the ramp and the first ``noise_sweeps`` sweeps at
the final bond dimension; the final sweeps are plain single-site sweeps (strictly variational).
"""

from __future__ import annotations

import contextlib
import functools
import math
import numbers
import time
import warnings
from dataclasses import asdict, dataclass, field, fields

import numpy as np

from threadpoolctl import threadpool_limits

from netprobe.engines.dmrg.effective import SiteOperator, PairOperator
from netprobe.engines.dmrg.environments import Environments
from netprobe.engines.dmrg.progress import ProgressWriter
from netprobe.engines.dmrg.solvers import check_eigensolver, lowest_eigenpair
from netprobe.errors import NetprobeError
from netprobe.engines.mps import MPS, BlockMPO, random_state
from netprobe.tensor import BlockLayout, BlockTensor, Leg, contract, diag_multiply, eigh, lq, matmul_tally, qr, svd
from netprobe.tensor.entropy import entropy_from_weights
from netprobe.engines.mps.mpo import build_mpo

__all__ = ["SweepSettings", "SweepRecord", "DmrgResult", "GroundStateSearch", "ConvergenceWarning",
           "find_ground_state", "default_ramp", "LOCAL_UPDATES"]

_RAMP_START = 16  # first bond dimension of the default ramp
LOCAL_UPDATES = ("two-site", "single-site", "single-site-expanding")


class ConvergenceWarning(UserWarning):
    """A DMRG run stopped before its convergence criteria were met (the result is still returned)."""


def default_ramp(bond_dimension: int) -> tuple[int, ...]:
    """Bond dimensions of the sweeps before the final one: doubling from 16, all below ``bond_dimension``.

    Examples
    --------
    >>> default_ramp(256)
    (16, 32, 64, 128)
    >>> default_ramp(12)
    ()
    """
    out = []
    chi = _RAMP_START
    while chi < bond_dimension:
        out.append(chi)
        chi *= 2
    return tuple(out)


def _positive_int(name, value, least=1):
    if isinstance(value, bool) or not isinstance(value, (numbers.Integral, np.integer)) or value < least:
        raise NetprobeError(f"SweepSettings: {name}={value!r} must be an integer of at least {least}")
    return int(value)


def _fraction(name, value, upper=1.0, closed=False):
    ok = (isinstance(value, (numbers.Real, np.floating)) and not isinstance(value, bool)
          and math.isfinite(value))
    if not ok or value < 0 or (value > upper if closed else value >= upper):
        bound = f"[0, {upper:g}]" if closed else f"[0, {upper:g})"
        raise NetprobeError(f"SweepSettings: {name}={value!r} must be a number in {bound}")
    return float(value)


@dataclass(frozen=True, kw_only=True)
class SweepSettings:
    """Settings of a two-site DMRG run.

    Parameters
    ----------
    bond_dimension : int
        Largest bond dimension of the final sweeps.
    ramp : tuple of int or None
        Bond dimensions of the first sweeps, each at most ``bond_dimension``; ``None`` gives
        :func:`default_ramp`, ``()`` starts at ``bond_dimension`` (e.g. from a converged smaller state).
    sweep_limit : int
        Stop after this many sweeps (the result then says ``converged=False``).
    sweep_minimum : int
        Never stop before this many sweeps.
    energy_tolerance : float
        Converged when the energy change between two noise-free sweeps at the final bond dimension is
        at most ``energy_tolerance * max(1, |E|)``.
    discarded_tolerance : float
        ... and the largest discarded weight of the last sweep is at most this. When the energy has
        settled but the discarded weight has not, the run stops with ``converged=False`` (more sweeps
        cannot help; a larger bond dimension can).
    truncation_weight : float
        At each bond keep the fewest Schmidt states whose discarded weight stays below this (and at
        most the bond dimension).
    noise : float
        Strength alpha of the density-matrix perturbation (0 switches it off).
    noise_sweeps : int
        Sweeps at the final bond dimension that still use noise (the ramp always does).
    eigensolver : str
        A name in :data:`netprobe.engines.dmrg.solvers.EIGENSOLVERS`.
    solver_tolerance : float
        Residual norm asked of the local eigensolver in the noise-free sweeps at the final bond
        dimension, relative to ``max(1, |E|)``. Observables of the state err to first order in the
        residual, the energy to second order.
    ramp_solver_tolerance : float
        The same during the ramp and the noisy sweeps, where the state is still far from converged
        and a tight local solve would be wasted.
    krylov_dimension : int
        Largest Krylov space of the local eigensolver.
    solver_restarts : int
        Restarts of the local eigensolver.
    local_update : str
        ``"two-site"`` (bonds grow and are truncated), ``"single-site"`` (bonds frozen, strictly
        variational; ``ramp``, ``noise`` and the truncation settings are not used) or
        ``"single-site-expanding"`` (single-site updates whose bonds grow by subspace expansion along
        the ramp and are truncated; ``expansion`` takes the place of ``noise``).
    expansion : float
        Strength alpha of the subspace expansion of ``"single-site-expanding"`` sweeps (0 switches it
        off, and the sweeps are plain single-site sweeps).

    Raises
    ------
    NetprobeError
        For a value out of range or an unknown eigensolver.
    """

    bond_dimension: int = 64
    ramp: tuple[int, ...] | None = None
    sweep_limit: int = 20
    sweep_minimum: int = 2
    energy_tolerance: float = 1e-9
    discarded_tolerance: float = 1e-5
    truncation_weight: float = 1e-12
    noise: float = 1e-5
    noise_sweeps: int = 1
    eigensolver: str = "lanczos"
    solver_tolerance: float = 1e-8
    ramp_solver_tolerance: float = 1e-6
    krylov_dimension: int = 20
    solver_restarts: int = 4
    local_update: str = "two-site"
    expansion: float = 1e-4

    def __post_init__(self):
        _positive_int("bond_dimension", self.bond_dimension)
        if self.ramp is not None:
            try:
                ramp = tuple(self.ramp)
            except TypeError:
                raise NetprobeError(
                    f"SweepSettings: ramp={self.ramp!r} must be a sequence of bond dimensions") from None
            for chi in ramp:
                _positive_int("ramp entry", chi)
                if chi > self.bond_dimension:
                    raise NetprobeError(
                        f"SweepSettings: ramp entry {chi} exceeds bond_dimension={self.bond_dimension}; "
                        "the ramp climbs towards the final bond dimension"
                    )
            object.__setattr__(self, "ramp", tuple(int(c) for c in ramp))
        _positive_int("sweep_limit", self.sweep_limit)
        _positive_int("sweep_minimum", self.sweep_minimum)
        _fraction("energy_tolerance", self.energy_tolerance)
        _fraction("discarded_tolerance", self.discarded_tolerance, closed=True)
        _fraction("truncation_weight", self.truncation_weight)
        _fraction("noise", self.noise)
        _fraction("expansion", self.expansion)
        _positive_int("noise_sweeps", self.noise_sweeps, least=0)
        check_eigensolver(self.eigensolver)
        _fraction("solver_tolerance", self.solver_tolerance)
        _fraction("ramp_solver_tolerance", self.ramp_solver_tolerance)
        _positive_int("krylov_dimension", self.krylov_dimension, least=2)
        _positive_int("solver_restarts", self.solver_restarts, least=0)
        if self.local_update not in LOCAL_UPDATES:
            raise NetprobeError(
                f"SweepSettings: unknown local_update {self.local_update!r}; valid: "
                f"{', '.join(LOCAL_UPDATES)}"
            )

    @property
    def schedule(self) -> tuple[int, ...]:
        """The ramp actually used (``ramp`` or :func:`default_ramp`; none for frozen single-site sweeps)."""
        if self.local_update == "single-site":
            return ()
        return default_ramp(self.bond_dimension) if self.ramp is None else self.ramp

    @property
    def first_clean_sweep(self) -> int:
        """Index (from 0) of the first sweep at the final bond dimension without noise."""
        noisy = self.mixing > 0 and self.local_update != "single-site"
        return len(self.schedule) + (self.noise_sweeps if noisy else 0)

    def bond_dimension_at(self, sweep: int) -> int:
        """Bond-dimension limit of sweep ``sweep`` (counted from 0)."""
        ramp = self.schedule
        return ramp[sweep] if sweep < len(ramp) else self.bond_dimension

    @property
    def mixing(self) -> float:
        """Strength of the basis enlargement: ``expansion`` for expanding single-site sweeps, else ``noise``."""
        return self.expansion if self.local_update == "single-site-expanding" else self.noise

    def noise_at(self, sweep: int) -> float:
        """Noise (or expansion) strength of sweep ``sweep`` (counted from 0)."""
        return self.mixing if sweep < self.first_clean_sweep else 0.0

    def solver_tolerance_at(self, sweep: int) -> float:
        """Residual tolerance of the local eigensolver in sweep ``sweep`` (counted from 0)."""
        if sweep < self.first_clean_sweep:
            return max(self.solver_tolerance, self.ramp_solver_tolerance)
        return self.solver_tolerance

    def to_dict(self) -> dict:
        """Plain values (JSON-ready)."""
        out = asdict(self)
        out["ramp"] = None if self.ramp is None else list(self.ramp)
        return out

    @classmethod
    def from_dict(cls, data: dict) -> SweepSettings:
        """Inverse of :meth:`to_dict`.

        Raises
        ------
        NetprobeError
            For an unknown key (the message lists the valid ones) or a bad value.
        """
        valid = {f.name for f in fields(cls)}
        unknown = sorted(set(data) - valid)
        if unknown:
            raise NetprobeError(
                f"SweepSettings: unknown setting(s) {', '.join(unknown)}; valid: {', '.join(sorted(valid))}"
            )
        data = dict(data)
        if data.get("ramp") is not None:
            data["ramp"] = tuple(data["ramp"])
        return cls(**data)


@dataclass(frozen=True)
class SweepRecord:
    """What one sweep did.

    Attributes
    ----------
    sweep : int
        Number of the sweep, from 1.
    bond_dimension : int
        Bond-dimension limit of the sweep.
    max_bond_dimension : int
        Largest bond dimension of the state after the sweep.
    energy : float
        Lowest eigenvalue at the last bond of the sweep.
    energy_change : float
        Change from the previous sweep (NaN for the first).
    discarded_weight : float
        Largest discarded weight of the sweep.
    centre_entropy : float
        Entanglement entropy (nats) at the centre bond ``N // 2``.
    seconds : float
        Wall time of the sweep.
    noise : float
        Noise strength used (the expansion strength for expanding single-site sweeps).
    matvecs : int
        Applications of the effective Hamiltonian.
    matvec_flops : int
        Floating-point operations of those applications, counted from the shapes of their matrix
        products (:func:`netprobe.tensor.matmul_tally`). Divided by a GEMM rate and by ``seconds``
        it gives the sweep's efficiency: the fraction of the wall time the machine would need for
        the matvecs alone at its matrix-multiply rate.
    """

    sweep: int
    bond_dimension: int
    max_bond_dimension: int
    energy: float
    energy_change: float
    discarded_weight: float
    centre_entropy: float
    seconds: float
    noise: float = 0.0
    matvecs: int = 0
    matvec_flops: int = 0

    def to_dict(self) -> dict:
        """Plain values; a NaN energy change becomes None (JSON has no NaN)."""
        out = asdict(self)
        if math.isnan(self.energy_change):
            out["energy_change"] = None
        return out

    @classmethod
    def from_dict(cls, data: dict) -> SweepRecord:
        """Inverse of :meth:`to_dict`."""
        data = dict(data)
        if data.get("energy_change") is None:
            data["energy_change"] = float("nan")
        return cls(**data)


@dataclass(frozen=True, eq=False)
class DmrgResult:
    """Outcome of a DMRG run.

    Attributes
    ----------
    energy : float
        Energy of the last sweep.
    energies : tuple of float
        Energy after every sweep.
    discarded_weights : tuple of float
        Largest discarded weight of every sweep.
    bond_dimensions : tuple of int
        Largest bond dimension after every sweep.
    converged : bool
    message : str
        Why the run stopped.
    state : MPS
        The final state (norm 1, centre 0).
    history : tuple of SweepRecord
    """

    energy: float
    energies: tuple[float, ...]
    discarded_weights: tuple[float, ...]
    bond_dimensions: tuple[int, ...]
    converged: bool
    message: str
    state: MPS = field(repr=False)
    history: tuple[SweepRecord, ...] = field(repr=False)

    @property
    def sweeps(self) -> int:
        """Number of sweeps run."""
        return len(self.history)

    @property
    def discarded_weight(self) -> float:
        """Largest discarded weight of the last sweep."""
        return self.discarded_weights[-1] if self.discarded_weights else float("nan")

    def __repr__(self) -> str:
        chi = self.bond_dimensions[-1] if self.bond_dimensions else 0
        return (f"DmrgResult(energy={self.energy:.12g}, sweeps={self.sweeps}, bond_dimension={chi}, "
                f"discarded_weight={self.discarded_weight:.2e}, converged={self.converged})")


def _perturbed_isometry(rho, pert, xnorm2: float, alpha: float, chi: int, truncation_weight: float):
    """The kept eigenvectors (:func:`_keep_largest`) of ``rho + alpha pert / |x|^2``.

    ``rho`` is the normalised reduced density matrix of the optimised tensor and ``pert`` the
    perturbation from its expansion ``x`` (of squared norm ``xnorm2``), whose weight ``alpha`` is the noise.
    """
    mixed = rho + pert * (alpha / xnorm2) if xnorm2 > 0 else rho
    spec, u = eigh(mixed, [0, 1], [2, 3])
    return _keep_largest(spec, u, chi, truncation_weight)


def _normalised_centre(centre, norm2: float):
    """``(centre / |centre|, discarded weight 1 - |centre|^2 / norm2)``: the centre after truncation."""
    kept = centre.norm() ** 2
    return centre / math.sqrt(kept), max(0.0, 1.0 - kept / norm2)


def _keep_largest(spectrum, u: BlockTensor, max_dim: int, max_discarded: float) -> BlockTensor:
    """Columns of ``u`` (legs ``(x, y, bond)``) for the largest eigenvalues of a density matrix."""
    vals = np.clip(np.asarray(spectrum.values, float), 0.0, None)
    order = np.argsort(-vals, kind="stable")
    weights = vals[order]
    total = float(weights.sum())
    n = min(len(weights), max_dim)
    if max_discarded > 0 and total > 0:
        tail = np.concatenate([np.cumsum(weights[::-1])[::-1], [0.0]])
        n = min(n, int(np.argmax(tail <= max_discarded * total)))
    n = max(n, 1)
    bond = u.legs[2]
    counts = np.bincount(np.asarray(spectrum.sectors)[order[:n]], minlength=bond.n_sectors)
    kept = np.flatnonzero(counts)
    new_index = np.full(bond.n_sectors, -1)
    new_index[kept] = np.arange(len(kept))
    leg = Leg(bond.charges[kept], counts[kept], -1)
    blocks = {}
    for key, blk in u.blocks.items():
        c = int(counts[key[2]])
        if c:
            blocks[key[:2] + (int(new_index[key[2]]),)] = np.ascontiguousarray(blk[..., ::-1][..., :c])
    return BlockTensor((u.legs[0], u.legs[1], leg), None, u.rule, blocks)


class GroundStateSearch:
    """A two-site DMRG ground-state search: :meth:`step` does one sweep, :meth:`finish` sweeps to convergence.

    Parameters
    ----------
    mpo : netprobe.engines.mps.mpo.MPO or BlockMPO
    state : MPS
        Initial state (copied; brought to centre 0 and norm 1).
    settings : SweepSettings, optional
    rng : numpy.random.Generator or int or None
        Source of every random choice (only needed when a two-site tensor vanishes).
    progress : file-like, "stderr" or None
        Where the per-sweep lines go (default standard error; None is silent).
    history : sequence of SweepRecord
        Sweeps already done (when continuing from a checkpoint); the sweep count, the schedule and
        the convergence test continue from there.
    blas_threads : int or None
        Threads the BLAS/LAPACK libraries may use during a sweep (restored afterwards); None leaves
        them as they are. DMRG hands them many mid-sized blocks, for which one thread is fastest on
        small machines (threads that wait for a busy core cost far more than they gain), and a fixed
        count keeps the arithmetic reproducible from run to run.

    Examples
    --------
    >>> from netprobe.model.spec import load_model
    >>> from netprobe.engines.mps.mpo import build_mpo
    >>> from netprobe.engines.mps import random_state
    >>> ham = load_model("heisenberg", {"length": "8"}).hamiltonian
    >>> engine = GroundStateSearch(build_mpo(ham), random_state(ham, rng=1),
    ...                     SweepSettings(bond_dimension=16), progress=None)
    >>> record = engine.step()
    >>> result = engine.finish()
    >>> print(f"{result.energy:.10f}", result.converged)
    -3.3749325987 True
    """

    def __init__(self, mpo, state: MPS, settings: SweepSettings | None = None, *, rng=None,
                 progress="stderr", history=(), blas_threads: int | None = 1):
        self.settings = settings if settings is not None else SweepSettings()
        if not isinstance(self.settings, SweepSettings):
            raise NetprobeError("GroundStateSearch: settings must be a SweepSettings")
        if state.num_sites < 2:
            raise NetprobeError("GroundStateSearch: two-site DMRG needs at least 2 sites; use the exact engine")
        self.mpo = BlockMPO.from_mpo(mpo, state.basis)
        if self.mpo.num_sites != state.num_sites:
            raise NetprobeError(
                f"GroundStateSearch: the MPO has {self.mpo.num_sites} sites, the state {state.num_sites}")
        state = state.copy()
        dtype = np.result_type(state.dtype, self.mpo.dtype)
        if state.dtype != dtype:
            state.tensors = [t.astype(dtype) for t in state.tensors]
        state.move_centre(0)
        if abs(state.norm() - 1.0) > 1e-12:
            state.normalize()
        self.state = state
        self.dtype = np.dtype(dtype)
        self.rng = np.random.default_rng(rng)
        self.progress = progress if isinstance(progress, ProgressWriter) else ProgressWriter(progress)
        self.history: list[SweepRecord] = list(history)
        if blas_threads is not None and (isinstance(blas_threads, bool) or not isinstance(blas_threads, int)
                                         or blas_threads < 1):
            raise NetprobeError(
                f"GroundStateSearch: blas_threads={blas_threads!r} must be a positive integer or None")
        self.blas_threads = blas_threads
        with self.blas_limit():
            self._env = Environments(state, self.mpo)
        self._outcome = self._judge() if self.history else None

    # ---- status ----------------------------------------------------------------------------------

    @property
    def finished(self) -> bool:
        """True once the run has converged or has given up (``sweep_limit``)."""
        return self._outcome is not None

    @property
    def converged(self) -> bool:
        """True if the convergence criteria are met."""
        return bool(self._outcome and self._outcome[0])

    @property
    def energy(self) -> float:
        """Energy of the last sweep (NaN before the first)."""
        return self.history[-1].energy if self.history else float("nan")

    def _judge(self):
        s = self.settings
        k = len(self.history)
        last = self.history[-1]
        tol = s.energy_tolerance * max(1.0, abs(last.energy))
        ready = k >= max(s.sweep_minimum, s.first_clean_sweep + 2)
        if ready and abs(last.energy_change) <= tol:
            if last.discarded_weight <= s.discarded_tolerance:
                return (True, f"converged after {k} sweeps: energy change {last.energy_change:+.2e}, "
                              f"discarded weight {last.discarded_weight:.2e}")
            return (False, f"energy settled after {k} sweeps (change {last.energy_change:+.2e}) but the "
                           f"discarded weight {last.discarded_weight:.2e} exceeds discarded_tolerance="
                           f"{s.discarded_tolerance:g}; raise the bond dimension")
        if k >= s.sweep_limit:
            change = "n/a" if math.isnan(last.energy_change) else f"{last.energy_change:+.2e}"
            return (False, f"not converged after {k} sweeps (sweep_limit): energy change {change} against "
                           f"tolerance {tol:.1e}, discarded weight {last.discarded_weight:.2e}; "
                           "raise sweep_limit")
        return None

    # ---- one bond --------------------------------------------------------------------------------

    def _split(self, theta, direction, chi):
        s = self.settings
        u, spec, v, info = svd(theta, [0, 1], [2, 3], max_dim=chi, max_discarded=s.truncation_weight,
                               normalize=True)
        if direction > 0:
            return u, diag_multiply(v, 0, spec), info.discarded_weight, spec.values
        return diag_multiply(u, 2, spec), v, info.discarded_weight, spec.values

    def _split_perturbed(self, theta, op, direction, chi, noise):
        s = self.settings
        norm2 = theta.norm() ** 2
        if direction > 0:
            rho = contract(theta, theta.conj(), ([2, 3], [2, 3]))  # (a, s1, a*, s1*)
            x = op.left_expansion(theta)  # (a*, s2, b, s1', u)
            pert = contract(x, x.conj(), ([1, 2, 4], [1, 2, 4]))
        else:
            rho = contract(theta.conj(), theta, ([0, 1], [0, 1]))  # (s2*, b*, s2, b): rho_right transposed
            x = op.right_expansion(theta)  # (a, s1, b*, u, s2')
            pert = contract(x.conj(), x, ([0, 1, 3], [0, 1, 3])).transpose((1, 0, 3, 2))
        u = _perturbed_isometry(rho * (1.0 / norm2), pert, x.norm() ** 2, noise, chi, s.truncation_weight)
        if direction > 0:
            centre = contract(u.conj(), theta, ([0, 1], [0, 1]))  # (k, s2, b)
        else:
            # theta^dag theta = V S^2 V^dag has the right singular vectors V as eigenvectors; the
            # right-orthonormal tensor is V^dag, i.e. conj(u) with the bond first.
            u = u.conj().transpose((2, 0, 1))  # (k, s2, b)
            centre = contract(theta, u.conj(), ([2, 3], [1, 2]))  # (a, s1, k)
        centre, discarded = _normalised_centre(centre, norm2)
        if direction > 0:
            return u, centre, discarded, None
        return centre, u, discarded, None

    def _solve_local(self, op, v0, stats) -> np.ndarray:
        """The lowest eigenvector of ``op`` from ``v0``; its energy and costs go into ``stats``."""
        s = self.settings
        flops = matmul_tally().flops
        pair = lowest_eigenpair(s.eigensolver, op, v0, tol=stats["tolerance"],
                                krylov_dimension=s.krylov_dimension, restarts=s.solver_restarts)
        stats["matvec_flops"] += matmul_tally().flops - flops
        stats["matvecs"] += pair.matvecs
        stats["energy"] = pair.value
        return pair.vector

    def _update_bond(self, i, direction, *, chi, noise, stats):
        tensors = self.state.tensors
        theta = contract(tensors[i], tensors[i + 1], ([2], [0]))
        layout = BlockLayout(theta.legs, None, self.state.basis.rule, self.dtype)
        op = PairOperator(self._env.left[i], self.mpo.tensors[i], self.mpo.tensors[i + 1],
                                self._env.right[i + 2], layout)
        v0 = layout.pack(theta)
        if not np.any(v0):
            v0 = self.rng.standard_normal(layout.size)
            if self.dtype.kind == "c":
                v0 = v0 + 1j * self.rng.standard_normal(layout.size)
        theta = layout.unpack(self._solve_local(op, v0, stats))
        if noise > 0:
            left, right, discarded, values = self._split_perturbed(theta, op, direction, chi, noise)
        else:
            left, right, discarded, values = self._split(theta, direction, chi)
        tensors[i], tensors[i + 1] = left, right
        self.state.centre = i + 1 if direction > 0 else i
        if direction > 0:
            self._env.update_left(i, left)
        else:
            self._env.update_right(i + 1, right)
        stats["discarded"] = max(stats["discarded"], discarded)
        if i + 1 == self.state.num_sites // 2:
            if values is None:
                centre = right if direction > 0 else left
                axes = ([0], [1, 2]) if direction > 0 else ([0, 1], [2])
                values = svd(centre, *axes)[1].values
            stats["entropy"] = entropy_from_weights(np.asarray(values, float) ** 2)

    def _expand_site(self, a, op, direction, chi, alpha):
        """Subspace expansion of the optimised site tensor ``a``: the kept isometry and the centre factor.

        Right-moving: returns ``(u, c)`` with ``u`` (legs ``(a, s, k)``) and ``c = u^dag a`` (``(k, b)``);
        left-moving: ``(c, u)`` with ``u`` (``(k, s, b)``) and ``c = a u^dag`` (``(a, k)``).
        """
        s = self.settings
        norm2 = a.norm() ** 2
        if direction > 0:
            rho = contract(a, a.conj(), ([2], [2]))  # (a, s, a*, s*)
            x = op.left_expansion(a)  # (a*, b, s', w')
            pert = contract(x, x.conj(), ([1, 3], [1, 3]))
        else:
            rho = contract(a.conj(), a, ([0], [0]))  # (s*, b*, s, b)
            x = op.right_expansion(a)  # (a, b*, w, s')
            pert = contract(x.conj(), x, ([0, 2], [0, 2])).transpose((1, 0, 3, 2))
        u = _perturbed_isometry(rho * (1.0 / norm2), pert, x.norm() ** 2, alpha, chi, s.truncation_weight)
        if direction > 0:
            centre = contract(u.conj(), a, ([0, 1], [0, 1]))  # (k, b)
        else:
            u = u.conj().transpose((2, 0, 1))  # (k, s, b)
            centre = contract(a, u.conj(), ([1, 2], [1, 2]))  # (a, k)
        centre, discarded = _normalised_centre(centre, norm2)
        return u, centre, discarded

    def _update_site(self, i, direction, stats, *, chi=None, noise=0.0):
        tensors = self.state.tensors
        a = tensors[i]
        layout = BlockLayout(a.legs, None, self.state.basis.rule, self.dtype)
        op = SiteOperator(self._env.left[i], self.mpo.tensors[i], self._env.right[i + 1], layout)
        v0 = layout.pack(a)
        a = layout.unpack(self._solve_local(op, v0, stats))
        if direction < 0 and i == self.state.num_sites // 2:
            stats["entropy"] = entropy_from_weights(svd(a, [0], [1, 2])[1].values ** 2)
        if noise > 0 and ((direction > 0 and i + 1 < self.state.num_sites) or (direction < 0 and i > 0)):
            u, centre, discarded = self._expand_site(a, op, direction, chi, noise)
            stats["discarded"] = max(stats["discarded"], discarded)
            if direction > 0:
                tensors[i], tensors[i + 1] = u, contract(centre, tensors[i + 1], ([1], [0]))
                self.state.centre = i + 1
                self._env.update_left(i, u)
            else:
                tensors[i], tensors[i - 1] = u, contract(tensors[i - 1], centre, ([2], [0]))
                self.state.centre = i - 1
                self._env.update_right(i, u)
        elif direction > 0 and i + 1 < self.state.num_sites:
            q, r = qr(a, [0, 1], [2])
            tensors[i], tensors[i + 1] = q, contract(r, tensors[i + 1], ([1], [0]))
            self.state.centre = i + 1
            self._env.update_left(i, q)
        elif direction < 0 and i > 0:
            l_factor, q = lq(a, [0], [1, 2])
            tensors[i], tensors[i - 1] = q, contract(tensors[i - 1], l_factor, ([2], [0]))
            self.state.centre = i - 1
            self._env.update_right(i, q)
        else:
            tensors[i] = a
            self.state.centre = i

    # ---- sweeps ----------------------------------------------------------------------------------

    def blas_limit(self):
        """Context manager holding the BLAS/LAPACK threads at ``blas_threads`` (no-op for None)."""
        if self.blas_threads is None:
            return contextlib.nullcontext()
        return threadpool_limits(limits=self.blas_threads)

    def step(self) -> SweepRecord:
        """Run one sweep (left to right and back, ending with the centre at site 0) and return its record.

        Returns
        -------
        SweepRecord
        """
        k = len(self.history)
        chi = self.settings.bond_dimension_at(k)
        noise = self.settings.noise_at(k)
        n = self.state.num_sites
        start = time.perf_counter()
        stats = {"matvecs": 0, "matvec_flops": 0, "energy": float("nan"), "discarded": 0.0, "entropy": float("nan"),
                 "tolerance": self.settings.solver_tolerance_at(k)}
        if self.settings.local_update != "two-site":
            noise = noise if self.settings.local_update == "single-site-expanding" else 0.0
            moves = [(i, 1) for i in range(n - 1)] + [(i, -1) for i in range(n - 1, -1, -1)]
            update = functools.partial(self._update_site, chi=chi, noise=noise)
        else:
            moves = [(i, 1) for i in range(n - 1)] + [(i, -1) for i in range(n - 2, -1, -1)]
            update = functools.partial(self._update_bond, chi=chi, noise=noise)
        with self.blas_limit():
            for step, (i, direction) in enumerate(moves, start=1):
                update(i, direction, stats=stats)
                self.progress.tick(k + 1, step, len(moves))
        energy = float(stats["energy"])
        change = energy - self.history[-1].energy if self.history else float("nan")
        record = SweepRecord(
            sweep=k + 1, bond_dimension=chi, max_bond_dimension=self.state.max_bond_dimension, energy=energy,
            energy_change=change, discarded_weight=float(stats["discarded"]),
            centre_entropy=float(stats["entropy"]), seconds=time.perf_counter() - start, noise=noise,
            matvecs=int(stats["matvecs"]), matvec_flops=int(stats["matvec_flops"]),
        )
        self.history.append(record)
        self._outcome = self._judge()
        self.progress.sweep(record)
        return record

    def finish(self, *, on_sweep=None, warn: bool = True) -> DmrgResult:
        """Sweep until converged or ``sweep_limit``; return the result (never raises on non-convergence).

        Parameters
        ----------
        on_sweep : callable, optional
            ``on_sweep(engine, record)`` after every sweep (e.g. to write a checkpoint).
        warn : bool
            Emit a :class:`ConvergenceWarning` if the run stops without converging.
        """
        while not self.finished:
            record = self.step()
            if on_sweep is not None:
                on_sweep(self, record)
        result = self.result()
        if warn and not result.converged:
            warnings.warn(f"DMRG: {result.message}", ConvergenceWarning, stacklevel=2)
        return result

    def result(self) -> DmrgResult:
        """The result so far (also before the run has finished)."""
        h = tuple(self.history)
        if self._outcome is None:
            message = f"stopped after {len(h)} sweeps (still running)" if h else "no sweep run yet"
            converged = False
        else:
            converged, message = self._outcome
        return DmrgResult(
            energy=self.energy, energies=tuple(r.energy for r in h),
            discarded_weights=tuple(r.discarded_weight for r in h),
            bond_dimensions=tuple(r.max_bond_dimension for r in h), converged=bool(converged),
            message=message, state=self.state.copy(), history=h,
        )


def find_ground_state(model, settings: SweepSettings | None = None, *, seed=None, state: MPS | None = None,
                      progress="stderr", warn: bool = True, blas_threads: int | None = 1) -> DmrgResult:
    """Ground state of a model (or Hamiltonian) by two-site DMRG from a seeded random state.

    Parameters
    ----------
    model : netprobe.model.spec.Model or netprobe.model.terms.Hamiltonian
    settings : SweepSettings, optional
    seed : int or numpy.random.Generator, optional
        Seeds the random initial state; the run is deterministic given the seed.
    state : MPS, optional
        Initial state instead of a random one.
    progress : file-like, "stderr" or None
    warn : bool
        Warn if the run does not converge.
    blas_threads : int or None
        See :class:`GroundStateSearch`.

    Returns
    -------
    DmrgResult
    """
    ham = getattr(model, "hamiltonian", model)
    settings = settings if settings is not None else SweepSettings()
    rng = np.random.default_rng(seed)
    if state is None:
        state = random_state(ham, bond_dimension=min(settings.bond_dimension_at(0), _RAMP_START), rng=rng)
    engine = GroundStateSearch(build_mpo(ham), state, settings, rng=rng, progress=progress,
                        blas_threads=blas_threads)
    return engine.finish(warn=warn)

