"""Reduced states of parts (A|B|C) kept in charge blocks: reordering, partial traces, operator traces.

A :class:`~netprobe.rdm.common.BlockedRho` of ``S = A u B u C`` is reordered into part order with the
fermionic signs (design notes, section 6: legs permuted, ket and bra multiplied by
``(-1)^(sum over inverted pairs n_p n_q)``), block by block; every row then carries the configuration
code of each part. From there

- :func:`subset_rho` traces out the other parts (moving the kept ones in front fermionically first),
  straight into the charge blocks of ``rho_X``;
- :func:`prefix_suffix_trace` gives ``Tr(rho_ABC (L_AB x 1_C)(1_A x R_BC))`` with ``L`` and ``R``
  in the charge blocks of AB and BC, applied block by block: inside a block of ``rho_ABC`` the rows
  with one configuration of A see one charge block of ``R`` (and likewise for C and ``L``), because
  both operators keep the charge of ABC.

No dense ``d**m x d**m`` matrix appears; the largest temporary is one product of a block of
``rho_ABC`` with the operator, the size of the block.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np
import scipy.linalg

from netprobe.rdm.common import BlockedRho, _code_tables, _config_parity, permutation_sign
from netprobe.rdm.parts import check_parts
from netprobe.rdm.spectra import block_eigenvalues
from netprobe.model.sites import SiteSpace

__all__ = ["PartBlocks", "SubsetBlocks", "part_blocks", "subset_rho", "prefix_suffix_trace", "blocks_probe_estimate"]


@dataclass(frozen=True, eq=False)
class PartBlocks:
    """``rho`` of a union of parts in charge blocks, rows and columns in part order.

    Attributes
    ----------
    names : tuple of str
    sites : tuple of tuple of int
        Sites of each part, in MPS order inside the part.
    space : SiteSpace
    conserved : tuple of str
        The conserved charges that grade the blocks (the parity is added for fermions).
    blocks : tuple of (ndarray, ndarray)
        Per charge block: the configuration code of every part for each row, shape ``(n, parts)``,
        and the block ``(n, n)`` with the fermionic signs of the reordering applied.
    route : str
    """

    names: tuple[str, ...]
    sites: tuple[tuple[int, ...], ...]
    space: SiteSpace = field(repr=False)
    conserved: tuple[str, ...]
    blocks: tuple = field(repr=False)
    route: str = "mps-split"

    @property
    def sizes(self) -> tuple[int, ...]:
        """Number of sites of each part."""
        return tuple(len(s) for s in self.sites)

    @property
    def nbytes(self) -> int:
        """Bytes held by the blocks and their row codes."""
        return sum(codes.nbytes + mat.nbytes for codes, mat in self.blocks)

    def weights(self) -> np.ndarray:
        """Eigenvalues of ``rho`` (all parts), descending, positive only."""
        vals = block_eigenvalues([mat for _, mat in self.blocks if mat.size])
        w = np.concatenate(vals) if vals else np.zeros(0)
        return np.sort(w[w > 0])[::-1]

    def __repr__(self) -> str:
        parts = ", ".join(f"{n}: {len(s)} sites" for n, s in zip(self.names, self.sites))
        return f"PartBlocks({parts}; {len(self.blocks)} blocks; {self.route})"


@dataclass(frozen=True, eq=False)
class SubsetBlocks:
    """An operator on some parts (kept in the given order), in the charge blocks of their configurations.

    Attributes
    ----------
    keep : tuple of int
        Part indices, first most significant in the configuration code.
    block_of, position : ndarray of int64, shape (d**k,)
        Charge block of every configuration code of the kept parts, and its position inside the block.
    matrices : dict of int to ndarray
        Block index -> square matrix (absent blocks are zero).
    """

    keep: tuple[int, ...]
    block_of: np.ndarray = field(repr=False)
    position: np.ndarray = field(repr=False)
    matrices: dict = field(repr=False)

    def weights(self) -> np.ndarray:
        """Eigenvalues (for a density matrix: its weights), descending, positive only."""
        vals = block_eigenvalues([m for m in self.matrices.values() if m.size])
        w = np.concatenate(vals) if vals else np.zeros(0)
        return np.sort(w[w > 0])[::-1]

    def eigh(self) -> dict:
        """Block index -> (eigenvalues, eigenvectors)."""
        return {u: scipy.linalg.eigh(m, check_finite=False) for u, m in self.matrices.items()}

    def replaced(self, matrices: dict) -> SubsetBlocks:
        """The same layout with other block matrices (e.g. a function of this operator)."""
        return SubsetBlocks(self.keep, self.block_of, self.position, matrices)


def part_blocks(rho: BlockedRho, parts: Mapping[str, Sequence[int]]) -> PartBlocks:
    """Reorder a :class:`BlockedRho` into part order with the fermionic signs.

    The blocks of ``rho`` are taken over and, for fermions, multiplied by the signs in place (no copy):
    do not use ``rho`` afterwards.

    Parameters
    ----------
    rho : BlockedRho
        Reduced state of S, the union of the parts.
    parts : dict of str to list of int
        Disjoint parts covering S, in leg order.

    Returns
    -------
    PartBlocks
    """
    names, lists, _ = check_parts(parts, "part_blocks", rho.sites)
    space = rho.space
    d, m = space.dim, len(rho.sites)
    pos = {s: i for i, s in enumerate(rho.sites)}
    positions = [[pos[s] for s in members] for members in lists]
    order = [p for pp in positions for p in pp]
    sign = None
    if space.fermionic and order != sorted(order):
        sign = permutation_sign([space.parity] * m, order).reshape(-1)
    powers = d ** np.arange(m - 1, -1, -1, dtype=np.int64)
    blocks = []
    for b in rho.blocks:
        digits = (b.codes[:, None] // powers[None, :]) % d
        codes = np.stack([digits[:, pp] @ (d ** np.arange(len(pp) - 1, -1, -1, dtype=np.int64))
                          for pp in positions], axis=1)
        mat = b.matrix
        if sign is not None:
            s = sign[b.codes].astype(mat.real.dtype)
            mat *= s[:, None]
            mat *= s[None, :]
        blocks.append((codes, mat))
    conserved = tuple(n for n in rho.grading if not (space.fermionic and n == "parity"))
    return PartBlocks(names, tuple(lists), space, conserved, tuple(blocks), rho.route)


def _combine(codes: np.ndarray, which: Sequence[int], sizes: Sequence[int], d: int) -> np.ndarray:
    """Configuration code of the parts ``which`` (first most significant) for every row."""
    out = np.zeros(len(codes), np.int64)
    for i in which:
        out = out * d ** sizes[i] + codes[:, i]
    return out


def _subset_tables(pb: PartBlocks, keep: Sequence[int]):
    k = sum(pb.sizes[i] for i in keep)
    _, _, block_of, position, members = _code_tables(pb.space, pb.conserved, k)
    return block_of, position, members


def subset_rho(pb: PartBlocks, keep: Sequence[int]) -> SubsetBlocks:
    """Reduced density matrix of the parts ``keep`` (in that order), in charge blocks.

    The kept parts are moved in front fermionically (a sign per row: the parity products of the
    part pairs whose order is inverted), then the rest is traced as an ordinary partial trace:
    the same rule as the ``F`` strings (design notes, section 6).
    """
    keep = tuple(int(k) for k in keep)
    n = len(pb.names)
    rest = [i for i in range(n) if i not in keep]
    d, sizes = pb.space.dim, pb.sizes
    block_of, position, members = _subset_tables(pb, keep)
    order = list(keep) + rest
    parities = None
    if pb.space.fermionic and order != sorted(order):
        new_pos = np.empty(n, np.int64)
        new_pos[order] = np.arange(n)
        pairs = [(i, j) for i in range(n) for j in range(i + 1, n) if new_pos[i] > new_pos[j]]
        parities = ([_config_parity(pb.space.parity, s) for s in sizes], pairs)
    out: dict = {}
    for codes, mat in pb.blocks:
        x = _combine(codes, keep, sizes, d)
        r = _combine(codes, rest, sizes, d)
        sign = None
        if parities is not None:
            par, pairs = parities
            expo = np.zeros(len(codes), np.int8)
            for i, j in pairs:
                expo ^= par[i][codes[:, i]] & par[j][codes[:, j]]
            sign = (1 - 2 * expo.astype(np.int64)).astype(mat.real.dtype)
        rows = np.argsort(r, kind="stable")
        cuts = np.flatnonzero(np.diff(r[rows])) + 1
        for idx in np.split(rows, cuts):
            xs = x[idx]
            u = int(block_of[xs[0]])
            p = position[xs]
            sub = mat[np.ix_(idx, idx)]
            if sign is not None:
                s = sign[idx]
                sub = sub * s[:, None] * s[None, :]
            target = out.get(u)
            if target is None:
                size = len(members[u])
                target = out[u] = np.zeros((size, size), mat.dtype)
            target[np.ix_(p, p)] += sub
    return SubsetBlocks(keep, block_of, position, out)


def prefix_suffix_trace(pb: PartBlocks, left: SubsetBlocks, right: SubsetBlocks) -> complex:
    """``Tr(rho (L x 1)(1 x R))`` for three parts, ``L`` on parts (0, 1) and ``R`` on parts (1, 2).

    Block by block of ``rho``: ``Z = (1 x R) rho_Q`` row group by row group (rows with one
    configuration of part 0 meet one block of ``R``), then the trace with ``L x 1`` over the row
    groups with one configuration of part 2. Both operators keep the charge of the three parts.
    """
    if len(pb.names) != 3 or left.keep != (0, 1) or right.keep != (1, 2):
        raise ValueError("prefix_suffix_trace needs three parts, L on parts (0, 1) and R on parts (1, 2)")
    d, sizes = pb.space.dim, pb.sizes
    total = 0.0 + 0.0j
    for codes, mat in pb.blocks:
        a = codes[:, 0]
        bc = _combine(codes, (1, 2), sizes, d)
        ab = _combine(codes, (0, 1), sizes, d)
        c = codes[:, 2]
        z = np.empty(mat.shape, np.result_type(mat.dtype, *(m.dtype for m in right.matrices.values())))
        rows = np.argsort(a, kind="stable")
        for idx in np.split(rows, np.flatnonzero(np.diff(a[rows])) + 1):
            u = int(right.block_of[bc[idx[0]]])
            op = right.matrices.get(u)
            if op is None:
                z[idx] = 0
                continue
            p = right.position[bc[idx]]
            z[idx] = op[np.ix_(p, p)] @ mat[idx]
        rows = np.argsort(c, kind="stable")
        for idx in np.split(rows, np.flatnonzero(np.diff(c[rows])) + 1):
            u = int(left.block_of[ab[idx[0]]])
            op = left.matrices.get(u)
            if op is None:
                continue
            p = left.position[ab[idx]]
            total += np.sum(op[np.ix_(p, p)] * z[np.ix_(idx, idx)].T)
        del z
    return complex(total)


def blocks_probe_estimate(block_sizes: Sequence[int], itemsize: int) -> float:
    """Peak bytes of the probes on blocks: the blocks, one product the size of the largest, a copy
    for its eigenvalues and the gathered sub-blocks (about one more block)."""
    sizes = [float(n) for n in block_sizes]
    held = sum(n * n for n in sizes)
    big = max(sizes, default=0.0)
    return (held + 3.0 * big * big) * itemsize + 24.0 * sum(sizes)
