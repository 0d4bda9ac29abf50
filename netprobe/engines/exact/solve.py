"""Exact diagonalisation in a charge sector: the Hamiltonian as a sparse matrix or a matrix-free operator,
ground states (scipy's eigensolvers) and measurements on state vectors.

Sector bases live in :mod:`netprobe.engines.exact.basis`, the numba kernels that assemble operators in
:mod:`netprobe.engines.exact.kernels`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from netprobe.errors import HermiticityError, MemoryBudgetError, OperatorError, SectorError
from netprobe.resources import default_memory_budget, format_bytes
from netprobe.model.sites import operator_charge_change, operator_parity
from netprobe.model.terms import Hamiltonian, LocalProduct, Term, normal_form
from netprobe.engines.exact.basis import (
    SectorBasis, _Action, _check_conserving, sector_basis,
)

__all__ = [
    "ExactOptions",
    "ExactResult",
    "hamiltonian_matrix",
    "hamiltonian_operator",
    "operator_matrix",
    "apply_operator",
    "ground_state",
    "expectation",
    "local_expectations",
    "correlation",
    "full_vector",
]

# ----------------------------------------------------------------------------------------------
# Hamiltonian and operators
# ----------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ExactOptions:
    """Settings of the exact engine.

    Attributes
    ----------
    dense_limit : int
        Sector dimensions up to this use dense ``numpy.linalg.eigh``.
    memory_budget : int or None
        Bytes the sparse matrix plus Lanczos vectors may take before the matrix-free path is
        chosen (or an error raised); ``None`` means :func:`netprobe.resources.default_memory_budget`.
    ncv : int or None
        Lanczos vectors kept by ARPACK; ``None`` lets it be ``max(2 k + 1, 20)``.
    maxiter : int or None
        ARPACK restarts; ``None`` is the ARPACK default.
    """

    dense_limit: int = 400
    memory_budget: int | None = None
    ncv: int | None = None
    maxiter: int | None = None

    def budget(self) -> int:
        return default_memory_budget() if self.memory_budget is None else int(self.memory_budget)


def hamiltonian_matrix(ham: Hamiltonian, basis: SectorBasis | None = None) -> sp.csr_matrix:
    """The Hamiltonian restricted to a sector, as a CSR matrix of dtype ``ham.dtype``.

    Raises
    ------
    SpecError
        If a term connects the sector to states outside it (the declared charge is not conserved).
    """
    basis = sector_basis(ham) if basis is None else basis
    action = _Action(ham.products, basis, basis, dtype=ham.dtype)
    _check_conserving(action, ham)
    return action.csr()


def _linear_operator(ham: Hamiltonian, basis: SectorBasis, matrix_free: bool | None, options: ExactOptions,
                     workspace_vectors: int):
    action = _Action(ham.products, basis, basis, dtype=ham.dtype)
    _check_conserving(action, ham)
    budget = options.budget()
    work = (workspace_vectors + 5) * basis.dim * action.dtype.itemsize + 16 * basis.dim
    csr_bytes = action.csr_bytes()
    if matrix_free is None:
        matrix_free = csr_bytes + work > budget
    if work + (0 if matrix_free else csr_bytes) > budget:
        need = work + (0 if matrix_free else csr_bytes)
        hint = "use matrix_free=True or " if not matrix_free else ""
        raise MemoryBudgetError(
            f"the {basis.dim}-state sector needs about {format_bytes(need)} "
            f"({'matrix-free' if matrix_free else 'CSR'}), "
            f"over the budget of {format_bytes(budget)}; {hint}raise ExactOptions.memory_budget or shrink the lattice"
        )
    if matrix_free:
        # the diagonal is stored (one vector): it would otherwise be most of the work per product
        diag = _Action(ham.products, basis, basis, dtype=ham.dtype, keep="diagonal").apply(
            np.ones(basis.dim, action.dtype))
        off = _Action(ham.products, basis, basis, dtype=ham.dtype, keep="offdiagonal")

        def matvec(x):
            x = np.ravel(x)
            return off.apply(x) + diag * x

        method = "matrix-free"
    else:
        mat = action.csr()

        def matvec(x):
            return mat @ np.ravel(x)

        method = "sparse"
    op = spla.LinearOperator((basis.dim, basis.dim), matvec=matvec, rmatvec=matvec, dtype=action.dtype)
    return op, method


def hamiltonian_operator(ham: Hamiltonian, basis: SectorBasis | None = None, *,
                         matrix_free: bool | None = None,
                         options: ExactOptions | None = None) -> spla.LinearOperator:
    """The sector Hamiltonian as a ``scipy.sparse.linalg.LinearOperator``.

    With ``matrix_free=None`` the CSR matrix is built when it fits the memory budget; otherwise
    every product recomputes the off-diagonal elements in a parallel compiled loop, storing only
    the basis and the diagonal.
    """
    basis = sector_basis(ham) if basis is None else basis
    op, _ = _linear_operator(ham, basis, matrix_free, options or ExactOptions(), 0)
    return op


def operator_matrix(products: Sequence[LocalProduct], basis_in: SectorBasis,
                    basis_out: SectorBasis | None = None) -> sp.csr_matrix:
    """Matrix of a sum of local products from ``basis_in`` to ``basis_out`` (default the same).

    The result is the block ``P_out O P_in``: components that leave ``basis_out`` are dropped, so
    pass the sector the operator leads to (:meth:`SectorBasis.with_target`) for charge-changing
    operators. Shape ``(basis_out.dim, basis_in.dim)``; float64 unless a product is complex.
    """
    basis_out = basis_in if basis_out is None else basis_out
    return _Action(tuple(products), basis_out, basis_in).csr()


def apply_operator(products: Sequence[LocalProduct], vector: np.ndarray, basis_in: SectorBasis,
                   basis_out: SectorBasis | None = None) -> np.ndarray:
    """``P_out O v`` for a vector on ``basis_in``, without storing the operator."""
    basis_out = basis_in if basis_out is None else basis_out
    vector = np.asarray(vector)
    if vector.shape != (basis_in.dim,):
        raise SectorError(f"vector of shape {vector.shape} does not match the basis dimension {basis_in.dim}")
    return _Action(tuple(products), basis_out, basis_in).apply(vector)


# ----------------------------------------------------------------------------------------------
# ground states and measurements
# ----------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class ExactResult:
    """Lowest eigenpairs in one sector.

    Attributes
    ----------
    energies : ndarray, shape (k,)
        Ascending eigenvalues.
    vectors : ndarray, shape (dim, k)
        Normalised eigenvectors on ``basis``; the phase makes the largest component real positive.
    basis : SectorBasis
    method : str
        ``"dense"``, ``"sparse"`` (CSR with Lanczos) or ``"matrix-free"``.
    """

    energies: np.ndarray
    vectors: np.ndarray = field(repr=False)
    basis: SectorBasis = field(repr=False)
    method: str = "dense"

    @property
    def energy(self) -> float:
        """Lowest energy."""
        return float(self.energies[0])

    @property
    def energy_per_site(self) -> float:
        """Lowest energy divided by the number of sites."""
        return self.energy / self.basis.num_sites

    @property
    def num_states(self) -> int:
        return int(self.energies.size)

    def vector(self, state: int = 0) -> np.ndarray:
        """Eigenvector number ``state`` (0 the ground state)."""
        if not 0 <= state < self.num_states:
            raise SectorError(f"state {state} not computed; this result holds {self.num_states} state(s)")
        return self.vectors[:, state]

    def __repr__(self) -> str:
        sector = ", ".join(f"{n}={t}" for n, t in zip(self.basis.names, self.basis.target)) or "full space"
        return (f"ExactResult(E0={self.energy:.10g}, {self.num_states} state(s), {sector}, "
                f"dim={self.basis.dim}, {self.method})")


def _fix_phases(vectors: np.ndarray) -> np.ndarray:
    if vectors.size == 0:
        return vectors
    idx = np.argmax(np.abs(vectors), axis=0)
    pivots = vectors[idx, np.arange(vectors.shape[1])]
    phases = pivots / np.abs(pivots)
    out = vectors / phases[None, :]
    if not np.iscomplexobj(vectors):
        out = out.real
    return out / np.linalg.norm(out, axis=0)[None, :]


def ground_state(ham: Hamiltonian, *, num_states: int = 1, tol: float = 1e-10, seed: int | None = None,
                 sector: Mapping[str, int] | None = None, matrix_free: bool | None = None,
                 options: ExactOptions | None = None) -> ExactResult:
    """Lowest ``num_states`` eigenpairs of the Hamiltonian in its sector.

    Parameters
    ----------
    ham : Hamiltonian
    num_states : int
        How many of the lowest states to return.
    tol : float
        Relative accuracy asked of ARPACK (``scipy.sparse.linalg.eigsh``); dense solves are exact.
    seed : int, optional
        Seed of the Lanczos start vector (a fixed default seed when ``None``, so runs repeat).
    sector : dict, optional
        Override of some target charges (default ``ham.sector``).
    matrix_free : bool, optional
        Force (True) or forbid (False) the matrix-free path; by default chosen from the memory
        estimate.
    options : ExactOptions, optional

    Raises
    ------
    HermiticityError
        If the Hamiltonian is not Hermitian.
    SectorError
        For an empty sector, or more states asked than the sector holds.
    MemoryBudgetError
        If even the matrix-free path does not fit the budget.
    """
    options = options or ExactOptions()
    ham.check_hermitian()
    basis = sector_basis(ham, sector, memory_budget=options.budget())
    num_states = int(num_states)
    if not 1 <= num_states <= basis.dim:
        raise SectorError(
            f"num_states={num_states} but the sector holds {basis.dim} state(s); ask for 1 to {basis.dim}"
        )
    if basis.dim <= options.dense_limit or num_states >= basis.dim - 1:
        need = 3 * basis.dim**2 * np.dtype(ham.dtype).itemsize  # matrix, eigenvectors, LAPACK work
        if need > options.budget():
            raise MemoryBudgetError(
                f"{num_states} of {basis.dim} states need a dense solve of about {format_bytes(need)}, over the "
                f"budget of {format_bytes(options.budget())}; ask for at most {basis.dim - 2} states or raise it"
            )
        dense = hamiltonian_matrix(ham, basis).toarray()
        energies, vectors = np.linalg.eigh(dense)
        energies, vectors = energies[:num_states], vectors[:, :num_states]
        method = "dense"
    else:
        ncv = options.ncv or min(basis.dim, max(2 * num_states + 1, 20))
        op, method = _linear_operator(ham, basis, matrix_free, options, ncv)
        rng = np.random.default_rng(20240611 if seed is None else seed)
        v0 = rng.standard_normal(basis.dim)
        if op.dtype.kind == "c":
            v0 = v0 + 1j * rng.standard_normal(basis.dim)
        energies, vectors = spla.eigsh(op, k=num_states, which="SA", tol=tol, v0=v0, ncv=ncv,
                                       maxiter=options.maxiter)
        order = np.argsort(energies)
        energies, vectors = energies[order], vectors[:, order]
    vectors = _fix_phases(np.asarray(vectors))
    energies = np.asarray(energies, dtype=float)
    energies.setflags(write=False)
    vectors.setflags(write=False)
    return ExactResult(energies, vectors, basis, method)


def _is_hermitian(products: Sequence[LocalProduct]) -> bool:
    try:
        Hamiltonian(None, None, products).check_hermitian()
    except HermiticityError:
        return False
    return True


def expectation(result: ExactResult, products: Sequence[LocalProduct], *, state: int = 0):
    """``<psi|O|psi>`` for a sum of local products (float if O is Hermitian, else complex)."""
    products = tuple(products)
    vec = result.vector(state)
    value = complex(np.vdot(vec, apply_operator(products, vec, result.basis)))
    return value.real if _is_hermitian(products) else value


def _space_of(model):
    ham = getattr(model, "hamiltonian", model)
    return ham.space


def _charge_change(space, names, matrix, label):
    changes = []
    for name in names:
        delta = operator_charge_change(space, matrix, name)
        if delta is None:
            raise OperatorError(
                f"operator {label} mixes different changes of the conserved charge {name}; in a fixed-{name} "
                "state only its charge-conserving part counts: measure that part, or drop the charge from "
                "conserved"
            )
        changes.append(delta)
    return np.array(changes, dtype=np.int64)


def _conserving_product(space, names, ops, label) -> LocalProduct | None:
    total = np.zeros(len(names), np.int64)
    for _, name in ops:
        total += _charge_change(space, names, space.operator(name), f"'{name}'")
    if np.any(total != 0):
        shift = ", ".join(f"{n} by {int(t):+d}" for n, t in zip(names, total) if t)
        raise OperatorError(
            f"operator {label} changes {shift} and leaves the sector, so its expectation vanishes; use a "
            "charge-conserving operator or correlator"
        )
    odd = sum(operator_parity(space, space.operator(name)) for _, name in ops) % 2
    if odd:
        raise OperatorError(
            f"operator {label} is fermion-odd, so its expectation vanishes; pair it with another odd one"
        )
    return normal_form(Term(1.0, tuple(ops), label), space)


def local_expectations(result: ExactResult, model, op_name: str, *, state: int = 0) -> np.ndarray:
    """``<O_i>`` on every site i for a named local operator; real if the operator is Hermitian.

    Raises
    ------
    OperatorError
        For an unknown operator, or one that leaves the sector (changes a conserved charge or the
        fermion parity).
    """
    space = _space_of(model)
    mat = space.operator(op_name)
    hermitian = np.allclose(mat, mat.conj().T, atol=1e-12)
    vec = result.vector(state)
    out = np.zeros(result.basis.num_sites, dtype=float if hermitian else complex)
    for i in range(result.basis.num_sites):
        prod = _conserving_product(space, result.basis.names, [(i, op_name)], f"'{op_name}'")
        if prod is None:
            continue
        value = np.vdot(vec, apply_operator([prod], vec, result.basis))
        out[i] = value.real if hermitian else value
    return out


def correlation(result: ExactResult, model, op_a: str, op_b: str, i: int, j: int, *, state: int = 0):
    """``<A_i B_j>`` with fermion strings handled (e.g. ``"cdag", "c"``); float if Hermitian, else complex."""
    space = _space_of(model)
    n = result.basis.num_sites
    for site in (i, j):
        if not 0 <= int(site) < n:
            raise OperatorError(f"site {site} outside 0..{n - 1}")
    prod = _conserving_product(space, result.basis.names, [(int(i), op_a), (int(j), op_b)],
                               f"'{op_a}_{i} {op_b}_{j}'")
    if prod is None:
        return 0.0
    return expectation(result, [prod], state=state)


def full_vector(result: ExactResult, state: int = 0, *, max_dim: int = 2**27) -> np.ndarray:
    """Eigenvector ``state`` embedded in the full ``d**N`` space (reshape to ``(d,) * N`` for MPS axes).

    Raises
    ------
    MemoryBudgetError
        If ``d**N`` exceeds ``max_dim``.
    """
    basis = result.basis
    full_dim = basis.local_dim**basis.num_sites
    if full_dim > max_dim:
        raise MemoryBudgetError(
            f"the full space has {full_dim} states, more than max_dim={max_dim}; work in the sector basis "
            "or raise max_dim"
        )
    vec = result.vector(state)
    out = np.zeros(full_dim, dtype=vec.dtype)
    out[basis.codes] = vec
    return out
