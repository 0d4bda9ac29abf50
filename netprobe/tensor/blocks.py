"""Block-sparse tensors with abelian charges: the tensor core under the MPO, MPS and DMRG layers.

A :class:`BlockTensor` stores only the blocks that charge conservation allows. Each leg (:class:`Leg`)
is a list of sectors, one ``(charge, dimension)`` pair each, and a direction; a block is labelled by one
sector index per leg and exists only when the charges, weighted by the directions, add up to the
tensor's total charge. Contractions and factorisations never look at the forbidden entries.

Conventions
-----------
Charges
    A :class:`ChargeRule` lists one modulus per charge component: 0 for a U(1) charge, n >= 2 for a
    Z_n charge, 1 for the trivial component that is always 0. Charges are int64 arrays of shape
    ``(..., k)``, Z_n components reduced to ``0 .. n-1``. A model without a conserved charge uses
    ``ChargeRule.trivial()`` and runs through exactly the same code.
Directions
    ``+1`` marks an incoming (ket-like) leg, ``-1`` an outgoing one. A block with sector indices
    ``(s_0, ..., s_{n-1})`` is allowed when ``sum_l direction_l * charge_l[s_l] == charge`` in the
    group. An operator ``O[i, j]`` acting on kets has legs ``(leg, leg.dual())`` and the charge it
    adds, e.g. +1 for a raising operator of a U(1) charge.
Contraction
    Only an incoming leg contracts with an outgoing one carrying the same sectors in the same order;
    the result carries the sum of the two total charges.
Dense layout
    In :meth:`BlockTensor.to_dense` and :meth:`BlockTensor.from_dense` the basis of a leg lists its
    sectors one after the other, in the leg's sector order (``Leg.offsets``).
Factorisations
    :func:`svd`, :func:`qr`, :func:`lq` and :func:`eigh` fuse ``left_axes`` into rows and
    ``right_axes`` into columns and work one charge sector at a time. The new bond is outgoing (-1)
    on the left factor and incoming (+1) on the right factor; its charges are the fused charges of
    the left legs. The left factor is neutral (charge 0) and the right factor carries the charge of
    the input, so a Schmidt spectrum read off a bond is labelled by the charge of the left part.
Shared data
    Like NumPy views, results that do not change values (``transpose``, ``conj`` of real data,
    blocks cut out of one matrix product) may share memory with their inputs or with each other.
    Call :meth:`BlockTensor.copy` before modifying blocks in place.

Notes
-----
A contraction fuses the free legs of each tensor against the contracted ones. For every charge ``c``
flowing through the contracted legs it assembles one matrix per tensor (rows: all free-leg sector
combinations of fused charge ``Q_a - c``; columns: all contracted combinations of charge ``c``), makes
one matrix product and cuts the result into blocks. The bookkeeping (which block goes where) depends
only on the legs, the total charges and the axes, and is cached, so the repeated products of an
eigensolver reuse it and pay Python work only for copying blocks in and out. The scheme follows
S. Singh, R. N. C. Pfeifer and G. Vidal, Phys. Rev. B 83, 115125 (2011).
"""

from __future__ import annotations

import functools
import numbers
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg


__all__ = [
    "ChargeRule",
    "Leg",
    "BlockTensor",
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
    "plan_cache_info",
    "clear_plan_cache",
    "MatmulTally",
    "matmul_tally",
]

_REAL = np.dtype(np.float64)
_COMPLEX = np.dtype(np.complex128)
_PLAN_CACHE_SIZE = 256


# --------------------------------------------------------------------------------------------------
# Charges and legs
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ChargeRule:
    """An abelian charge group U(1)^a x Z_n1 x Z_n2 ..., one modulus per charge component.

    Parameters
    ----------
    moduli : tuple of int
        0 for a U(1) (integer) component, n >= 2 for a Z_n component, 1 for a trivial component that
        is always 0. An empty tuple means the trivial group and is stored as ``(1,)``, so every rule
        has at least one component.

    Examples
    --------
    >>> ChargeRule((0, 2)).reduce([[3, 5], [-1, -1]]).tolist()
    [[3, 1], [-1, 1]]
    """

    moduli: tuple[int, ...] = (1,)
    _cyclic: np.ndarray = field(init=False, repr=False, compare=False)
    _cyclic_moduli: np.ndarray = field(init=False, repr=False, compare=False)

    def __post_init__(self):
        raw = self.moduli if isinstance(self.moduli, Sequence) else None
        if raw is None or not all(isinstance(m, numbers.Integral) for m in raw):
            raise TypeError(
                f"ChargeRule: moduli must be a tuple of integers, got {self.moduli!r}; "
                "use 0 for U(1), n >= 2 for Z_n, () for no charge"
            )
        moduli = tuple(int(m) for m in raw) or (1,)
        if any(m < 0 for m in moduli):
            raise ValueError(
                f"ChargeRule: moduli {moduli} contain a negative entry; use 0 for U(1) or n >= 2 for Z_n"
            )
        mods = np.array(moduli, dtype=np.int64)
        object.__setattr__(self, "moduli", moduli)
        object.__setattr__(self, "_cyclic", np.flatnonzero(mods > 0))
        object.__setattr__(self, "_cyclic_moduli", mods[mods > 0])

    @classmethod
    def trivial(cls) -> ChargeRule:
        """Return the rule of a model without a conserved charge (one component, always 0)."""
        return cls((1,))

    @classmethod
    def u1(cls, count: int = 1) -> ChargeRule:
        """Return ``count`` independent U(1) charges."""
        return cls((0,) * count)

    @property
    def k(self) -> int:
        """Number of charge components."""
        return len(self.moduli)

    @property
    def is_trivial(self) -> bool:
        """True when every component is the trivial one."""
        return all(m == 1 for m in self.moduli)

    def zero(self) -> np.ndarray:
        """Return the neutral charge, shape ``(k,)``."""
        return np.zeros(self.k, dtype=np.int64)

    def reduce(self, charges) -> np.ndarray:
        """Return ``charges`` as a new int64 array with the Z_n components reduced to ``0 .. n-1``.

        Parameters
        ----------
        charges : array_like of int, shape (..., k)

        Returns
        -------
        ndarray of int64, shape (..., k)
        """
        q = np.array(charges, dtype=np.int64)
        if self._cyclic.size:
            q[..., self._cyclic] %= self._cyclic_moduli
        return q

    def __str__(self) -> str:
        names = {0: "U(1)", 1: "trivial"}
        return " x ".join(names.get(m, f"Z_{m}") for m in self.moduli)


@dataclass(frozen=True, eq=False)
class Leg:
    """One leg of a block tensor: charge sectors, their dimensions and a direction.

    Parameters
    ----------
    charges : array_like of int, shape (n_sectors, k) or (n_sectors,)
        One charge per sector, all different. A 1-D array means ``k = 1``.
    dims : array_like of int, shape (n_sectors,)
        Dimension of each sector, at least 1.
    direction : {+1, -1}
        +1 for an incoming (ket-like) leg, -1 for an outgoing one.

    Notes
    -----
    Legs compare equal when charges, dimensions (in the same order) and direction agree; they hash
    accordingly, so they can key caches. The arrays are read-only.
    """

    charges: np.ndarray
    dims: np.ndarray
    direction: int = 1
    _offsets: np.ndarray = field(init=False, repr=False)
    _index: dict = field(init=False, repr=False)
    _key: tuple = field(init=False, repr=False)
    _hash: int = field(init=False, repr=False)

    def __post_init__(self):
        q = np.asarray(self.charges)
        d = np.asarray(self.dims)
        if q.size == 0:
            q = q.reshape(0, q.shape[1] if q.ndim == 2 else 1)
        elif q.ndim == 1:
            q = q.reshape(-1, 1)
        if q.ndim != 2 or (q.size and q.dtype.kind not in "iu"):
            raise ValueError(
                f"Leg: charges must be integers of shape (n_sectors, k), got dtype {q.dtype} and shape "
                f"{q.shape}"
            )
        if d.ndim != 1 or d.shape[0] != q.shape[0] or (d.size and d.dtype.kind not in "iu"):
            raise ValueError(
                f"Leg: dims must be {q.shape[0]} integers (one per sector), got {np.asarray(self.dims)!r}"
            )
        if d.size and d.min() < 1:
            raise ValueError(
                f"Leg: sector dimensions {d.tolist()} include one below 1; drop empty sectors"
            )
        if len(np.unique(q, axis=0)) != len(q):
            raise ValueError(
                f"Leg: charges {q.tolist()} repeat a sector; merge equal charges into one sector"
            )
        if self.direction not in (1, -1):
            raise ValueError(
                f"Leg: direction must be +1 (incoming) or -1 (outgoing), got {self.direction!r}"
            )
        self._fill(q, d, int(self.direction))

    def _fill(self, q, d, direction):
        q = np.array(q, dtype=np.int64)
        d = np.array(d, dtype=np.int64)
        q.setflags(write=False)
        d.setflags(write=False)
        offsets = np.concatenate([[0], np.cumsum(d)]).astype(np.int64)
        offsets.setflags(write=False)
        key = (direction, q.shape, q.tobytes(), d.tobytes())
        for name, value in (
            ("charges", q),
            ("dims", d),
            ("direction", direction),
            ("_offsets", offsets),
            ("_index", {tuple(row): i for i, row in enumerate(q.tolist())}),
            ("_key", key),
            ("_hash", hash(key)),
        ):
            object.__setattr__(self, name, value)

    @classmethod
    def _trusted(cls, charges, dims, direction) -> Leg:
        # Skips validation: for legs built by this module from already valid data.
        leg = object.__new__(cls)
        leg._fill(charges, dims, direction)
        return leg

    @classmethod
    def from_basis_charges(
        cls, basis_charges, rule: ChargeRule, direction: int = 1
    ) -> tuple[Leg, np.ndarray]:
        """Group a list of per-state charges into sectors.

        Parameters
        ----------
        basis_charges : array_like of int, shape (d,) or (d, k)
            Charge of each basis state in the original (e.g. physical) order.
        rule : ChargeRule
            The charges are reduced with this rule.
        direction : {+1, -1}

        Returns
        -------
        leg : Leg
            Sectors sorted by charge (lexicographically), each as large as its number of states.
        perm : ndarray of int, shape (d,)
            Blocked state ``j`` is original state ``perm[j]``; states of one sector keep their
            original order. A dense operator ``op`` in the original basis becomes
            ``op[np.ix_(perm, perm)]`` in the blocked basis, a vector ``v`` becomes ``v[perm]``.

        Examples
        --------
        >>> leg, perm = Leg.from_basis_charges([1, -1, 1], ChargeRule.u1())
        >>> leg.charges.ravel().tolist(), leg.dims.tolist(), perm.tolist()
        ([-1, 1], [1, 2], [1, 0, 2])
        """
        q = np.asarray(basis_charges)
        if q.ndim == 1:
            q = q.reshape(-1, 1)
        if q.ndim != 2 or q.shape[1] != rule.k or (q.size and q.dtype.kind not in "iu"):
            raise ValueError(
                f"Leg.from_basis_charges: need integer charges of shape (d, {rule.k}) for rule {rule}, "
                f"got shape {q.shape}"
            )
        q = rule.reduce(q)
        uniq, inverse, counts = np.unique(q, axis=0, return_inverse=True, return_counts=True)
        perm = np.argsort(inverse.reshape(-1), kind="stable")
        return cls(uniq, counts, direction), perm

    @classmethod
    def unit(cls, rule: ChargeRule, charge=None, direction: int = 1) -> Leg:
        """Return a one-dimensional leg with a single sector (e.g. the boundary bond of an MPS)."""
        q = rule.zero() if charge is None else _as_charge(charge, rule, "Leg.unit")
        return cls(q.reshape(1, -1), np.array([1]), direction)

    @property
    def n_sectors(self) -> int:
        """Number of sectors."""
        return self.charges.shape[0]

    @property
    def k(self) -> int:
        """Number of charge components."""
        return self.charges.shape[1]

    @property
    def dim(self) -> int:
        """Total dimension (sum of the sector dimensions)."""
        return int(self._offsets[-1])

    @property
    def offsets(self) -> np.ndarray:
        """Start of each sector in the dense basis, with the total dimension appended, shape (n+1,)."""
        return self._offsets

    def dual(self) -> Leg:
        """Return the same sectors with the opposite direction."""
        return Leg._trusted(self.charges, self.dims, -self.direction)

    def same_sectors(self, other: Leg) -> bool:
        """True when ``other`` has the same charges and dimensions in the same order (any direction)."""
        return self._key[1:] == other._key[1:]

    def sector_index(self, charge) -> int:
        """Return the index of the sector with this (reduced) charge.

        Raises
        ------
        ValueError
            If the leg has no such sector.
        """
        q = np.atleast_1d(np.asarray(charge, dtype=np.int64))
        try:
            return self._index[tuple(q.tolist())]
        except KeyError:
            raise ValueError(
                f"Leg.sector_index: no sector with charge {q.tolist()}; the leg has {self.charges.tolist()}"
            ) from None

    def basis_charges(self) -> np.ndarray:
        """Return the charge of every basis state in the dense (blocked) order, shape (dim, k)."""
        return np.repeat(self.charges, self.dims, axis=0)

    def __eq__(self, other):
        if self is other:
            return True
        if not isinstance(other, Leg):
            return NotImplemented
        return self._hash == other._hash and self._key == other._key

    def __hash__(self):
        return self._hash

    def __repr__(self):
        pairs = [f"{tuple(q)}:{d}" for q, d in zip(self.charges.tolist()[:8], self.dims.tolist()[:8])]
        more = ", ..." if self.n_sectors > 8 else ""
        return f"Leg(dim={self.dim}, direction={self.direction:+d}, sectors={{{', '.join(pairs)}{more}}})"

    def _describe(self) -> str:
        return f"{self.n_sectors} sectors of dimension {self.dim}, direction {self.direction:+d}"


# --------------------------------------------------------------------------------------------------
# Shared validation and small helpers
# --------------------------------------------------------------------------------------------------


def _as_charge(charge, rule: ChargeRule, where: str) -> np.ndarray:
    q = np.asarray(charge)
    if q.ndim == 0:
        q = q.reshape(1)
    if q.shape != (rule.k,) or q.dtype.kind not in "iu":
        raise ValueError(
            f"{where}: charge {np.asarray(charge).tolist()!r} must be {rule.k} integer(s) for rule {rule}"
        )
    return rule.reduce(q)


def _check_structure(legs, charge, rule, where: str) -> tuple[tuple[Leg, ...], tuple[int, ...]]:
    if not isinstance(rule, ChargeRule):
        raise TypeError(f"{where}: rule must be a ChargeRule, got {type(rule).__name__}")
    legs = tuple(legs)
    for i, leg in enumerate(legs):
        if not isinstance(leg, Leg):
            raise TypeError(f"{where}: leg {i} is a {type(leg).__name__}, not a Leg")
        if leg.k != rule.k:
            raise ValueError(
                f"{where}: leg {i} has {leg.k} charge component(s) but rule {rule} has {rule.k}; "
                "build the legs for this rule"
            )
        if not np.array_equal(rule.reduce(leg.charges), leg.charges):
            raise ValueError(
                f"{where}: leg {i} has charges {leg.charges.tolist()} not reduced for rule {rule}; "
                "use rule.reduce or Leg.from_basis_charges"
            )
    q = rule.zero() if charge is None else _as_charge(charge, rule, where)
    return legs, tuple(q.tolist())


def _check_dtype(dtype, where: str) -> np.dtype:
    dt = np.dtype(dtype)
    if dt not in (_REAL, _COMPLEX):
        raise ValueError(f"{where}: dtype {dt} is not supported; use float64 or complex128")
    return dt


def _result_dtype(*dtypes) -> np.dtype:
    return _COMPLEX if any(np.dtype(d).kind == "c" for d in dtypes) else _REAL


def _normalize_axis(axis, ndim: int, where: str) -> int:
    if not isinstance(axis, numbers.Integral) or not -ndim <= axis < ndim:
        raise ValueError(f"{where}: axis {axis!r} is out of range for a tensor with {ndim} legs")
    return int(axis) % ndim


def _normalize_axes(axes, ndim: int, where: str) -> tuple[int, ...]:
    if isinstance(axes, numbers.Integral):
        axes = (axes,)
    out = tuple(_normalize_axis(a, ndim, where) for a in axes)
    if len(set(out)) != len(out):
        raise ValueError(f"{where}: axes {tuple(axes)} repeat a leg; name each leg once")
    return out


def _partition_axes(ndim, left_axes, right_axes, where) -> tuple[tuple[int, ...], tuple[int, ...]]:
    left = _normalize_axes(left_axes, ndim, where)
    right = _normalize_axes(right_axes, ndim, where)
    if sorted(left + right) != list(range(ndim)):
        raise ValueError(
            f"{where}: left_axes {left} and right_axes {right} must split all {ndim} legs between them, "
            "each leg exactly once"
        )
    return left, right


def _check_tensor(t, where: str) -> None:
    if not isinstance(t, BlockTensor):
        raise TypeError(f"{where}: expected a BlockTensor, got {type(t).__name__}")


def _combos(legs, rule):
    """All sector combinations of ``legs`` in lexicographic order, their fused charges and dimensions."""
    n = len(legs)
    if n == 0:
        return np.zeros((1, 0), np.int64), np.zeros((1, rule.k), np.int64), np.ones(1, np.int64)
    idx = np.indices([leg.n_sectors for leg in legs]).reshape(n, -1).T
    charge = np.zeros((idx.shape[0], rule.k), np.int64)
    dims = np.ones(idx.shape[0], np.int64)
    for p, leg in enumerate(legs):
        charge += leg.direction * leg.charges[idx[:, p]]
        dims *= leg.dims[idx[:, p]]
    return idx, rule.reduce(charge), dims


def _row_lookup(table: np.ndarray, queries: np.ndarray) -> np.ndarray:
    """Index of each query row in ``table`` (rows unique), or -1."""
    if len(queries) == 0 or len(table) == 0:
        return np.full(len(queries), -1, dtype=np.int64)
    _, inverse = np.unique(np.concatenate([table, queries]), axis=0, return_inverse=True)
    inverse = inverse.reshape(-1)
    where = np.full(inverse.max() + 1, -1, dtype=np.int64)
    where[inverse[: len(table)]] = np.arange(len(table))
    return where[inverse[len(table) :]]


def _groups(charges: np.ndarray):
    """Unique charge rows and, for each, the indices (in order) of the rows carrying it."""
    if len(charges) == 0:
        return charges, []
    uniq, inverse = np.unique(charges, axis=0, return_inverse=True)
    inverse = inverse.reshape(-1)
    order = np.argsort(inverse, kind="stable")
    bounds = np.cumsum(np.bincount(inverse, minlength=len(uniq)))[:-1]
    return uniq, np.split(order, bounds)


@functools.lru_cache(maxsize=_PLAN_CACHE_SIZE)
def _allowed_keys(legs: tuple[Leg, ...], qkey: tuple[int, ...], rule: ChargeRule) -> tuple[tuple, ...]:
    """Sector-index tuples of every block allowed by the total charge, in lexicographic order."""
    if not legs:
        return ((),) if not any(qkey) else ()
    head, head_q, _ = _combos(legs[:-1], rule)
    last = legs[-1]
    need = rule.reduce(last.direction * (np.array(qkey, np.int64) - head_q))
    pos = _row_lookup(last.charges, need)
    ok = pos >= 0
    keys = np.concatenate([head[ok], pos[ok, None]], axis=1)
    return tuple(map(tuple, keys.tolist()))


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
            If an entry outside the allowed blocks exceeds ``atol`` (the array does not conserve the
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


def _block_shape(legs, key) -> tuple[int, ...]:
    return tuple(int(leg.dims[s]) for s, leg in zip(key, legs))


def _block_slices(legs, key) -> tuple[slice, ...]:
    return tuple(slice(int(leg.offsets[s]), int(leg.offsets[s + 1])) for s, leg in zip(key, legs))


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
