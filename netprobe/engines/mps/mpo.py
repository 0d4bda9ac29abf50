"""Matrix product operators from Hamiltonians in normal form.

The MPO is built as a finite-state machine over the operator strings (design notes, section 4),
then compressed exactly to the operator Schmidt rank of each bond (:mod:`netprobe.engines.mps.mpo_compression`).
Every bond carries two fixed channels, *waiting* (nothing applied yet, identities to the left) and
*done* (the term is complete, identities to the right), and one channel for each distinct
*pending suffix*: the list of (site, matrix) factors that a started term still has to apply to the
right of the bond. A term's coefficient is applied at its first site; terms whose remaining
factors coincide share a channel from there on, which is an exact compression. Nearest-neighbour
terms on a width-W cylinder leave at most about (number of operator kinds) x W suffixes open at any
bond, so the bond dimension grows linearly in W.

Charges: where the model conserves charges, every factor is split into charge-definite parts
first. The charge of a channel is the charge change produced by the factors already applied to its
left, so ``W[a, s', s, b]`` is nonzero only if ``charge(b) = charge(a) + q(s') - q(s)``.

Tensor layout: ``W[s]`` has shape (D_left, d, d, D_right) with axes (left bond, output physical
index, input physical index, right bond); the MPO is ``sum over bond indices of W[0] W[1] ...``
with the first and last bonds of dimension 1 (left boundary: *waiting*; right boundary: *done*).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

from netprobe.engines.mps.mpo_compression import compress_channels
from netprobe.model.terms import Hamiltonian

__all__ = ["MPO", "build_mpo", "split_by_charge"]

_ATOL = 1e-13  # structural zeros of exactly built matrices


@dataclass(frozen=True, eq=False)
class MPO:
    """A matrix product operator with charges on its virtual bonds.

    Attributes
    ----------
    tensors : tuple of ndarray, shape (D_l, d, d, D_r)
    bond_charges : tuple of ndarray of int, shape (D_b, k)
        Charges of the virtual channels on bonds 0..N (bond b sits left of site b).
    site_charges : ndarray of int, shape (d, k)
        Charges of the local basis states for the conserved quantities.
    conserved : tuple of str
    uncompressed_bond_dimensions : tuple of int
        Inner bond dimensions of the finite-state machine before the exact compression
        (:mod:`netprobe.engines.mps.mpo_compression`); empty if it was not compressed.
    """

    tensors: tuple[np.ndarray, ...]
    bond_charges: tuple[np.ndarray, ...]
    site_charges: np.ndarray
    conserved: tuple[str, ...]
    uncompressed_bond_dimensions: tuple[int, ...] = ()

    @property
    def num_sites(self) -> int:
        """Number of sites."""
        return len(self.tensors)

    @property
    def bond_dimensions(self) -> list[int]:
        """Virtual dimensions of the inner bonds 1..N-1."""
        return [w.shape[3] for w in self.tensors[:-1]]

    @property
    def max_bond_dimension(self) -> int:
        """Largest virtual dimension."""
        return max(self.bond_dimensions, default=1)

    @property
    def dtype(self):
        """dtype of the tensors."""
        return self.tensors[0].dtype

    def to_dense(self) -> np.ndarray:
        """The full operator as a d^N x d^N matrix (site 0 most significant); small N only."""
        acc = self.tensors[0][0]  # (d, d, D)
        for w in self.tensors[1:]:
            # acc: (rows, cols, D); w: (D, d, d, D')
            acc = np.einsum("rca,astb->rsctb", acc, w)
            r, s, c, t, b = acc.shape
            acc = acc.reshape(r * s, c * t, b)
        return acc[:, :, 0]

    def __repr__(self) -> str:
        return f"MPO({self.num_sites} sites, max bond dimension {self.max_bond_dimension})"


def split_by_charge(matrix: np.ndarray, charges: np.ndarray):
    """Split a local matrix into parts of definite charge change.

    Returns a list of (delta, part) with ``part[a, b] != 0`` only where
    ``charges[a] - charges[b] == delta`` (delta a tuple over the charge components).
    """
    if charges.shape[1] == 0:
        return [((), matrix)]
    deltas = charges[:, None, :] - charges[None, :, :]
    parts = {}
    rows, cols = np.nonzero(np.abs(matrix) > _ATOL)
    for r, c in zip(rows, cols):
        key = tuple(int(v) for v in deltas[r, c])
        if key not in parts:
            parts[key] = np.zeros_like(matrix)
        parts[key][r, c] = matrix[r, c]
    return list(parts.items())


def _expand_charge_definite(products, charges):
    """Replace every product by products whose factors each have a definite charge change."""
    out = []
    for p in products:
        options = [split_by_charge(m, charges) for m in p.matrices]
        for combo in itertools.product(*options):
            total = np.sum([np.array(d, dtype=np.int64) for d, _ in combo], axis=0) if charges.shape[1] else None
            if total is not None and np.any(total != 0):
                continue  # charge-changing parts cancel in a conserving Hamiltonian
            out.append((p.coefficient, p.sites, tuple(m for _, m in combo), tuple(d for d, _ in combo)))
    return out


def build_mpo(ham: Hamiltonian, *, dtype=None, compress: bool = True) -> MPO:
    """Build the MPO of a Hamiltonian (see the module notes).

    Parameters
    ----------
    ham : Hamiltonian
    dtype : numpy dtype, optional
        Defaults to ``ham.dtype`` (complex where any coupling or matrix is complex).
    compress : bool
        Reduce the pending channels of every bond to their operator Schmidt rank
        (:func:`netprobe.engines.mps.mpo_compression.compress_channels`, exact to rounding); default True.
    """
    n, d = ham.num_sites, ham.space.dim
    dtype = np.dtype(dtype or ham.dtype)
    charges = ham.space.charge_values(ham.conserved)
    k = charges.shape[1]
    matrices: dict[bytes, int] = {}
    mats: list[np.ndarray] = []

    def mat_id(m):
        key = np.round(np.asarray(m, dtype=complex), 14).tobytes()
        if key not in matrices:
            matrices[key] = len(mats)
            mats.append(np.asarray(m))
        return matrices[key]

    entries = []  # per term: coefficient, sites, matrix ids, charge deltas
    for coeff, sites, ms, deltas in _expand_charge_definite(ham.products, charges):
        entries.append((coeff, sites, tuple(mat_id(m) for m in ms), deltas))

    # channels per bond b (left of site b), b = 0..n: WAITING = 0, DONE = 1, then suffixes
    channels = [dict() for _ in range(n + 1)]
    charge_of = [dict() for _ in range(n + 1)]
    WAIT, DONE = ("wait",), ("done",)
    for b in range(n + 1):
        for key in (WAIT, DONE):
            channels[b][key] = len(channels[b])
            charge_of[b][key] = (0,) * k
    # transitions[s]: list of (left key, right key, matrix id or None for identity, coefficient)
    transitions = [dict() for _ in range(n)]

    def add(s, left, right, mid, coeff):
        key = (left, right, mid)
        transitions[s][key] = transitions[s].get(key, 0) + coeff

    def share(s, left, right, mid):
        # continuation of a shared suffix channel: the same for every term that uses it
        transitions[s][(left, right, mid)] = 1.0

    for coeff, sites, mids, deltas in entries:
        suffix_charge = [np.zeros(k, dtype=np.int64) for _ in sites]
        acc = np.zeros(k, dtype=np.int64)
        for idx in range(len(sites) - 1, -1, -1):
            acc = acc + (np.array(deltas[idx], dtype=np.int64) if k else 0)
            suffix_charge[idx] = acc.copy()
        first, last = sites[0], sites[-1]
        if first == last:
            add(first, WAIT, DONE, mids[0], coeff)
            continue
        pos = 0
        left = WAIT
        for s in range(first, last + 1):
            here = pos < len(sites) and sites[pos] == s
            if here:
                pos += 1
            right = DONE if pos == len(sites) else tuple(zip(sites[pos:], mids[pos:]))
            if right is not DONE and right not in channels[s + 1]:
                channels[s + 1][right] = len(channels[s + 1])
                charge_of[s + 1][right] = tuple(int(v) for v in (-suffix_charge[pos] if k else ()))
            if s == first:
                add(s, left, right, mids[pos - 1], coeff)
            else:
                share(s, left, right, mids[pos - 1] if here else None)
            left = right

    # identities on the fixed channels
    for s in range(n):
        share(s, WAIT, WAIT, None)
        share(s, DONE, DONE, None)
    ident = np.eye(d)
    tensors = []
    for s in range(n):
        dl = 1 if s == 0 else len(channels[s])
        dr = 1 if s == n - 1 else len(channels[s + 1])
        w = np.zeros((dl, d, d, dr), dtype=dtype)
        for (left, right, mid), coeff in transitions[s].items():
            if s == 0 and left != WAIT or s == n - 1 and right != DONE:
                continue
            a = 0 if s == 0 else channels[s][left]
            b = 0 if s == n - 1 else channels[s + 1][right]
            block = coeff * (ident if mid is None else mats[mid])
            w[a, :, :, b] += block if w.dtype.kind == "c" else block.real
        tensors.append(w)
    bond_charges = []
    for b in range(n + 1):
        if b == 0:
            bond_charges.append(np.zeros((1, k), dtype=np.int64))
        elif b == n:
            bond_charges.append(np.zeros((1, k), dtype=np.int64))
        else:
            arr = np.zeros((len(channels[b]), k), dtype=np.int64)
            for key, idx in channels[b].items():
                arr[idx] = charge_of[b][key]
            bond_charges.append(arr)
    if not compress:
        return MPO(tuple(tensors), tuple(bond_charges), charges, tuple(ham.conserved))
    before = tuple(w.shape[3] for w in tensors[:-1])
    tensors, bond_charges = compress_channels(tensors, bond_charges)
    return MPO(tuple(tensors), tuple(bond_charges), charges, tuple(ham.conserved), before)
