"""Slices of a function of a Hermitian matrix through its tridiagonal form.

The modular commutator of a Gaussian state needs only a slice of each modular matrix (the B columns
of ``h_AB``, the B rows of ``h_BC``), but ``f(M) = V diag(f(lambda)) V^dag`` through a full
eigendecomposition pays for every eigenvector of M, and the relatively-robust driver slows down
on the large clusters of eigenvalues near 0 and 1 that a correlation matrix has.

Here M is reduced once by Householder reflections, ``M = Q T Q^dag`` with T real symmetric
tridiagonal (LAPACK ``hetrd``/``sytrd``), T is diagonalised by divide and conquer (``stevd``, which
deflates the clusters cheaply), and

    f(M)[:, cols] = Q Z diag(f(lambda)) Z^T (Q[cols, :])^dag

costs the reduction, forming Q (``ungqr``/``orgqr``) and a few matrix products with the k columns.
The reduction calls LAPACK through scipy's Cython interface (``scipy.linalg.cython_lapack``, through
ctypes), which releases the Python interpreter lock, so that the two slices of J can be formed in two
threads at once (:func:`run_pair`); where that interface cannot be reached, scipy's Python wrapper
(which holds the lock) does the same call.
This is the same arithmetic as a divide-and-conquer eigendecomposition (``heevd`` runs ``hetrd``, the
tridiagonal solver, then applies Q to all of Z); only the order of the products differs, so the result
agrees with the eigendecomposition route to rounding (backward stable, errors of order
``n * machine epsilon * max|f|`` per entry). Eigenvalues clustered at the clipping bound are
clipped in the same way on both routes, so a slice of f(M) is reproduced, not approximated.
"""

from __future__ import annotations

import ctypes
import functools
from concurrent.futures import ThreadPoolExecutor
from typing import Callable

import numpy as np
import scipy.linalg
import scipy.linalg.lapack as lapack
from scipy.linalg import cython_lapack

__all__ = ["function_columns", "function_rows", "run_pair", "MODULAR_METHODS"]

MODULAR_METHODS = ("tridiagonal", "eigh")

_BLOCK = 64  # workspace columns per row for the blocked LAPACK routines (their usual block size)


def _eigh_columns(mat: np.ndarray, weights: Callable[[np.ndarray], np.ndarray], cols) -> np.ndarray:
    vals, vecs = scipy.linalg.eigh(mat, driver="evr", check_finite=False)
    return (vecs * weights(vals)) @ vecs[cols].conj().T


@functools.cache
def _unlocked(name: str):
    """LAPACK routine ``name`` from scipy's Cython interface as a ctypes function (None if unreachable).

    ctypes releases the interpreter lock for the duration of a call to a C function pointer.
    """
    try:
        capsule = cython_lapack.__pyx_capi__[name]
        capsule_name = ctypes.PYFUNCTYPE(ctypes.c_char_p, ctypes.py_object)(("PyCapsule_GetName", ctypes.pythonapi))
        capsule_pointer = ctypes.PYFUNCTYPE(ctypes.c_void_p, ctypes.py_object, ctypes.c_char_p)(
            ("PyCapsule_GetPointer", ctypes.pythonapi))
        address = capsule_pointer(capsule, capsule_name(capsule))
    except (AttributeError, KeyError, TypeError, ValueError, OSError):
        return None
    if not address:
        return None
    return ctypes.CFUNCTYPE(None, *(ctypes.c_void_p,) * 10)(address)


def _tridiagonalize(mat: np.ndarray, work: int):
    """``(packed, d, e, tau)`` of the reduction ``M = Q T Q^dag`` (lower storage), LAPACK hetrd / sytrd."""
    complex_ = np.iscomplexobj(mat)
    routine = _unlocked("zhetrd" if complex_ else "dsytrd")
    if routine is None:  # scipy's wrapper: the same routine, holding the interpreter lock
        packed, diag, off, tau, info = (lapack.zhetrd if complex_ else lapack.dsytrd)(mat, lower=1, lwork=work)
    else:
        n = mat.shape[0]
        dtype = complex if complex_ else float
        packed = np.array(mat, dtype=dtype, order="F")
        diag, off, tau = np.empty(n), np.empty(n - 1), np.empty(n - 1, dtype=dtype)
        scratch = np.empty(work, dtype=dtype)
        size, lead, length, status = ctypes.c_int(n), ctypes.c_int(n), ctypes.c_int(work), ctypes.c_int(0)
        routine(ctypes.c_char_p(b"L"), ctypes.byref(size), packed.ctypes.data, ctypes.byref(lead), diag.ctypes.data,
                off.ctypes.data, tau.ctypes.data, scratch.ctypes.data, ctypes.byref(length), ctypes.byref(status))
        info = status.value
    if info != 0:
        raise np.linalg.LinAlgError(f"tridiagonal reduction failed (LAPACK info {info})")
    return packed, diag, off, tau


def _real_times(z: np.ndarray, x: np.ndarray) -> np.ndarray:
    """``z @ x`` for real z and real or complex x, as two real products (half the work of a complex one)."""
    if not np.iscomplexobj(x):
        return z @ x
    out = np.empty(x.shape, dtype=complex)
    out.real = z @ x.real
    out.imag = z @ x.imag
    return out


def function_columns(mat: np.ndarray, weights: Callable[[np.ndarray], np.ndarray], cols,
                     *, method: str = "tridiagonal") -> np.ndarray:
    """Columns ``cols`` of ``f(M) = V diag(weights(lambda)) V^dag`` for a Hermitian (or real symmetric) M.

    Parameters
    ----------
    mat : ndarray, shape (n, n)
        Hermitian matrix; only its lower triangle is read on the tridiagonal route.
    weights : callable
        Maps the ascending real eigenvalues to the (real or complex) values of f.
    cols : slice or array of int
        The columns wanted.
    method : {'tridiagonal', 'eigh'}
        ``tridiagonal`` (default): Householder reduction and divide and conquer, see the module
        docstring; ``eigh``: the full eigendecomposition (the reference route).

    Returns
    -------
    ndarray, shape (n, k)
    """
    if method not in MODULAR_METHODS:
        raise ValueError(f"method must be one of {', '.join(MODULAR_METHODS)}, got {method!r}")
    n = mat.shape[0]
    if method == "eigh" or n < 3:
        return _eigh_columns(mat, weights, cols)
    build = lapack.zungqr if np.iscomplexobj(mat) else lapack.dorgqr
    work = _BLOCK * n
    packed, diag, off, tau = _tridiagonalize(mat, work)
    vals, z, info = lapack.dstevd(diag, off)
    if info != 0:
        raise np.linalg.LinAlgError(f"tridiagonal eigensolver did not converge (LAPACK info {info})")
    # lower storage: Q = H(1) ... H(n-1), reflector i acts on rows i+1.. (vector below the subdiagonal)
    q = np.zeros((n, n), dtype=mat.dtype)
    q[0, 0] = 1.0
    q[1:, 1:] = build(packed[1:, :-1], tau, lwork=work)[0]
    qc = q[cols].conj().T                      # (Q^dag)[:, cols]
    inner = _real_times(z.T, qc)               # Z^T Q^dag E_cols
    inner = inner * weights(vals)[:, None]
    return q @ _real_times(z, inner)


def function_rows(mat: np.ndarray, weights: Callable[[np.ndarray], np.ndarray], rows,
                  *, method: str = "tridiagonal") -> np.ndarray:
    """Rows ``rows`` of ``f(M)``: ``f(M)[rows, :] = (conj f)(M)[:, rows]^dag`` (M Hermitian)."""
    return function_columns(mat, lambda v: np.conj(weights(v)), rows, method=method).conj().T


def run_pair(first: Callable[[], object], second: Callable[[], object], threads: int = 1) -> tuple:
    """``(first(), second())``, the second in a worker thread when ``threads`` is 2.

    The two modular matrices of J are independent, and the LAPACK calls and matrix products that
    form them release the Python interpreter lock (the reduction only through the Cython interface,
    see the module notes). Meant for one BLAS thread per Python thread (``threadpoolctl``) with two
    cores free; ``threads=1`` runs both in the calling thread.
    """
    if threads not in (1, 2):
        raise ValueError(f"threads must be 1 or 2, got {threads!r}")
    if threads == 1:
        return first(), second()
    with ThreadPoolExecutor(max_workers=1) as pool:
        later = pool.submit(second)
        return first(), later.result()
