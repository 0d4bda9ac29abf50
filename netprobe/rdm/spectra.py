"""Eigenvalues of the (large) Hermitian charge blocks of reduced states.

The entropy of a 15-site region needs every eigenvalue of blocks of a few thousand rows, and for
eigenvalues alone the cost is the reduction to tridiagonal form. LAPACK's two-stage reduction
(dense to band with matrix-matrix products, then band to tridiagonal) does most of its work at the
matrix-product rate, where the one-stage reduction behind ``scipy.linalg.eigvalsh`` spends half of
it in matrix-vector products. scipy does not wrap the two-stage drivers, so
:func:`hermitian_eigenvalues` calls them in the LAPACK that scipy itself loads (its bundled
OpenBLAS), found once by file name; where that library or its symbols are missing it falls back to
``scipy.linalg.eigvalsh`` (divide and conquer). Both give the eigenvalues to round-off of the
largest one (tests/test_rdm.py compares them).

:func:`block_eigenvalues` takes all blocks of a reduced state at once: with more than one BLAS
thread it runs the large blocks side by side, one BLAS thread each (the drivers release the GIL).
On two cores that is about twice as fast as one block at a time on two BLAS threads, whose second
thread mostly waits (measured in benchmarks/RESULTS.md).
"""

from __future__ import annotations

import ctypes
import glob
import os
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import scipy
import scipy.linalg
from threadpoolctl import threadpool_info, threadpool_limits

__all__ = ["hermitian_eigenvalues", "block_eigenvalues", "two_stage_available"]

#: Below this size the one-stage driver is as fast (and the call overhead matters).
TWO_STAGE_MIN = 384

_COLUMN_MAJOR = 102
_DRIVERS: dict = {}


def _load() -> dict:
    """``{"d": real symmetric driver, "z": complex Hermitian driver}`` or ``{}`` where not found."""
    if "loaded" in _DRIVERS:
        return _DRIVERS["found"]
    found: dict = {}
    libdir = os.path.join(os.path.dirname(os.path.dirname(scipy.__file__)), "scipy.libs")
    for path in sorted(glob.glob(os.path.join(libdir, "libscipy_openblas*.so*"))):
        try:
            lib = ctypes.CDLL(path)
            funcs = {"d": lib.scipy_LAPACKE_dsyevd_2stage, "z": lib.scipy_LAPACKE_zheevd_2stage}
        except (OSError, AttributeError):
            continue
        for f in funcs.values():
            f.restype = ctypes.c_int
            f.argtypes = [ctypes.c_int, ctypes.c_char, ctypes.c_char, ctypes.c_int, ctypes.c_void_p,
                          ctypes.c_int, ctypes.c_void_p]
        found = funcs
        break
    _DRIVERS.update(loaded=True, found=found)
    return found


def two_stage_available() -> bool:
    """True if the two-stage eigenvalue drivers were found (see the module notes)."""
    return bool(_load())


def hermitian_eigenvalues(mat: np.ndarray, *, overwrite: bool = False) -> np.ndarray:
    """All eigenvalues of a Hermitian matrix, ascending.

    Parameters
    ----------
    mat : ndarray, shape (n, n), float64 or complex128
        Hermitian; only its lower triangle (in memory order) is read.
    overwrite : bool
        Let the driver destroy ``mat`` (saves one copy of the matrix).

    Returns
    -------
    ndarray of float64, shape (n,)
    """
    n = mat.shape[0]
    kind = {np.dtype(np.float64): "d", np.dtype(np.complex128): "z"}.get(mat.dtype)
    drivers = _load() if kind is not None and n >= TWO_STAGE_MIN else {}
    if not drivers:
        return scipy.linalg.eigvalsh(mat, check_finite=False, driver="evd", overwrite_a=overwrite)
    # a C-ordered Hermitian matrix read in column-major order is its transpose, conj(mat): same eigenvalues
    work = mat if overwrite and mat.flags.c_contiguous else np.array(mat, order="C", copy=True)
    w = np.empty(n, np.float64)
    info = drivers[kind](_COLUMN_MAJOR, b"N", b"L", n, work.ctypes.data, n, w.ctypes.data)
    if info != 0:
        if work is mat:  # the caller let the driver overwrite its matrix: nothing left to retry on
            raise np.linalg.LinAlgError(f"two-stage Hermitian eigenvalue driver failed (info = {info})")
        return scipy.linalg.eigvalsh(mat, check_finite=False, driver="evd")
    return w


def _blas_threads() -> int:
    """Threads the BLAS libraries would use now (the largest count among those loaded; 1 if none found)."""
    counts = [int(info.get("num_threads") or 1) for info in threadpool_info() if info.get("user_api") == "blas"]
    return max(counts, default=1)


def block_eigenvalues(mats, *, workers: int | None = None) -> list:
    """All eigenvalues of each Hermitian block, ascending, in the order given.

    Parameters
    ----------
    mats : sequence of ndarray
        Square Hermitian blocks (left unchanged).
    workers : int, optional
        Blocks computed side by side, each on one BLAS thread; default the BLAS's current thread
        count, so that ``OMP_NUM_THREADS=1`` keeps everything on one core. Blocks below
        ``TWO_STAGE_MIN`` rows are done first, one after the other.

    Returns
    -------
    list of ndarray
    """
    mats = list(mats)
    out: list = [None] * len(mats)
    large = sorted((i for i, m in enumerate(mats) if m.shape[0] >= TWO_STAGE_MIN), key=lambda i: -mats[i].shape[0])
    for i, m in enumerate(mats):
        if m.shape[0] < TWO_STAGE_MIN:
            out[i] = hermitian_eigenvalues(m)
    workers = _blas_threads() if workers is None else int(workers)
    if workers <= 1 or len(large) <= 1:
        for i in large:
            out[i] = hermitian_eigenvalues(mats[i])
        return out
    # largest first, so that the last block to finish is a small one
    with threadpool_limits(limits=1, user_api="blas"), ThreadPoolExecutor(min(workers, len(large))) as pool:
        for i, w in zip(large, pool.map(lambda i: hermitian_eigenvalues(mats[i]), large)):
            out[i] = w
    return out
