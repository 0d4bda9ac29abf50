"""The square-root zipper on block tensors: ``rho_S = Y Y^dag`` built from the ket alone.

The walk runs from ``max S`` down to ``min S`` carrying ``Y[(a, open legs), e]``; a traced site goes
into ``e`` (with ``F_k`` where the ket parity of the open legs to its right is odd, which puts the
factor on ket and bra together) and ``e`` is compressed by a block SVD; the open legs are fused into
one leg graded by charge, so every step stays block-sparse. At ``min S`` the left bond is folded into
``e`` and each charge block is cut to its numerical rank by one more SVD.

Memory
------
After a traced site ``k`` the width of ``e`` is the rank of the reduced state of (everything left of
``k``) + (the open sites right of ``k``), which only the walk itself finds out: singular values whose
weight is below 1e-28 of the total (rounding) are dropped, so a state with little entanglement keeps
``e`` narrow, while a generic state, or a loosely converged one whose spurious Schmidt values sit far
above that cutoff, fills it up to its dimension bound. Hence two checks: the up-front estimate
(:func:`root_estimate`) replays the walk on the charge sectors with ``e`` limited by its dimension
bound and by the largest bond dimension of the MPS over the span (a realistic figure for a weakly
entangled region, no bound); and every step of the walk checks, right before its allocation and with
the actual current dimensions, that it stays within the budget, raising
:class:`~netprobe.errors.MemoryBudgetError` before the large allocation otherwise.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from netprobe.rdm.common import _ROOT_CUTOFF, GradedRoot, RootBlock, _grading_of, _labels
from netprobe.rdm.tables import (
    WalkMeter, _add, _bond_counts, _centred_copy, _fold_entries, _fuse_tables, _matrix_sectors, _pairs_by_charge,
    _rank_columns, _sector_parity, _svd_entries,
)
from netprobe.tensor import BlockTensor, Leg, contract, diag_multiply, svd

__all__ = ["UngradedParity", "root_estimate", "root_walk"]


def root_estimate(state, sites: tuple[int, ...]) -> float:
    """Realistic peak bytes of the square-root zipper, estimated before the walk (not a bound).

    Replays the walk of :func:`root_walk` on the charge sectors with the same per-step
    formulas that the walk checks, the rows ``(a, O)`` exact and ``e`` taken, after each traced
    site, as its dimension bound ``min(rows, columns)`` per charge, scaled down so that its width
    stays at most the largest bond dimension of the MPS over the span. That is about what a weakly
    entangled region needs; regions with more entanglement need more, which the step checks of
    the walk catch before the allocation.
    """
    rule = state.basis.rule
    phys = _bond_counts(state.basis.leg)
    lo, hi = sites[0], sites[-1]
    t = state.tensors
    cap = max([t[k].legs[0].dim for k in range(lo, hi + 1)] + [t[hi].legs[2].dim])
    fermionic = state.basis.space.fermionic
    opens = dict(phys)
    e = _bond_counts(t[hi].legs[2])
    y = sum(r * e.get(q, 0) for q, r in _fuse_tables(_bond_counts(t[hi].legs[0]), opens, rule).items())
    peak = float(y)
    for k in range(hi - 1, lo - 1, -1):
        bond = _bond_counts(t[k].legs[0])
        product = _fuse_tables(_fuse_tables(bond, phys, rule), opens, rule)
        t_size = sum(r * e.get(q, 0) for q, r in product.items())
        peak = max(peak, 2.0 * y + t_size)
        if k in sites:
            opens = _fuse_tables(phys, opens, rule)
            peak = max(peak, 2.0 * t_size)
            y = t_size
            continue
        if fermionic:
            peak = max(peak, 2.0 * t_size)
        rows = _fuse_tables(bond, opens, rule)
        cols = {q: sum(ds * e.get(_add(q, qs, rule), 0) for qs, ds in phys.items()) for q in rows}
        sectors = [(rows[q], cols[q]) for q in rows if cols[q]]
        peak = max(peak, t_size + _svd_entries(sectors))
        e = {q: min(rows[q], cols[q]) for q in rows if cols[q]}
        width = sum(e.values())
        if width > cap:
            e = {q: max(1, math.ceil(v * cap / width)) for q, v in e.items()}
        y = sum(rows[q] * v for q, v in e.items())
    bond = _bond_counts(t[lo].legs[0])
    fold_cols = [sum(da * e.get(_add(qa, qo, rule), 0) for qa, da in bond.items()) for qo in opens]
    peak = max(peak, _fold_entries(list(opens.values()), fold_cols, y))
    return peak * np.dtype(state.dtype).itemsize


class UngradedParity(Exception):
    """The MPS charges do not fix the fermion parity of the open legs (internal signal)."""


@dataclass
class _OpenLeg:
    """Book-keeping of the fused open leg: configuration codes and parity of each sector."""

    codes: list
    parity: list
    sites: int


def root_walk(state, sites: tuple[int, ...], budget: int | None = None,
                   where: str = "reduced_root") -> GradedRoot:
    """The square-root zipper from ``max S`` down to ``min S`` (module notes).

    Every step checks its allocation against ``budget`` with the actual dimensions first and raises
    :class:`~netprobe.errors.MemoryBudgetError` before allocating if it would not fit.
    """
    basis = state.basis
    space = basis.space
    leg = basis.leg
    rule = basis.rule
    d = basis.dim
    blocked_parity = np.asarray(space.parity)[basis.order]
    bounds = list(zip(leg.offsets[:-1], leg.offsets[1:]))
    phys_codes = [np.asarray(basis.order[a:b], np.int64) for a, b in bounds]
    phys_parity = _sector_parity(blocked_parity, leg.offsets)
    fvec = {s: 1.0 - 2.0 * blocked_parity[a:b] for s, (a, b) in enumerate(bounds)}
    lo, hi = sites[0], sites[-1]
    meter = WalkMeter(budget, f"{where}: the square-root zipper over {len(sites)} sites",
                       np.dtype(state.dtype).itemsize)
    st = _centred_copy(state, lo, hi)
    y = st.tensors[hi]  # (a, O, e)
    opened = _OpenLeg(list(phys_codes), list(phys_parity), 1)
    for k in range(hi - 1, lo - 1, -1):
        a = st.tensors[k]
        width = y.legs[2].dim
        out_legs = (a.legs[0], a.legs[1], y.legs[1], y.legs[2])
        out_charge = _add(tuple(a.charge.tolist()), tuple(y.charge.tolist()), rule)
        t_size = sum(m * n for m, n in _matrix_sectors(out_legs, out_charge, rule, (0, 1), (2, 3)))
        meter.check(2.0 * y.size + t_size, k, width)  # Y, its fused copy and the product
        t = contract(a, y, ([2], [0]))  # (a', s, O, e)
        y = None  # the old Y is no longer needed: free it before the next allocation
        if k in sites:
            meter.check(float(t.size + t_size), k, width)
            y, opened = _fuse_open(t, opened, phys_codes, phys_parity, d)
            continue
        if space.fermionic:
            meter.check(2.0 * t.size, k, width)
            t = _string_on_odd(t, opened, fvec)
        meter.check(t.size + _svd_entries(_matrix_sectors(t.legs, t.charge, rule, (0, 2), (1, 3))), k, width)
        u, s, _, _ = svd(t, [0, 2], [1, 3], cutoff=_ROOT_CUTOFF)
        y = diag_multiply(u, 2, s)
    # the left bond at min S is summed (left part left-orthonormal): fold it into e
    rows_of, cols_of = {}, {}
    for (ka, ko, ke), blk in y.blocks.items():
        rows_of[ko] = blk.shape[1]
        cols_of[ko] = cols_of.get(ko, 0) + blk.shape[0] * blk.shape[2]
    meter.check(_fold_entries([rows_of[ko] for ko in rows_of], [cols_of[ko] for ko in rows_of], y.size),
                lo, y.legs[2].dim)
    by_open: dict = {}
    for (ka, ko, ke), blk in y.blocks.items():
        by_open.setdefault(ko, []).append(blk.transpose(1, 0, 2).reshape(blk.shape[1], -1))
    names, local, moduli = _grading_of(space, basis.conserved)
    powers = d ** np.arange(len(sites) - 1, -1, -1, dtype=np.int64)
    # compress every group to its numerical rank with the walk's cutoff, relative to the total weight
    factors = {ko: _rank_columns(np.concatenate(by_open.pop(ko), axis=1)) for ko in sorted(by_open)}
    total = sum(float(w.sum()) for _, w in factors.values())
    blocks = []
    norm2 = 0.0
    for ko, (us, w) in factors.items():
        keep = w >= _ROOT_CUTOFF * total
        if not keep.any():
            continue
        mat = np.ascontiguousarray(us[:, keep])
        codes = np.asarray(opened.codes[ko], np.int64)
        first = (codes[0] // powers) % d
        label = _labels(local[first].sum(axis=0, keepdims=True), moduli)[0]
        norm2 += float(np.vdot(mat, mat).real)
        blocks.append(RootBlock(tuple(int(x) for x in label), codes, mat))
    scale = 1.0 / math.sqrt(norm2) if norm2 > 0 else 1.0
    blocks = [RootBlock(b.label, b.codes, b.matrix * scale) for b in blocks]
    return GradedRoot(sites, space, names, local, moduli, tuple(blocks), "mps-root", meter.peak)


def _string_on_odd(t: BlockTensor, opened: _OpenLeg, fvec: dict) -> BlockTensor:
    """Multiply ``t[a', s, O, e]`` by ``F`` on ``s`` wherever the open sector ``O`` is odd."""
    blocks = {}
    for key, blk in t.blocks.items():
        p = opened.parity[key[2]]
        if p is None:
            raise UngradedParity
        blocks[key] = blk * fvec[key[1]][None, :, None, None] if p else blk
    return BlockTensor(t.legs, t.charge, t.rule, blocks, dtype=t.dtype)


def _fuse_open(t: BlockTensor, opened: _OpenLeg, phys_codes, phys_parity, d: int):
    """Fuse the legs ``s`` (new leftmost open site) and ``O`` of ``t[a', s, O, e]`` into one open leg."""
    rule = t.rule
    s_leg, o_leg = t.legs[1], t.legs[2]
    groups = _pairs_by_charge(s_leg, o_leg, rule)
    charges = sorted(groups)
    place, dims, codes, parity = {}, [], [], []
    shift = d**opened.sites
    for n, q in enumerate(charges):
        off = 0
        sec_codes, sec_par = [], set()
        for ss, so in groups[q]:
            size = int(s_leg.dims[ss] * o_leg.dims[so])
            place[(ss, so)] = (n, off, size)
            off += size
            pair = phys_codes[ss][:, None] * shift + np.asarray(opened.codes[so])[None, :]
            sec_codes.append(pair.ravel())
            ps, po = phys_parity[ss], opened.parity[so]
            sec_par.add(None if ps is None or po is None else ps ^ po)
        dims.append(off)
        codes.append(np.concatenate(sec_codes))
        parity.append(sec_par.pop() if len(sec_par) == 1 else None)
    new_leg = Leg(np.array(charges, np.int64).reshape(len(charges), rule.k), np.array(dims, np.int64), 1)
    blocks: dict = {}
    for (ka, ss, so, ke), blk in t.blocks.items():
        n, off, size = place[(ss, so)]
        key = (ka, n, ke)
        if key not in blocks:
            blocks[key] = np.zeros((blk.shape[0], dims[n], blk.shape[3]), dtype=t.dtype)
        blocks[key][:, off:off + size, :] = blk.reshape(blk.shape[0], size, blk.shape[3])
    fused = BlockTensor((t.legs[0], new_leg, t.legs[3]), t.charge, rule, blocks, dtype=t.dtype)
    return fused, _OpenLeg(codes, parity, opened.sites + 1)

