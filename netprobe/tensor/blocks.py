"""The block tensor: blocks keyed by charges, with the index plans that map them onto the fused matrices of a
charge sector (shared by contraction and factorisations in :mod:`netprobe.tensor.linalg`).
"""

from __future__ import annotations

import functools
import numbers
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from netprobe.tensor.legs import (
    ChargeRule, Leg, _PLAN_CACHE_SIZE, _allowed_keys, _check_dtype, _check_structure, _combos, _groups,
    _normalize_axes, _result_dtype, _row_lookup,
)

__all__ = [
    "BlockTensor",
    "plan_cache_info",
    "clear_plan_cache",
    "MatmulTally",
    "matmul_tally",
]

# --------------------------------------------------------------------------------------------------
# Index plans: how blocks map onto the fused matrices of one charge sector
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class _Side:
    """Sector combinations of a group of legs that share one fused charge, laid out along one axis."""

    combos: tuple[tuple[int, ...], ...]
    slices: tuple[slice, ...]
    dims: tuple[tuple[int, ...], ...]
    size: int


@dataclass(frozen=True, eq=False)
class _SectorPlan:
    """One charge sector of a tensor seen as a matrix (rows: ``row_axes``, columns: ``col_axes``)."""

    row_charge: tuple[int, ...]
    col_charge: tuple[int, ...]
    rows: _Side
    cols: _Side
    # (block key, row slice, column slice, block shape with row legs first)
    entries: tuple[tuple[tuple[int, ...], slice, slice, tuple[int, ...]], ...]


@dataclass(frozen=True, eq=False)
class _MatrixPlan:
    perm: tuple[int, ...] | None  # None when the legs are already in row-then-column order
    sectors: tuple[_SectorPlan, ...]


def _side(legs, combos: np.ndarray) -> _Side:
    per_leg = np.ones((len(combos), len(legs)), np.int64)
    for p, leg in enumerate(legs):
        per_leg[:, p] = leg.dims[combos[:, p]]
    sizes = per_leg.prod(axis=1)
    ends = np.cumsum(sizes)
    starts = ends - sizes
    return _Side(
        combos=tuple(map(tuple, combos.tolist())),
        slices=tuple(slice(s, e) for s, e in zip(starts.tolist(), ends.tolist())),
        dims=tuple(map(tuple, per_leg.tolist())),
        size=int(ends[-1]),
    )


@functools.lru_cache(maxsize=_PLAN_CACHE_SIZE)
def _matrix_plan(legs, qkey, rule, row_axes, col_axes) -> _MatrixPlan:
    row_legs = [legs[i] for i in row_axes]
    col_legs = [legs[i] for i in col_axes]
    r_idx, r_q, _ = _combos(row_legs, rule)
    c_idx, c_q, _ = _combos(col_legs, rule)
    r_uniq, r_groups = _groups(r_q)
    c_uniq, c_groups = _groups(c_q)
    partner = _row_lookup(c_uniq, rule.reduce(np.array(qkey, np.int64) - r_uniq)) if len(r_uniq) else []
    sectors = []
    ndim = len(legs)
    for u, m in enumerate(partner):
        if m < 0:
            continue
        rows = _side(row_legs, r_idx[r_groups[u]])
        cols = _side(col_legs, c_idx[c_groups[m]])
        keys = np.empty((len(rows.combos), len(cols.combos), ndim), np.int64)
        keys[:, :, list(row_axes)] = r_idx[r_groups[u]][:, None, :]
        keys[:, :, list(col_axes)] = c_idx[c_groups[m]][None, :, :]
        keys = keys.tolist()
        entries = tuple(
            (tuple(keys[i][j]), rs, cs, rd + cd)
            for i, (rs, rd) in enumerate(zip(rows.slices, rows.dims))
            for j, (cs, cd) in enumerate(zip(cols.slices, cols.dims))
        )
        sectors.append(
            _SectorPlan(tuple(r_uniq[u].tolist()), tuple(c_uniq[m].tolist()), rows, cols, entries)
        )
    perm = tuple(row_axes) + tuple(col_axes)
    return _MatrixPlan(None if perm == tuple(range(ndim)) else perm, tuple(sectors))


@dataclass(frozen=True, eq=False)
class _ContractPlan:
    legs: tuple[Leg, ...]
    qkey: tuple[int, ...]
    perm_a: tuple[int, ...] | None
    perm_b: tuple[int, ...] | None
    # (sector of a, sector of b, output blocks as (key, row slice, column slice, shape))
    sectors: tuple[tuple[_SectorPlan, _SectorPlan, tuple], ...]


@functools.lru_cache(maxsize=_PLAN_CACHE_SIZE)
def _contract_plan(legs_a, qa, legs_b, qb, rule, axes_a, axes_b) -> _ContractPlan:
    for ia, ib in zip(axes_a, axes_b):
        la, lb = legs_a[ia], legs_b[ib]
        if la.direction == lb.direction:
            raise ValueError(
                f"contract: leg {ia} of the first tensor and leg {ib} of the second both have direction "
                f"{la.direction:+d}; a contracted pair needs one incoming and one outgoing leg "
                "(conjugate one tensor or build the leg with Leg.dual())"
            )
        if not la.same_sectors(lb):
            raise ValueError(
                f"contract: leg {ia} of the first tensor ({la._describe()}) and leg {ib} of the second "
                f"({lb._describe()}) differ; contracted legs need the same charges and dimensions in the "
                "same order"
            )
    free_a = tuple(i for i in range(len(legs_a)) if i not in axes_a)
    free_b = tuple(i for i in range(len(legs_b)) if i not in axes_b)
    plan_a = _matrix_plan(legs_a, qa, rule, free_a, axes_a)
    plan_b = _matrix_plan(legs_b, qb, rule, axes_b, free_b)
    b_by_charge = {sp.row_charge: sp for sp in plan_b.sectors}
    sectors = []
    for spa in plan_a.sectors:
        spb = b_by_charge.get(tuple(rule.reduce(-np.array(spa.col_charge, np.int64)).tolist()))
        if spb is None:
            continue
        out = tuple(
            (ka + kb, rs, cs, da + db)
            for ka, rs, da in zip(spa.rows.combos, spa.rows.slices, spa.rows.dims)
            for kb, cs, db in zip(spb.cols.combos, spb.cols.slices, spb.cols.dims)
        )
        sectors.append((spa, spb, out))
    legs = tuple(legs_a[i] for i in free_a) + tuple(legs_b[i] for i in free_b)
    qkey = tuple(rule.reduce(np.add(qa, qb, dtype=np.int64)).tolist())
    return _ContractPlan(legs, qkey, plan_a.perm, plan_b.perm, tuple(sectors))


@dataclass
class MatmulTally:
    """Running count of the matrix products made by :func:`contract`.

    ``flops`` counts real floating-point operations from the shapes of the fused sector matrices:
    ``2 m k n`` for a real ``(m, k) @ (k, n)`` product, ``8 m k n`` for a complex one (a complex
    multiply-add is four real multiplies and four real additions; common practice).
    """

    products: int = 0
    flops: int = 0

    def record(self, m: int, k: int, n: int, is_complex: bool, count: int = 1) -> None:
        """Count ``count`` products of shape ``(m, k) @ (k, n)``."""
        self.products += count
        self.flops += (8 if is_complex else 2) * m * k * n * count


_TALLY = MatmulTally()


def matmul_tally() -> MatmulTally:
    """The running tally of matrix products (read it before and after a piece of work)."""
    return _TALLY


def plan_cache_info() -> dict:
    """Return hit and miss counts of the cached index plans (``functools`` cache statistics).

    Returns
    -------
    dict
        ``{"contract": ..., "matrix": ..., "blocks": ...}`` for contraction plans, fused-matrix plans
        (also used by the factorisations) and allowed-block lists.
    """
    return {
        "contract": _contract_plan.cache_info(),
        "matrix": _matrix_plan.cache_info(),
        "blocks": _allowed_keys.cache_info(),
    }


def clear_plan_cache() -> None:
    """Forget every cached index plan (they are rebuilt on demand)."""
    _contract_plan.cache_clear()
    _matrix_plan.cache_clear()
    _allowed_keys.cache_clear()


def _assemble(blocks: Mapping, sp: _SectorPlan, perm, dtype, fill_missing: bool = False):
    """Fuse the blocks of one charge sector into one matrix; None if the tensor stores none of them."""
    shape = (sp.rows.size, sp.cols.size)
    entries = sp.entries
    if len(entries) == 1:
        blk = blocks.get(entries[0][0])
        if blk is None:
            return np.zeros(shape, dtype) if fill_missing else None
        return (blk if perm is None else blk.transpose(perm)).reshape(shape)
    mat = None
    missing = []
    for key, rs, cs, vshape in entries:
        blk = blocks.get(key)
        if blk is None:
            missing.append((rs, cs))
            continue
        if mat is None:
            mat = np.empty(shape, dtype)
        # The slice of a C-ordered matrix reshapes to the block shape as a view: one copy per block.
        mat[rs, cs].reshape(vshape)[...] = blk if perm is None else blk.transpose(perm)
    if mat is None:
        return np.zeros(shape, dtype) if fill_missing else None
    # The entries tile the sector matrix: only the places of blocks not stored need zeros.
    for rs, cs in missing:
        mat[rs, cs] = 0
    return mat


# --------------------------------------------------------------------------------------------------
# The tensor
# --------------------------------------------------------------------------------------------------


class BlockTensor:
    """A charge-conserving tensor stored as a dictionary of dense blocks.

    Parameters
    ----------
    legs : sequence of Leg
    charge : array_like of int, shape (k,), or None
        Total charge: ``sum_l direction_l * charge_l == charge`` for every stored block. None means 0.
    rule : ChargeRule
    blocks : mapping, optional
        ``{(s_0, ..., s_{n-1}): ndarray of shape (dims[s_0], ..., dims[s_{n-1}])}``, one sector index per
        leg. Missing blocks are zero. The arrays are used as given (converted only if the dtype differs).
    dtype : {float64, complex128}, optional
        Default: complex128 if any block is complex, else float64.

    Attributes
    ----------
    legs : tuple of Leg
    rule : ChargeRule
    charge : ndarray of int64, shape (k,)
    dtype : numpy.dtype
    blocks : dict

    Raises
    ------
    ValueError
        If a block key breaks charge conservation or the legs do not fit the rule.
    ValueError
        If a block has the wrong shape or an unsupported dtype.
    """

    __slots__ = ("legs", "rule", "charge", "dtype", "blocks", "_qkey")
    # NumPy scalars on the left of * defer to __rmul__ instead of building object arrays
    __array_ufunc__ = None

    def __init__(self, legs, charge, rule, blocks=None, *, dtype=None):
        legs, qkey = _check_structure(legs, charge, rule, "BlockTensor")
        blocks = dict(blocks or {})
        if dtype is None:
            dtype = _result_dtype(*(np.asarray(b).dtype for b in blocks.values()))
        dtype = _check_dtype(dtype, "BlockTensor")
        q = np.array(qkey, np.int64)
        checked = {}
        for key, blk in blocks.items():
            if not isinstance(key, tuple) or len(key) != len(legs):
                raise ValueError(
                    f"BlockTensor: block key {key!r} must be a tuple of {len(legs)} sector indices"
                )
            in_range = (
                isinstance(s, numbers.Integral) and 0 <= s < leg.n_sectors for s, leg in zip(key, legs)
            )
            if not all(in_range):
                raise ValueError(
                    f"BlockTensor: block key {key} has a sector index out of range for sector counts "
                    f"{[leg.n_sectors for leg in legs]}"
                )
            key = tuple(int(s) for s in key)
            fused = rule.reduce(sum((leg.direction * leg.charges[s] for s, leg in zip(key, legs)), q * 0))
            if not np.array_equal(fused, q):
                raise ValueError(
                    f"BlockTensor: block {key} has fused charge {fused.tolist()} but the tensor's charge is "
                    f"{q.tolist()}; drop the block or change the charge"
                )
            arr = np.asarray(blk)
            if arr.dtype.kind == "c" and dtype.kind != "c":
                raise ValueError(
                    f"BlockTensor: block {key} is complex but dtype is {dtype}; use complex128"
                )
            arr = arr.astype(dtype, copy=False)
            want = tuple(int(leg.dims[s]) for s, leg in zip(key, legs))
            if arr.shape != want:
                raise ValueError(f"BlockTensor: block {key} has shape {arr.shape}, the legs need {want}")
            checked[key] = arr
        self._set(legs, qkey, rule, checked, dtype)

    def _set(self, legs, qkey, rule, blocks, dtype):
        self.legs = legs
        self.rule = rule
        self._qkey = qkey
        charge = np.array(qkey, np.int64)
        charge.setflags(write=False)
        self.charge = charge
        self.dtype = dtype
        self.blocks = blocks

    @classmethod
    def _new(cls, legs, qkey, rule, blocks, dtype) -> BlockTensor:
        # Trusted constructor for results computed here: no validation.
        t = object.__new__(cls)
        t._set(legs, qkey, rule, blocks, np.dtype(dtype))
        return t

    # ---- constructors ----------------------------------------------------------------------------

    @classmethod
    def zeros(cls, legs, charge, rule, *, dtype=np.float64) -> BlockTensor:
        """Return a tensor with every allowed block present and filled with zeros."""
        legs, qkey = _check_structure(legs, charge, rule, "BlockTensor.zeros")
        dtype = _check_dtype(dtype, "BlockTensor.zeros")
        blocks = {key: np.zeros(_block_shape(legs, key), dtype) for key in _allowed_keys(legs, qkey, rule)}
        return cls._new(legs, qkey, rule, blocks, dtype)

    @classmethod
    def random(cls, legs, charge, rule, *, dtype=np.float64, rng=None) -> BlockTensor:
        """Return a tensor with standard-normal entries in every allowed block.

        Parameters
        ----------
        legs, charge, rule
            As for :class:`BlockTensor`.
        dtype : {float64, complex128}
            Complex entries have independent standard-normal real and imaginary parts.
        rng : numpy.random.Generator or int or None
            Generator or seed.
        """
        legs, qkey = _check_structure(legs, charge, rule, "BlockTensor.random")
        dtype = _check_dtype(dtype, "BlockTensor.random")
        rng = np.random.default_rng(rng)
        blocks = {}
        for key in _allowed_keys(legs, qkey, rule):
            shape = _block_shape(legs, key)
            blk = rng.standard_normal(shape)
            if dtype.kind == "c":
                blk = blk + 1j * rng.standard_normal(shape)
            blocks[key] = blk
        return cls._new(legs, qkey, rule, blocks, dtype)

    @classmethod
    def from_dense(cls, array, legs, charge, rule, atol: float = 1e-12) -> BlockTensor:
        """Cut a dense array into the allowed blocks.

        Parameters
        ----------
        array : array_like, shape (leg.dim for leg in legs)
            Dense tensor in the blocked basis of the legs (see the module notes); real or complex.
        legs, charge, rule
            As for :class:`BlockTensor`.
        atol : float
            Largest magnitude tolerated outside the allowed blocks.

        Returns
        -------
        BlockTensor
            float64 for real input, complex128 for complex input.

        Raises
        ------
        ValueError
            If an entry outside the allowed blocks exceeds ``atol`` (the array does not conserved the
            charge, or legs, directions or total charge are wrong).
        """
        legs, qkey = _check_structure(legs, charge, rule, "BlockTensor.from_dense")
        arr = np.asarray(array)
        if arr.dtype.kind not in "biufc":
            raise ValueError(f"BlockTensor.from_dense: array has dtype {arr.dtype}; pass numbers")
        dtype = _result_dtype(arr.dtype)
        arr = arr.astype(dtype, copy=False)
        want = tuple(leg.dim for leg in legs)
        if arr.shape != want:
            raise ValueError(
                f"BlockTensor.from_dense: array has shape {arr.shape} but the legs have dimensions {want}"
            )
        rest = arr.copy()
        blocks = {}
        for key in _allowed_keys(legs, qkey, rule):
            where = _block_slices(legs, key)
            blocks[key] = arr[where].copy()
            rest[where] = 0
        if rest.size:
            worst = np.abs(rest)
            pos = np.unravel_index(np.argmax(worst), worst.shape)
            if worst[pos] > atol:
                raise ValueError(
                    f"BlockTensor.from_dense: entry {tuple(int(i) for i in pos)} of size {worst[pos]:.3g} "
                    f"lies outside the blocks allowed by charge {list(qkey)}; check the leg charges, "
                    "directions and the total charge"
                )
        return cls._new(legs, qkey, rule, blocks, dtype)

    @classmethod
    def eye(cls, leg: Leg, rule: ChargeRule, *, dtype=np.float64) -> BlockTensor:
        """Return the identity operator on ``leg``: legs ``(leg, leg.dual())``, charge 0."""
        legs, qkey = _check_structure((leg, leg.dual()), None, rule, "BlockTensor.eye")
        dtype = _check_dtype(dtype, "BlockTensor.eye")
        blocks = {(s, s): np.eye(int(d), dtype=dtype) for s, d in enumerate(leg.dims.tolist())}
        return cls._new(legs, qkey, rule, blocks, dtype)

    # ---- properties ------------------------------------------------------------------------------

    @property
    def ndim(self) -> int:
        """Number of legs."""
        return len(self.legs)

    @property
    def shape(self) -> tuple[int, ...]:
        """Dense shape (total dimension of each leg)."""
        return tuple(leg.dim for leg in self.legs)

    @property
    def n_blocks(self) -> int:
        """Number of stored blocks."""
        return len(self.blocks)

    @property
    def size(self) -> int:
        """Number of stored entries (the dense tensor has ``prod(shape)``)."""
        return sum(b.size for b in self.blocks.values())

    # ---- conversions -----------------------------------------------------------------------------

    def to_dense(self) -> np.ndarray:
        """Return the dense array in the blocked basis of the legs."""
        out = np.zeros(self.shape, self.dtype)
        for key, blk in self.blocks.items():
            out[_block_slices(self.legs, key)] = blk
        return out

    def item(self):
        """Return the value of a tensor without legs (e.g. a full contraction)."""
        if self.legs:
            raise ValueError(
                f"BlockTensor.item: the tensor has {self.ndim} legs; only a 0-leg tensor is a number"
            )
        blk = self.blocks.get(())
        return self.dtype.type(0).item() if blk is None else blk.item()

    def copy(self) -> BlockTensor:
        """Return a deep copy (blocks copied)."""
        blocks = {k: b.copy() for k, b in self.blocks.items()}
        return BlockTensor._new(self.legs, self._qkey, self.rule, blocks, self.dtype)

    def astype(self, dtype, *, imag_atol: float = 0.0) -> BlockTensor:
        """Return a copy converted to ``dtype``.

        Parameters
        ----------
        dtype : {float64, complex128}
        imag_atol : float
            Converting complex to real refuses imaginary parts larger than this.

        Raises
        ------
        ValueError
            If a complex-to-real conversion would drop an imaginary part above ``imag_atol``.
        """
        dtype = _check_dtype(dtype, "BlockTensor.astype")
        if self.dtype.kind == "c" and dtype.kind != "c":
            worst = max((float(np.abs(b.imag).max()) for b in self.blocks.values() if b.size), default=0.0)
            if worst > imag_atol:
                raise ValueError(
                    f"BlockTensor.astype: imaginary parts up to {worst:.3g} exceed imag_atol={imag_atol:g}; "
                    "keep complex128 or raise imag_atol"
                )
            blocks = {k: b.real.copy() for k, b in self.blocks.items()}
        else:
            blocks = {k: b.astype(dtype) for k, b in self.blocks.items()}
        return BlockTensor._new(self.legs, self._qkey, self.rule, blocks, dtype)

    # ---- structure -------------------------------------------------------------------------------

    def conj(self) -> BlockTensor:
        """Return the complex conjugate: data conjugated, every leg flipped, total charge negated."""
        legs = tuple(leg.dual() for leg in self.legs)
        qkey = tuple(self.rule.reduce(-self.charge).tolist())
        if self.dtype.kind == "c":
            blocks = {k: b.conj() for k, b in self.blocks.items()}
        else:
            blocks = dict(self.blocks)
        return BlockTensor._new(legs, qkey, self.rule, blocks, self.dtype)

    def transpose(self, perm=None) -> BlockTensor:
        """Return the tensor with legs reordered, ``new.legs[i] = old.legs[perm[i]]`` (NumPy semantics).

        Parameters
        ----------
        perm : sequence of int, optional
            A permutation of ``range(ndim)``; default reverses the legs.
        """
        if perm is None:
            perm = tuple(range(self.ndim))[::-1]
        perm = _normalize_axes(perm, self.ndim, "BlockTensor.transpose")
        if len(perm) != self.ndim:
            raise ValueError(f"BlockTensor.transpose: perm {perm} must list all {self.ndim} legs once")
        legs = tuple(self.legs[p] for p in perm)
        blocks = {tuple(k[p] for p in perm): b.transpose(perm) for k, b in self.blocks.items()}
        return BlockTensor._new(legs, self._qkey, self.rule, blocks, self.dtype)

    # ---- arithmetic ------------------------------------------------------------------------------

    def norm(self) -> float:
        """Return the Frobenius norm."""
        return float(np.sqrt(sum(np.linalg.norm(b) ** 2 for b in self.blocks.values())))

    def inner(self, other: BlockTensor):
        """Return ``<self|other> = sum conj(self) * other`` over all entries.

        Raises
        ------
        ValueError
            If the legs or rules differ.
        """
        self._check_same(other, "inner")
        total = sum(
            (np.vdot(b, other.blocks[k]) for k, b in self.blocks.items() if k in other.blocks),
            _result_dtype(self.dtype, other.dtype).type(0),
        )
        return total.item()

    def _check_same(self, other, where):
        _check_tensor(other, f"BlockTensor.{where}")
        if self.rule != other.rule or self.legs != other.legs:
            raise ValueError(
                f"BlockTensor.{where}: the tensors have different legs or charge rules; they need the same "
                "legs (charges, dimensions, directions) under one rule"
            )

    def _combine(self, other, sign, where):
        self._check_same(other, where)
        if self._qkey != other._qkey:
            raise ValueError(
                f"BlockTensor.{where}: total charges {list(self._qkey)} and {list(other._qkey)} differ; "
                "only tensors of equal charge can be added"
            )
        dtype = _result_dtype(self.dtype, other.dtype)
        blocks = {k: b.astype(dtype, copy=True) for k, b in self.blocks.items()}
        for k, b in other.blocks.items():
            if k in blocks:
                blocks[k] += sign * b
            else:
                blocks[k] = (sign * b).astype(dtype, copy=False)
        return BlockTensor._new(self.legs, self._qkey, self.rule, blocks, dtype)

    def __add__(self, other):
        return self._combine(other, 1, "__add__") if isinstance(other, BlockTensor) else NotImplemented

    def __sub__(self, other):
        return self._combine(other, -1, "__sub__") if isinstance(other, BlockTensor) else NotImplemented

    def __mul__(self, scalar):
        if not isinstance(scalar, numbers.Number):
            return NotImplemented
        dtype = _result_dtype(self.dtype, np.asarray(scalar).dtype)
        blocks = {k: (b * scalar).astype(dtype, copy=False) for k, b in self.blocks.items()}
        return BlockTensor._new(self.legs, self._qkey, self.rule, blocks, dtype)

    __rmul__ = __mul__

    def __truediv__(self, scalar):
        if not isinstance(scalar, numbers.Number):
            return NotImplemented
        return self * (1.0 / scalar)

    def __neg__(self):
        return self * -1.0

    def __repr__(self):
        return (
            f"BlockTensor(shape={self.shape}, sectors={tuple(leg.n_sectors for leg in self.legs)}, "
            f"directions={tuple(leg.direction for leg in self.legs)}, charge={list(self._qkey)}, "
            f"blocks={self.n_blocks}, dtype={self.dtype})"
        )

def _check_tensor(t, where: str) -> None:
    if not isinstance(t, BlockTensor):
        raise TypeError(f"{where}: expected a BlockTensor, got {type(t).__name__}")



def _block_shape(legs, key) -> tuple[int, ...]:
    return tuple(int(leg.dims[s]) for s, leg in zip(key, legs))


def _block_slices(legs, key) -> tuple[slice, ...]:
    return tuple(slice(int(leg.offsets[s]), int(leg.offsets[s + 1])) for s, leg in zip(key, legs))

