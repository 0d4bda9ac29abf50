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
"""

from __future__ import annotations

import ctypes
import glob
import os

import numpy as np
import scipy
import scipy.linalg

__all__ = ["hermitian_eigenvalues", "two_stage_available"]

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
