"""Reduced states of a dense state vector (the exact engine's route, and the reference in tests).

Reorder the modes fermionically so that S comes first, i.e. multiply each amplitude by
``(-1)^(sum over inverted pairs n_p n_q)`` (only pairs inside ``[min S, max S]`` matter for a state of
definite parity), then trace the tail as an ordinary partial trace.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from netprobe.errors import NetprobeError, SectorError
from netprobe.resources import check_memory_budget
from netprobe.model.sites import SiteSpace
from netprobe.rdm.common import (
    _CHARGE_TOL, _PARITY_TOL, GradedRoot, RootBlock, _check_sites, _config_labels, _config_sums, _grading_of,
    _vector_sites,
)

__all__ = ["vector_root", "vector_rho", "vector_estimate"]


def _definite_charges(psi: np.ndarray, space: SiteSpace, n: int, where: str):
    """Project out rounding-level weight of other sectors; return the vector and its definite charges."""
    weight = np.abs(psi) ** 2
    total = float(weight.sum())
    if total == 0 or not np.isfinite(total):
        raise NetprobeError(f"{where}: the state vector is zero or not finite")
    keep = np.ones(psi.size, dtype=bool)
    names = []
    if space.fermionic:
        par = _config_sums(space.parity, n) % 2
        odd = float(weight[par == 1].sum()) / total
        minority = min(odd, 1.0 - odd)
        if minority > _PARITY_TOL:
            raise SectorError(
                f"{where}: the state mixes fermion parities (minority weight {minority:.2e}); a fermionic "
                "reduced density matrix needs a state of definite parity, e.g. fixed particle number"
            )
        keep &= par == (1 if odd > 0.5 else 0)
    for name in space.charges:
        tot = _config_sums(np.asarray(space.charges[name]), n)
        tot -= tot.min()
        per_value = np.bincount(tot, weights=weight)
        inside = tot == int(np.argmax(per_value))
        if float(weight[~inside].sum()) <= _CHARGE_TOL * total:
            names.append(name)
            keep &= inside
    if not keep.all():
        psi = np.where(keep, psi, 0)
    return psi, tuple(names)


def _vector_matrix(psi: np.ndarray, space: SiteSpace, n: int, sites: tuple[int, ...]) -> np.ndarray:
    """The amplitudes as a matrix (configurations of S, of the rest), fermion signs included."""
    d = space.dim
    t = psi.reshape((d,) * n)
    lo, hi = sites[0], sites[-1]
    if space.fermionic and hi - lo + 1 > len(sites):
        flags = [k in sites for k in range(lo, hi + 1)]
        sign = _span_sign(space.parity, flags)
        t = t * sign.reshape((1,) * lo + sign.shape + (1,) * (n - 1 - hi))
    t = np.moveaxis(t, sites, range(len(sites)))
    return t.reshape(d ** len(sites), -1)


def _span_sign(parity: np.ndarray, open_flags: Sequence[bool]) -> np.ndarray:
    """``(-1)^(sum over open q of p_q * #odd traced sites before q in the span)``, one axis per span site."""
    par = np.asarray(parity, dtype=np.int8)
    traced = np.zeros((), dtype=np.int8)
    expo = np.zeros((), dtype=np.int8)
    for j, is_open in enumerate(open_flags):
        p = par.reshape((1,) * j + (-1,))
        traced = traced[..., None]
        expo = expo[..., None]
        if is_open:
            expo = expo ^ (p & traced)
        else:
            traced = traced ^ p
    shape = (len(par),) * len(open_flags)
    return np.broadcast_to(1 - 2 * expo, shape).astype(np.int8)


def _compress_columns(mat: np.ndarray) -> np.ndarray:
    """A matrix with the same ``M M^dag`` and at most as many columns as rows (QR of ``M^dag``)."""
    rows, cols = mat.shape
    if cols <= rows:
        return mat
    r = np.linalg.qr(mat.conj().T, mode="r")
    return np.ascontiguousarray(r.conj().T)


def vector_estimate(n: int, d: int, m: int, itemsize: int, dense_rho: bool) -> float:
    full = d**n * itemsize
    rows = d**m
    part = rows * rows * itemsize
    # the signed and the reordered copies of the vector, the charge tables (int64), then Y (or rho)
    # with its QR workspace
    tables = 8.0 * d**n
    return 2.0 * full + tables + (part if dense_rho else 2.0 * min(part, rows * d ** (n - m) * itemsize))


def vector_root(psi, space, sites, budget, where) -> GradedRoot:
    n = _vector_sites(psi, space, where)
    sites = _check_sites(sites, n, where)
    m = len(sites)
    estimate = vector_estimate(n, space.dim, m, np.dtype(psi.dtype).itemsize, False)
    check_memory_budget(estimate, budget, f"{where}: the square root of rho over {m} sites")
    psi, definite = _definite_charges(np.asarray(psi), space, n, where)
    psi = psi / np.linalg.norm(psi)
    mat = _vector_matrix(psi, space, n, sites)
    names, local, moduli = _grading_of(space, definite)
    labels = _config_labels(local, moduli, m)
    blocks = []
    if labels.shape[1]:
        uniq, inverse = np.unique(labels, axis=0, return_inverse=True)
        inverse = inverse.ravel()
    else:
        uniq, inverse = np.zeros((1, 0), np.int64), np.zeros(mat.shape[0], np.int64)
    for g, label in enumerate(uniq):
        codes = np.flatnonzero(inverse == g)
        sub = mat[codes]
        if not np.any(sub):
            continue
        blocks.append(RootBlock(tuple(int(x) for x in label), codes, _compress_columns(sub)))
    return GradedRoot(sites, space, names, local, moduli, tuple(blocks), "vector")


def vector_rho(psi, space, sites, budget, where) -> np.ndarray:
    n = _vector_sites(psi, space, where)
    sites = _check_sites(sites, n, where)
    estimate = vector_estimate(n, space.dim, len(sites), np.dtype(psi.dtype).itemsize, True)
    check_memory_budget(estimate, budget, f"{where}: rho over {len(sites)} sites")
    psi, _ = _definite_charges(np.asarray(psi), space, n, where)
    mat = _vector_matrix(psi / np.linalg.norm(psi), space, n, sites)
    return mat @ mat.conj().T

