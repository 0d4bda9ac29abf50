"""Reduced density matrices of site sets, for spins and for fermions.

Conventions
-----------
Basis of a site set
    A set S of MPS sites is always listed in MPS order. Its basis states are the configurations
    ``(s_1, ..., s_m)`` of its sites, ``s_1`` (the smallest site) the most significant digit, in the
    local basis of the site space; a dense ``rho_S`` has shape ``(d**m, d**m)``.
Fermions
    For a fermionic site space the basis of S is its own Jordan-Wigner basis,
    ``|n_1 ... n_m> = (c_1^dag)^n_1 ... (c_m^dag)^n_m |0>`` over the modes of S alone, and ``rho_S`` is
    the fermionic reduced density matrix: ``Tr(rho_S O) = <psi|O|psi>`` for every even operator ``O``
    on S. The spin-basis partial trace of a non-contiguous set is a different (wrong) matrix.
Square-root form
    ``rho_S = Y Y^dag`` with ``Y`` graded by the conserved charges (and the fermion parity) of S: one
    block ``Y_q`` of shape ``(rows of charge q, r_q)`` per charge (:class:`GradedRoot`). Eigenvalues of
    ``rho_S`` are the squared singular values of the blocks.

Algorithms
----------
Dense vector (exact engine)
    Reorder the modes fermionically so that S comes first, i.e. multiply each amplitude by
    ``(-1)^(sum over inverted pairs n_p n_q)`` (only pairs inside ``[min S, max S]`` matter for a state
    of definite parity), then trace the tail as an ordinary partial trace.
MPS, density-matrix zipper (reference)
    Bring the orthogonality centre into ``[min S, max S]`` and contract the span from ``max S`` down
    to ``min S`` with bra and ket; on each traced site ``k`` the transfer uses ``F_k = (-1)^n_k``
    where the combined ket + bra parity of the open legs to the right of ``k`` is odd. Peak memory
    about ``chi^2 d^(2m)`` entries.
MPS, square-root zipper
    The same walk with the ket only: ``Y[(a, open legs), e]``; a traced site goes into ``e`` (with
    ``F_k`` where the ket parity of the open legs to its right is odd, which puts the factor on ket
    and bra together) and ``e`` is compressed by a block SVD; the open legs are fused into one leg
    graded by charge, so every step stays block-sparse. At ``min S`` the left bond is folded into
    ``e`` and each charge block is cut to its numerical rank by one more SVD.

MPS, split walks (spin and boson spaces)
    Two double-layer walks, ``G[O, b, O*, b*]`` from ``min S`` to a split point and the same walk on
    the mirrored chain from ``max S`` back to the bond after it, each starting from the identity
    (the state is orthonormal towards the span from outside); traced sites are summed ket against
    bra, open sites fused into the open legs, block by block so that a step holds only its input
    and output. ``rho = sum_{b, b*} G_L G_R``. The split point follows the first half of the open
    sites and the traced sites after them, so the largest steps run while nothing else is held.
    Peak about ``2 sum_Q n_Q^2`` entries with ``n_Q`` the (open configuration, bond state) pairs of
    charge Q at the split bond, counted exactly before the walk. Where the square-root walk's
    ``e`` fills up (strongly entangled states, sets with traced sites between open ones), this is
    far smaller: a 12-site disk of a D = 512 width-6 Heisenberg state needs about 3 GiB instead of
    more than 20. Fermionic spaces are not supported (no parity strings); ``auto`` picks it for
    other spaces unless the square-root walk's estimate is four times smaller.

Memory of the square-root zipper
    After a traced site ``k`` the width of ``e`` is the rank of the reduced state of (everything left
    of ``k``) + (the open sites right of ``k``), which only the walk itself finds out: singular values
    whose weight is below 1e-28 of the total (rounding) are dropped, so a state with little
    entanglement (zero correlation length) keeps ``e`` narrow, while a generic state, or a loosely
    converged one whose spurious Schmidt values sit far above that cutoff, fills it up to its
    dimension bound. Hence two checks:
    the up-front estimate (:func:`estimate_rdm_memory`) replays the walk on the charge sectors with
    ``e`` limited by its dimension bound and by the largest bond dimension of the MPS over the span,
    a realistic figure for a weakly entangled region and no bound; and every step of the walk
    checks, right before its allocation and with the actual current dimensions (rows times the
    current ``e``, the SVD's factors and workspace), that it stays within the budget, raising
    :class:`~netprobe.errors.MemoryBudgetError` before the large allocation otherwise.

References
----------
Fermionic reduced density matrices and the Jordan-Wigner parity strings: design notes, section 6.
Free-fermion check used in the tests: I. Peschel, J. Phys. A 36, L205 (2003).
"""

from __future__ import annotations

import math
import numbers
import os
from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np
import scipy.linalg

from netprobe.errors import LatticeError, MemoryBudgetError, NetprobeError, SectorError
from netprobe.mps import MPS
from netprobe.sites import SiteSpace
from netprobe.tensor import BlockTensor, ChargeRule, Leg, contract, diag_multiply, svd

__all__ = [
    "RDM_METHODS",
    "RootBlock",
    "GradedRoot",
    "PartRoot",
    "default_memory_budget",
    "check_memory_budget",
    "permutation_sign",
    "as_pure_state",
    "reduced_density_matrix",
    "reduced_root",
    "estimate_rdm_memory",
    "check_parts",
    "reorder_parts",
    "part_root",
    "subset_weights",
]

#: Ways to build a reduced density matrix from an MPS ("auto" picks the cheaper that applies).
RDM_METHODS = ("auto", "root", "zipper", "split")

_PARITY_TOL = 1e-12  # largest weight of the minority fermion parity still treated as rounding
_CHARGE_TOL = 1e-20  # weight outside one charge value below which a dense vector counts as definite
_ROOT_CUTOFF = 1e-28  # relative weights dropped when compressing e: s/s_max ~ 1e-14, rounding noise
_EIGH_FLOOR = 1e-15  # eigenvalues of a dense rho below this fraction of the largest are rounding
_BUDGET_FRACTION = 0.25
_SHRINK = "use fewer sites, a smaller bond dimension, or raise --memory-budget"


# --------------------------------------------------------------------------------------------------
# Memory
# --------------------------------------------------------------------------------------------------


def default_memory_budget() -> int:
    """A quarter of the machine's physical memory, in bytes (8 GiB if it cannot be read)."""
    try:
        return int(os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE") * _BUDGET_FRACTION)
    except (ValueError, OSError, AttributeError):
        return 8 * 2**30


def _gib(nbytes: float) -> str:
    return f"{nbytes / 2**30:.3g} GiB"


def check_memory_budget(estimate: float, budget: int | None, what: str) -> None:
    """Refuse a computation whose estimated peak exceeds the budget.

    Parameters
    ----------
    estimate : float
        Estimated peak bytes.
    budget : int or None
        Allowed bytes; ``None`` means :func:`default_memory_budget`.
    what : str
        What would be computed, for the message ("rho over 14 sites").

    Raises
    ------
    MemoryBudgetError
        One line with the estimate, the budget and what to shrink.
    """
    budget = default_memory_budget() if budget is None else int(budget)
    if estimate > budget:
        raise MemoryBudgetError(
            f"{what} would need about {_gib(estimate)}, over the memory budget of {_gib(budget)}; {_SHRINK}"
        )


# --------------------------------------------------------------------------------------------------
# Fermionic signs
# --------------------------------------------------------------------------------------------------


def permutation_sign(parities: Sequence[np.ndarray], order: Sequence[int]) -> np.ndarray:
    """Sign of reordering fermionic subsystems, for every basis state.

    Parameters
    ----------
    parities : sequence of ndarray of int, lengths (d_0, ..., d_{n-1})
        Fermion parity (0 or 1) of each basis state of each subsystem, in the current order.
    order : sequence of int
        The new order: position ``i`` holds the old subsystem ``order[i]``.

    Returns
    -------
    ndarray of int8, shape (d_0, ..., d_{n-1})
        ``(-1)^(sum over pairs i < j whose order is inverted of p_i p_j)``, indexed in the old order.
        A state ``|x_0 ... x_{n-1}>`` equals this sign times the same occupations written in the new
        order.

    Notes
    -----
    Moving the product of creation operators of subsystem j past that of subsystem i costs
    ``(-1)^(p_i p_j)``; a permutation is a product of such exchanges, one per inverted pair.
    """
    n = len(parities)
    pos = np.empty(n, dtype=np.int64)
    pos[np.asarray(order, dtype=np.int64)] = np.arange(n)
    shapes = [len(p) for p in parities]
    expo = np.zeros((1,) * n, dtype=np.int8)
    for j in range(n):
        inverted = [i for i in range(j) if pos[i] > pos[j]]
        if not inverted:
            continue
        acc = np.zeros((1,) * n, dtype=np.int8)
        for i in inverted:
            acc = acc ^ _along(parities[i], i, n)
        expo = expo ^ (acc & _along(parities[j], j, n))
    return np.broadcast_to(1 - 2 * expo, shapes).astype(np.int8)


def _along(values, axis: int, ndim: int) -> np.ndarray:
    shape = [1] * ndim
    shape[axis] = len(values)
    return np.asarray(values, dtype=np.int8).reshape(shape)


def _config_parity(parity: np.ndarray, m: int) -> np.ndarray:
    """Parity of every configuration of ``m`` sites (first site most significant), shape (d**m,)."""
    out = np.zeros(1, dtype=np.int8)
    for _ in range(m):
        out = (out[:, None] ^ parity.astype(np.int8)[None, :]).ravel()
    return out


def _config_sums(values: np.ndarray, m: int) -> np.ndarray:
    """Sum of a per-state value over ``m`` sites for every configuration, shape (d**m,)."""
    out = np.zeros(1, dtype=np.int64)
    for _ in range(m):
        out = (out[:, None] + values.astype(np.int64)[None, :]).ravel()
    return out


# --------------------------------------------------------------------------------------------------
# Results
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class RootBlock:
    """One charge block of a square-root factor.

    Attributes
    ----------
    label : tuple of int
        The grading charges of the rows (conserved charges, then the parity for fermions).
    codes : ndarray of int64, shape (n,)
        Configuration code of each row over the site set (first site most significant).
    matrix : ndarray, shape (n, r)
        The block ``Y_q``; ``rho_S`` restricted to these rows is ``Y_q Y_q^dag``.
    """

    label: tuple[int, ...]
    codes: np.ndarray = field(repr=False)
    matrix: np.ndarray = field(repr=False)


@dataclass(frozen=True, eq=False)
class GradedRoot:
    """Square-root factor of a reduced density matrix, graded by charge: ``rho_S = sum_q Y_q Y_q^dag``.

    Attributes
    ----------
    sites : tuple of int
        The site set S in MPS order.
    space : SiteSpace
    grading : tuple of str
        Names of the conserved charges that grade the rows; ``"parity"`` is appended for fermions.
    local_charges : ndarray of int64, shape (d, len(grading))
        Grading charges of each local basis state.
    moduli : tuple of int
        0 for a U(1) grading charge, 2 for the parity (as in :class:`netprobe.tensor.ChargeRule`).
    blocks : tuple of RootBlock
    route : str
        How it was built: ``"vector"``, ``"mps-root"`` or ``"mps-zipper"``.
    peak_estimate : float
        For ``"mps-root"``: the largest per-step memory estimate of the walk that built it, in bytes
        (what the budget was checked against); 0 for the other routes.
    """

    sites: tuple[int, ...]
    space: SiteSpace = field(repr=False)
    grading: tuple[str, ...]
    local_charges: np.ndarray = field(repr=False)
    moduli: tuple[int, ...]
    blocks: tuple[RootBlock, ...] = field(repr=False)
    route: str = "vector"
    peak_estimate: float = 0.0

    @property
    def num_sites(self) -> int:
        """Number of sites in the set."""
        return len(self.sites)

    @property
    def dim(self) -> int:
        """Dimension ``d**m`` of the set's Hilbert space."""
        return self.space.dim ** len(self.sites)

    @property
    def rank(self) -> int:
        """Total number of columns (an upper bound on the rank of ``rho_S``)."""
        return sum(b.matrix.shape[1] for b in self.blocks)

    @property
    def nbytes(self) -> int:
        """Bytes held by the blocks."""
        return sum(b.matrix.nbytes + b.codes.nbytes for b in self.blocks)

    def weights(self) -> np.ndarray:
        """Eigenvalues of ``rho_S`` (squared singular values of every block), descending, zeros dropped."""
        vals = [scipy.linalg.svdvals(b.matrix, check_finite=False) for b in self.blocks if b.matrix.size]
        w = np.concatenate(vals) ** 2 if vals else np.zeros(0)
        return np.sort(w[w > 0])[::-1]

    def density_matrix(self) -> np.ndarray:
        """The dense ``rho_S``, shape ``(d**m, d**m)`` (small sets only)."""
        dtype = np.result_type(*(b.matrix.dtype for b in self.blocks)) if self.blocks else np.float64
        rho = np.zeros((self.dim, self.dim), dtype=dtype)
        for b in self.blocks:
            rho[np.ix_(b.codes, b.codes)] = b.matrix @ b.matrix.conj().T
        return rho

    def __repr__(self) -> str:
        grading = ", ".join(self.grading) or "none"
        return (f"GradedRoot({self.num_sites} sites, {len(self.blocks)} blocks graded by {grading}, "
                f"rank <= {self.rank}, {self.route})")


@dataclass(frozen=True, eq=False)
class PartRoot:
    """Square-root factor of ``rho`` of a union of parts, with the modes in part order (e.g. A|B|C).

    Attributes
    ----------
    names : tuple of str
        Part names in leg order.
    sites : tuple of tuple of int
        Sites of each part, in MPS order inside the part.
    tensor : BlockTensor
        Legs ``(part_0, ..., part_{n-1}, e)``; each part leg is the fused basis of the part, blocked by
        the grading charges; ``rho = Y Y^dag`` contracting ``e``. Fermionic signs of the reordering
        are applied, so a prefix or suffix of parts is traced by an ordinary partial trace.
    orders : tuple of ndarray of int
        Blocked state ``j`` of part leg ``i`` is configuration ``orders[i][j]`` of that part.
    sector_parity : tuple of ndarray of int
        Fermion parity of each sector of each part leg (all 0 for bosons).
    fermionic : bool
    route : str
        Route of the :class:`GradedRoot` it came from.
    """

    names: tuple[str, ...]
    sites: tuple[tuple[int, ...], ...]
    tensor: BlockTensor = field(repr=False)
    orders: tuple[np.ndarray, ...] = field(repr=False)
    sector_parity: tuple[np.ndarray, ...] = field(repr=False)
    fermionic: bool = False
    route: str = "vector"

    @property
    def dims(self) -> tuple[int, ...]:
        """Dimension of each part."""
        return tuple(leg.dim for leg in self.tensor.legs[:-1])

    def dense_root(self) -> np.ndarray:
        """``Y`` as a dense matrix, rows in part order (part 0 most significant), original local basis."""
        t = self.tensor.to_dense()
        for axis, order in enumerate(self.orders):
            back = np.empty_like(t)
            index = [slice(None)] * t.ndim
            index[axis] = order
            back[tuple(index)] = t
            t = back
        return t.reshape(int(np.prod(self.dims)), -1)

    def __repr__(self) -> str:
        parts = ", ".join(f"{n}: {len(s)} sites" for n, s in zip(self.names, self.sites))
        return f"PartRoot({parts}; {self.route})"


# --------------------------------------------------------------------------------------------------
# Input checks
# --------------------------------------------------------------------------------------------------


def _check_sites(sites, num_sites: int, where: str) -> tuple[int, ...]:
    try:
        items = list(sites)
    except TypeError:
        raise LatticeError(f"{where}: sites must be a list of MPS site indices, got {sites!r}") from None
    if not items:
        raise LatticeError(f"{where}: the site set is empty; give at least one MPS site index")
    out = []
    for s in items:
        if not isinstance(s, (numbers.Integral, np.integer)) or not 0 <= int(s) < num_sites:
            raise LatticeError(f"{where}: site {s!r} is not an MPS index of a lattice with {num_sites} sites "
                               f"(0..{num_sites - 1})")
        out.append(int(s))
    if len(set(out)) != len(out):
        dup = sorted({s for s in out if out.count(s) > 1})
        raise LatticeError(f"{where}: site(s) {dup} listed twice; give each site once")
    return tuple(sorted(out))


def as_pure_state(state):
    """The state as a dense vector or an MPS: a :class:`netprobe.exact.ExactResult` becomes its full vector.

    Raises
    ------
    NetprobeError
        For anything else.
    """
    if isinstance(state, (np.ndarray, MPS)):
        return state
    if type(state).__name__ == "ExactResult":
        from netprobe.exact import full_vector  # the exact engine loads numba: only when needed

        return full_vector(state)
    raise NetprobeError(
        f"expected a state vector (numpy array in the full d**N space), an exact-engine result or an MPS, "
        f"got {type(state).__name__}"
    )


def _is_vector(state) -> bool:
    return isinstance(state, np.ndarray)


def _vector_sites(psi: np.ndarray, space: SiteSpace, where: str) -> int:
    d = space.dim
    size = psi.size
    n = int(round(math.log(size, d))) if size > 1 else 0
    if psi.ndim != 1 or n < 1 or d**n != size:
        raise NetprobeError(
            f"{where}: a state vector must be 1-D of length d**N with d = {d} ({space.name}); got shape "
            f"{psi.shape}"
        )
    return n


def _check_space(state, space: SiteSpace, where: str) -> None:
    if state.basis.space.name != space.name or state.basis.space.dim != space.dim:
        raise NetprobeError(
            f"{where}: the MPS lives on site space '{state.basis.space.name}' but '{space.name}' was given; "
            "pass the model's space"
        )


def _grading_of(space: SiteSpace, names: Sequence[str]):
    """(names, local charges (d, k), moduli) for the given conserved charges, plus parity for fermions."""
    names = tuple(names)
    cols = [np.asarray(space.charges[n], dtype=np.int64) for n in names]
    moduli = [0] * len(names)
    if space.fermionic:
        names = names + ("parity",)
        cols.append(np.asarray(space.parity, dtype=np.int64))
        moduli.append(2)
    local = np.stack(cols, axis=1) if cols else np.zeros((space.dim, 0), np.int64)
    return names, local, tuple(moduli)


def _labels(codes_charges: np.ndarray, moduli: tuple[int, ...]) -> np.ndarray:
    out = codes_charges.copy()
    for c, mod in enumerate(moduli):
        if mod:
            out[:, c] %= mod
    return out


def _config_labels(local: np.ndarray, moduli, m: int) -> np.ndarray:
    """Grading label of every configuration of ``m`` sites, shape (d**m, k)."""
    if local.shape[1] == 0:
        return np.zeros((local.shape[0] ** m, 0), np.int64)
    sums = np.stack([_config_sums(local[:, c], m) for c in range(local.shape[1])], axis=1)
    return _labels(sums, moduli)


# --------------------------------------------------------------------------------------------------
# Dense vectors
# --------------------------------------------------------------------------------------------------


def _definite_charges(psi: np.ndarray, space: SiteSpace, n: int, where: str):
    """Project out rounding-level weight of other sectors; return the vector and its definite charges."""
    weight = np.abs(psi) ** 2
    total = float(weight.sum())
    if total == 0 or not np.isfinite(total):
        raise NetprobeError(f"{where}: the state vector is zero or not finite")
    keep = np.ones(psi.size, dtype=bool)
    names = []
    if space.fermionic:
        par = _config_sums(space.parity, n) % 2
        odd = float(weight[par == 1].sum()) / total
        minority = min(odd, 1.0 - odd)
        if minority > _PARITY_TOL:
            raise SectorError(
                f"{where}: the state mixes fermion parities (minority weight {minority:.2e}); a fermionic "
                "reduced density matrix needs a state of definite parity, e.g. fixed particle number"
            )
        keep &= par == (1 if odd > 0.5 else 0)
    for name in space.charges:
        tot = _config_sums(np.asarray(space.charges[name]), n)
        tot -= tot.min()
        per_value = np.bincount(tot, weights=weight)
        inside = tot == int(np.argmax(per_value))
        if float(weight[~inside].sum()) <= _CHARGE_TOL * total:
            names.append(name)
            keep &= inside
    if not keep.all():
        psi = np.where(keep, psi, 0)
    return psi, tuple(names)


def _vector_matrix(psi: np.ndarray, space: SiteSpace, n: int, sites: tuple[int, ...]) -> np.ndarray:
    """The amplitudes as a matrix (configurations of S, of the rest), fermion signs included."""
    d = space.dim
    t = psi.reshape((d,) * n)
    lo, hi = sites[0], sites[-1]
    if space.fermionic and hi - lo + 1 > len(sites):
        flags = [k in sites for k in range(lo, hi + 1)]
        sign = _span_sign(space.parity, flags)
        t = t * sign.reshape((1,) * lo + sign.shape + (1,) * (n - 1 - hi))
    t = np.moveaxis(t, sites, range(len(sites)))
    return t.reshape(d ** len(sites), -1)


def _span_sign(parity: np.ndarray, open_flags: Sequence[bool]) -> np.ndarray:
    """``(-1)^(sum over open q of p_q * #odd traced sites before q in the span)``, one axis per span site."""
    par = np.asarray(parity, dtype=np.int8)
    traced = np.zeros((), dtype=np.int8)
    expo = np.zeros((), dtype=np.int8)
    for j, is_open in enumerate(open_flags):
        p = par.reshape((1,) * j + (-1,))
        traced = traced[..., None]
        expo = expo[..., None]
        if is_open:
            expo = expo ^ (p & traced)
        else:
            traced = traced ^ p
    shape = (len(par),) * len(open_flags)
    return np.broadcast_to(1 - 2 * expo, shape).astype(np.int8)


def _compress_columns(mat: np.ndarray) -> np.ndarray:
    """A matrix with the same ``M M^dag`` and at most as many columns as rows (QR of ``M^dag``)."""
    rows, cols = mat.shape
    if cols <= rows:
        return mat
    r = np.linalg.qr(mat.conj().T, mode="r")
    return np.ascontiguousarray(r.conj().T)


def _vector_estimate(n: int, d: int, m: int, itemsize: int, dense_rho: bool) -> float:
    full = d**n * itemsize
    rows = d**m
    part = rows * rows * itemsize
    # the signed and the reordered copies of the vector, the charge tables (int64), then Y (or rho)
    # with its QR workspace
    tables = 8.0 * d**n
    return 2.0 * full + tables + (part if dense_rho else 2.0 * min(part, rows * d ** (n - m) * itemsize))


def _root_from_vector(psi, space, sites, budget, where) -> GradedRoot:
    n = _vector_sites(psi, space, where)
    sites = _check_sites(sites, n, where)
    m = len(sites)
    estimate = _vector_estimate(n, space.dim, m, np.dtype(psi.dtype).itemsize, False)
    check_memory_budget(estimate, budget, f"{where}: the square root of rho over {m} sites")
    psi, definite = _definite_charges(np.asarray(psi), space, n, where)
    psi = psi / np.linalg.norm(psi)
    mat = _vector_matrix(psi, space, n, sites)
    names, local, moduli = _grading_of(space, definite)
    labels = _config_labels(local, moduli, m)
    blocks = []
    if labels.shape[1]:
        uniq, inverse = np.unique(labels, axis=0, return_inverse=True)
        inverse = inverse.ravel()
    else:
        uniq, inverse = np.zeros((1, 0), np.int64), np.zeros(mat.shape[0], np.int64)
    for g, label in enumerate(uniq):
        codes = np.flatnonzero(inverse == g)
        sub = mat[codes]
        if not np.any(sub):
            continue
        blocks.append(RootBlock(tuple(int(x) for x in label), codes, _compress_columns(sub)))
    return GradedRoot(sites, space, names, local, moduli, tuple(blocks), "vector")


def _rho_from_vector(psi, space, sites, budget, where) -> np.ndarray:
    n = _vector_sites(psi, space, where)
    sites = _check_sites(sites, n, where)
    estimate = _vector_estimate(n, space.dim, len(sites), np.dtype(psi.dtype).itemsize, True)
    check_memory_budget(estimate, budget, f"{where}: rho over {len(sites)} sites")
    psi, _ = _definite_charges(np.asarray(psi), space, n, where)
    mat = _vector_matrix(psi / np.linalg.norm(psi), space, n, sites)
    return mat @ mat.conj().T


# --------------------------------------------------------------------------------------------------
# MPS: shared preparation
# --------------------------------------------------------------------------------------------------


def _centred_copy(state, lo: int, hi: int):
    """A shallow copy whose orthogonality centre lies in [lo, hi] (the caller's gauge is untouched)."""
    st = state.copy()
    if st.centre is None:
        st.canonicalize(hi)
    elif not lo <= st.centre <= hi:
        st.move_centre(min(max(st.centre, lo), hi))
    return st


def _sector_parity(leg_parity: np.ndarray, offsets: np.ndarray):
    """Parity of each sector (``None`` where a sector mixes parities)."""
    out = []
    for a, b in zip(offsets[:-1], offsets[1:]):
        vals = np.unique(leg_parity[a:b])
        out.append(int(vals[0]) if len(vals) == 1 else None)
    return out


def _bond_counts(leg: Leg) -> dict:
    return {tuple(q): int(d) for q, d in zip(leg.charges.tolist(), leg.dims.tolist())}


def _add(a: tuple, b: tuple, rule: ChargeRule, sign: int = 1) -> tuple:
    return tuple(rule.reduce(np.array(a) + sign * np.array(b)).tolist())


def _fused_sizes(legs, rule) -> dict:
    """Total dimension of every fused charge ``sum direction * charge`` of a group of legs."""
    out = {tuple(rule.zero().tolist()): 1}
    for leg in legs:
        charges = leg.direction * np.asarray(leg.charges, np.int64)
        dims = leg.dims.tolist()
        new: dict = {}
        for q, n in out.items():
            for qq, d in zip(rule.reduce(np.asarray(q, np.int64) + charges).tolist(), dims):
                key = tuple(qq)
                new[key] = new.get(key, 0) + n * int(d)
        out = new
    return out


def _pairs_by_charge(first: Leg, second: Leg, rule: ChargeRule) -> dict:
    """Sector pairs ``(i, j)`` of two legs (``first`` outer, ``second`` inner) grouped by summed charge."""
    groups: dict = {}
    for i in range(first.n_sectors):
        for j in range(second.n_sectors):
            q = tuple(rule.reduce(first.charges[i] + second.charges[j]).tolist())
            groups.setdefault(q, []).append((i, j))
    return groups


def _fuse_tables(a: dict, b: dict, rule: ChargeRule) -> dict:
    """Charge -> dimension of the product of two charge -> dimension tables."""
    out: dict = {}
    for qa, da in a.items():
        for qb, db in b.items():
            q = _add(qa, qb, rule)
            out[q] = out.get(q, 0) + da * db
    return out


def _matrix_sectors(legs, charge, rule: ChargeRule, rows, cols) -> list:
    """(rows, columns) of every charge sector of a tensor read as a matrix, all allowed blocks counted."""
    r = _fused_sizes([legs[i] for i in rows], rule)
    c = _fused_sizes([legs[i] for i in cols], rule)
    q0 = tuple(rule.reduce(np.asarray(charge, np.int64)).tolist())
    out = []
    for q, m in r.items():
        n = c.get(_add(q0, q, rule, -1), 0)
        if n:
            out.append((m, n))
    return out


def _svd_entries(sectors) -> float:
    """Entries a block SVD allocates besides its input.

    The fused matrices, U (and the scaled copy that becomes the new ``Y``), V, and for the largest
    sector LAPACK's own copy of the matrix, the QR factor of its tall-matrix path, and the
    divide-and-conquer workspace (about 4 k^2).
    """
    if not sectors:
        return 0.0
    mats = sum(m * n for m, n in sectors)
    u = sum(m * min(m, n) for m, n in sectors)
    v = sum(min(m, n) * n for m, n in sectors)
    work = max(2 * m * n + 4 * min(m, n) ** 2 + 4 * min(m, n) + max(m, n) for m, n in sectors)
    return float(mats + 2 * u + v + work)


def _fold_entries(rows: Sequence[int], cols: Sequence[int], held: float) -> float:
    """Entries of the final fold of the left bond into ``e`` (per open charge: rows, columns).

    ``Y`` itself, its blocks regrouped by open charge, and the SVD that compresses each group to its
    rank (:func:`_svd_entries`; the concatenated groups are its input matrices).
    """
    return float(2.0 * held + _svd_entries([(r, c) for r, c in zip(rows, cols) if r and c]))


def _rank_columns(mat: np.ndarray):
    """``U s`` and the squared singular values of ``mat``: same ``M M^dag``, columns still to be cut."""
    try:
        u, s, _ = scipy.linalg.svd(mat, full_matrices=False, check_finite=False, lapack_driver="gesdd")
    except np.linalg.LinAlgError:
        u, s, _ = scipy.linalg.svd(mat, full_matrices=False, check_finite=False, lapack_driver="gesvd")
    return u * s, s**2


class _WalkMeter:
    """The budget check of every step of the square-root zipper, with the largest estimate seen."""

    def __init__(self, budget: int | None, what: str, itemsize: int):
        self.budget = default_memory_budget() if budget is None else int(budget)
        self.what = what
        self.itemsize = itemsize
        self.peak = 0.0

    def check(self, entries: float, site: int, width: int) -> None:
        need = float(entries) * self.itemsize
        self.peak = max(self.peak, need)
        check_memory_budget(need, self.budget, f"{self.what}, at site {site} with e of width {width},")


def _root_estimate(state, sites: tuple[int, ...]) -> float:
    """Realistic peak bytes of the square-root zipper, estimated before the walk (not a bound).

    Replays the walk of :func:`_root_from_mps` on the charge sectors with the same per-step
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


def _zipper_estimate(state, sites: tuple[int, ...]) -> float:
    d = state.basis.dim
    item = np.dtype(state.dtype).itemsize
    lo, hi = sites[0], sites[-1]
    peak, opened = 0.0, 0
    for k in range(hi, lo - 1, -1):
        opened += k in sites
        chi = state.tensors[k].legs[0].dim
        chi_r = state.tensors[k].legs[2].dim
        big = max(chi, chi_r)
        # input, output and temporaries of one transfer (the fermion case splits E into two parities)
        peak = max(peak, 4.0 * big * big * float(d) ** (2 * opened) * d)
    return peak * item


def estimate_rdm_memory(state, sites, space: SiteSpace, *, method: str = "auto",
                        dense: bool = False) -> float:
    """Bytes a reduced density matrix of ``sites`` would need, estimated before any large allocation.

    Parameters
    ----------
    state : ndarray or MPS
    sites : sequence of int
    space : SiteSpace
    method : {"auto", "root", "zipper", "split"}
        For an MPS: the square-root zipper, the density-matrix zipper, the split walks (spins and
        bosons), or the route ``auto`` would choose.
    dense : bool
        Include the dense ``d**m x d**m`` output (what :func:`reduced_density_matrix` returns).

    Returns
    -------
    float
        Peak bytes. Dense vector and density-matrix zipper: what the computation allocates (their
        sizes are fixed by the dimensions). Square-root zipper: a realistic figure, not a bound; the
        width of the compressed leg ``e`` is known only during the walk, so the estimate assumes it
        stays within its dimension bound and within the largest bond dimension of the MPS over the
        span (about what a weakly entangled region needs). The walk then checks every step, right
        before its allocation, with the actual dimensions, so a region that outgrows the budget is
        refused with :class:`~netprobe.errors.MemoryBudgetError` before the large allocation, and
        :attr:`GradedRoot.peak_estimate` records the largest step estimate of a finished walk.
    """
    _check_method(method, "estimate_rdm_memory")
    state = as_pure_state(state)
    if _is_vector(state):
        psi = np.asarray(state)
        n = _vector_sites(psi, space, "estimate_rdm_memory")
        sites = _check_sites(sites, n, "estimate_rdm_memory")
        return _vector_estimate(n, space.dim, len(sites), psi.dtype.itemsize, dense)
    sites = _check_sites(sites, state.num_sites, "estimate_rdm_memory")
    out = float(space.dim) ** (2 * len(sites)) * np.dtype(state.dtype).itemsize if dense else 0.0
    if method == "auto" and not _parity_graded(state.basis):
        method = "zipper"
    if method == "root":
        return out + _root_estimate(state, sites)
    if method == "zipper":
        return out + _zipper_estimate(state, sites)
    if method == "split":
        return out + _split_estimate(state, sites)
    chosen = _choose_method(state, sites, "auto", "estimate_rdm_memory")
    return out + {"root": _root_estimate, "zipper": _zipper_estimate, "split": _split_estimate}[chosen](
        state, sites)


# --------------------------------------------------------------------------------------------------
# MPS: density-matrix zipper (the reference)
# --------------------------------------------------------------------------------------------------


def _dense_site(state, k: int) -> np.ndarray:
    blocked = state.tensors[k].to_dense()
    a = np.zeros_like(blocked)
    a[:, state.basis.order, :] = blocked
    return a


def _rho_from_mps_zipper(state, sites: tuple[int, ...]) -> np.ndarray:
    space = state.basis.space
    parity = np.asarray(space.parity, dtype=np.int8)
    fsign = 1.0 - 2.0 * parity
    lo, hi = sites[0], sites[-1]
    st = _centred_copy(state, lo, hi)
    a = _dense_site(st, hi)
    env = np.tensordot(a, a.conj(), axes=([2], [2]))  # (a, s, a*, s*)
    env = env.transpose(0, 2, 1, 3)
    opened = 1
    for k in range(hi - 1, lo - 1, -1):
        a = _dense_site(st, k)
        if k in sites:
            t = np.tensordot(a, env, axes=([2], [0]))  # (a', s, a*, O, O*)
            t = np.tensordot(t, a.conj(), axes=([2], [2]))  # (a', s, O, O*, a'*, s*)
            chi = a.shape[0]
            env = t.transpose(0, 4, 1, 2, 5, 3).reshape(chi, chi, a.shape[1] * env.shape[2], -1)
            opened += 1
            continue
        if space.fermionic:
            par = _config_parity(space.parity, opened)
            odd = (par[:, None] ^ par[None, :]).astype(bool)
            env_odd = np.where(odd, env, 0)
            env = _transfer(a, a, env - env_odd) + _transfer(a * fsign[None, :, None], a, env_odd)
        else:
            env = _transfer(a, a, env)
    rho = np.einsum("aaij->ij", env)
    return rho / np.trace(rho).real


def _transfer(ket: np.ndarray, bra: np.ndarray, env: np.ndarray) -> np.ndarray:
    """``E'[a', a'*, O, O*] = sum ket[a', s, a] E[a, a*, O, O*] conj(bra[a'*, s, a*])``."""
    t = np.tensordot(ket, env, axes=([2], [0]))  # (a', s, a*, O, O*)
    t = np.tensordot(t, bra.conj(), axes=([1, 2], [1, 2]))  # (a', O, O*, a'*)
    return t.transpose(0, 3, 1, 2)


def _root_from_rho(rho: np.ndarray, space: SiteSpace, sites, conserve, route: str) -> GradedRoot:
    names, local, moduli = _grading_of(space, conserve)
    labels = _config_labels(local, moduli, len(sites))
    uniq, inverse = (np.unique(labels, axis=0, return_inverse=True) if labels.shape[1]
                     else (np.zeros((1, 0), np.int64), np.zeros(rho.shape[0], np.int64)))
    inverse = np.asarray(inverse).ravel()
    blocks = []
    for g, label in enumerate(uniq):
        codes = np.flatnonzero(inverse == g)
        w, v = np.linalg.eigh(rho[np.ix_(codes, codes)])
        keep = w > _EIGH_FLOOR * max(w.max(initial=0.0), 0.0)
        if np.any(keep):
            blocks.append(RootBlock(tuple(int(x) for x in label), codes, v[:, keep] * np.sqrt(w[keep])))
    return GradedRoot(tuple(sites), space, names, local, moduli, tuple(blocks), route)


# --------------------------------------------------------------------------------------------------
# MPS: square-root zipper on block tensors
# --------------------------------------------------------------------------------------------------


class _UngradedParity(Exception):
    """The MPS charges do not fix the fermion parity of the open legs (internal signal)."""


@dataclass
class _OpenLeg:
    """Book-keeping of the fused open leg: configuration codes and parity of each sector."""

    codes: list
    parity: list
    sites: int


def _root_from_mps(state, sites: tuple[int, ...], budget: int | None = None,
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
    meter = _WalkMeter(budget, f"{where}: the square-root zipper over {len(sites)} sites",
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
    names, local, moduli = _grading_of(space, basis.conserve)
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


# --------------------------------------------------------------------------------------------------
# MPS: double-layer walks from both ends that meet at one bond (spin and boson spaces)
# --------------------------------------------------------------------------------------------------


def _bond_identity(bond: Leg, rule: ChargeRule, dtype) -> BlockTensor:
    """The start of a double-layer walk: ``G[O, b, O*, b*]``, identity on ``b``, one open state of charge 0.

    ``b`` contracts with ``bond``, the left bond of the walk's first tensor.
    """
    zero = np.zeros((1, rule.k), np.int64)
    blocks = {(0, sec, 0, sec): np.eye(int(n), dtype=dtype).reshape(1, int(n), 1, int(n))
              for sec, n in enumerate(bond.dims.tolist())}
    return BlockTensor((Leg(zero, [1], 1), bond.dual(), Leg(zero, [1], -1), bond), None, rule, blocks, dtype=dtype)


def _fused_open_leg(o_leg: Leg, s_leg: Leg, o_codes, s_codes, code_of, rule: ChargeRule):
    """Sectors, placements and codes of the open leg after one more site (see :func:`_double_layer_step`)."""
    groups = _pairs_by_charge(o_leg, s_leg, rule)
    charges = sorted(groups)
    place, dims, codes = {}, [], []
    for n, q in enumerate(charges):
        off, parts = 0, []
        for so, ss in groups[q]:
            size = int(o_leg.dims[so] * s_leg.dims[ss])
            place[(so, ss)] = (n, off, size)
            off += size
            parts.append(code_of(np.asarray(o_codes[so], np.int64)[:, None],
                                 np.asarray(s_codes[ss], np.int64)[None, :]).ravel())
        dims.append(off)
        codes.append(np.concatenate(parts))
    leg = Leg(np.array(charges, np.int64).reshape(len(charges), rule.k), np.array(dims, np.int64), o_leg.direction)
    return leg, place, codes


def _double_layer_step(g: BlockTensor, a: BlockTensor, open_site: bool, o_codes, s_codes, code_of):
    """``G'[O', c, O'*, c*] = sum A[b, s, c] G[O, b, O*, b*] conj(A[b*, s*, c*])``, one block pair at a time.

    A traced site has ``s* = s`` summed and ``O' = O``; an open site fuses ``(O, s)`` into ``O'``
    (``O`` major) with codes ``code_of(O codes, s codes)``. Working block by block keeps the memory
    at the input and the output plus one product of blocks (no fused copies of the large tensor).
    """
    rule = g.rule
    by_bond: dict = {}
    for (b, ss, c), blk in a.blocks.items():
        by_bond.setdefault(b, []).append((ss, c, blk))
    if open_site:
        o_leg, place, codes = _fused_open_leg(g.legs[0], a.legs[1], o_codes, s_codes, code_of, rule)
    else:
        o_leg, place, codes = g.legs[0], None, o_codes
    legs = (o_leg, a.legs[2], o_leg.dual(), a.legs[2].dual())
    out: dict = {}
    for (o, b, ob, bb), blk in g.blocks.items():
        kets = by_bond.get(b, ())
        bras = by_bond.get(bb, ())
        for ss, c, ka in kets:
            half = np.tensordot(blk, ka, axes=([1], [0]))  # (x, y, z, s, c)
            for sb, cb, kb in bras:
                if not open_site and sb != ss:
                    continue
                if open_site:
                    part = np.tensordot(half, kb.conj(), axes=([2], [0]))  # (x, y, s, c, s*, c*)
                    n, off, size = place[(o, ss)]
                    nb, offb, sizeb = place[(ob, sb)]
                    key = (n, c, nb, cb)
                    shape = (int(o_leg.dims[n]), part.shape[3], int(o_leg.dims[nb]), part.shape[5])
                    target = out.get(key)
                    if target is None:
                        target = out[key] = np.zeros(shape, part.dtype)
                    x, y, sd, cd, sbd, cbd = part.shape
                    target[off:off + size, :, offb:offb + sizeb, :] += part.transpose(0, 2, 3, 1, 4, 5).reshape(
                        x * sd, cd, y * sbd, cbd)
                else:
                    part = np.tensordot(half, kb.conj(), axes=([2, 3], [0, 1]))  # (x, y, c, c*)
                    key = (o, c, ob, cb)
                    target = out.get(key)
                    if target is None:
                        out[key] = part.transpose(0, 2, 1, 3).copy()
                    else:
                        target += part.transpose(0, 2, 1, 3)
    return BlockTensor(legs, None, rule, out, dtype=np.result_type(g.dtype, a.dtype)), codes


def _split_point(sites: tuple[int, ...]) -> int:
    """MPS index of the last site of the left walk.

    The left walk takes the first half of the open sites and the traced sites after them, up to the
    first open site of the second half: it runs first, with nothing else held, so the full-size
    traced steps cost least there.
    """
    return sites[(len(sites) + 1) // 2] - 1 if len(sites) > 1 else sites[0]


def _split_estimate(state, sites: tuple[int, ...]) -> float:
    """Peak bytes of the split route: the two double layers at the meeting bond, exactly counted.

    A double layer ``G[(O, b), (O*, b*)]`` is block diagonal in the charge of ``(O, b)``; its entries are
    ``sum_Q n_Q**2`` with ``n_Q`` the number of (open configuration, bond state) pairs of charge Q.
    A step holds its input and its output (it works block by block), the right walk also holds
    ``G_L``, and the join holds both layers and the dense reduced matrix of ``d**(2n)`` entries.
    """
    basis = state.basis
    rule = basis.rule
    d = basis.dim
    item = np.dtype(state.dtype).itemsize
    phys = _bond_counts(basis.leg)
    zero = tuple(rule.zero().tolist())
    m = _split_point(sites)

    def layer(open_count: int, bond: Leg, sign: int) -> float:
        opens = {zero: 1}
        for _ in range(open_count):
            opens = _fuse_tables(phys, opens, rule)
        bond_table = {_add(zero, q, rule, sign): n for q, n in _bond_counts(bond).items()}
        return float(sum(n * n for n in _fuse_tables(opens, bond_table, rule).values()))

    k_left = sum(1 for s in sites if s <= m)
    bond = state.tensors[m].legs[2]
    g_left, g_right = layer(k_left, bond, 1), layer(len(sites) - k_left, bond, -1)
    # left walk: its input and output; right walk: the same with G_L held; the join: both and rho
    peak = max(2.0 * g_left, g_left + 2.0 * g_right, g_left + g_right + float(d) ** (2 * len(sites)))
    return peak * item


def _rho_from_mps_split(state, sites: tuple[int, ...], budget: int | None = None,
                        where: str = "reduced_density_matrix") -> np.ndarray:
    """Dense reduced density matrix of a non-fermionic MPS by two double-layer walks (module notes).

    The left walk carries ``G_L[O_L, b, O_L*, b*]`` from the first site of the set to the split
    point; the right walk is the same walk on the mirrored chain (every tensor read as
    ``A[c, s, b]``) from the last site back to the bond after the split point. Traced sites are
    summed ket against bra, open sites are fused into the open legs. Outside the span the state is
    orthonormal towards it, so both walks start from the identity, and
    ``rho = sum_{b, b*} G_L[O_L, b, O_L*, b*] G_R[O_R, b, O_R*, b*]``. Every step checks its
    allocation against the budget first.
    """
    basis = state.basis
    rule = basis.rule
    d = basis.dim
    bounds = list(zip(basis.leg.offsets[:-1], basis.leg.offsets[1:]))
    phys_codes = [np.asarray(basis.order[a:b], np.int64) for a, b in bounds]
    lo, hi = sites[0], sites[-1]
    m = _split_point(sites)
    meter = _WalkMeter(budget, f"{where}: the split walk over {len(sites)} sites", np.dtype(state.dtype).itemsize)
    st = _centred_copy(state, lo, hi)

    def walk(start_bond, tensors, code_of, held: float):
        g = _bond_identity(start_bond, rule, np.result_type(st.dtype, np.float64))
        codes, opened = [np.zeros(1, np.int64)], 0
        for k, a in tensors:
            is_open = k in sites
            grow = float(d * d) if is_open else 1.0
            grow *= max(1.0, a.legs[2].dim / max(1, a.legs[0].dim)) ** 2
            meter.check(held + g.size * (1.0 + grow), k, a.legs[2].dim)
            g, codes = _double_layer_step(g, a, is_open, codes, phys_codes, lambda o, s_: code_of(o, s_, opened))
            opened += is_open
        return g, codes, opened

    left = [(k, st.tensors[k]) for k in range(lo, m + 1)]
    g_left, codes_left, _ = walk(st.tensors[lo].legs[0], left, lambda o, s_, k: o * d + s_, 0.0)
    right = [(k, st.tensors[k].transpose((2, 1, 0))) for k in range(hi, m, -1)]  # the mirrored chain
    g_right, codes_right, k_right = walk(st.tensors[hi].legs[2], right, lambda o, s_, k: s_ * d**k + o,
                                         float(g_left.size))
    n = len(sites)
    meter.check(float(d) ** (2 * n) + g_right.size + g_left.size, m, st.tensors[m].legs[2].dim)
    # rho = sum_{b, b*} G_L G_R one pair of blocks at a time, straight into the dense matrix
    rho = np.zeros((d**n, d**n), np.result_type(g_left.dtype, g_right.dtype))
    shift = d**k_right
    right_by_bond: dict = {}
    for (sr, bk, srb, bb), blk in g_right.blocks.items():
        right_by_bond.setdefault((bk, bb), []).append((sr, srb, blk))
    for (sl, bk, slb, bb), blk in g_left.blocks.items():
        for sr, srb, other in right_by_bond.get((bk, bb), ()):
            part = np.tensordot(blk, other, axes=([1, 3], [1, 3]))  # (O_L, O_L*, O_R, O_R*)
            rows = (codes_left[sl][:, None] * shift + codes_right[sr][None, :]).ravel()
            cols = (codes_left[slb][:, None] * shift + codes_right[srb][None, :]).ravel()
            rho[np.ix_(rows, cols)] += part.transpose(0, 2, 1, 3).reshape(len(rows), len(cols))
    trace = np.trace(rho).real
    if trace > 0:
        rho /= trace
    return rho


def _string_on_odd(t: BlockTensor, opened: _OpenLeg, fvec: dict) -> BlockTensor:
    """Multiply ``t[a', s, O, e]`` by ``F`` on ``s`` wherever the open sector ``O`` is odd."""
    blocks = {}
    for key, blk in t.blocks.items():
        p = opened.parity[key[2]]
        if p is None:
            raise _UngradedParity
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


def _parity_graded(basis) -> bool:
    """True if every physical sector has one fermion parity (always true for bosons)."""
    par = np.asarray(basis.space.parity)[basis.order]
    return all(p is not None for p in _sector_parity(par, basis.leg.offsets))


def _check_mps_parity(state, where: str) -> None:
    """Refuse a fermionic MPS of mixed parity (its fermionic reduced matrix is not defined)."""
    fsign = 1.0 - 2.0 * np.asarray(state.basis.space.parity)
    env = np.ones((1, 1))
    for k in range(state.num_sites):
        a = _dense_site(state, k)
        t = np.tensordot(env, a * fsign[None, :, None], axes=([1], [0]))  # (a*, s, b)
        env = np.tensordot(a.conj(), t, axes=([0, 1], [0, 1]))
    norm2 = float(np.real(_plain_norm2(state)))
    value = float(np.real(env[0, 0])) / norm2
    if 1.0 - abs(value) > _PARITY_TOL:
        raise SectorError(
            f"{where}: the MPS mixes fermion parities (<(-1)^N> = {value:.6f}); a fermionic reduced density "
            "matrix needs a state of definite parity: conserve N, or project the state"
        )


def _plain_norm2(state):
    env = np.ones((1, 1))
    for k in range(state.num_sites):
        a = _dense_site(state, k)
        env = np.tensordot(a.conj(), np.tensordot(env, a, axes=([1], [0])), axes=([0, 1], [0, 1]))
    return env[0, 0]


def _choose_method(state, sites, method: str, where: str) -> str:
    graded = _parity_graded(state.basis)
    if not graded:
        if method == "root":
            raise NetprobeError(
                f"{where}: the MPS's conserved charges do not fix the fermion parity of a site, so the "
                "square-root route cannot place the parity strings; use method='zipper' or conserve N"
            )
        _check_mps_parity(state, where)
        return "zipper"
    if method == "split":
        if state.basis.space.fermionic:
            raise NetprobeError(
                f"{where}: method='split' does not place fermion parity strings; use method='root' or 'zipper'")
        return method
    if method != "auto":
        return method
    estimates = {"root": _root_estimate(state, sites), "zipper": _zipper_estimate(state, sites)}
    if not state.basis.space.fermionic:
        # the root estimate assumes a narrow e (weak entanglement); the split one is exact, so it is
        # taken unless the root route is expected to be far smaller
        estimates["split"] = _split_estimate(state, sites) / 4.0
    return min(estimates, key=estimates.get)


def _mps_root(state, sites, method, budget, where) -> GradedRoot:
    method = _choose_method(state, sites, method, where)
    if method == "root":
        check_memory_budget(_root_estimate(state, sites), budget,
                            f"{where}: the square-root zipper over {len(sites)} sites")
        try:
            return _root_from_mps(state, sites, budget, where)
        except _UngradedParity:
            raise NetprobeError(
                f"{where}: the conserved charges do not fix the fermion parity of the open sites, so the "
                "square-root route cannot place the parity strings; use method='zipper'"
            ) from None
    if method == "split":
        check_memory_budget(_split_estimate(state, sites), budget,
                            f"{where}: the split walk over {len(sites)} sites")
        rho = _rho_from_mps_split(state, sites, budget, where)
        return _root_from_rho(rho, state.basis.space, sites, state.basis.conserve, "mps-split")
    check_memory_budget(_zipper_estimate(state, sites), budget,
                        f"{where}: the density-matrix zipper over {len(sites)} sites")
    rho = _rho_from_mps_zipper(state, sites)
    return _root_from_rho(rho, state.basis.space, sites, state.basis.conserve, "mps-zipper")


# --------------------------------------------------------------------------------------------------
# Public entry points
# --------------------------------------------------------------------------------------------------


def _check_method(method: str, where: str) -> str:
    if method not in RDM_METHODS:
        raise NetprobeError(f"{where}: unknown method '{method}'; valid methods: {', '.join(RDM_METHODS)}")
    return method


def reduced_root(state, sites, space: SiteSpace, *, method: str = "auto",
                 memory_budget: int | None = None) -> GradedRoot:
    """Square-root factor of the reduced density matrix of a site set, graded by charge.

    Parameters
    ----------
    state : ndarray, shape (d**N,), ExactResult or MPS
        A pure state: a vector in the full space (site 0 most significant, as
        :func:`netprobe.exact.full_vector` returns it), an exact-engine result (its ground state), or a
        :class:`netprobe.mps.MPS`.
    sites : sequence of int
        MPS indices of the set S (any order, any gaps; listed back in MPS order).
    space : SiteSpace
        The local site space (fermionic spaces get the fermionic reduced matrix).
    method : {"auto", "root", "zipper", "split"}
        MPS only: the square-root zipper on block tensors, the dense density-matrix zipper, the split
        double-layer walks (spin and boson spaces), or the one with the smallest memory estimate
        (module notes).
    memory_budget : int, optional
        Bytes the computation may use; default :func:`default_memory_budget`.

    Returns
    -------
    GradedRoot

    Raises
    ------
    LatticeError
        For a site outside the lattice, a repeated site or an empty set.
    SectorError
        For a fermionic vector of mixed parity.
    MemoryBudgetError
        If the up-front estimate exceeds the budget, or, on the square-root route, a step of the walk
        would (checked with the actual dimensions before each step's allocation; module notes).
    """
    where = "reduced_root"
    _check_method(method, where)
    state = as_pure_state(state)
    if _is_vector(state):
        return _root_from_vector(np.asarray(state), space, sites, memory_budget, where)
    _check_space(state, space, where)
    sites = _check_sites(sites, state.num_sites, where)
    return _mps_root(state, sites, method, memory_budget, where)


def reduced_density_matrix(state, sites, space: SiteSpace, *, method: str = "auto",
                           memory_budget: int | None = None) -> np.ndarray:
    """The reduced density matrix of a site set as a dense matrix.

    Parameters
    ----------
    state, sites, space, method, memory_budget
        As for :func:`reduced_root`.

    Returns
    -------
    ndarray, shape (d**m, d**m)
        ``rho_S`` in the basis of S's sites in MPS order (first site most significant); for fermions
        the fermionic reduced matrix in the Jordan-Wigner basis of S. Unit trace.

    Raises
    ------
    LatticeError, SectorError, MemoryBudgetError
        As for :func:`reduced_root`.

    Examples
    --------
    >>> import numpy as np
    >>> from netprobe.sites import site_space
    >>> bell = np.array([0, 1, -1, 0]) / np.sqrt(2)
    >>> np.round(reduced_density_matrix(bell, [0], site_space("spin-1/2")), 3).tolist()
    [[0.5, 0.0], [0.0, 0.5]]
    """
    where = "reduced_density_matrix"
    _check_method(method, where)
    state = as_pure_state(state)
    if _is_vector(state):
        return _rho_from_vector(np.asarray(state), space, sites, memory_budget, where)
    _check_space(state, space, where)
    sites = _check_sites(sites, state.num_sites, where)
    m = len(sites)
    dense = float(space.dim) ** (2 * m) * np.dtype(state.dtype).itemsize
    method = _choose_method(state, sites, method, where)
    if method == "zipper":
        check_memory_budget(_zipper_estimate(state, sites) + dense, memory_budget,
                            f"{where}: the density-matrix zipper over {m} sites")
        return _rho_from_mps_zipper(state, sites)
    check_memory_budget(_root_estimate(state, sites) + dense, memory_budget,
                        f"{where}: the square-root zipper over {m} sites")
    try:
        root = _root_from_mps(state, sites, memory_budget, where)
    except _UngradedParity:
        check_memory_budget(_zipper_estimate(state, sites) + dense, memory_budget,
                            f"{where}: the density-matrix zipper over {m} sites")
        return _rho_from_mps_zipper(state, sites)
    check_memory_budget(root.nbytes + dense, memory_budget, f"{where}: the dense rho over {m} sites")
    return root.density_matrix()


# --------------------------------------------------------------------------------------------------
# Parts: reordering into A|B|C
# --------------------------------------------------------------------------------------------------


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
