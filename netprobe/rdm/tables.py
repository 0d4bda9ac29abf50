"""Charge tables of MPS legs, the per-step budget meter, and the centred copy every MPS route starts from.

Everything here counts sizes from the charge sectors only (no tensor data), so that every route can
estimate its memory exactly before its walk, and check each step right before allocating it.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import scipy.linalg

from netprobe.resources import check_memory_budget, resolve_budget
from netprobe.tensor import ChargeRule, Leg

__all__ = ["WalkMeter"]


def _centred_copy(state, lo: int, hi: int):
    """A shallow copy whose orthogonality centre lies in [lo, hi] (the caller's gauge is untouched)."""
    st = state.copy()
    if st.centre is None:
        st.canonicalize(hi)
    elif not lo <= st.centre <= hi:
        st.move_centre(min(max(st.centre, lo), hi))
    return st


def _sector_parity(leg_parity: np.ndarray, offsets: np.ndarray):
    """Parity of each sector (``None`` where a sector mixes parities)."""
    out = []
    for a, b in zip(offsets[:-1], offsets[1:]):
        vals = np.unique(leg_parity[a:b])
        out.append(int(vals[0]) if len(vals) == 1 else None)
    return out


def _bond_counts(leg: Leg) -> dict:
    return {tuple(q): int(d) for q, d in zip(leg.charges.tolist(), leg.dims.tolist())}


def _add(a: tuple, b: tuple, rule: ChargeRule, sign: int = 1) -> tuple:
    return tuple(rule.reduce(np.array(a) + sign * np.array(b)).tolist())


def _fused_sizes(legs, rule) -> dict:
    """Total dimension of every fused charge ``sum direction * charge`` of a group of legs."""
    out = {tuple(rule.zero().tolist()): 1}
    for leg in legs:
        charges = leg.direction * np.asarray(leg.charges, np.int64)
        dims = leg.dims.tolist()
        new: dict = {}
        for q, n in out.items():
            for qq, d in zip(rule.reduce(np.asarray(q, np.int64) + charges).tolist(), dims):
                key = tuple(qq)
                new[key] = new.get(key, 0) + n * int(d)
        out = new
    return out


def _pairs_by_charge(first: Leg, second: Leg, rule: ChargeRule) -> dict:
    """Sector pairs ``(i, j)`` of two legs (``first`` outer, ``second`` inner) grouped by summed charge."""
    groups: dict = {}
    for i in range(first.n_sectors):
        for j in range(second.n_sectors):
            q = tuple(rule.reduce(first.charges[i] + second.charges[j]).tolist())
            groups.setdefault(q, []).append((i, j))
    return groups


def _fuse_tables(a: dict, b: dict, rule: ChargeRule) -> dict:
    """Charge -> dimension of the product of two charge -> dimension tables."""
    out: dict = {}
    for qa, da in a.items():
        for qb, db in b.items():
            q = _add(qa, qb, rule)
            out[q] = out.get(q, 0) + da * db
    return out


def _matrix_sectors(legs, charge, rule: ChargeRule, rows, cols) -> list:
    """(rows, columns) of every charge sector of a tensor read as a matrix, all allowed blocks counted."""
    r = _fused_sizes([legs[i] for i in rows], rule)
    c = _fused_sizes([legs[i] for i in cols], rule)
    q0 = tuple(rule.reduce(np.asarray(charge, np.int64)).tolist())
    out = []
    for q, m in r.items():
        n = c.get(_add(q0, q, rule, -1), 0)
        if n:
            out.append((m, n))
    return out


def _svd_entries(sectors) -> float:
    """Entries a block SVD allocates besides its input.

    The fused matrices, U (and the scaled copy that becomes the new ``Y``), V, and for the largest
    sector LAPACK's own copy of the matrix, the QR factor of its tall-matrix path, and the
    divide-and-conquer workspace (about 4 k^2).
    """
    if not sectors:
        return 0.0
    mats = sum(m * n for m, n in sectors)
    u = sum(m * min(m, n) for m, n in sectors)
    v = sum(min(m, n) * n for m, n in sectors)
    work = max(2 * m * n + 4 * min(m, n) ** 2 + 4 * min(m, n) + max(m, n) for m, n in sectors)
    return float(mats + 2 * u + v + work)


def _fold_entries(rows: Sequence[int], cols: Sequence[int], held: float) -> float:
    """Entries of the final fold of the left bond into ``e`` (per open charge: rows, columns).

    ``Y`` itself, its blocks regrouped by open charge, and the SVD that compresses each group to its
    rank (:func:`_svd_entries`; the concatenated groups are its input matrices).
    """
    return float(2.0 * held + _svd_entries([(r, c) for r, c in zip(rows, cols) if r and c]))


def _rank_columns(mat: np.ndarray):
    """``U s`` and the squared singular values of ``mat``: same ``M M^dag``, columns still to be cut."""
    try:
        u, s, _ = scipy.linalg.svd(mat, full_matrices=False, check_finite=False, lapack_driver="gesdd")
    except np.linalg.LinAlgError:
        u, s, _ = scipy.linalg.svd(mat, full_matrices=False, check_finite=False, lapack_driver="gesvd")
    return u * s, s**2


class WalkMeter:
    """The budget check of every step of the square-root zipper, with the largest estimate seen."""

    def __init__(self, budget: int | None, what: str, itemsize: int):
        self.budget = resolve_budget(budget)
        self.what = what
        self.itemsize = itemsize
        self.peak = 0.0

    def check(self, entries: float, site: int, width: int) -> None:
        need = float(entries) * self.itemsize
        self.peak = max(self.peak, need)
        check_memory_budget(need, self.budget, f"{self.what}, at site {site} with e of width {width},")


def _parity_graded(basis) -> bool:
    """True if every physical sector has one fermion parity (always true for bosons)."""
    par = np.asarray(basis.space.parity)[basis.order]
    return all(p is not None for p in _sector_parity(par, basis.leg.offsets))
