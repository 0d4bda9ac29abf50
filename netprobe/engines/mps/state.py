"""Matrix product states on block-sparse tensors: construction, canonical forms and measurements.

Conventions
-----------
Site tensors
    ``A[i]`` has legs ``(a, s, b)`` = (left bond, physical, right bond) with directions ``(+1, +1, -1)``
    and total charge 0, so a block exists where ``q_b = q_a + q_s``: the charge on a bond is the charge
    accumulated by the sites to its left. The left boundary bond is one state of charge 0, the right
    boundary bond one state carrying the target sector; a state therefore has a definite charge by
    construction. Models without a conserved charge use ``ChargeRule.trivial()`` through the same code.
Physical basis
    :class:`SiteBasis` groups the local basis of the site space into charge sectors. Blocked state
    ``j`` is original state ``order[j]``; every operator matrix given in the site space's basis is
    permuted with ``order`` before use, and :meth:`MPS.to_vector` returns amplitudes in the original
    basis with site 0 most significant (the convention of :mod:`netprobe.engines.exact`).
Canonical forms
    Sites left of the orthogonality centre are left-orthonormal (``sum_{a,s} conj(A) A = 1`` on the
    right bond), sites right of it right-orthonormal; the centre tensor carries the norm.
    ``centre is None`` means no canonical form is known.
Environments
    A left environment has legs ``(bra, ket, w)`` with directions ``(+1, -1, -1)``, a right environment
    ``(ket, w, bra)`` with ``(+1, +1, -1)``; ``w`` is the MPO channel. An MPO tensor (:class:`BlockMPO`)
    has legs ``(w_left, s_out, s_in, w_right)`` with directions ``(+1, +1, -1, -1)``.

Measurements bring the orthogonality centre where they need it; they work on a shallow copy, so the
gauge of the caller's state is left as it was.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from netprobe.errors import NetprobeError, OperatorError, SectorError
from netprobe.model.sites import SiteSpace
from netprobe.tensor import BlockTensor, ChargeRule, Leg, contract, lq, qr
from netprobe.model.terms import Hamiltonian

__all__ = [
    "SiteBasis",
    "BlockMPO",
    "MPS",
    "random_state",
    "product_state",
    "overlap",
]

_ATOL = 1e-13  # structural zeros of exactly built operator matrices


# --------------------------------------------------------------------------------------------------
# Local basis and operators
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class SiteBasis:
    """The local basis of a site space grouped into charge sectors.

    Attributes
    ----------
    space : SiteSpace
    conserved : tuple of str
        Conserved charges (may be empty: then the rule is trivial).
    rule : ChargeRule
    leg : Leg
        The physical leg (direction +1) in blocked order.
    order : ndarray of int, shape (d,)
        Blocked state ``j`` is original state ``order[j]``.
    charges : ndarray of int64, shape (d, k)
        Charge of each original basis state under ``rule``.
    """

    space: SiteSpace
    conserved: tuple[str, ...]
    rule: ChargeRule
    leg: Leg
    order: np.ndarray
    charges: np.ndarray

    @classmethod
    def from_space(cls, space: SiteSpace, conserved: Sequence[str] = ()) -> SiteBasis:
        """Group the basis of ``space`` by the charges in ``conserved``."""
        conserved = tuple(conserved)
        values = space.charge_values(conserved)
        if values.shape[1] == 0:
            rule = ChargeRule.trivial()
            values = np.zeros((space.dim, 1), np.int64)
        else:
            rule = ChargeRule.u1(values.shape[1])
        leg, order = Leg.from_basis_charges(values, rule, 1)
        order.setflags(write=False)
        values.setflags(write=False)
        return cls(space, conserved, rule, leg, order, values)

    @classmethod
    def from_hamiltonian(cls, ham: Hamiltonian) -> SiteBasis:
        """The basis of a Hamiltonian's site space and conserved charges."""
        return cls.from_space(ham.space, ham.conserved)

    @property
    def dim(self) -> int:
        """Local dimension d."""
        return self.space.dim

    def target(self, sector: Mapping[str, int] | None) -> np.ndarray:
        """Charge vector of a sector ``{name: value}``, shape (k,).

        Raises
        ------
        SectorError
            If a conserved charge has no value or an unknown charge is named.
        """
        sector = dict(sector or {})
        unknown = sorted(set(sector) - set(self.conserved))
        if unknown:
            raise SectorError(
                f"sector names {', '.join(unknown)}, which is not conserved; conserved: "
                f"{', '.join(self.conserved) or 'none'}"
            )
        missing = [c for c in self.conserved if c not in sector]
        if missing:
            raise SectorError(f"sector needs a value for the conserved charge(s) {', '.join(missing)}")
        if not self.conserved:
            return self.rule.zero()
        return np.array([int(sector[c]) for c in self.conserved], np.int64)

    def sector_of(self, charge) -> dict[str, int]:
        """The sector dictionary of a charge vector."""
        return {name: int(v) for name, v in zip(self.conserved, np.asarray(charge).tolist())}

    def blocked(self, matrix) -> np.ndarray:
        """A matrix of the site space's basis in the blocked basis."""
        m = np.asarray(matrix)
        return m[np.ix_(self.order, self.order)]

    def operator(self, matrix, *, label: str = "operator") -> BlockTensor:
        """A local matrix of definite charge change as a block tensor with legs ``(leg, leg.dual())``.

        Raises
        ------
        OperatorError
            If the matrix mixes different charge changes (split it with :meth:`split`).
        """
        parts = self.split(matrix)
        if len(parts) > 1:
            raise OperatorError(
                f"{label} mixes different changes of the conserved charges; split it into parts of "
                "definite charge change"
            )
        if not parts:
            return BlockTensor.zeros((self.leg, self.leg.dual()), None, self.rule)
        return parts[0][1]

    def split(self, matrix) -> list[tuple[tuple[int, ...], BlockTensor]]:
        """Split a local matrix into parts of definite charge change, each a block tensor.

        Returns
        -------
        list of (delta, BlockTensor)
            ``delta`` is the charge change (a tuple over the rule's components); zero parts are left out.
        """
        m = self.blocked(matrix)
        q = self.leg.basis_charges()
        rows, cols = np.nonzero(np.abs(m) > _ATOL * max(1.0, float(np.abs(m).max(initial=0.0))))
        deltas = sorted({tuple((q[r] - q[c]).tolist()) for r, c in zip(rows, cols)})
        out = []
        for delta in deltas:
            mask = np.all((q[:, None, :] - q[None, :, :]) == np.array(delta), axis=2)
            part = np.where(mask, m, 0)
            dtype = np.complex128 if np.iscomplexobj(part) and np.any(part.imag) else np.float64
            part = part.astype(dtype) if dtype == np.complex128 else part.real.astype(np.float64)
            out.append((delta, BlockTensor.from_dense(part, (self.leg, self.leg.dual()), delta, self.rule)))
        return out

    def state_index(self, label) -> int:
        """Original basis index of a state given by its label (``space.states``) or its index.

        Raises
        ------
        OperatorError
            For an unknown label or an index out of range.
        """
        if isinstance(label, (numbers.Integral, np.integer)) and not isinstance(label, bool):
            if 0 <= int(label) < self.dim:
                return int(label)
            raise OperatorError(
                f"local state index {label} outside 0..{self.dim - 1} of site space '{self.space.name}'"
            )
        if isinstance(label, str) and label in self.space.states:
            return self.space.states.index(label)
        raise OperatorError(
            f"unknown local state {label!r} for site space '{self.space.name}'; valid: "
            f"{', '.join(self.space.states)} or 0..{self.dim - 1}"
        )


@dataclass(frozen=True, eq=False)
class BlockMPO:
    """An MPO as block tensors with legs ``(w_left, s_out, s_in, w_right)``, directions ``(+1, +1, -1, -1)``.

    Attributes
    ----------
    tensors : tuple of BlockTensor
        Charge 0 each; ``W[a, s', s, b] != 0`` only if ``q_b = q_a + q(s') - q(s)``.
    basis : SiteBasis
    """

    tensors: tuple[BlockTensor, ...]
    basis: SiteBasis

    @classmethod
    def from_mpo(cls, mpo, basis: SiteBasis | None = None) -> BlockMPO:
        """Cut the dense tensors of a :class:`netprobe.engines.mps.mpo.MPO` into charge blocks.

        Parameters
        ----------
        mpo : netprobe.engines.mps.mpo.MPO or BlockMPO
        basis : SiteBasis, optional
            Required unless ``mpo`` is already a BlockMPO; its charges must be the MPO's.

        Raises
        ------
        SectorError
            If the MPO's charges do not fit the basis.
        """
        if isinstance(mpo, BlockMPO):
            return mpo
        if basis is None:
            raise NetprobeError("BlockMPO.from_mpo: pass the SiteBasis of the state")
        site_q = np.asarray(mpo.site_charges)
        fits = site_q.shape == (basis.dim, len(basis.conserved))
        if not fits or (basis.conserved and not np.array_equal(site_q, basis.charges)):
            raise SectorError(
                "BlockMPO.from_mpo: the MPO's site charges do not match the state's conserved charges "
                f"({', '.join(basis.conserved) or 'none'}); build both from the same Hamiltonian"
            )
        rule, order = basis.rule, basis.order
        phys = basis.leg
        bond_legs, bond_perms = [], []
        for bc in mpo.bond_charges:
            bc = np.asarray(bc, np.int64)
            if bc.shape[1] == 0:
                bc = np.zeros((bc.shape[0], 1), np.int64)
            leg, perm = Leg.from_basis_charges(bc, rule, 1)
            bond_legs.append(leg)
            bond_perms.append(perm)
        tensors = []
        for i, w in enumerate(mpo.tensors):
            arr = np.asarray(w)[bond_perms[i]][:, order][:, :, order][:, :, :, bond_perms[i + 1]]
            legs = (bond_legs[i], phys, phys.dual(), bond_legs[i + 1].dual())
            tensors.append(BlockTensor.from_dense(arr, legs, None, rule, atol=1e-12))
        return cls(tuple(tensors), basis)

    @property
    def num_sites(self) -> int:
        """Number of sites."""
        return len(self.tensors)

    @property
    def dtype(self):
        """float64 or complex128."""
        return np.result_type(*(w.dtype for w in self.tensors))

    def __repr__(self) -> str:
        dims = [w.shape[3] for w in self.tensors[:-1]]
        return f"BlockMPO({self.num_sites} sites, max bond dimension {max(dims, default=1)})"


# --------------------------------------------------------------------------------------------------
# The state
# --------------------------------------------------------------------------------------------------


class MPS:
    """A matrix product state of definite charge (see the module notes for the conventions).

    Parameters
    ----------
    tensors : sequence of BlockTensor
        Legs ``(a, s, b)`` with directions ``(+1, +1, -1)``, charge 0; the right bond of each tensor
        matches the left bond of the next; boundary bonds have dimension 1 and the left one charge 0.
    basis : SiteBasis
    centre : int or None
        Orthogonality centre, if the tensors are in that mixed canonical form.

    Attributes
    ----------
    tensors : list of BlockTensor
    basis : SiteBasis
    centre : int or None
    """

    __slots__ = ("tensors", "basis", "centre")

    def __init__(self, tensors: Sequence[BlockTensor], basis: SiteBasis, *, centre: int | None = None):
        tensors = list(tensors)
        if not tensors:
            raise NetprobeError("MPS: needs at least one site tensor")
        for i, t in enumerate(tensors):
            if not isinstance(t, BlockTensor) or t.ndim != 3:
                raise NetprobeError(f"MPS: site {i} must be a BlockTensor with 3 legs (a, s, b)")
            if tuple(leg.direction for leg in t.legs) != (1, 1, -1) or any(t.charge):
                raise SectorError(f"MPS: site {i} needs leg directions (+1, +1, -1) and charge 0")
            if t.legs[1] != basis.leg or t.rule != basis.rule:
                raise SectorError(f"MPS: the physical leg of site {i} is not the basis's leg")
            if i and not tensors[i - 1].legs[2].same_sectors(t.legs[0]):
                raise SectorError(f"MPS: the bond between sites {i - 1} and {i} does not match")
        first, last = tensors[0].legs[0], tensors[-1].legs[2]
        if first.dim != 1 or any(first.charges[0]) or last.dim != 1:
            raise SectorError("MPS: boundary bonds must have dimension 1, the left one with charge 0")
        if centre is not None and not 0 <= centre < len(tensors):
            raise NetprobeError(f"MPS: centre {centre} outside 0..{len(tensors) - 1}")
        self.tensors = tensors
        self.basis = basis
        self.centre = centre

    # ---- properties ------------------------------------------------------------------------------

    @property
    def num_sites(self) -> int:
        """Number of sites."""
        return len(self.tensors)

    @property
    def dtype(self):
        """float64 or complex128."""
        return np.result_type(*(t.dtype for t in self.tensors))

    @property
    def target(self) -> np.ndarray:
        """Total charge (the charge of the right boundary bond), shape (k,)."""
        return self.tensors[-1].legs[2].charges[0].copy()

    @property
    def sector(self) -> dict[str, int]:
        """Total charge as ``{name: value}`` (empty without conserved charges)."""
        return self.basis.sector_of(self.target)

    @property
    def bond_dimensions(self) -> list[int]:
        """Dimensions of the inner bonds 1..N-1."""
        return [t.legs[0].dim for t in self.tensors[1:]]

    @property
    def max_bond_dimension(self) -> int:
        """Largest inner bond dimension (1 for a single site)."""
        return max(self.bond_dimensions, default=1)

    def copy(self) -> MPS:
        """Shallow copy: a new list of the same tensors (tensors are never modified in place)."""
        return self._clone()

    def _clone(self) -> MPS:
        new = object.__new__(MPS)
        new.tensors = list(self.tensors)
        new.basis = self.basis
        new.centre = self.centre
        return new

    # ---- gauge -----------------------------------------------------------------------------------

    def _shift_right(self, i: int) -> None:
        q, r = qr(self.tensors[i], [0, 1], [2])
        self.tensors[i] = q
        self.tensors[i + 1] = contract(r, self.tensors[i + 1], ([1], [0]))

    def _shift_left(self, i: int) -> None:
        l_factor, q = lq(self.tensors[i], [0], [1, 2])
        self.tensors[i] = q
        self.tensors[i - 1] = contract(self.tensors[i - 1], l_factor, ([2], [0]))

    def canonicalize(self, centre: int = 0) -> MPS:
        """Bring the state into mixed canonical form with orthogonality centre ``centre`` (in place).

        Returns
        -------
        MPS
            ``self``, for chaining.
        """
        centre = self._check_site(centre, "canonicalize")
        for i in range(centre):
            self._shift_right(i)
        for i in range(self.num_sites - 1, centre, -1):
            self._shift_left(i)
        self.centre = centre
        return self

    def move_centre(self, site: int) -> MPS:
        """Move the orthogonality centre to ``site`` by QR/LQ steps (in place; the state is unchanged)."""
        site = self._check_site(site, "move_centre")
        if self.centre is None:
            return self.canonicalize(site)
        while self.centre < site:
            self._shift_right(self.centre)
            self.centre += 1
        while self.centre > site:
            self._shift_left(self.centre)
            self.centre -= 1
        return self

    def norm(self) -> float:
        """The 2-norm of the state."""
        if self.centre is not None:
            return self.tensors[self.centre].norm()
        return math.sqrt(max(float(np.real(overlap(self, self))), 0.0))

    def normalize(self) -> MPS:
        """Scale the state to norm 1 (in place; brings it into canonical form if it was not).

        Raises
        ------
        NetprobeError
            For the zero state.
        """
        if self.centre is None:
            self.canonicalize(0)
        nrm = self.tensors[self.centre].norm()
        if nrm == 0 or not np.isfinite(nrm):
            raise NetprobeError(
                "MPS.normalize: the state has norm 0 (or is not finite); it cannot be normalised")
        self.tensors[self.centre] = self.tensors[self.centre] / nrm
        return self

    def _check_site(self, site, where) -> int:
        if not isinstance(site, (numbers.Integral, np.integer)) or not 0 <= int(site) < self.num_sites:
            raise NetprobeError(f"MPS.{where}: site {site!r} outside 0..{self.num_sites - 1}")
        return int(site)

    # ---- conversions -----------------------------------------------------------------------------

    def to_vector(self, *, max_dim: int = 2**24) -> np.ndarray:
        """Amplitudes in the full space, original local basis, site 0 most significant (small N only).

        Raises
        ------
        NetprobeError
            If ``d**N`` exceeds ``max_dim``.
        """
        full = self.basis.dim**self.num_sites
        if full > max_dim:
            raise NetprobeError(
                f"MPS.to_vector: the full space has {full} states, more than max_dim={max_dim}")
        acc = np.ones((1, 1), dtype=self.dtype)
        for t in self.tensors:
            blocked = t.to_dense()
            a = np.zeros_like(blocked)
            a[:, self.basis.order, :] = blocked
            acc = np.tensordot(acc, a, axes=([1], [0])).reshape(-1, a.shape[2])
        return acc[:, 0]

    def __repr__(self) -> str:
        sector = ", ".join(f"{k}={v}" for k, v in self.sector.items()) or "no conserved charge"
        return (f"MPS({self.num_sites} sites, {self.basis.space.name}, {sector}, "
                f"max bond dimension {self.max_bond_dimension}, centre {self.centre})")


# --------------------------------------------------------------------------------------------------
# Construction
# --------------------------------------------------------------------------------------------------


def _charge_counts(local: list[tuple[int, ...]], dims: list[int], steps: int, start: tuple[int, ...],
                   sign: int) -> list[dict]:
    """Number of basis states reaching each bond charge, one dict per bond, walking ``steps`` sites."""
    out = [{start: 1}]
    for _ in range(steps):
        nxt: dict = {}
        for q, n in out[-1].items():
            for lq_, dim in zip(local, dims):
                key = tuple(a + sign * b for a, b in zip(q, lq_))
                nxt[key] = nxt.get(key, 0) + n * dim
        out.append(nxt)
    return out


def random_state(ham: Hamiltonian, *, bond_dimension: int = 8, rng=None,
                 sector: Mapping[str, int] | None = None) -> MPS:
    """A seeded random MPS in the target sector, right-canonical with unit norm.

    Parameters
    ----------
    ham : Hamiltonian
        Supplies the site space, conserved charges, sector, size and dtype (complex if ``ham`` is).
    bond_dimension : int
        Largest bond dimension of the random state.
    rng : numpy.random.Generator or int or None
        The only source of randomness (entries of the tensors).
    sector : dict, optional
        Target sector; default ``ham.sector``.

    Returns
    -------
    MPS
        Centre 0.

    Raises
    ------
    SectorError
        If no basis state has the target charges.
    NetprobeError
        If ``bond_dimension`` is below 1.

    Notes
    -----
    Bond charges are chosen from left to right among the charges that both ends can still reach
    (counted exactly by convolving the local charges), preferring those closest to the straight line
    from 0 to the target, and pruned from the right so that every sector connects both ends.
    """
    if not isinstance(bond_dimension, (numbers.Integral, np.integer)) or bond_dimension < 1:
        raise NetprobeError(
            f"random_state: bond_dimension={bond_dimension!r} must be an integer of at least 1")
    rng = np.random.default_rng(rng)
    basis = SiteBasis.from_hamiltonian(ham)
    n = ham.num_sites
    target = basis.target(ham.sector if sector is None else sector)
    rule = basis.rule
    local = [tuple(q) for q in basis.leg.charges.tolist()]
    ldims = basis.leg.dims.tolist()
    zero = tuple(rule.zero().tolist())
    tgt = tuple(target.tolist())
    left = _charge_counts(local, ldims, n, zero, +1)
    right = _charge_counts(local, ldims, n, tgt, -1)[::-1]
    if tgt not in left[n]:
        desc = ", ".join(f"{k} = {v}" for k, v in basis.sector_of(target).items())
        raise SectorError(
            f"sector {desc} has no states on {n} sites of '{basis.space.name}'; choose a reachable sector"
        )
    chosen: list[dict] = [{zero: 1}]
    max_sectors = max(1, bond_dimension)
    for b in range(1, n + 1):
        cand = {tuple(a + c for a, c in zip(q, l_)) for q in chosen[-1] for l_ in local}
        cand = [q for q in cand if q in left[b] and q in right[b]]
        line = np.asarray(target, float) * b / n
        cand.sort(key=lambda q: (float(np.sum((np.asarray(q) - line) ** 2)), q))
        cand = cand[:max_sectors]
        per = max(1, bond_dimension // len(cand))
        chosen.append({q: int(min(per, left[b][q], right[b][q])) for q in cand})
    chosen[n] = {tgt: 1}
    for b in range(n - 1, 0, -1):
        nxt = chosen[b + 1]
        chosen[b] = {q: d for q, d in chosen[b].items()
                     if any(tuple(a + c for a, c in zip(q, l_)) in nxt for l_ in local)}
    legs = [Leg(np.array(sorted(c), np.int64).reshape(len(c), rule.k), [c[q] for q in sorted(c)], 1)
            for c in chosen]
    dtype = np.dtype(ham.dtype)
    tensors = [BlockTensor.random((legs[i], basis.leg, legs[i + 1].dual()), None, rule, dtype=dtype, rng=rng)
               for i in range(n)]
    return MPS(tensors, basis).canonicalize(0).normalize()


def product_state(ham: Hamiltonian, labels: Sequence) -> MPS:
    """The product state with the given local state on every site.

    Parameters
    ----------
    ham : Hamiltonian
    labels : sequence of str or int, length N
        Local state of each site, by label (``ham.space.states``) or by basis index.

    Returns
    -------
    MPS
        Bond dimension 1, norm 1, centre 0.

    Raises
    ------
    SectorError
        If the total charge of the product state is not the Hamiltonian's sector.
    OperatorError
        For an unknown label.
    """
    basis = SiteBasis.from_hamiltonian(ham)
    labels = list(labels)
    if len(labels) != ham.num_sites:
        raise NetprobeError(
            f"product_state: {len(labels)} labels for {ham.num_sites} sites; give one per site")
    inverse = np.argsort(basis.order)
    phys = basis.leg
    rule = basis.rule
    q = rule.zero()
    bond = Leg.unit(rule)
    tensors = []
    dtype = np.dtype(ham.dtype)
    for label in labels:
        j = int(inverse[basis.state_index(label)])
        sec = int(np.searchsorted(phys.offsets, j, side="right") - 1)
        q = rule.reduce(q + phys.charges[sec])
        nxt = Leg.unit(rule, q)
        blk = np.zeros((1, int(phys.dims[sec]), 1), dtype)
        blk[0, j - int(phys.offsets[sec]), 0] = 1.0
        tensors.append(BlockTensor((bond, phys, nxt.dual()), None, rule, {(0, sec, 0): blk}))
        bond = nxt
    target = basis.target(ham.sector)
    if not np.array_equal(q, target):
        have = ", ".join(f"{k} = {v}" for k, v in basis.sector_of(q).items())
        want = ", ".join(f"{k} = {v}" for k, v in basis.sector_of(target).items())
        raise SectorError(
            f"product_state: the labels give {have} but the target sector is {want}; change the labels")
    return MPS(tensors, basis, centre=0)


def overlap(bra: MPS, ket: MPS):
    """``<bra|ket>``; 0 for states of different sectors.

    Raises
    ------
    SectorError
        If the states have different sizes or local bases.
    """
    if bra.num_sites != ket.num_sites or bra.basis.leg != ket.basis.leg:
        raise SectorError("overlap: the states need the same number of sites and the same local basis")
    if not np.array_equal(bra.target, ket.target):
        return 0.0
    a0, b0 = ket.tensors[0].legs[0], bra.tensors[0].legs[0]
    env = BlockTensor((b0, a0.dual()), None, ket.basis.rule, {(0, 0): np.ones((1, 1))})
    for a, b in zip(ket.tensors, bra.tensors):
        t = contract(env, a, ([1], [0]))  # (bra, s, b)
        env = contract(b.conj(), t, ([0, 1], [0, 1]))
    value = sum((blk.sum() for blk in env.blocks.values()), 0.0)
    value = complex(value)
    return value.real if np.dtype(bra.dtype).kind != "c" and np.dtype(ket.dtype).kind != "c" else value
