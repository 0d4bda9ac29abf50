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
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np


__all__ = [
    "ChargeRule",
    "Leg",
]

_REAL = np.dtype(np.float64)
_COMPLEX = np.dtype(np.complex128)
_PLAN_CACHE_SIZE = 2048  # a sweep of a 36-site cylinder at D = 128 builds about 1000 matrix plans


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


def _row_codes(*arrays: np.ndarray) -> tuple[np.ndarray, ...] | None:
    """One int64 per charge row, in the same lexicographic order as the rows; None if they overflow.

    The codes of all ``arrays`` (each of shape (n_i, k)) share one mixed-radix base, so equal rows
    get equal codes across them: sorting and matching rows becomes sorting and matching integers.
    """
    stacked = np.concatenate(arrays) if len(arrays) > 1 else arrays[0]
    low = stacked.min(axis=0)
    span = stacked.max(axis=0) - low + 1
    if float(np.prod(span.astype(float))) >= 2.0**62:
        return None
    strides = np.ones(len(span), np.int64)
    for i in range(len(span) - 2, -1, -1):
        strides[i] = strides[i + 1] * span[i + 1]
    return tuple((a - low) @ strides for a in arrays)


def _row_lookup(table: np.ndarray, queries: np.ndarray) -> np.ndarray:
    """Index of each query row in ``table`` (rows unique), or -1."""
    if len(queries) == 0 or len(table) == 0:
        return np.full(len(queries), -1, dtype=np.int64)
    codes = _row_codes(table, queries) if table.shape[1] else None
    if codes is not None:
        tcode, qcode = codes
        order = np.argsort(tcode, kind="stable")
        pos = np.minimum(np.searchsorted(tcode[order], qcode), len(order) - 1)
        found = order[pos]
        return np.where(tcode[found] == qcode, found, -1).astype(np.int64)
    _, inverse = np.unique(np.concatenate([table, queries]), axis=0, return_inverse=True)
    inverse = inverse.reshape(-1)
    where = np.full(inverse.max() + 1, -1, dtype=np.int64)
    where[inverse[: len(table)]] = np.arange(len(table))
    return where[inverse[len(table) :]]


def _groups(charges: np.ndarray):
    """Unique charge rows and, for each, the indices (in order) of the rows carrying it."""
    if len(charges) == 0:
        return charges, []
    codes = _row_codes(charges) if charges.shape[1] else None
    if codes is not None:  # rows as integers in the same order: a 1-D unique, much cheaper
        ucodes, first, inverse = np.unique(codes[0], return_index=True, return_inverse=True)
        uniq = charges[first]
    else:
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

