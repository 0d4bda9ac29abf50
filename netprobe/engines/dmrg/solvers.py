"""Local eigensolvers for the effective Hamiltonian: the lowest eigenpair of a Hermitian operator.

An eigensolver sees only an operator object with ``size``, ``dtype`` and ``matvec(x)`` (a 1-D array to
a 1-D array) and a start vector; it never looks inside the operator. Solvers are chosen by name from
:data:`EIGENSOLVERS`; every one is deterministic given its start vector.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Protocol

import numpy as np
import scipy.sparse.linalg as spla

from netprobe.errors import NetprobeError

__all__ = ["LinearMap", "EigenPair", "lanczos_lowest", "arpack_lowest", "EIGENSOLVERS", "lowest_eigenpair",
           "check_eigensolver"]


class LinearMap(Protocol):
    """What an eigensolver needs from an operator."""

    size: int
    dtype: np.dtype

    def matvec(self, x: np.ndarray) -> np.ndarray:  # pragma: no cover - protocol
        ...


@dataclass(frozen=True, eq=False)
class EigenPair:
    """Lowest eigenvalue and eigenvector found by a local solver.

    Attributes
    ----------
    value : float
    vector : ndarray, shape (size,)
        Unit norm.
    matvecs : int
        Operator applications used.
    residual : float
        ``||H x - value x||``.
    converged : bool
        Whether the residual met the tolerance.
    """

    value: float
    vector: np.ndarray
    matvecs: int
    residual: float
    converged: bool


# a Gram-Schmidt pass that leaves less than this fraction of the norm is repeated (DGKS, 1976)
_REORTHOGONALISE_AGAIN = 1 / np.sqrt(2)


def lanczos_lowest(matvec: Callable[[np.ndarray], np.ndarray], v0: np.ndarray, *, tol: float = 1e-8,
                   krylov_dimension: int = 20, restarts: int = 4) -> EigenPair:
    """Lanczos iteration with full reorthogonalisation and restarts from the Ritz vector.

    Parameters
    ----------
    matvec : callable
        ``x -> H x`` for a Hermitian ``H``.
    v0 : ndarray, shape (n,)
        Start vector (nonzero).
    tol : float
        Stop when the residual ``||H x - theta x||`` is at most ``tol * max(1, |theta|)``.
    krylov_dimension : int
        Largest Krylov space before a restart.
    restarts : int
        Restarts allowed after the first Krylov space.

    Returns
    -------
    EigenPair

    Notes
    -----
    Every new Lanczos vector is orthogonalised against all earlier ones (full reorthogonalisation),
    so no spurious copies of converged Ritz values appear: after the three-term recurrence, one pass
    of classical Gram-Schmidt against the whole basis, and a second pass whenever the first shrinks
    the vector below ``1/sqrt(2)`` of its norm (the criterion of Daniel, Gragg, Kaufman and Stewart,
    Math. Comp. 30, 772 (1976); two passes are enough: Giraud, Langou, Rozloznik, Comput. Math.
    Appl. 50, 1069 (2005)). The residual of the Ritz pair is
    ``beta_j |s_j|`` with ``s_j`` the last component of the tridiagonal eigenvector (Paige's estimate;
    Parlett, The Symmetric Eigenvalue Problem, 1998, ch. 13).
    """
    x = np.array(v0, copy=True)
    n = x.size
    nrm = np.linalg.norm(x)
    x /= nrm
    total = 0
    theta, resid = np.nan, np.inf
    for _ in range(restarts + 1):
        m = max(1, min(krylov_dimension, n))
        basis = np.empty((m, n), dtype=x.dtype)
        basis[0] = x
        alpha, beta = [], []
        for j in range(m):
            w = np.asarray(matvec(basis[j]))
            if not w.flags.writeable or np.may_share_memory(w, basis) or w.dtype != basis.dtype:
                w = w.astype(np.result_type(w.dtype, basis.dtype))  # updated in place below
            total += 1
            alpha.append(float(np.vdot(basis[j], w).real))
            # the three-term recurrence first (two vectors), then the whole basis once, and once more
            # only where that pass removed most of what was left (the vectors are memory-bound)
            w -= alpha[-1] * basis[j]
            if j:
                w -= beta[-1] * basis[j - 1]
            block = basis[: j + 1]
            before = float(np.linalg.norm(w))
            b = _project_out(block, w)
            if b < _REORTHOGONALISE_AGAIN * before:
                b = _project_out(block, w)
            t = np.diag(alpha) + np.diag(beta, 1) + np.diag(beta, -1)
            evals, evecs = np.linalg.eigh(t)
            theta, s = float(evals[0]), evecs[:, 0]
            resid = b * abs(s[-1])
            scale = max(1.0, abs(theta))
            if resid <= tol * scale or b <= 1e-14 * scale or j == m - 1:
                break
            beta.append(b)
            basis[j + 1] = w / b
        x = s @ basis[: len(s)]
        x /= np.linalg.norm(x)
        if resid <= tol * max(1.0, abs(theta)) or len(alpha) < m or m == n:
            break
    return EigenPair(theta, x, total, float(resid), bool(resid <= tol * max(1.0, abs(theta)) or m == n))


def _project_out(block: np.ndarray, w: np.ndarray) -> float:
    """Remove from ``w`` (in place) its components along the orthonormal rows of ``block``
    (one pass of classical Gram-Schmidt) and return the norm of what is left."""
    if block.dtype.kind == "c":
        # coefficients conj(block) @ w, written so that no conjugate copy of the basis is made
        coef = (block @ w.conj()).conj()
    else:
        coef = block @ w
    w -= coef @ block
    return float(np.linalg.norm(w))


def _dense_lowest(op: LinearMap, v0: np.ndarray) -> EigenPair:
    n = op.size
    eye = np.eye(n, dtype=np.result_type(op.dtype, v0.dtype))
    mat = np.column_stack([op.matvec(eye[:, k]) for k in range(n)])
    mat = 0.5 * (mat + mat.conj().T)
    evals, evecs = np.linalg.eigh(mat)
    return EigenPair(float(evals[0]), evecs[:, 0], n, 0.0, True)


def arpack_lowest(op: LinearMap, v0: np.ndarray, *, tol: float = 1e-8, krylov_dimension: int = 20,
                  restarts: int = 4) -> EigenPair:
    """The lowest eigenpair from ARPACK (``scipy.sparse.linalg.eigsh``) on a ``LinearOperator``.

    Small problems (size at most ``krylov_dimension + 1``) are solved densely; if ARPACK does not
    converge the Lanczos solver takes over from the same start vector.
    """
    n = op.size
    if n <= krylov_dimension + 1:
        return _dense_lowest(op, v0)
    counter = [0]

    def apply(x):
        counter[0] += 1
        return op.matvec(np.ascontiguousarray(x).reshape(-1))

    dtype = np.result_type(op.dtype, v0.dtype)
    lin = spla.LinearOperator((n, n), matvec=apply, dtype=dtype)
    try:
        vals, vecs = spla.eigsh(lin, k=1, which="SA", v0=v0, tol=tol, ncv=min(n, max(krylov_dimension, 3)),
                                maxiter=max(1, restarts + 1) * n)
    except spla.ArpackNoConvergence:
        return lanczos_lowest(op.matvec, v0, tol=tol, krylov_dimension=krylov_dimension, restarts=restarts)
    x = vecs[:, 0] / np.linalg.norm(vecs[:, 0])
    resid = float(np.linalg.norm(op.matvec(x) - vals[0] * x))
    return EigenPair(float(vals[0]), x, counter[0] + 1, resid, True)


def _lanczos(op: LinearMap, v0, **kw) -> EigenPair:
    return lanczos_lowest(op.matvec, v0, **kw)


EIGENSOLVERS: dict[str, Callable[..., EigenPair]] = {"lanczos": _lanczos, "arpack": arpack_lowest}


def check_eigensolver(name: str) -> str:
    """Return ``name`` if it is a registered eigensolver.

    Raises
    ------
    NetprobeError
        Naming the registered solvers.
    """
    if name not in EIGENSOLVERS:
        raise NetprobeError(f"unknown eigensolver '{name}'; valid eigensolvers: {', '.join(EIGENSOLVERS)}")
    return name


def lowest_eigenpair(name: str, op: LinearMap, v0: np.ndarray, *, tol: float, krylov_dimension: int,
                     restarts: int) -> EigenPair:
    """Run the registered eigensolver ``name`` on ``op`` from ``v0``."""
    return EIGENSOLVERS[check_eigensolver(name)](op, v0, tol=tol, krylov_dimension=krylov_dimension,
                                                 restarts=restarts)
