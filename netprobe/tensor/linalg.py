"""Operations on block tensors: contraction, traces, diagonal scaling, block layouts and factorisations (SVD, QR,
LQ, eigh), each worked sector by sector on the fused matrices planned in :mod:`netprobe.tensor.blocks`.
"""

from __future__ import annotations

import functools
import numbers
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import scipy.linalg

from netprobe.tensor.legs import (
    Leg, _allowed_keys, _check_dtype, _check_structure, _normalize_axes, _normalize_axis, _partition_axes,
    _result_dtype,
)
from netprobe.tensor.blocks import (
    BlockTensor, _TALLY, _assemble, _block_shape, _check_tensor,
    _contract_plan, _matrix_plan,
)

__all__ = [
    "Spectrum",
    "SvdInfo",
    "contract",
    "svd",
    "qr",
    "lq",
    "eigh",
    "trace",
    "diag_multiply",
    "BlockLayout",
]

# --------------------------------------------------------------------------------------------------
# Contraction and leg-wise operations
# --------------------------------------------------------------------------------------------------


def contract(a: BlockTensor, b: BlockTensor, axes=2) -> BlockTensor:
    """Contract legs of ``a`` with legs of ``b`` (``numpy.tensordot`` semantics).

    Parameters
    ----------
    a, b : BlockTensor
        Same charge rule. Each contracted pair must join an incoming and an outgoing leg with the same
        sectors in the same order.
    axes : int or (sequence of int, sequence of int)
        An integer ``n`` contracts the last ``n`` legs of ``a`` with the first ``n`` legs of ``b``;
        a pair lists the legs of ``a`` and the matching legs of ``b``.

    Returns
    -------
    BlockTensor
        Legs: the free legs of ``a`` then those of ``b``, each in order; charge ``a.charge + b.charge``;
        dtype complex if either input is. A full contraction gives a tensor without legs
        (:meth:`BlockTensor.item` reads the number).

    Raises
    ------
    ValueError
        If a contracted pair has equal directions or different sectors, or the rules differ.

    Notes
    -----
    One matrix product per charge sector of the contracted legs; see the module notes. Blocks of the
    result are views into that product.
    """
    _check_tensor(a, "contract")
    _check_tensor(b, "contract")
    if a.rule != b.rule:
        raise ValueError(
            f"contract: charge rules differ ({a.rule} and {b.rule}); build both tensors with one rule"
        )
    axes_a, axes_b = _axes_pair(axes, a.ndim, b.ndim)
    plan = _contract_plan(a.legs, a._qkey, b.legs, b._qkey, a.rule, axes_a, axes_b)
    blocks = {}
    for spa, spb, out in plan.sectors:
        ma = _assemble(a.blocks, spa, plan.perm_a, a.dtype)
        if ma is None:
            continue
        mb = _assemble(b.blocks, spb, plan.perm_b, b.dtype)
        if mb is None:
            continue
        prod = ma @ mb
        _TALLY.record(ma.shape[0], ma.shape[1], mb.shape[1], prod.dtype.kind == "c")
        if len(out) == 1:
            blocks[out[0][0]] = prod.reshape(out[0][3])
        else:
            for key, rs, cs, shape in out:
                blocks[key] = prod[rs, cs].reshape(shape)
    return BlockTensor._new(plan.legs, plan.qkey, a.rule, blocks, _result_dtype(a.dtype, b.dtype))


def _axes_pair(axes, nda: int, ndb: int) -> tuple[tuple[int, ...], tuple[int, ...]]:
    # the same few leg lists recur in every matvec: their checked form is kept (cheap Python saved)
    if not isinstance(axes, numbers.Integral):
        try:
            first, second = axes
            key = (first if isinstance(first, numbers.Integral) else tuple(first),
                   second if isinstance(second, numbers.Integral) else tuple(second))
            hash(key)
        except (TypeError, ValueError):
            key = None
        if key is None:
            return _axes_pair_checked.__wrapped__(axes, nda, ndb)
        return _axes_pair_checked(key, nda, ndb)
    return _axes_pair_checked(axes, nda, ndb)


@functools.lru_cache(maxsize=256)
def _axes_pair_checked(axes, nda: int, ndb: int) -> tuple[tuple[int, ...], tuple[int, ...]]:
    if isinstance(axes, numbers.Integral):
        if not 0 <= axes <= min(nda, ndb):
            raise ValueError(f"contract: axes={axes} but the tensors have {nda} and {ndb} legs")
        return tuple(range(nda - axes, nda)), tuple(range(axes))
    try:
        first, second = axes
    except (TypeError, ValueError):
        raise TypeError(f"contract: axes must be an int or a pair of leg lists, got {axes!r}") from None
    axes_a = _normalize_axes(first, nda, "contract (legs of the first tensor)")
    axes_b = _normalize_axes(second, ndb, "contract (legs of the second tensor)")
    if len(axes_a) != len(axes_b):
        raise ValueError(
            f"contract: {len(axes_a)} legs of the first tensor against {len(axes_b)} of the second"
        )
    return axes_a, axes_b


def trace(t: BlockTensor, axis1: int, axis2: int) -> BlockTensor:
    """Sum over the diagonal of two legs (a partial trace), like ``numpy.trace``.

    Parameters
    ----------
    t : BlockTensor
    axis1, axis2 : int
        Two different legs with the same sectors and opposite directions.

    Returns
    -------
    BlockTensor
        The remaining legs in order; same charge.
    """
    _check_tensor(t, "trace")
    a1 = _normalize_axis(axis1, t.ndim, "trace")
    a2 = _normalize_axis(axis2, t.ndim, "trace")
    l1, l2 = t.legs[a1], t.legs[a2]
    if a1 == a2 or l1.direction == l2.direction or not l1.same_sectors(l2):
        raise ValueError(
            f"trace: legs {a1} and {a2} must be two different legs with the same sectors and opposite "
            "directions"
        )
    keep = [i for i in range(t.ndim) if i not in (a1, a2)]
    blocks = {}
    for key, blk in t.blocks.items():
        if key[a1] != key[a2]:
            continue
        new = tuple(key[i] for i in keep)
        part = np.trace(blk, axis1=a1, axis2=a2)
        if new in blocks:
            blocks[new] = blocks[new] + part
        else:
            blocks[new] = part
    return BlockTensor._new(tuple(t.legs[i] for i in keep), t._qkey, t.rule, blocks, t.dtype)


def diag_multiply(t: BlockTensor, axis: int, values) -> BlockTensor:
    """Multiply leg ``axis`` by a diagonal matrix given sector by sector.

    Parameters
    ----------
    t : BlockTensor
    axis : int
    values : Spectrum or mapping of int to 1-D array
        One vector per sector index of ``t.legs[axis]`` that occurs in a stored block, with the
        dimension of that sector (a :class:`Spectrum` uses its ``by_sector``).

    Returns
    -------
    BlockTensor
        ``t`` with every block scaled along ``axis``, e.g. ``diag_multiply(U, -1, S)`` is ``U S``.
    """
    _check_tensor(t, "diag_multiply")
    ax = _normalize_axis(axis, t.ndim, "diag_multiply")
    by_sector = values.by_sector if isinstance(values, Spectrum) else values
    if not isinstance(by_sector, Mapping):
        raise TypeError("diag_multiply: values must be a Spectrum or a dict {sector index: 1-D array}")
    tail = (1,) * (t.ndim - ax - 1)
    vecs = {int(s): np.asarray(v).reshape((-1,) + tail) for s, v in by_sector.items()}
    dtype = _result_dtype(t.dtype, *(v.dtype for v in vecs.values()))
    blocks = {}
    for key, blk in t.blocks.items():
        vec = vecs.get(key[ax])
        if vec is None or vec.shape[0] != blk.shape[ax]:
            raise ValueError(
                f"diag_multiply: sector {key[ax]} of leg {ax} needs {blk.shape[ax]} values, got "
                f"{'none' if vec is None else vec.shape[0]}"
            )
        blocks[key] = (blk * vec).astype(dtype, copy=False)
    return BlockTensor._new(t.legs, t._qkey, t.rule, blocks, dtype)


class BlockLayout:
    """A fixed order of the allowed blocks of one leg structure, to see block tensors as 1-D arrays.

    Iterative eigensolvers and file formats want a tensor as one flat vector. The layout lists every
    block allowed by ``legs`` and ``charge`` in lexicographic order of the sector indices and gives each
    a slice of the vector.

    Parameters
    ----------
    legs : sequence of Leg
    charge : array_like of int, shape (k,), or None
    rule : ChargeRule
    dtype : {float64, complex128}

    Attributes
    ----------
    legs : tuple of Leg
    keys : tuple of tuple of int
        Block keys in vector order.
    size : int
        Length of the packed vector (number of allowed entries).

    Examples
    --------
    >>> from netprobe.tensor.legs import ChargeRule, Leg
    >>> rule = ChargeRule.u1()
    >>> leg = Leg([[0], [1]], [2, 1])
    >>> layout = BlockLayout((leg, leg.dual()), None, rule)
    >>> layout.size
    5
    """

    __slots__ = ("legs", "rule", "charge", "dtype", "keys", "size", "_slots", "_qkey")

    def __init__(self, legs, charge, rule, dtype=np.float64):
        legs, qkey = _check_structure(legs, charge, rule, "BlockLayout")
        self.legs = legs
        self.rule = rule
        self._qkey = qkey
        self.charge = np.array(qkey, np.int64)
        self.dtype = _check_dtype(dtype, "BlockLayout")
        self.keys = _allowed_keys(legs, qkey, rule)
        slots, start = [], 0
        for key in self.keys:
            shape = _block_shape(legs, key)
            stop = start + int(np.prod(shape, dtype=np.int64))
            slots.append((key, start, stop, shape))
            start = stop
        self._slots = tuple(slots)
        self.size = start

    def pack(self, t: BlockTensor, out: np.ndarray | None = None) -> np.ndarray:
        """Copy the blocks of ``t`` into a vector of length :attr:`size` (missing blocks give zeros).

        Raises
        ------
        ValueError
            If ``t`` has other legs or another total charge than the layout.
        """
        _check_tensor(t, "BlockLayout.pack")
        if t.legs != self.legs or t._qkey != self._qkey:
            raise ValueError(
                "BlockLayout.pack: the tensor's legs or total charge differ from the layout's; build the "
                "layout from this tensor's legs"
            )
        if out is None:
            out = np.zeros(self.size, _result_dtype(self.dtype, t.dtype))
        else:
            out[...] = 0
        blocks = t.blocks
        for key, start, stop, _ in self._slots:
            blk = blocks.get(key)
            if blk is not None:
                out[start:stop] = blk.reshape(-1)
        return out

    def unpack(self, vector) -> BlockTensor:
        """Return the tensor whose blocks are (views of) the slices of ``vector``.

        Raises
        ------
        ValueError
            If ``vector`` is not 1-D of length :attr:`size`.
        """
        vec = np.asarray(vector)
        if vec.ndim != 1 or vec.shape[0] != self.size:
            raise ValueError(
                f"BlockLayout.unpack: need a 1-D array of length {self.size}, got shape {vec.shape}"
            )
        dtype = _result_dtype(vec.dtype)
        vec = vec.astype(dtype, copy=False)
        blocks = {key: vec[start:stop].reshape(shape) for key, start, stop, shape in self._slots}
        return BlockTensor._new(self.legs, self._qkey, self.rule, blocks, dtype)

    def __repr__(self):
        return f"BlockLayout(blocks={len(self.keys)}, size={self.size}, dtype={self.dtype})"


# --------------------------------------------------------------------------------------------------
# Factorisations
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Spectrum:
    """Values on the sectors of a new bond: singular values (:func:`svd`) or eigenvalues (:func:`eigh`).

    Attributes
    ----------
    leg : Leg
        The new bond as it appears on the left factor (direction -1); sector indices refer to it.
    by_sector : dict of int to ndarray
        Sector index -> values of that sector (svd: descending; eigh: ascending).
    values : ndarray, shape (n,)
        All values, sorted (svd: descending; eigh: ascending).
    charges : ndarray of int64, shape (n, k)
        Charge of each value: the fused charge of the left legs, ``sum direction * charge``.
    sectors : ndarray of int, shape (n,)
        Sector index of each value.
    """

    leg: Leg
    by_sector: dict
    values: np.ndarray
    charges: np.ndarray
    sectors: np.ndarray

    def __len__(self) -> int:
        return len(self.values)

    def __repr__(self):
        top = f", first={self.values[0]:.6g}" if len(self.values) else ""
        return f"Spectrum(n={len(self.values)}, sectors={self.leg.n_sectors}{top})"


@dataclass(frozen=True)
class SvdInfo:
    """Bookkeeping of one truncated SVD.

    Attributes
    ----------
    discarded_weight : float
        Sum of the squared discarded singular values divided by the sum of all squared singular
        values (0 for a zero tensor); before any ``normalize``.
    kept_dim : int
        Number of kept singular values (dimension of the new bond).
    full_dim : int
        Number of singular values computed before truncation.
    norm : float
        Frobenius norm of the input, ``sqrt(sum s**2)`` over all singular values.
    """

    discarded_weight: float
    kept_dim: int
    full_dim: int
    norm: float


def _matricize(t, left_axes, right_axes, where, fill_missing=False):
    _check_tensor(t, where)
    left, right = _partition_axes(t.ndim, left_axes, right_axes, where)
    plan = _matrix_plan(t.legs, t._qkey, t.rule, left, right)
    mats = []
    for sp in plan.sectors:
        mat = _assemble(t.blocks, sp, plan.perm, t.dtype, fill_missing)
        if mat is None:
            continue
        if not np.isfinite(mat).all():
            raise ValueError(f"{where}: the tensor has NaN or infinite entries")
        mats.append((sp, mat))
    return left, right, mats


def _new_bond(mats, dims, rule) -> Leg:
    charges = np.array([sp.row_charge for sp, _ in mats], np.int64).reshape(len(mats), rule.k)
    return Leg._trusted(charges, np.asarray(dims, np.int64), -1)


def _left_factor(t, left, bond, mats, cols_by_sector) -> BlockTensor:
    """Tensor with legs ``left + (bond,)`` from one matrix per sector (rows: left combos)."""
    blocks = {}
    for b, ((sp, _), mat) in enumerate(zip(mats, cols_by_sector)):
        width = mat.shape[1]
        for combo, rs, rd in zip(sp.rows.combos, sp.rows.slices, sp.rows.dims):
            blocks[combo + (b,)] = mat[rs].reshape(rd + (width,))
    legs = tuple(t.legs[i] for i in left) + (bond,)
    return BlockTensor._new(legs, tuple(t.rule.zero().tolist()), t.rule, blocks, t.dtype)


def _right_factor(t, right, bond, mats, rows_by_sector) -> BlockTensor:
    """Tensor with legs ``(bond.dual(),) + right`` carrying the charge of ``t``."""
    blocks = {}
    for b, ((sp, _), mat) in enumerate(zip(mats, rows_by_sector)):
        height = mat.shape[0]
        for combo, cs, cd in zip(sp.cols.combos, sp.cols.slices, sp.cols.dims):
            blocks[(b,) + combo] = mat[:, cs].reshape((height,) + cd)
    legs = (bond.dual(),) + tuple(t.legs[i] for i in right)
    return BlockTensor._new(legs, t._qkey, t.rule, blocks, t.dtype)


def _svd_kernel(mat):
    """Thin SVD ``mat = U diag(s) Vh``; the divide-and-conquer driver, the QR driver if it fails."""
    try:
        return scipy.linalg.svd(mat, full_matrices=False, check_finite=False, lapack_driver="gesdd")
    except np.linalg.LinAlgError:
        return scipy.linalg.svd(mat, full_matrices=False, check_finite=False, lapack_driver="gesvd")


def _truncation_count(weights: np.ndarray, max_dim, cutoff: float, max_discarded: float) -> int:
    """Number of leading entries of descending squared singular values ``weights`` to keep."""
    n = len(weights)
    total = weights.sum()
    if n == 0 or total == 0:
        return min(n, 1)
    if max_dim is not None:
        n = min(n, max_dim)
    if cutoff > 0:
        n = min(n, int(np.count_nonzero(weights / total >= cutoff)))
    if max_discarded > 0:
        # tail[m] = weight discarded when keeping m values, summed from the small end for accuracy
        tail = np.concatenate([np.cumsum(weights[::-1])[::-1], [0.0]])
        n = min(n, int(np.argmax(tail <= max_discarded * total)))
    return max(n, 1)


def svd(
    t: BlockTensor,
    left_axes,
    right_axes,
    *,
    max_dim: int | None = None,
    cutoff: float = 0.0,
    max_discarded: float = 0.0,
    normalize: bool = False,
) -> tuple[BlockTensor, Spectrum, BlockTensor, SvdInfo]:
    """Blockwise singular value decomposition with global truncation, ``t = U diag(S) V``.

    Parameters
    ----------
    t : BlockTensor
    left_axes, right_axes : sequence of int
        A split of all legs of ``t``: rows and columns of the fused matrix.
    max_dim : int, optional
        Keep at most this many singular values in total.
    cutoff : float
        Drop every singular value with ``s**2 / sum(all s**2) < cutoff``.
    max_discarded : float
        Keep the fewest values such that the discarded weight (see :class:`SvdInfo`) is at most this.
    normalize : bool
        Rescale the kept singular values to ``sum s**2 = 1``.

    Returns
    -------
    U : BlockTensor
        Legs ``left_axes`` (in that order) then the new bond (direction -1); charge 0; isometric
        (``U^dag U = 1``).
    S : Spectrum
        Kept singular values, by sector of the new bond and as one descending array with charges.
    V : BlockTensor
        The new bond (direction +1) then legs ``right_axes``; carries ``t.charge``; ``V V^dag = 1``.
    info : SvdInfo
        Discarded weight, kept and full dimensions, norm of ``t``.

    Notes
    -----
    All singular values of all charge sectors are sorted together and the constraints applied to the
    descending list; each constraint keeps a prefix, the smallest prefix wins, and at least one value
    is kept. By the Eckart-Young theorem (Psychometrika 1, 211 (1936)) this is the best approximation
    of the requested rank. Equal values at the cut are split in sector order, not kept together.
    Sectors in which ``t`` stores no block are left out of the new bond.
    """
    if max_dim is not None and (not isinstance(max_dim, numbers.Integral) or max_dim < 1):
        raise ValueError(f"svd: max_dim={max_dim!r} must be a positive integer or None")
    if not 0.0 <= cutoff < 1.0:
        raise ValueError(f"svd: cutoff={cutoff!r} must lie in [0, 1)")
    if not 0.0 <= max_discarded < 1.0:
        raise ValueError(f"svd: max_discarded={max_discarded!r} must lie in [0, 1)")
    left, right, mats = _matricize(t, left_axes, right_axes, "svd")
    factors = [_svd_kernel(mat) for _, mat in mats]
    s_all = np.concatenate([f[1] for f in factors]) if factors else np.zeros(0)
    owner = np.repeat(np.arange(len(factors)), [len(f[1]) for f in factors])
    order = np.argsort(-s_all, kind="stable")
    weights = s_all[order] ** 2
    total = float(weights.sum())
    n_keep = _truncation_count(weights, max_dim, cutoff, max_discarded)
    discarded = float(weights[n_keep:].sum() / total) if total > 0 else 0.0
    counts = np.bincount(owner[order[:n_keep]], minlength=len(factors))
    kept_sectors = [i for i in range(len(factors)) if counts[i] > 0]
    kept_mats = [mats[i] for i in kept_sectors]
    bond = _new_bond(kept_mats, counts[kept_sectors], t.rule)
    scale = 1.0
    if normalize and n_keep:
        kept_weight = float(weights[:n_keep].sum())
        scale = 1.0 / np.sqrt(kept_weight) if kept_weight > 0 else 1.0
    u_cols, v_rows, by_sector = [], [], {}
    for b, i in enumerate(kept_sectors):
        u, s, vh = factors[i]
        c = counts[i]
        # Copies drop the truncated columns, so the stored blocks do not keep them alive.
        u_cols.append(u if c == u.shape[1] else np.ascontiguousarray(u[:, :c]))
        v_rows.append(vh if c == vh.shape[0] else vh[:c].copy())
        by_sector[b] = s[:c] * scale
    U = _left_factor(t, left, bond, kept_mats, u_cols)
    V = _right_factor(t, right, bond, kept_mats, v_rows)
    new_index = np.full(len(factors), -1)
    new_index[kept_sectors] = np.arange(len(kept_sectors))
    sectors = new_index[owner[order[:n_keep]]]
    spectrum = Spectrum(bond, by_sector, s_all[order[:n_keep]] * scale, bond.charges[sectors], sectors)
    info = SvdInfo(discarded, int(n_keep), len(s_all), float(np.sqrt(total)))
    return U, spectrum, V, info


def qr(t: BlockTensor, left_axes, right_axes) -> tuple[BlockTensor, BlockTensor]:
    """Blockwise thin QR decomposition ``t = Q R``.

    Parameters
    ----------
    t : BlockTensor
    left_axes, right_axes : sequence of int
        A split of all legs: rows and columns of the fused matrix.

    Returns
    -------
    Q : BlockTensor
        Legs ``left_axes`` then the new bond (direction -1); charge 0; ``Q^dag Q = 1``.
    R : BlockTensor
        The new bond (direction +1) then ``right_axes``; carries ``t.charge``; upper triangular in
        each sector.

    Notes
    -----
    Each sector of the bond has dimension ``min(rows, columns)`` of its fused block. Sectors in which
    ``t`` stores no block are left out of the new bond.
    """
    left, right, mats = _matricize(t, left_axes, right_axes, "qr")
    factors = [scipy.linalg.qr(mat, mode="economic", check_finite=False) for _, mat in mats]
    bond = _new_bond(mats, [q.shape[1] for q, _ in factors], t.rule)
    Q = _left_factor(t, left, bond, mats, [q for q, _ in factors])
    R = _right_factor(t, right, bond, mats, [r for _, r in factors])
    return Q, R


def lq(t: BlockTensor, left_axes, right_axes) -> tuple[BlockTensor, BlockTensor]:
    """Blockwise thin LQ decomposition ``t = L Q`` with ``Q`` isometric on the right.

    Parameters
    ----------
    t : BlockTensor
    left_axes, right_axes : sequence of int
        A split of all legs: rows and columns of the fused matrix.

    Returns
    -------
    L : BlockTensor
        Legs ``left_axes`` then the new bond (direction -1); charge 0; lower triangular in each sector.
    Q : BlockTensor
        The new bond (direction +1) then ``right_axes``; carries ``t.charge``; ``Q Q^dag = 1`` (the
        right-canonical form of an MPS tensor).
    """
    left, right, mats = _matricize(t, left_axes, right_axes, "lq")
    # m = L Q  from  m^dag = Q' R':  L = R'^dag, Q = Q'^dag
    factors = [scipy.linalg.qr(mat.conj().T, mode="economic", check_finite=False) for _, mat in mats]
    bond = _new_bond(mats, [q.shape[1] for q, _ in factors], t.rule)
    L = _left_factor(t, left, bond, mats, [np.ascontiguousarray(r.conj().T) for _, r in factors])
    Q = _right_factor(t, right, bond, mats, [np.ascontiguousarray(q.conj().T) for q, _ in factors])
    return L, Q


def eigh(t: BlockTensor, left_axes, right_axes) -> tuple[Spectrum, BlockTensor]:
    """Blockwise eigendecomposition of a Hermitian tensor, ``t = U diag(w) U^dag``.

    Parameters
    ----------
    t : BlockTensor
        Charge 0, Hermitian as a matrix from ``right_axes`` to ``left_axes``; like
        ``numpy.linalg.eigh`` only the lower triangle of each sector is read.
    left_axes, right_axes : sequence of int
        Split of all legs; ``t.legs[right_axes[i]]`` must be the dual of ``t.legs[left_axes[i]]``.

    Returns
    -------
    w : Spectrum
        All eigenvalues, ascending, with the charge of their sector.
    U : BlockTensor
        Legs ``left_axes`` then the new bond (direction -1); charge 0; unitary in each sector.

    Notes
    -----
    Sectors without stored blocks count as zero matrices, so the spectrum is complete.
    """
    _check_tensor(t, "eigh")
    left, right = _partition_axes(t.ndim, left_axes, right_axes, "eigh")
    square = len(left) == len(right) and all(t.legs[j] == t.legs[i].dual() for i, j in zip(left, right))
    if not square:
        raise ValueError(
            "eigh: each leg in right_axes must be the dual of the matching leg in left_axes (same sectors, "
            "opposite direction); a Hermitian tensor maps a space to itself"
        )
    if any(t._qkey):
        raise ValueError(
            f"eigh: the tensor has charge {list(t._qkey)}; a Hermitian tensor must have charge 0"
        )
    left, right, mats = _matricize(t, left, right, "eigh", fill_missing=True)
    factors = [scipy.linalg.eigh(mat, check_finite=False) for _, mat in mats]
    bond = _new_bond(mats, [len(w) for w, _ in factors], t.rule)
    U = _left_factor(t, left, bond, mats, [v for _, v in factors])
    w_all = np.concatenate([w for w, _ in factors]) if factors else np.zeros(0)
    owner = np.repeat(np.arange(len(factors)), [len(w) for w, _ in factors])
    order = np.argsort(w_all, kind="stable")
    by_sector = {b: w for b, (w, _) in enumerate(factors)}
    spectrum = Spectrum(bond, by_sector, w_all[order], bond.charges[owner[order]], owner[order])
    return spectrum, U
