"""Regions made of named parts (A|B|C): validation, fermionic reordering, part-ordered square roots."""

from __future__ import annotations

from typing import Mapping, Sequence

import numpy as np

from netprobe.errors import LatticeError, NetprobeError
from netprobe.rdm.common import (
    GradedRoot, PartRoot, _check_sites, _config_labels, _config_parity, permutation_sign,
)
from netprobe.rdm.tables import _sector_parity
from netprobe.model.sites import SiteSpace
from netprobe.tensor import BlockTensor, ChargeRule, Leg, svd

__all__ = ["check_parts", "reorder_parts", "part_root", "subset_weights"]


def check_parts(parts: Mapping[str, Sequence[int]], where: str, sites: tuple[int, ...] | None = None,
                num_sites: int | None = None):
    """Validate named parts of a site set.

    Parameters
    ----------
    parts : dict of str to sequence of int
        Part name -> MPS sites.
    where : str
        Caller's name, for messages.
    sites : tuple of int, optional
        If given, the parts must cover exactly these sites.
    num_sites : int, optional
        Number of lattice sites (default: one more than the largest of ``sites``).

    Returns
    -------
    names : tuple of str
    lists : tuple of tuple of int
        Each part's sites in MPS order.
    union : tuple of int
        All sites in MPS order.

    Raises
    ------
    LatticeError
        For an empty or malformed layout, a site outside the lattice, a repeated site or overlapping
        parts, or parts that do not cover ``sites``.
    """
    if not isinstance(parts, Mapping) or not parts:
        raise LatticeError(f"{where}: parts must be a dict of part name -> list of MPS sites, got {parts!r}")
    names, lists, seen = [], [], {}
    for name, members in parts.items():
        limit = num_sites if num_sites is not None else (max(sites) + 1 if sites else 0)
        members = _check_sites(members, limit, f"{where} (part {name})")
        for s in members:
            if s in seen:
                raise LatticeError(
                    f"{where}: site {s} is in parts {seen[s]} and {name}; parts must be disjoint"
                )
            seen[s] = name
        names.append(str(name))
        lists.append(members)
    union = tuple(sorted(seen))
    if sites is not None and union != tuple(sites):
        raise LatticeError(
            f"{where}: the parts cover sites {list(union)} but the reduced state holds {list(sites)}; "
            "build it for exactly the union of the parts"
        )
    return tuple(names), tuple(lists), union


def reorder_parts(rho: np.ndarray, sites, parts: Mapping[str, Sequence[int]], space: SiteSpace):
    """Reorder a dense ``rho_S`` into part order (e.g. A|B|C), with the fermionic signs.

    Parameters
    ----------
    rho : ndarray, shape (d**m, d**m)
        Reduced density matrix of ``sites`` in MPS order (as :func:`reduced_density_matrix` returns).
    sites : sequence of int
        The set S.
    parts : dict of str to list of int
        Disjoint parts whose union is S; the result lists them in the dict's order, each part's sites
        in MPS order.
    space : SiteSpace

    Returns
    -------
    rho_parts : ndarray, shape (D, D)
        The same operator in part order; a prefix (or suffix) of parts is then traced out by an
        ordinary partial trace, and ``K_X (x) 1`` with plain tensor products is the fermionic embedding.
    dims : tuple of int
        Dimension of each part.

    Notes
    -----
    Legs are permuted and ket and bra are each multiplied by ``(-1)^(sum over inverted pairs n_p n_q)``
    (design notes, section 6).
    """
    where = "reorder_parts"
    sites = tuple(sorted(int(s) for s in sites))
    names, lists, _ = check_parts(parts, where, sites)
    d, m = space.dim, len(sites)
    if rho.shape != (d**m, d**m):
        raise NetprobeError(
            f"{where}: rho has shape {rho.shape}; {m} sites of dimension {d} need {(d**m,) * 2}"
        )
    pos = {s: i for i, s in enumerate(sites)}
    order = [pos[s] for members in lists for s in members]
    t = rho.reshape((d,) * (2 * m))
    if space.fermionic:
        sign = permutation_sign([space.parity] * m, order).astype(rho.real.dtype)
        t = t * sign.reshape(sign.shape + (1,) * m) * sign.reshape((1,) * m + sign.shape)
    t = t.transpose(order + [m + o for o in order])
    dims = tuple(d ** len(members) for members in lists)
    return t.reshape(d**m, d**m), dims


def part_root(root: GradedRoot, parts: Mapping[str, Sequence[int]]) -> PartRoot:
    """Regroup a :class:`GradedRoot` into parts (A|B|C ...) as a block tensor, fermionic signs applied.

    Parameters
    ----------
    root : GradedRoot
        Square root of ``rho_S`` for S the union of the parts.
    parts : dict of str to list of int
        Disjoint parts covering S, in the order the legs should have.

    Returns
    -------
    PartRoot
    """
    where = "part_root"
    names, lists, _ = check_parts(parts, where, root.sites)
    space = root.space
    d, m = space.dim, root.num_sites
    pos = {s: i for i, s in enumerate(root.sites)}
    positions = [[pos[s] for s in members] for members in lists]
    order = [p for pp in positions for p in pp]
    moduli = root.moduli or (1,)
    rule = ChargeRule(tuple(moduli))
    local = root.local_charges if root.local_charges.shape[1] else np.zeros((d, 1), np.int64)
    legs, inverse, orders, sec_par, parities = [], [], [], [], []
    for pp in positions:
        labels = _config_labels(local, moduli if root.moduli else (1,), len(pp))
        leg, perm = Leg.from_basis_charges(labels, rule, 1)
        inv = np.empty_like(perm)
        inv[perm] = np.arange(len(perm))
        par = _config_parity(space.parity, len(pp))
        legs.append(leg)
        inverse.append(inv)
        orders.append(perm)
        sec = _sector_parity(par[perm], leg.offsets)
        sec_par.append(np.array([0 if p is None else p for p in sec], np.int64))
        parities.append(par)
    sign = None
    if space.fermionic and order != sorted(order):
        sign = permutation_sign([space.parity] * m, order).reshape(-1)
    powers = d ** np.arange(m - 1, -1, -1, dtype=np.int64)
    e_charges, e_dims, blocks = [], [], {}
    dtype = np.result_type(*(b.matrix.dtype for b in root.blocks)) if root.blocks else np.float64
    for g, blk in enumerate(root.blocks):
        digits = (blk.codes[:, None] // powers[None, :]) % d
        sec_keys, idx = [], []
        for i, pp in enumerate(positions):
            sub_pow = d ** np.arange(len(pp) - 1, -1, -1, dtype=np.int64)
            code = digits[:, pp] @ sub_pow
            j = inverse[i][code]
            sec = np.searchsorted(legs[i].offsets, j, side="right") - 1
            sec_keys.append(sec)
            idx.append(j - legs[i].offsets[sec])
        mat = blk.matrix if sign is None else blk.matrix * sign[blk.codes][:, None]
        e_charges.append(blk.label if root.moduli else (0,))
        e_dims.append(mat.shape[1])
        keys = np.stack(sec_keys, axis=1)
        uniq, which = np.unique(keys, axis=0, return_inverse=True)
        which = np.asarray(which).ravel()
        for u, key in enumerate(uniq):
            rows = np.flatnonzero(which == u)
            shape = tuple(int(legs[i].dims[key[i]]) for i in range(len(positions))) + (mat.shape[1],)
            arr = np.zeros(shape, dtype=dtype)
            arr[tuple(idx[i][rows] for i in range(len(positions)))] = mat[rows]
            blocks[tuple(int(k) for k in key) + (g,)] = arr
    e_leg = Leg(np.array(e_charges, np.int64).reshape(len(e_charges), rule.k), np.array(e_dims, np.int64), -1)
    tensor = BlockTensor(tuple(legs) + (e_leg,), None, rule, blocks, dtype=dtype)
    return PartRoot(names, tuple(lists), tensor, tuple(orders), tuple(sec_par), space.fermionic, root.route)


def subset_weights(root: PartRoot, keep: Sequence[int]) -> np.ndarray:
    """Eigenvalues of the reduced density matrix of some parts of a :class:`PartRoot`.

    Parameters
    ----------
    root : PartRoot
    keep : sequence of int
        Indices of the kept parts (any subset, e.g. (0, 2) for AC out of A|B|C).

    Returns
    -------
    ndarray
        Descending eigenvalues (squared singular values), unit sum for a normalised root.

    Notes
    -----
    The kept parts are moved in front fermionically (sign on the rows), the rest is folded into the
    column index: ``rho_keep = Y' Y'^dag`` is then the fermionic partial trace, the same rule as the
    ``F`` strings in the design notes.
    """
    n = len(root.names)
    keep = [int(k) for k in keep]
    rest = [i for i in range(n) if i not in keep]
    t = root.tensor
    order = keep + rest
    if root.fermionic and order != sorted(order):
        pos = np.empty(n, np.int64)
        pos[order] = np.arange(n)
        blocks = {}
        for key, blk in t.blocks.items():
            expo = 0
            for i in range(n):
                for j in range(i + 1, n):
                    if pos[i] > pos[j]:
                        expo ^= int(root.sector_parity[i][key[i]] & root.sector_parity[j][key[j]])
            blocks[key] = -blk if expo else blk
        t = BlockTensor(t.legs, t.charge, t.rule, blocks, dtype=t.dtype)
    _, s, _, _ = svd(t, keep, rest + [n])
    return np.asarray(s.values) ** 2
