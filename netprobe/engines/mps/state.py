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

import itertools
import math
import numbers
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from netprobe.errors import NetprobeError, OperatorError, SectorError
from netprobe.model.sites import SiteSpace, operator_charge_change, operator_parity
from netprobe.tensor import BlockTensor, ChargeRule, Leg, contract, diag_multiply, lq, qr, svd, trace
from netprobe.model.terms import Hamiltonian, LocalProduct, Term, normal_form

__all__ = [
    "SiteBasis",
    "BlockMPO",
    "MPS",
    "SchmidtSpectrum",
    "random_state",
    "product_state",
    "overlap",
    "expectation_value",
    "energy_variance",
    "local_expectations",
    "correlation",
    "product_expectation",
    "schmidt_spectra",
    "entanglement_entropies",
    "entanglement_spectrum",
    "left_boundary",
    "right_boundary",
    "left_environment_step",
    "right_environment_step",
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
    conserve : tuple of str
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
    conserve: tuple[str, ...]
    rule: ChargeRule
    leg: Leg
    order: np.ndarray
    charges: np.ndarray

    @classmethod
    def from_space(cls, space: SiteSpace, conserve: Sequence[str] = ()) -> SiteBasis:
        """Group the basis of ``space`` by the charges in ``conserve``."""
        conserve = tuple(conserve)
        values = space.charge_values(conserve)
        if values.shape[1] == 0:
            rule = ChargeRule.trivial()
            values = np.zeros((space.dim, 1), np.int64)
        else:
            rule = ChargeRule.u1(values.shape[1])
        leg, order = Leg.from_basis_charges(values, rule, 1)
        order.setflags(write=False)
        values.setflags(write=False)
        return cls(space, conserve, rule, leg, order, values)

    @classmethod
    def from_hamiltonian(cls, ham: Hamiltonian) -> SiteBasis:
        """The basis of a Hamiltonian's site space and conserved charges."""
        return cls.from_space(ham.space, ham.conserve)

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
        unknown = sorted(set(sector) - set(self.conserve))
        if unknown:
            raise SectorError(
                f"sector names {', '.join(unknown)}, which is not conserved; conserved: "
                f"{', '.join(self.conserve) or 'none'}"
            )
        missing = [c for c in self.conserve if c not in sector]
        if missing:
            raise SectorError(f"sector needs a value for the conserved charge(s) {', '.join(missing)}")
        if not self.conserve:
            return self.rule.zero()
        return np.array([int(sector[c]) for c in self.conserve], np.int64)

    def sector_of(self, charge) -> dict[str, int]:
        """The sector dictionary of a charge vector."""
        return {name: int(v) for name, v in zip(self.conserve, np.asarray(charge).tolist())}

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
        fits = site_q.shape == (basis.dim, len(basis.conserve))
        if not fits or (basis.conserve and not np.array_equal(site_q, basis.charges)):
            raise SectorError(
                "BlockMPO.from_mpo: the MPO's site charges do not match the state's conserved charges "
                f"({', '.join(basis.conserve) or 'none'}); build both from the same Hamiltonian"
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


# --------------------------------------------------------------------------------------------------
# Environments and contractions with operators
# --------------------------------------------------------------------------------------------------


def left_boundary(state: MPS, mpo: BlockMPO) -> BlockTensor:
    """The trivial left environment, legs ``(bra, ket, w)``."""
    a, w = state.tensors[0].legs[0], mpo.tensors[0].legs[0]
    return BlockTensor((a, a.dual(), w.dual()), None, state.basis.rule,
                       {(0, 0, 0): np.ones((1, 1, 1))})


def right_boundary(state: MPS, mpo: BlockMPO) -> BlockTensor:
    """The trivial right environment, legs ``(ket, w, bra)``."""
    b, w = state.tensors[-1].legs[2], mpo.tensors[-1].legs[3]
    return BlockTensor((b.dual(), w.dual(), b), None, state.basis.rule, {(0, 0, 0): np.ones((1, 1, 1))})


def left_environment_step(env: BlockTensor, a: BlockTensor, w: BlockTensor) -> BlockTensor:
    """``L'[b*, b, w'] = sum L[a*, a, w] A[a, s, b] W[w, s', s, w'] conj(A[a*, s', b*])``."""
    t = contract(env, a, ([1], [0]))  # (bra, w, s, b)
    t = contract(t, w, ([1, 2], [0, 2]))  # (bra, b, s', w')
    return contract(a.conj(), t, ([0, 1], [0, 2]))  # (bra', b, w')


def right_environment_step(env: BlockTensor, a: BlockTensor, w: BlockTensor) -> BlockTensor:
    """``R'[a, w, a*] = sum A[a, s, b] W[w, s', s, w'] R[b, w', b*] conj(A[a*, s', b*])``."""
    t = contract(a, env, ([2], [0]))  # (a, s, w', bra)
    t = contract(t, w, ([1, 2], [2, 3]))  # (a, bra, w, s')
    return contract(t, a.conj(), ([1, 3], [2, 1]))  # (a, w, bra')


def _as_block_mpo(state: MPS, mpo) -> BlockMPO:
    block = BlockMPO.from_mpo(mpo, state.basis)
    if block.num_sites != state.num_sites:
        raise NetprobeError(f"the MPO has {block.num_sites} sites but the state has {state.num_sites}")
    return block


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


def expectation_value(state: MPS, mpo) -> float | complex:
    """``<psi|H|psi> / <psi|psi>`` for an MPO (real for a Hermitian MPO, up to rounding).

    Parameters
    ----------
    state : MPS
    mpo : netprobe.engines.mps.mpo.MPO or BlockMPO

    Returns
    -------
    float or complex
        Real part if the imaginary part is below 1e-12 of the magnitude.
    """
    block = _as_block_mpo(state, mpo)
    env = left_boundary(state, block)
    for a, w in zip(state.tensors, block.tensors):
        env = left_environment_step(env, a, w)
    value = complex(contract(env, right_boundary(state, block), ([0, 1, 2], [2, 0, 1])).item())
    value /= state.norm() ** 2
    return _real_if_close(value)


def _real_if_close(value: complex):
    return value.real if abs(value.imag) <= 1e-12 * max(1.0, abs(value)) else value


def energy_variance(state: MPS, mpo) -> float:
    """``<H^2> - <H>^2`` of the normalised state, by an exact contraction with two MPO layers.

    Notes
    -----
    ``<H^2>`` is contracted site by site with an environment of legs (bra, ket, w_lower, w_upper);
    the cost per site is about ``chi^3 D^2 d`` (``D`` the MPO bond dimension). Rounding limits the
    result to about ``eps <H^2>``.
    """
    block = _as_block_mpo(state, mpo)
    a0, w0 = state.tensors[0].legs[0], block.tensors[0].legs[0]
    env = BlockTensor((a0, a0.dual(), w0.dual(), w0.dual()), None, state.basis.rule,
                      {(0, 0, 0, 0): np.ones((1, 1, 1, 1))})
    for a, w in zip(state.tensors, block.tensors):
        t = contract(env, a, ([1], [0]))  # (bra, wl, wu, s, b)
        t = contract(t, w, ([1, 3], [0, 2]))  # (bra, wu, b, s', wl')
        t = contract(t, w, ([1, 3], [0, 2]))  # (bra, b, wl', s'', wu')
        env = contract(a.conj(), t, ([0, 1], [0, 3]))  # (bra', b, wl', wu')
    h2 = complex(sum((blk.sum() for blk in env.blocks.values()), 0.0)) / state.norm() ** 2
    h1 = complex(expectation_value(state, block))
    return float((h2 - h1 * h1.conjugate()).real)


def _expand_definite(basis: SiteBasis, product: LocalProduct):
    """Charge-definite pieces of a local product whose charge changes add up to zero."""
    options = [basis.split(m) for m in product.matrices]
    zero = tuple(basis.rule.zero().tolist())
    for combo in itertools.product(*options):
        total = tuple(np.sum([np.array(d, np.int64) for d, _ in combo], axis=0).tolist()) if combo else zero
        if tuple(basis.rule.reduce(np.array(total, np.int64)).tolist()) == zero:
            yield tuple(t for _, t in combo)


def product_expectation(state: MPS, product: LocalProduct):
    """``<psi|P|psi> / <psi|psi>`` for one local product in normal form (strings already written out).

    Parameters
    ----------
    state : MPS
    product : LocalProduct
        ``coefficient * prod_k matrices[k]`` on increasing ``sites``, in the site space's basis
        (:func:`netprobe.model.terms.normal_form` writes fermion strings out).

    Returns
    -------
    complex
        Parts of the product that change a conserved charge contribute nothing and are skipped.
    """
    if not product.sites:
        return complex(product.coefficient)
    work = state._clone()
    first, last = product.sites[0], product.sites[-1]
    work.move_centre(first)
    norm2 = work.tensors[first].norm() ** 2
    total = 0.0 + 0.0j
    for ops in _expand_definite(work.basis, product):
        by_site = dict(zip(product.sites, ops))
        env = BlockTensor.eye(work.tensors[first].legs[0], work.basis.rule)
        for s in range(first, last + 1):
            a = work.tensors[s]
            t = contract(env, a, ([1], [0]))  # (bra, s, b)
            op = by_site.get(s)
            if op is not None:
                t = contract(t, op, ([1], [1])).transpose((0, 2, 1))  # (bra, s', b)
            env = contract(a.conj(), t, ([0, 1], [0, 1]))  # (bra', b)
        total += complex(trace(env, 0, 1).item())
    return complex(product.coefficient) * total / norm2


def _hermitian_product(product: LocalProduct) -> bool:
    c = complex(product.coefficient)
    mats = product.matrices
    if abs(c.imag) > 1e-14 * max(1.0, abs(c)):
        return False
    return all(np.allclose(m, np.conj(m).T, atol=1e-12) for m in mats)


def _check_measurable(basis: SiteBasis, ops: Sequence[tuple[int, str]], label: str) -> None:
    """Refuse operators whose expectation vanishes by symmetry (they leave the sector)."""
    space = basis.space
    odd = sum(operator_parity(space, space.operator(name)) for _, name in ops) % 2
    if odd:
        raise OperatorError(f"operator {label} is fermion-odd, so its expectation vanishes; pair it with "
                            "another odd operator")
    for charge in basis.conserve:
        total = 0
        for _, name in ops:
            delta = operator_charge_change(space, space.operator(name), charge)
            if delta is None:
                raise OperatorError(
                    f"operator {label} mixes different changes of the conserved charge {charge}; in a "
                    f"fixed-{charge} state only its charge-conserving part counts: measure that part, "
                    "or drop the charge from conserve"
                )
            total += delta
        if total:
            raise OperatorError(
                f"operator {label} changes {charge} by {total:+d} and leaves the sector, so its expectation "
                "vanishes; use a charge-conserving operator or correlator"
            )


def local_expectations(state: MPS, op_name: str) -> np.ndarray:
    """``<O_i>`` on every site for a named local operator of the site space.

    Parameters
    ----------
    state : MPS
    op_name : str
        An operator of ``state.basis.space`` (or an on-site product ``a.b``).

    Returns
    -------
    ndarray, shape (N,)
        Real for a Hermitian operator, complex otherwise.

    Raises
    ------
    OperatorError
        For an unknown operator, or one whose expectation vanishes by symmetry (fermion-odd, or
        changing a conserved charge).
    """
    basis = state.basis
    mat = basis.space.operator(op_name)
    _check_measurable(basis, [(0, op_name)], f"'{op_name}'")
    parts = basis.split(mat)
    hermitian = np.allclose(mat, np.conj(mat).T, atol=1e-12)
    out = np.zeros(state.num_sites, dtype=float if hermitian else complex)
    if not parts:
        return out
    op = parts[0][1]
    work = state._clone()
    for i in range(state.num_sites):
        work.move_centre(i)
        a = work.tensors[i]
        oa = contract(op, a, ([1], [1])).transpose((1, 0, 2))  # (a, s', b)
        value = complex(a.inner(oa)) / a.norm() ** 2
        out[i] = value.real if hermitian else value
    return out


def correlation(state: MPS, op_a: str, op_b: str, i: int, j: int):
    """``<A_i B_j>`` for named local operators, with Jordan-Wigner strings for fermions.

    Parameters
    ----------
    state : MPS
    op_a, op_b : str
        Operators of the site space (e.g. ``"cdag"``, ``"c"`` or ``"Sz"``, ``"Sz"``); ``A_i`` is applied
        after ``B_j``, as written.
    i, j : int
        Sites in MPS order (may be equal or in any order).

    Returns
    -------
    float or complex
        Real if the product is Hermitian.

    Raises
    ------
    OperatorError
        For an unknown operator, a site out of range, or a product whose expectation vanishes by symmetry.
    """
    n = state.num_sites
    for site in (i, j):
        if not isinstance(site, (numbers.Integral, np.integer)) or not 0 <= int(site) < n:
            raise OperatorError(f"correlation: site {site!r} outside 0..{n - 1}")
    ops = [(int(i), op_a), (int(j), op_b)]
    label = f"'{op_a}_{i} {op_b}_{j}'"
    _check_measurable(state.basis, ops, label)
    product = normal_form(Term(1.0, tuple(ops), label), state.basis.space)
    if product is None:
        return 0.0
    value = product_expectation(state, product)
    return value.real if _hermitian_product(product) else value


# --------------------------------------------------------------------------------------------------
# Entanglement
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class SchmidtSpectrum:
    """Schmidt values at one bond, labelled by the charge of the left part.

    Attributes
    ----------
    bond : int
        Bond ``b`` separates sites ``0..b-1`` from ``b..N-1``.
    values : ndarray, shape (n,)
        Schmidt values, descending, ``sum values**2 = 1``.
    charges : ndarray of int, shape (n, k)
        Charge of the left part for each value (k = number of conserved charges, may be 0).
    names : tuple of str
        Names of the charge components.
    """

    bond: int
    values: np.ndarray
    charges: np.ndarray
    names: tuple[str, ...]

    @property
    def weights(self) -> np.ndarray:
        """Probabilities ``values**2``."""
        return self.values**2

    def entropy(self) -> float:
        """Von Neumann entanglement entropy ``-sum p ln p`` (nats)."""
        p = self.weights[self.weights > 0]
        return float(-np.sum(p * np.log(p)))

    def renyi(self, alpha: float) -> float:
        """Renyi entropy ``ln(sum p**alpha) / (1 - alpha)`` (nats); alpha = 1 gives :meth:`entropy`."""
        if alpha == 1:
            return self.entropy()
        p = self.weights[self.weights > 0]
        return float(np.log(np.sum(p**alpha)) / (1 - alpha))

    def by_charge(self) -> dict[tuple[int, ...], np.ndarray]:
        """Schmidt values grouped by the charge of the left part (descending in each group)."""
        out: dict = {}
        for v, q in zip(self.values, map(tuple, self.charges.tolist())):
            out.setdefault(q, []).append(v)
        return {q: np.array(v) for q, v in sorted(out.items())}

    def levels(self) -> np.ndarray:
        """Entanglement energies ``-2 ln(values)``."""
        return -2.0 * np.log(self.values[self.values > 0])

    def __repr__(self) -> str:
        return f"SchmidtSpectrum(bond={self.bond}, n={len(self.values)}, entropy={self.entropy():.6g})"


def _spectrum(bond: int, s, basis: SiteBasis) -> SchmidtSpectrum:
    values = np.asarray(s.values, float)
    total = np.sqrt(np.sum(values**2))
    values = values / total if total > 0 else values
    charges = np.asarray(s.charges)[:, : len(basis.conserve)]
    return SchmidtSpectrum(bond, values, charges, basis.conserve)


def schmidt_spectra(state: MPS) -> list[SchmidtSpectrum]:
    """Schmidt spectra at every inner bond 1..N-1, from one sweep of SVDs.

    Returns
    -------
    list of SchmidtSpectrum
        Entry ``b - 1`` is bond ``b``.
    """
    work = state._clone()
    work.move_centre(0)
    out = []
    for i in range(work.num_sites - 1):
        u, s, v, _ = svd(work.tensors[i], [0, 1], [2])
        work.tensors[i] = u
        work.tensors[i + 1] = contract(diag_multiply(v, 0, s), work.tensors[i + 1], ([1], [0]))
        out.append(_spectrum(i + 1, s, work.basis))
    return out


def entanglement_entropies(state: MPS) -> np.ndarray:
    """Von Neumann entropy (nats) at every inner bond; entry ``b - 1`` is bond ``b``, shape (N-1,)."""
    return np.array([s.entropy() for s in schmidt_spectra(state)])


def entanglement_spectrum(state: MPS, bond: int) -> SchmidtSpectrum:
    """Schmidt values and left-part charges at one bond (1..N-1).

    Raises
    ------
    NetprobeError
        If the bond is out of range.
    """
    n = state.num_sites
    if not isinstance(bond, (numbers.Integral, np.integer)) or not 1 <= int(bond) <= n - 1:
        raise NetprobeError(
            f"entanglement_spectrum: bond {bond!r} outside 1..{n - 1} (bond b cuts left of site b)")
    work = state._clone()
    work.move_centre(int(bond))
    _, s, _, _ = svd(work.tensors[int(bond)], [0], [1, 2])
    return _spectrum(int(bond), s, work.basis)
