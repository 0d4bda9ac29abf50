"""Exact compression of finite-state-machine MPOs to the operator Schmidt rank of each bond.

The MPO of :mod:`netprobe.engines.mps.mpo` has on every inner bond the channels *waiting* (index 0: nothing
applied yet), *done* (index 1: the term is complete) and the *pending* channels (2, 3, ...). With
the channels in the order (waiting, pending, done), every tensor has the block form::

    W = [[1, C, D],
         [0, A, B],
         [0, 0, 1]]

(each entry a d x d operator). Merging identical pending channels, as the builder does, leaves
linearly dependent channels wherever a bond term is a sum of several products (a spin-1
bilinear-biquadratic bond has nine products but an operator Schmidt rank of 8 once its identity
parts are split off). This module removes them exactly, in two sweeps over the bonds:

1. left to right: split off the identity part of every pending channel's left operator (its
   trace component ``alpha_c 1`` in the waiting row moves into the waiting row of the next
   tensor, where it becomes a term that starts there), then replace the columns ``[C; A]`` by
   an orthonormal basis of their span (SVD) and push the coefficients into the rows of the next
   tensor;
2. right to left: the same on the rows ``[A, B]`` (the identity part of a pending channel's right
   operator moves into the done column of the previous tensor).

After the first sweep the left operators of the waiting and pending channels of each bond are
linearly independent, so the rank found by the second sweep is the operator Schmidt rank of the
pending part, and the bond dimension becomes that rank + 2. Only singular values below
:data:`SINGULAR_RTOL` times the bond's largest are dropped. The waiting and done channels and
their identities are never touched, and channels are combined only within one charge, so the
charge rule ``charge(b) = charge(a) + q(s') - q(s)`` keeps holding (pending channels of different
charges have disjoint supports, so nothing is lost by splitting the SVD by charge). Fermionic
strings and complex couplings are ordinary matrix entries here, so the compression is exact for
them as well.

References
----------
The block-triangular form and its exact compression by QR / SVD sweeps follow Parker, Cao and
Zaletel, Phys. Rev. B 102, 035147 (2020) ("Local matrix product operators"), in our own variant.
"""

from __future__ import annotations

import numpy as np

__all__ = ["SINGULAR_RTOL", "compress_channels"]

WAIT, DONE, FIRST = 0, 1, 2  # channel layout of an inner bond (see netprobe.engines.mps.mpo)

# the sums formed here round at a few ulps of each bond's largest singular value, times the square
# root of the number of entries summed (<= 10^3 here): 1e-13 sits above that and far below any
# coupling a model file would hold
SINGULAR_RTOL = 1e-13


def _pad(tensors: list[np.ndarray]) -> list[np.ndarray]:
    """Give the outer bonds the channels (waiting, done) too, so every tensor has the block form."""
    out = [np.array(w) for w in tensors]
    d = out[0].shape[1]
    first = np.zeros((2,) + out[0].shape[1:], dtype=out[0].dtype)
    first[WAIT] = out[0][0]
    first[DONE, :, :, DONE] = np.eye(d)
    out[0] = first
    last = out[-1]
    padded = np.zeros(last.shape[:3] + (2,), dtype=last.dtype)
    padded[..., DONE] = last[..., 0]
    padded[WAIT, :, :, WAIT] = np.eye(d)
    out[-1] = padded
    return out


def _by_charge(charges: np.ndarray) -> list[np.ndarray]:
    """Groups of pending channels (positions counted from FIRST) that share a charge."""
    if charges.shape[1] == 0:
        return [np.arange(charges.shape[0])]
    _, inverse = np.unique(charges, axis=0, return_inverse=True)
    inverse = inverse.ravel()
    return [np.flatnonzero(inverse == g) for g in range(inverse.max() + 1)] if inverse.size else []


def _factor(matrix: np.ndarray, groups: list[np.ndarray], charges: np.ndarray, rows: bool):
    """Rank-revealing factorisation per charge group.

    For ``rows=False`` the columns of ``matrix`` (K x m) are the channels: returns ``(basis (K x r),
    coefficients (r x m), new charges)`` with ``matrix = basis @ coefficients``. For ``rows=True`` the
    rows of ``matrix`` (m x K) are the channels: returns ``(coefficients (m x r), basis (r x K), charges)``
    with ``matrix = coefficients @ basis``.
    """
    m = matrix.shape[0] if rows else matrix.shape[1]
    pieces = []
    for group in groups:
        block = matrix[group] if rows else matrix[:, group]
        u, s, vh = np.linalg.svd(block, full_matrices=False)
        pieces.append((group, u, s, vh))
    largest = max((float(s[0]) for _, _, s, _ in pieces if s.size), default=0.0)
    keep = [int(np.sum(s > SINGULAR_RTOL * largest)) if largest > 0 else 0 for _, _, s, _ in pieces]
    total = sum(keep)
    k = matrix.shape[1] if rows else matrix.shape[0]
    basis = np.zeros((total, k) if rows else (k, total), dtype=matrix.dtype)
    coefficients = np.zeros((m, total) if rows else (total, m), dtype=matrix.dtype)
    new_charges = np.zeros((total, charges.shape[1]), dtype=charges.dtype)
    at = 0
    for (group, u, s, vh), r in zip(pieces, keep):
        span = slice(at, at + r)
        if rows:  # block = u s vh: coefficients u s, basis vh
            coefficients[group, span] = u[:, :r] * s[:r]
            basis[span] = vh[:r]
        else:  # block = u s vh: basis u, coefficients s vh
            basis[:, span] = u[:, :r]
            coefficients[span, group] = s[:r, None] * vh[:r]
        if charges.shape[1]:
            new_charges[span] = charges[group[0]]
        at += r
    return (coefficients, basis, new_charges) if rows else (basis, coefficients, new_charges)


def _left_sweep(w: list[np.ndarray], charges: list[np.ndarray]) -> None:
    n = len(w)
    for s in range(n - 1):
        cur, nxt = w[s], w[s + 1]
        d = cur.shape[1]
        dl = cur.shape[0]
        if cur.shape[3] <= FIRST:
            continue
        # identity parts of the left operators: alpha_c 1 in the waiting row moves to the next site
        alpha = np.trace(cur[WAIT, :, :, FIRST:], axis1=0, axis2=1) / d
        cur[WAIT, :, :, FIRST:] -= np.eye(d)[:, :, None] * alpha[None, None, :]
        nxt[WAIT] += np.tensordot(alpha, nxt[FIRST:], axes=(0, 0))
        rows = [WAIT] + list(range(FIRST, dl))
        v = cur[rows][:, :, :, FIRST:].reshape(len(rows) * d * d, -1)
        pending = charges[s + 1][FIRST:]
        basis, coeffs, new_q = _factor(v, _by_charge(pending), pending, rows=False)
        r = basis.shape[1]
        new = np.zeros((dl, d, d, FIRST + r), dtype=cur.dtype)
        new[..., :FIRST] = cur[..., :FIRST]
        new[rows, :, :, FIRST:] = basis.reshape(len(rows), d, d, r)
        w[s] = new
        head = nxt[:FIRST]
        tail = np.tensordot(coeffs, nxt[FIRST:], axes=(1, 0))
        w[s + 1] = np.concatenate([head, tail], axis=0)
        charges[s + 1] = np.concatenate([charges[s + 1][:FIRST], new_q], axis=0)


def _right_sweep(w: list[np.ndarray], charges: list[np.ndarray]) -> None:
    n = len(w)
    for s in range(n - 1, 0, -1):
        cur, prv = w[s], w[s - 1]
        d = cur.shape[1]
        dr = cur.shape[3]
        if cur.shape[0] <= FIRST:
            continue
        # identity parts of the right operators: beta_c 1 in the done column moves to the previous site
        beta = np.trace(cur[FIRST:, :, :, DONE], axis1=1, axis2=2) / d
        cur[FIRST:, :, :, DONE] -= beta[:, None, None] * np.eye(d)[None]
        prv[..., DONE] += np.tensordot(prv[..., FIRST:], beta, axes=(3, 0))
        cols = [DONE] + list(range(FIRST, dr))
        u = cur[FIRST:][..., cols].reshape(cur.shape[0] - FIRST, -1)
        pending = charges[s][FIRST:]
        coeffs, basis, new_q = _factor(u, _by_charge(pending), pending, rows=True)
        r = basis.shape[0]
        new = np.zeros((FIRST + r, d, d, dr), dtype=cur.dtype)
        new[:FIRST] = cur[:FIRST]
        new[FIRST:][..., cols] = basis.reshape(r, d, d, len(cols))
        w[s] = new
        head = prv[..., :FIRST]
        tail = np.tensordot(prv[..., FIRST:], coeffs, axes=(3, 0))
        w[s - 1] = np.concatenate([head, tail], axis=3)
        charges[s] = np.concatenate([charges[s][:FIRST], new_q], axis=0)


def compress_channels(tensors, bond_charges) -> tuple[tuple[np.ndarray, ...], tuple[np.ndarray, ...]]:
    """Exact compression of a finite-state-machine MPO (see the module notes).

    Parameters
    ----------
    tensors : sequence of ndarray, shape (D_l, d, d, D_r)
        Inner bonds with the channels (waiting, done, pending...); outer bonds of dimension 1
        (waiting on the left, done on the right).
    bond_charges : sequence of ndarray of int, shape (D_b, k)

    Returns
    -------
    tensors, bond_charges : tuple
        The same operator with the pending channels of each bond reduced to their rank.
    """
    n = len(tensors)
    if n < 2:
        return tuple(tensors), tuple(bond_charges)
    w = _pad(list(tensors))
    charges = [np.asarray(q, dtype=np.int64) for q in bond_charges]
    k = charges[0].shape[1]
    charges[0] = np.zeros((2, k), dtype=np.int64)
    charges[n] = np.zeros((2, k), dtype=np.int64)
    _left_sweep(w, charges)
    _right_sweep(w, charges)
    w[0] = np.ascontiguousarray(w[0][WAIT:WAIT + 1])
    w[-1] = np.ascontiguousarray(w[-1][..., DONE:DONE + 1])
    charges[0] = np.zeros((1, k), dtype=np.int64)
    charges[n] = np.zeros((1, k), dtype=np.int64)
    return tuple(w), tuple(charges)
